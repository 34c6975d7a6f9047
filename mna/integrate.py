"""Integration methods: how ``d/dt q`` at the new time is approximated.

Every method here writes the derivative of the charges (and fluxes) at the
new time point as a linear combination of the new charges and history:

    qdot[n+1] = alpha * q[n+1] + b0 * q[n] + b1 * q[n-1] + g0 * qdot[n]

so one step of the descriptor system ``d/dt q(x) + f(x, t) = 0`` becomes
the algebraic system ``alpha*q(x) + history + f(x, t) = 0`` with
``history = b0*q[n] + b1*q[n-1] + g0*qdot[n]``. For backward Euler
``alpha = 1/h`` and ``history = -q[n]/h``; for an inductor this is the
classic companion model, a resistance ``L/h`` in series with a source
``(L/h)*i[n]``.

Rules for a new method (a subclass):

1. Set ``name`` (the netlist word), ``order`` and ``error_constant`` (the
   leading coefficient of its local truncation error, for step control).
2. Implement ``coefficients(h, h_prev)`` returning ``(alpha, b0, b1, g0)``
   for a step ``h`` after a step ``h_prev``. ``h_prev`` is ``None`` for the
   first ``restart_steps`` steps after a start or a discontinuity, where the
   method must fall back to a one-step, first-order formula.
3. Hold no state: the engine owns the history.

Methods that differ only by coefficients are subclasses holding data.
"""

from __future__ import annotations

from typing import ClassVar


class IntegrationMethod:
    """Base class; see the module docstring for the rules."""

    name: ClassVar[str] = ""
    order: ClassVar[int] = 1
    error_constant: ClassVar[float] = 0.5
    uses_derivative: ClassVar[bool] = False
    #: Backward-Euler steps taken after a start, a corner or an event.
    restart_steps: ClassVar[int] = 1

    def coefficients(self, h: float, h_prev: float | None) -> tuple[float, float, float, float]:
        raise NotImplementedError

    def __repr__(self) -> str:
        return f"<{self.name}>"


class BackwardEuler(IntegrationMethod):
    """First order, L-stable: ``qdot[n+1] = (q[n+1] - q[n]) / h``."""

    name = "backward-euler"
    order = 1
    error_constant = 0.5  # LTE = -(h^2/2) x''

    def coefficients(self, h, h_prev):
        return 1.0 / h, -1.0 / h, 0.0, 0.0


class Trapezoidal(IntegrationMethod):
    """Second order, A-stable, no numerical damping:
    ``(qdot[n+1] + qdot[n]) / 2 = (q[n+1] - q[n]) / h``.

    The first two steps after a start, a corner or an event are
    backward-Euler steps: the rule has |R| -> 1 on stiff modes, so a
    derivative left over from before a discontinuity (or from a mode faster
    than the step) would ring, alternating in sign, for the rest of the run.
    Two damped steps leave a derivative consistent with the slow solution.
    """

    name = "trapezoidal"
    order = 2
    error_constant = 1.0 / 12.0  # LTE = -(h^3/12) x'''
    uses_derivative = True
    restart_steps = 2

    def coefficients(self, h, h_prev):
        if h_prev is None:  # no trustworthy qdot[n] after a start or a corner
            return BackwardEuler.coefficients(self, h, None)
        return 2.0 / h, -2.0 / h, 0.0, -1.0


class BDF2(IntegrationMethod):
    """Second order, L-stable, variable step (ratio w = h / h_prev):

    ``qdot[n+1] = [ (1+2w)/(1+w) q[n+1] - (1+w) q[n] + w^2/(1+w) q[n-1] ] / h``.
    Falls back to backward Euler on the first step after a discontinuity.
    """

    name = "bdf2"
    order = 2
    error_constant = 2.0 / 9.0  # constant step: LTE = -(2/9) h^3 x'''

    def coefficients(self, h, h_prev):
        if h_prev is None:
            return BackwardEuler.coefficients(self, h, None)
        w = h / h_prev
        return (1 + 2 * w) / ((1 + w) * h), -(1 + w) / h, w * w / ((1 + w) * h), 0.0


METHODS: dict[str, type[IntegrationMethod]] = {
    cls.name: cls for cls in (BackwardEuler, Trapezoidal, BDF2)
}


def get_method(method: str | IntegrationMethod | type[IntegrationMethod]) -> IntegrationMethod:
    """A method by netlist name, or a user's own subclass or instance."""
    if isinstance(method, IntegrationMethod):
        return method
    if isinstance(method, type) and issubclass(method, IntegrationMethod):
        return method()
    try:
        return METHODS[method]()
    except (KeyError, TypeError):
        from .errors import InputError

        raise InputError(
            f"unknown integration method {method!r}; choose one of {', '.join(METHODS)}"
        ) from None
