"""Backward Euler: first order, L-stable, the companion model in its plainest form."""

from __future__ import annotations

from .companion import CompanionStepper


class BackwardEuler(CompanionStepper):
    """``qdot[n+1] = (q[n+1] - q[n]) / h``: alpha = 1/h, history = -q[n]/h.

    For an inductor this is the classic companion model: a resistance
    ``L/h`` in series with a voltage source ``(L/h)*i[n]``; for a capacitor
    a conductance ``C/h`` in parallel with a current source ``(C/h)*v[n]``.
    Damps every mode, also the ones it should not: the error control keeps
    the damping of resolved modes within the tolerance, at the price of
    many short steps (first order).
    """

    name = "backward-euler"
    order = 1
    summary = "first order, L-stable; robust, needs many steps for a tight tolerance"

    @staticmethod
    def coefficients(h, h_prev):
        return 1.0 / h, -1.0 / h, 0.0, 0.0
