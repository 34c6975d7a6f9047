"""BDF2: the second-order backward differentiation formula, variable step."""

from __future__ import annotations

from .companion import CompanionStepper


class BDF2(CompanionStepper):
    """Second order, L-stable, variable step (ratio w = h / h_prev):

    ``qdot[n+1] = [ (1+2w)/(1+w) q[n+1] - (1+w) q[n] + w^2/(1+w) q[n-1] ] / h``.
    Falls back to backward Euler on the first step after a discontinuity.
    """

    name = "bdf2"
    order = 2
    summary = "second order, L-stable; damps lightly damped modes a little"

    @staticmethod
    def coefficients(h, h_prev):
        if h_prev is None:
            return 1.0 / h, -1.0 / h, 0.0, 0.0
        w = h / h_prev
        return (1 + 2 * w) / ((1 + w) * h), -(1 + w) / h, w * w / ((1 + w) * h), 0.0

    def lte_from_third_difference(self, h, h_prev, dd3):
        # variable-step BDF2: LTE = (1+w)^2 / (w (1+2w)) h^3 q[t_{n-2}..t_{n+1}]
        w = h / h_prev
        return ((1 + w) ** 2 / (w * (1 + 2 * w))) * h ** 3 * dd3
