"""The trapezoidal rule: second order, A-stable, no numerical damping."""

from __future__ import annotations

from .companion import CompanionStepper


class Trapezoidal(CompanionStepper):
    """``(qdot[n+1] + qdot[n]) / 2 = (q[n+1] - q[n]) / h``.

    The first two steps after a start, a corner or an event are
    backward-Euler steps: the rule has |R| -> 1 on stiff modes, so a
    derivative left over from before a discontinuity (or from a mode faster
    than the step) would ring, alternating in sign, for the rest of the run.
    Two damped steps leave a derivative consistent with the slow solution.
    """

    name = "trapezoidal"
    order = 2
    summary = "second order, A-stable, undamped: modes faster than the step ring"
    uses_derivative = True
    restart_steps = 2

    @staticmethod
    def coefficients(h, h_prev):
        if h_prev is None:  # no trustworthy qdot[n] after a start or a corner
            return 1.0 / h, -1.0 / h, 0.0, 0.0
        return 2.0 / h, -2.0 / h, 0.0, -1.0

    def lte_from_third_difference(self, h, h_prev, dd3):
        # (h^3/12) q''' with q''' = 6 * dd3
        return 0.5 * h ** 3 * dd3
