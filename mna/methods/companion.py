"""Methods with one implicit solve per step: the companion-model family.

Each writes the derivative of the charges and fluxes at the new time point
as a linear combination of the new charges and history,

    qdot[n+1] = alpha * q[n+1] + b0 * q[n] + b1 * q[n-1] + g0 * qdot[n],

so one step of ``d/dt q(x) + f(x, t) = 0`` is the algebraic system
``alpha*q(x) + history + f(x, t) = 0`` with
``history = b0*q[n] + b1*q[n-1] + g0*qdot[n]``: every capacitor and
inductor becomes a conductance and a source (its companion model).

:class:`CompanionStepper` owns the history these formulas need, the local
error estimate from divided differences of the charge and flux history
(the method's error constant times the matching derivative), and the
restart: after a corner or an event the history is cut and the first
``restart_steps`` steps are backward-Euler steps, unless the rates just
after the discontinuity are known exactly (after a jump solve), in which
case a method that uses the derivative may take its own step at once.

A subclass gives ``coefficients(h, h_prev)`` and, for order 2,
``lte_from_third_difference``.
"""

from __future__ import annotations

from typing import ClassVar

import numpy as np

from .base import (CANDIDATE, MAX_GROWTH, NOT_CONVERGED, REJECTED, LinearDense, QuadraticDense, Step,
                   Stepper, divided_difference)


class CompanionStepper(Stepper):
    """Shared machinery of backward Euler, the trapezoidal rule and BDF2."""

    #: Uses qdot[n] (g0 != 0): the rates at a restart matter.
    uses_derivative: ClassVar[bool] = False
    #: Backward-Euler steps taken after a start, a corner or an event.
    restart_steps: ClassVar[int] = 1

    def coefficients(self, h: float, h_prev: float | None) -> tuple[float, float, float, float]:
        """``(alpha, b0, b1, g0)`` (1/s, 1/s, 1/s, 1) for a step h after a step h_prev (s).

        ``h_prev`` is None on a restart step: a one-step, first-order formula.
        """
        raise NotImplementedError

    def lte_from_third_difference(self, h: float, h_prev: float, dd3: np.ndarray) -> np.ndarray:
        """Local truncation error of q from its third divided difference (order-2 methods)."""
        raise NotImplementedError

    # -- history ---------------------------------------------------------------------
    def _restart(self, rates: np.ndarray | None) -> None:
        p = self.problem
        self.q = self.q_prev = p.charges(self.x, self.t)
        if not hasattr(self, "x_last"):
            self.x_last = self.x_prev_point = None
        if not hasattr(self, "xdot"):
            self.xdot = np.zeros(self.x.size)
        self.h_prev = None
        self.since_restart = 0
        self.qdot = np.zeros(self.q.size)
        self.qdot0 = None if rates is None else rates[p.q_rows]
        self.exact_rates = self.qdot0 is not None and self.uses_derivative
        if self.exact_rates:
            self.qdot = rates
        self.hist_t = [self.t]
        self.hist_q = [self.q[p.q_rows]]

    def _step_coefficients(self, h: float):
        if self.since_restart >= self.restart_steps:
            return self.coefficients(h, self.h_prev)
        if self.exact_rates:
            return self.coefficients(h, self.h_prev or h)
        return self.coefficients(h, None)

    # -- one step --------------------------------------------------------------------
    def _attempt(self, t_new: float, h: float, error_control: bool) -> Step:
        p = self.problem
        alpha, b0, b1, g0 = self._step_coefficients(h)
        history = b0 * self.q
        if b1:
            history = history + b1 * self.q_prev
        if g0:
            history = history + g0 * self.qdot
        # Newton starts from the linear extrapolation of the last two
        # points (within a smooth stretch), which often converges at once.
        guess = self.x
        if not p.pwl and self.x_last is not None and self.since_restart >= 1 and self.h_prev:
            guess = self.x + (self.x - self.x_last) * (h / self.h_prev)
        x_new = p.solve(guess, t_new, alpha, history)
        if x_new is None:
            return Step(NOT_CONVERGED, self.t, t_new)
        q_new = p.charges(x_new, t_new)
        h_next = self.h
        if not p.q_rows.size:
            h_next = self.h  # nothing stores energy: no local error to grow the step by
        elif error_control:
            err = self.local_error(t_new, q_new[p.q_rows], h)
            if err is None:
                h_next = h * MAX_GROWTH if len(self.hist_t) > 1 else h * 1.5
            else:
                ok, h_next = self.next_step(h, err, self._estimate_order())
                if not ok:
                    return Step(REJECTED, self.t, t_new, error=err, h_next=h_next)
        xdot = alpha * x_new + b0 * self.x
        if b1:
            xdot += b1 * self.x_prev_point
        if g0:
            xdot += g0 * self.xdot
        return Step(CANDIDATE, self.t, t_new, length=h, x=x_new, xdot=xdot, dense=self._dense(t_new, x_new),
                    h_next=h_next, memo=(q_new, alpha, history, g0))

    def _estimate_order(self) -> int:
        # (backward-Euler restart steps, and the first step from exact
        # rates, have first-order estimates)
        if self.since_restart >= self.restart_steps or (self.exact_rates and self.since_restart >= 1):
            return self.order
        return 1

    def _dense(self, t_new: float, x_new: np.ndarray):
        if self.order >= 2 and self.since_restart >= 1 and self.x_last is not None:
            return QuadraticDense((self.hist_t[-2], self.t, t_new), (self.x_last, self.x, x_new))
        return LinearDense(self.t, self.x, t_new, x_new)

    def _accept(self, step: Step) -> None:
        q_new, alpha, history, g0 = step.memo
        self.q_prev, self.q = self.q, q_new
        if self.uses_derivative or g0:
            self.qdot = alpha * q_new + history
        self.x_prev_point = self.x_last = self.x
        self.xdot = step.xdot
        self.hist_t.append(step.t)
        self.hist_q.append(q_new[self.problem.q_rows])
        if len(self.hist_t) > 4:
            del self.hist_t[0], self.hist_q[0]
        self.h_prev = step.h
        self.since_restart += 1

    @property
    def charges_now(self) -> np.ndarray:
        return self.q

    # -- the error estimate --------------------------------------------------------------
    def local_error(self, t_new: float, q_new: np.ndarray, h: float) -> float | None:
        """Largest local truncation error over the charge and flux rows, in units of their tolerance.

        On the first step after a restart with known rates ``qdot0`` they
        give the backward-Euler error ``h^2 q''/2 = (q1 - q0) - h*qdot0``
        (a confluent divided difference, Hermite data at the restart point);
        an upper bound for a trapezoidal first step. A trapezoidal second
        step from exact rates uses the third divided difference
        ``q[t0, t0, t1, t2]``: h^3/12 times the third derivative, at once.
        """
        ts = self.hist_t + [t_new]
        qs = self.hist_q + [q_new]
        qdot0 = self.qdot0 if self.since_restart <= 1 else None
        confluent = self.exact_rates and self.since_restart == 1
        if len(ts) == 2 and qdot0 is not None:
            lte = (q_new - self.hist_q[-1]) - h * qdot0
        elif len(ts) == 3 and qdot0 is not None and confluent:
            (t0, t1, t2), (q0, q1, q2) = ts, qs
            d01 = (q1 - q0) / (t1 - t0)
            d001 = (d01 - qdot0) / (t1 - t0)
            d012 = ((q2 - q1) / (t2 - t1) - d01) / (t2 - t0)
            lte = 0.5 * h ** 3 * (d012 - d001) / (t2 - t0)
        elif len(ts) < 3 or self.h_prev is None:
            return None
        elif len(ts) < self.order + 2 or self.order == 1:
            # (not enough history for the method's own order: a first-order estimate)
            lte = h * h * divided_difference(ts[-3:], qs[-3:])
        else:
            lte = self.lte_from_third_difference(h, self.h_prev, divided_difference(ts[-4:], qs[-4:]))
        return self.problem.error_norm(lte, q_new)
