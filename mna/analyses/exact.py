"""Exact solution of a linear descriptor system over an interval between events.

Between two events a circuit whose elements are all linear or piecewise
linear (switches in a fixed state, the piecewise-linear diode) is the linear
time-invariant descriptor system

    C x' + G x + f0 = S u(t)

with constant matrices ``C`` (F, H), ``G`` (S, 1/ohm), an offset ``f0`` and
the source entries ``u(t)`` (V, A) entering through ``S``. Between corners
every source is affine in time (constant, steps, ramps, PWM edges,
piecewise-linear tables) or a sine, so over an interval starting at ``t0``

    u(t0 + s) = a + b*s + sum_k ( c_k cos(w_k s) + d_k sin(w_k s) ).

**Reduction to the differential part (index 1).** With row and column
scalings ``Dr``, ``Dc`` (so that a 1 pF capacitor and a 1 H coil are
judged on the same footing) the singular value decomposition
``Dr C Dc = U diag(sigma) V^T`` splits the unknowns ``x = Dc V [y; w]``
into ``r`` differential coordinates ``y`` and algebraic ones ``w``. The
algebraic rows give ``w`` from ``y`` and the sources (the block ``A22`` of
``U^T Dr G Dc V`` must be invertible: the circuit is of index 1), and what
remains is the ordinary system

    y' = M y + N (S u(t) - f0),        x = P y + Q (S u(t) - f0).

**Propagation.** With the eigen-decomposition ``M = X diag(lam) X^-1``
every term of the solution is a scalar integral per eigenvalue, in closed
form: ``exp(lam s)`` for the free response, ``s phi1(lam s)`` for a constant
input, ``s^2 phi2(lam s)`` for a ramp and ``(exp(j w s) - exp(lam s)) / (j w
- lam)`` for a sine (the augmented-matrix method of Van Loan, IEEE Trans.
Automatic Control 23(3), 1978, evaluated in the eigenbasis). So ``x`` at any
time inside the interval costs a few small matrix-vector products, which is
what event location and output on any grid need. When the eigenvectors are
too ill-conditioned for that (a defective matrix), the same quantities come
from ``scipy.linalg.expm`` of the augmented matrix instead.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg as la

#: Singular values of the scaled C below this fraction of the largest are zero.
RANK_TOLERANCE = 1e-11
#: Eigenvector matrices worse conditioned than this use the expm path.
EIGEN_CONDITION_LIMIT = 1e8
#: Below this |z| the phi functions use their series (no cancellation).
SERIES_LIMIT = 1e-4


class NotIndexOne(Exception):
    """The algebraic part of the system cannot be solved for (index above 1)."""


@dataclass(frozen=True)
class Inputs:
    """The sources over one interval: ``u(t0 + s) = a + b s + sum c_k cos(w_k s) + d_k sin(w_k s)``.

    ``a``, ``b`` (per source entry, SI units and units per second); ``omega``
    (rad/s) with ``c``, ``d`` one row per frequency.
    """

    a: np.ndarray
    b: np.ndarray
    omega: np.ndarray
    c: np.ndarray
    d: np.ndarray

    def at(self, s: np.ndarray) -> np.ndarray:
        """u at the offsets ``s`` (s) from the interval's start, one row per offset."""
        s = np.atleast_1d(np.asarray(s, dtype=float))
        u = self.a[None, :] + s[:, None] * self.b[None, :]
        if self.omega.size:
            ws = np.outer(s, self.omega)
            u = u + np.cos(ws) @ self.c + np.sin(ws) @ self.d
        return u


def _phi1(z: np.ndarray) -> np.ndarray:
    """(exp(z) - 1) / z, accurate near 0 (complex z)."""
    out = np.empty_like(z)
    small = np.abs(z) < SERIES_LIMIT
    zs = z[small]
    out[small] = 1 + zs / 2 + zs * zs / 6
    zl = z[~small]
    out[~small] = np.expm1(zl) / zl if np.isrealobj(zl) else (np.exp(zl) - 1) / zl
    return out


def _phi2(z: np.ndarray) -> np.ndarray:
    """(exp(z) - 1 - z) / z^2, accurate near 0 (complex z)."""
    out = np.empty_like(z)
    small = np.abs(z) < 1e-2
    zs = z[small]
    out[small] = 0.5 + zs / 6 + zs * zs / 24 + zs ** 3 / 120 + zs ** 4 / 720
    zl = z[~small]
    out[~small] = (np.exp(zl) - 1 - zl) / (zl * zl)
    return out


def _sine_integral(lam: np.ndarray, jw: complex, s: np.ndarray) -> np.ndarray:
    """The integral over [0, s] of exp(lam (s - v)) exp(jw v) dv (broadcast over lam and s)."""
    lam, s = np.broadcast_arrays(np.asarray(lam, dtype=complex), np.asarray(s, dtype=float))
    z = (jw - lam) * s
    out = np.empty(z.shape, dtype=complex)
    small = np.abs(z) < SERIES_LIMIT
    ls, ss, zs = lam[small], s[small], z[small]
    out[small] = np.exp(ls * ss) * ss * (1 + zs / 2 + zs * zs / 6)
    big = ~small
    out[big] = (np.exp(jw * s[big]) - np.exp(lam[big] * s[big])) / (jw - lam[big])
    return out


class LinearModes:
    """One switch state's linear descriptor system, reduced to its differential part.

    ``C``, ``G``: dense n x n arrays (the charge and conductance Jacobians
    of the state); ``f0``: the offset of f at x = 0 (n); ``S``: the map of
    the source entries onto the rows (n x m).
    """

    def __init__(self, C: np.ndarray, G: np.ndarray, f0: np.ndarray, S: np.ndarray):
        n = C.shape[0]
        row_scale = _inverse_max(np.abs(C), axis=1)
        col_scale = _inverse_max(np.abs(C), axis=0)
        U, sigma, Vt = la.svd(row_scale[:, None] * C * col_scale[None, :])
        r = int(np.sum(sigma > RANK_TOLERANCE * (sigma[0] if sigma.size else 0.0)))
        W = U.T * row_scale[None, :]          # equations, scaled and rotated
        T = col_scale[:, None] * Vt.T         # x = T [y; w]
        A = W @ G @ T
        A11, A12, A21, A22 = A[:r, :r], A[:r, r:], A[r:, :r], A[r:, r:]
        if n > r:
            try:
                lu = la.lu_factor(A22, check_finite=True)
            except (ValueError, la.LinAlgError) as exc:  # pragma: no cover - defensive
                raise NotIndexOne(str(exc)) from None
            if np.min(np.abs(np.diag(lu[0]))) <= 1e-13 * max(np.max(np.abs(A22)), 1e-300):
                raise NotIndexOne("the algebraic part is singular")
            A22_inv_A21 = la.lu_solve(lu, A21)
            A22_inv_W2 = la.lu_solve(lu, W[r:])
        else:
            A22_inv_A21 = np.zeros((0, r))
            A22_inv_W2 = np.zeros((0, n))
        inv_sigma = 1.0 / sigma[:r]
        self.n, self.r = n, r
        #: y' = M y + N (S u - f0)
        self.M = inv_sigma[:, None] * (-A11 + A12 @ A22_inv_A21)
        self.N = inv_sigma[:, None] * (W[:r] - A12 @ A22_inv_W2)
        #: x = P y + Q (S u - f0)
        self.P = T[:, :r] - T[:, r:] @ A22_inv_A21
        self.Q = T[:, r:] @ A22_inv_W2
        #: y from the charges and fluxes: sigma y = W1 C x
        self.Y_of_q = inv_sigma[:, None] * W[:r]
        self.C = C
        self.S = S
        self.f0 = f0
        self.NS = self.N @ S
        self.Nf0 = self.N @ f0
        self.QS = self.Q @ S
        self.Qf0 = self.Q @ f0
        self._eigen()

    def _eigen(self) -> None:
        self.use_eigen = False
        if self.r == 0:
            return
        lam, X = la.eig(self.M)
        try:
            cond = np.linalg.cond(X)
        except np.linalg.LinAlgError:  # pragma: no cover
            return
        if np.isfinite(cond) and cond < EIGEN_CONDITION_LIMIT:
            self.lam, self.X = lam, X
            self.X_inv = la.inv(X)
            self.PX = self.P @ X  # each mode's shape in the unknowns
            self.use_eigen = True

    # -- the state ---------------------------------------------------------------
    def y_from_charges(self, q: np.ndarray) -> np.ndarray:
        """Differential coordinates from the charges and fluxes ``q = C x``."""
        return self.Y_of_q @ q

    def x_of(self, y: np.ndarray, u: np.ndarray) -> np.ndarray:
        """The unknowns from ``y`` (rows) and the source entries ``u`` (rows)."""
        return y @ self.P.T + u @ self.QS.T - self.Qf0

    def forcing(self, inputs: Inputs) -> tuple[np.ndarray, np.ndarray, list]:
        """The forcing of y' per basis function: constant, ramp and (per frequency) complex sine."""
        const = inputs.a @ self.NS.T - self.Nf0
        ramp = inputs.b @ self.NS.T
        sines = []
        for k, w in enumerate(inputs.omega):
            # c cos + d sin = Re[(c - j d) exp(j w s)]
            sines.append((w, (inputs.c[k] - 1j * inputs.d[k]) @ self.NS.T))
        return const, ramp, sines

    # -- propagation ---------------------------------------------------------------
    def y_at(self, y0: np.ndarray, inputs: Inputs, s: np.ndarray) -> np.ndarray:
        """y at the offsets ``s`` (s, >= 0) from the interval's start, one row per offset."""
        return self.trajectory(y0, inputs)(s)

    def trajectory(self, y0: np.ndarray, inputs: Inputs) -> "Trajectory":
        """y(s) over one interval from y0 with these sources (coefficients computed once)."""
        return Trajectory(self, y0, inputs)

class Trajectory:
    """y(s) of one interval: the eigen-basis coefficients of every term, computed once."""

    def __init__(self, modes: LinearModes, y0: np.ndarray, inputs: Inputs):
        self.modes, self.y0 = modes, y0
        self.const, self.ramp, self.sines = modes.forcing(inputs)
        if modes.r and modes.use_eigen:
            Xi = modes.X_inv
            self.z0, self.zc, self.zr = Xi @ y0, Xi @ self.const, Xi @ self.ramp
            self.zs = [(w, Xi @ g) for w, g in self.sines]

    def __call__(self, s) -> np.ndarray:
        s = np.atleast_1d(np.asarray(s, dtype=float))
        modes = self.modes
        if modes.r == 0:
            return np.zeros((s.size, 0))
        if not modes.use_eigen:
            return np.array([self._expm(float(v)) for v in s])
        lam = modes.lam
        lv = np.multiply.outer(s, lam)  # one row per offset
        sc = s[:, None]
        z = np.exp(lv) * self.z0 + sc * _phi1(lv) * self.zc
        if np.any(self.zr):
            z = z + sc * sc * _phi2(lv) * self.zr
        for w, g in self.zs:
            z = z + _sine_integral(lam[None, :], 1j * w, sc) * g
        return (z @ modes.X.T).real

    def _expm(self, s: float) -> np.ndarray:
        """y(s) by one matrix exponential of the augmented system (when M is defective)."""
        modes = self.modes
        r = modes.r
        blocks = [self.const, self.ramp]
        gens = [np.array([[0.0, 0.0], [1.0, 0.0]])]  # (1, s): 1' = 0, s' = 1
        for w, g in self.sines:
            blocks += [g.real, -g.imag]  # Re[g e^{jws}] = g.re cos - g.im sin
            gens.append(np.array([[0.0, -w], [w, 0.0]]))  # (cos, sin)
        p = len(blocks)
        Z = np.zeros((r + p, r + p))
        Z[:r, :r] = modes.M
        Z[:r, r:] = np.column_stack(blocks)
        Z[r:, r:] = la.block_diag(*gens)
        e0 = np.zeros(r + p)
        e0[:r] = self.y0
        e0[r] = 1.0
        e0[r + 2::2] = 1.0  # cos(0) = 1
        return (la.expm(Z * s) @ e0)[:r]


def _inverse_max(a: np.ndarray, axis: int) -> np.ndarray:
    m = a.max(axis=axis) if a.size else np.zeros(0)
    return np.where(m > 0, 1.0 / np.where(m > 0, m, 1.0), 1.0)


# -- from a compiled system ---------------------------------------------------------
#: Waveform kinds whose values between corners are affine in time or a sine.
def _qualifying_waveforms():
    from ..waveforms import Constant, Piecewise, Pulse, Sine, Step

    return (Constant, Step, Pulse, Piecewise), Sine


class SourceEntries:
    """The system's source entries (row, coefficient, waveform), for :class:`Inputs`."""

    def __init__(self, system):
        waves = [w for ev in system.evaluators for w in ev.waves]
        self.waves = [waves[k] for k in np.asarray(system.source_order).tolist()]
        self.m = len(self.waves)
        n = system.n
        self.S = np.zeros((n, self.m))
        for k, (row, coef) in enumerate(zip(system.source_rows.tolist(), system.source_coefs.tolist())):
            self.S[row, k] += coef
        affine, sine = _qualifying_waveforms()
        self.sine_index = [k for k, w in enumerate(self.waves) if isinstance(w, sine)]
        self.supported = all(isinstance(w, affine + (sine,)) for w in self.waves)
        self.system = system

    def inputs(self, t0: float, t1: float) -> Inputs:
        """The sources over ``(t0, t1)``, which holds no corner."""
        h = t1 - t0
        u1 = self.system.source_values(t0 + 0.25 * h)
        u2 = self.system.source_values(t0 + 0.75 * h)
        b = (u2 - u1) / (0.5 * h)
        a = u1 - 0.25 * h * b
        omegas, cs, ds = [], [], []
        for k in self.sine_index:
            w = self.waves[k]
            if t0 < w.delay:  # held before its delay (a corner): affine already
                continue
            omega = 2 * np.pi * w.frequency
            theta = omega * (t0 - w.delay) + w.phase
            a[k], b[k] = w.offset, 0.0
            if omega not in omegas:
                omegas.append(omega)
                cs.append(np.zeros(self.m))
                ds.append(np.zeros(self.m))
            j = omegas.index(omega)
            cs[j][k] = w.amplitude * np.sin(theta)
            ds[j][k] = w.amplitude * np.cos(theta)
        shape = (len(omegas), self.m)
        return Inputs(a=a, b=b, omega=np.array(omegas, dtype=float),
                      c=np.array(cs).reshape(shape), d=np.array(ds).reshape(shape))


def state_matrices(system, states=None, t: float = 0.0):
    """Dense ``(C, G, f0)`` of a piecewise-linear system in its present switch state."""
    f0, _q0, jf, jq = system.affine_parts(t, states)
    G = system.dense_array(system.matrix_data(0.0, jf, jq))
    CG = system.dense_array(system.matrix_data(1.0, jf, jq))
    if f0 is None:
        f0 = np.zeros(system.n)
    return CG - G, G, np.asarray(f0, dtype=float)
