"""Radau IIA of order 5: three stages, L-stable, stiffly accurate.

For the index-1 descriptor system ``d/dt q(x) + f(x, t) = 0`` a step of
length h from (t_n, x_n) finds three stage values X_i at t_n + c_i h that
satisfy the collocation conditions

    sum_j W_ij (q(X_j) - q(x_n)) / h + f(X_i, t_n + c_i h) = 0,   W = A^-1,

with A the Radau IIA coefficient matrix (Hairer & Wanner, *Solving
Ordinary Differential Equations II*, 2nd ed., §IV.5 Table 5.6 and §IV.8).
The method is stiffly accurate (c_3 = 1), so x_{n+1} = X_3.

The stage system is solved by simplified Newton iterations. W has one real
eigenvalue and a complex pair; in the eigenvector basis (T) the 3n x 3n
system splits into one real n x n system ``(mu_r/h) Jq + Jf`` and one
complex one ``(mu_c/h) Jq + Jf`` (H&W §IV.8, eq. 8.15-8.17), where Jq and
Jf are the Jacobians of q and f. Both are factored once per step length and
switch state (and, for a nonlinear circuit, when the Jacobian is renewed):
on a linear or piecewise-linear circuit one iteration solves the stages
exactly, and a run at constant step does no factorization at all.

The error estimate is the embedded formula of H&W §IV.8 (eq. 8.19-8.20),
filtered through the real matrix so stiff components do not inflate it:
``err = ((mu_r/h) Jq + Jf)^-1 (qdot_n + sum_i e_i (q(X_i) - q_n) / h)``,
measured on the charge and flux rows like every other method. It is of
third order in h; the step size follows it with the exponent 1/4.

The dense output is the collocation polynomial through x_n and the three
stages: a cubic, accurate to the third order everywhere in the step.
"""

from __future__ import annotations

import numpy as np
from scipy.linalg.lapack import dgetrf, dgetrs, zgetrf, zgetrs

from .base import CANDIDATE, NOT_CONVERGED, REJECTED, DenseOutput, LinearDense, Step, Stepper

_S6 = 6.0 ** 0.5
#: Nodes and coefficients of Radau IIA, s = 3 (H&W II, Table 5.6).
NODES = np.array([(4 - _S6) / 10, (4 + _S6) / 10, 1.0])
A = np.array([
    [(88 - 7 * _S6) / 360, (296 - 169 * _S6) / 1800, (-2 + 3 * _S6) / 225],
    [(296 + 169 * _S6) / 1800, (88 + 7 * _S6) / 360, (-2 - 3 * _S6) / 225],
    [(16 - _S6) / 36, (16 + _S6) / 36, 1.0 / 9.0],
])
W = np.linalg.inv(A)
#: Weights of the embedded error estimate (H&W II, §IV.8, eq. 8.20, times mu_r).
E = np.array([-13 - 7 * _S6, -13 + 7 * _S6, -1.0]) / 3.0


def _eigen_basis():
    """T, T^-1, mu_r, mu_c with T^-1 W T = [[mu_r, 0, 0], [0, a, b], [0, -b, a]], mu_c = a - i b."""
    values, vectors = np.linalg.eig(W)
    real = int(np.argmin(np.abs(values.imag)))
    cplx = int(np.argmax(values.imag))
    T = np.column_stack([vectors[:, real].real, vectors[:, cplx].real, vectors[:, cplx].imag])
    return T, np.linalg.inv(T), float(values[real].real), complex(values[cplx].conjugate())


T, TI, MU_REAL, MU_COMPLEX = _eigen_basis()
#: x(t_n + theta h) = x_n + sum_k D_k theta^k: D = V^-1 Z with V_ik = c_i^k.
_V_INV = np.linalg.inv(np.vander(NODES, 4, increasing=True)[:, 1:])

NEWTON_MAX_ITERATIONS = 8
#: Stage iterations stop when every update is below this fraction of
#: tolerance= (relative) plus the Newton floor of its unknown.
NEWTON_FRACTION = 0.01
ORDER_OF_ESTIMATE = 3
#: Fresh Jacobians a step may take when the simplified iteration stalls.
JACOBIAN_RENEWALS = 3
#: A stage update this many times the largest value present is divergence.
DIVERGED = 1e4


class RadauDense(DenseOutput):
    """The collocation polynomial of one step: a cubic through x_n and the three stages."""

    order = 3

    def __init__(self, t_old: float, t: float, x_old: np.ndarray, coefs: np.ndarray):
        super().__init__(t_old, t)
        self.x_old, self.coefs = x_old, coefs  # coefs: (3, n), theta^1..theta^3

    def __call__(self, t):
        th = self.theta(t)
        powers = np.stack([th, th * th, th * th * th], axis=-1)
        return self.x_old + powers @ self.coefs

    def derivative(self, t):
        th = self.theta(t)
        powers = np.stack([np.ones_like(th), 2 * th, 3 * th * th], axis=-1)
        return powers @ self.coefs / (self.t - self.t_old)

    def derivative_at_end(self) -> np.ndarray:
        """dx/dt at the end of the step (per second)."""
        return (self.coefs[0] + 2 * self.coefs[1] + 3 * self.coefs[2]) / (self.t - self.t_old)


class _Factors:
    """The real and the complex stage matrices of one step length, factored.

    Small systems (the system's dense form) call LAPACK's getrf/getrs
    directly: a 5 x 5 factorization costs about a microsecond, where the
    checking wrappers cost a hundred times more.
    """

    def __init__(self, system, data_f: np.ndarray, data_q: np.ndarray, h: float):
        from ..solver import SingularMatrix, singular_unknowns

        self.dense = system.dense
        self.Jq = system.dense_array(data_q) if self.dense else system.matrix(data_q).tocsr()
        if self.dense:
            Jf = system.dense_array(data_f)
            self.real = dgetrf(MU_REAL / h * self.Jq + Jf)
            self.cplx = zgetrf(MU_COMPLEX / h * self.Jq + Jf)
            if self.real[2] != 0 or self.cplx[2] != 0:
                raise SingularMatrix(singular_unknowns(system, system.matrix(data_f + data_q / h)))
        else:
            import scipy.sparse.linalg as spla  # only the sparse path pays for its import

            try:
                self.real = spla.splu(system.matrix(data_f + (MU_REAL / h) * data_q), permc_spec="COLAMD")
                self.cplx = spla.splu(system.matrix(data_f + (MU_COMPLEX / h) * data_q.astype(complex)),
                                      permc_spec="COLAMD")
            except RuntimeError:
                raise SingularMatrix(singular_unknowns(system, system.matrix(data_f + data_q / h))) from None

    def solve_real(self, rhs):
        return dgetrs(self.real[0], self.real[1], rhs)[0] if self.dense else self.real.solve(rhs)

    def solve_complex(self, rhs):
        return zgetrs(self.cplx[0], self.cplx[1], rhs)[0] if self.dense else self.cplx.solve(rhs)


class Radau(Stepper):
    """Radau IIA, order 5 (3 stages), with its embedded error estimate and cubic dense output."""

    name = "radau"
    order = 5
    dense_order = 3
    summary = "fifth order, L-stable, stiffly accurate; few long steps for smooth stretches"

    def __init__(self, problem, t, x, h, rates=None):
        self._factors: dict = {}
        self._jacobian = None  # (data_f, data_q, key) for the current switch state / point
        self.stats_work = {"factorizations": 0, "solves": 0, "newton_iterations": 0}
        super().__init__(problem, t, x, h, rates)

    # -- history ----------------------------------------------------------------------
    def _restart(self, rates):
        p = self.problem
        self.q = p.charges(self.x, self.t)
        self.rates_now = rates if rates is not None else p.rates(self.x, self.t)
        self.first = True
        self.dense_prev = None
        if not p.pwl:
            self._jacobian = None

    def _accept(self, step: Step) -> None:
        self.q, self.rates_now = step.memo
        self.first = False
        self.dense_prev = step.dense

    # -- linear algebra -----------------------------------------------------------------
    def _jacobians(self):
        """(data_f, data_q): CSC data of df/dx and dq/dx, renewed per switch state or per step."""
        p = self.problem
        key = p.state_key() if p.pwl else (self.t, id(self.x))
        if self._jacobian is not None and self._jacobian[2] == key:
            return self._jacobian[:2]
        data_f, data_q = p.jacobians(self.x, self.t)
        if p.pwl:
            self._factors = {k: v for k, v in self._factors.items() if k[1] == key}
        else:
            self._factors.clear()
        self._jacobian = (data_f, data_q, key)
        return data_f, data_q

    def _factored(self, h: float) -> _Factors:
        data_f, data_q = self._jacobians()
        key = (h, self._jacobian[2])
        factors = self._factors.get(key)
        if factors is None:
            factors = _Factors(self.problem.system, data_f, data_q, h)
            self.stats_work["factorizations"] += 2
            if len(self._factors) >= 8:
                self._factors.pop(next(iter(self._factors)))
            self._factors[key] = factors
        return factors

    # -- one step -----------------------------------------------------------------------
    def _attempt(self, t_new: float, h: float, error_control: bool) -> Step:
        p = self.problem
        Z, Qz, factors = self._stages(self._factored(h), h)
        if Z is None:
            return self._euler_step(t_new, h, error_control)
        x_new = self.x + Z[2]
        h_next = self.h
        err = None
        if not p.q_rows.size:
            h_next = np.inf  # nothing stores energy: only corners and max-step bound the step
        elif error_control:
            err = self._error(factors, Qz, h)
            ok, h_next = self.next_step(h, err, ORDER_OF_ESTIMATE)
            if not ok:
                self.first = True  # the next try filters its estimate once more (H&W §IV.8)
                return Step(REJECTED, self.t, t_new, error=err, h_next=h_next)
        dense = RadauDense(self.t, t_new, self.x, _V_INV @ Z)
        rates_new = (W[2] @ Qz) / h  # stiffly accurate: the last stage's collocation rate
        q_new = self.q + Qz[2]
        return Step(CANDIDATE, self.t, t_new, length=h, x=x_new, xdot=dense.derivative_at_end(), dense=dense,
                    error=err, h_next=h_next, memo=(q_new, rates_new))

    def _euler_step(self, t_new: float, h: float, error_control: bool) -> Step:
        """A backward-Euler step, when the stage iteration does not settle.

        The stage iteration keeps the Jacobian of the step's start; a junction
        that switches hard inside the step (a freewheel diode taking over
        after its switch opens) can stall it at any step length. One
        backward-Euler step (a full Newton iteration with junction limiting)
        carries the run over it, with its own error estimate
        ``(q1 - q0) - h qdot0`` (first order); the next step is Radau again.
        """
        p = self.problem
        x_new = p.solve(self.x, t_new, 1.0 / h, -self.q / h)
        if x_new is None:
            return Step(NOT_CONVERGED, self.t, t_new, unsettled=self._unsettled)
        q_new = p.charges(x_new, t_new)
        h_next = self.h
        err = None
        if not p.q_rows.size:
            h_next = np.inf
        elif error_control:
            rows = p.q_rows
            err = p.error_norm((q_new - self.q - h * self.rates_now)[rows], q_new[rows])
            ok, h_next = self.next_step(h, err, 1)
            if not ok:
                return Step(REJECTED, self.t, t_new, error=err, h_next=h_next)
        dense = LinearDense(self.t, self.x, t_new, x_new)
        return Step(CANDIDATE, self.t, t_new, length=h, x=x_new, xdot=(x_new - self.x) / h, dense=dense,
                    error=err, h_next=h_next, memo=(q_new, (q_new - self.q) / h))

    def _stages(self, factors: _Factors, h: float):
        """Stage increments Z (3, n), charge increments (3, n) and the factors last used.

        Simplified Newton with the Jacobian at the step's start; when it
        does not settle within NEWTON_MAX_ITERATIONS (a diode turning on
        inside the step), the Jacobian is renewed at the last stage's
        values, up to JACOBIAN_RENEWALS times. (None, None, factors) if
        Newton fails.
        """
        for renewal in range(JACOBIAN_RENEWALS + 1):
            Z, Qz = self._iterate(factors, h, getattr(self, "_Z_last", None) if renewal else None)
            if Z is not None or self.problem.pwl or renewal == JACOBIAN_RENEWALS or self._Z_last is None:
                return Z, Qz, factors
            x3, t3 = self.x + self._Z_last[2], self.t + h
            data_f, data_q = self.problem.jacobians(x3, t3)
            factors = _Factors(self.problem.system, data_f, data_q, h)
            self.stats_work["factorizations"] += 2
        return None, None, factors

    def _iterate(self, factors: _Factors, h: float, Z0):
        """Simplified Newton on the stage equations from Z0 (or a prediction)."""
        p = self.problem
        times = self.t + NODES * h
        self._Z_last = None
        if Z0 is not None:
            Z = Z0
        elif self.dense_prev is not None and not p.pwl:
            Z = self.dense_prev(times) - self.x
        else:
            Z = np.zeros((3, self.x.size))
        Wt = TI @ Z
        mu_r, mu_c = MU_REAL / h, MU_COMPLEX / h
        limiters = p.system.limiting_batches
        for iteration in range(1, NEWTON_MAX_ITERATIONS + 1):
            X = self.x + Z
            F = np.stack([p.rates(X[i], times[i]) for i in range(3)])
            Qz = np.stack([p.charges(X[i], times[i]) for i in range(3)]) - self.q
            TF, TQ = TI @ F, TI @ Qz
            d_real = factors.solve_real(TF[0] - mu_r * TQ[0])
            d_cplx = factors.solve_complex(TF[1] + 1j * TF[2] - mu_c * (TQ[1] + 1j * TQ[2]))
            self.stats_work["solves"] += 2
            self.stats_work["newton_iterations"] += 1
            dW = np.stack([d_real, d_cplx.real, d_cplx.imag])
            if not np.isfinite(dW).all():
                self._unsettled = p.system.describe_unknowns(np.flatnonzero(~np.isfinite(dW).all(axis=0))[:4])
                self._Z_last = None
                return None, None
            Wt = Wt + dW
            Z_new = T @ Wt
            if np.max(np.abs(Z_new)) > DIVERGED * (np.max(np.abs(self.x)) + 1.0):
                # an update ten thousand times the largest value present: the
                # iteration has left for an exponential's far side
                self._unsettled = p.system.describe_unknowns(np.argsort(-np.max(np.abs(Z_new), axis=0))[:4])
                self._Z_last = None
                return None, None
            if p.pwl:  # affine stage equations: one iteration is exact
                X = self.x + Z_new
                return Z_new, np.stack([p.charges(X[i], times[i]) for i in range(3)]) - self.q
            scale = NEWTON_FRACTION * p.tolerance * np.abs(self.x + Z_new) + p.system.abstol
            limited = False
            if limiters:
                X_full, X_old = self.x + Z_new, self.x + Z
                X_new = X_full.copy()
                for i in range(3):
                    for batch in limiters:
                        X_new[i] = batch.limit(X_new[i], X_old[i])
                # (a limiter may round a converged update: only a real cut counts)
                limited = bool(np.any(np.abs(X_new - X_full) > scale))
                if limited:
                    Z_new = X_new - self.x
                    Wt = TI @ Z_new
            ratio = np.max(np.abs(Z_new - Z) / scale, axis=0)
            moved = np.max(ratio)
            Z = self._Z_last = Z_new
            if moved <= 1.0 and not limited:
                X = self.x + Z
                return Z, np.stack([p.charges(X[i], times[i]) for i in range(3)]) - self.q
        self._unsettled = p.system.describe_unknowns(np.argsort(-ratio)[:4])
        return None, None

    def _error(self, factors: _Factors, Qz: np.ndarray, h: float) -> float:
        """The embedded error estimate, in units of the tolerance (H&W II §IV.8)."""
        p = self.problem
        qe = (E @ Qz) / h
        err = factors.solve_real(self.rates_now + qe)
        norm = self._norm(factors, err, Qz)
        if norm > 1.0 and self.first:
            # After a start or a rejection the estimate is filtered once more
            # (H&W II §IV.8, "the first and rejected steps").
            err = factors.solve_real(p.rates(self.x + err, self.t) + qe)
            norm = self._norm(factors, err, Qz)
        return norm

    def _norm(self, factors: _Factors, err: np.ndarray, Qz: np.ndarray) -> float:
        rows = self.problem.q_rows
        lte = (factors.Jq @ err)[rows]
        return self.problem.error_norm(lte, (self.q + Qz[2])[rows])
