"""Sparse LU factorization with reuse, and Newton's method on the system.

:class:`Factorizer` keeps the last few factorizations keyed by what the
matrix depends on (the integration coefficient ``alpha`` and the event
version of switched elements), so a fixed step on a linear circuit factors
once, and it counts factorizations and solves for the run statistics.

:func:`newton` solves ``alpha*q(x) + history + f(x, t) = 0`` for one time
point (``alpha = 0`` and no history is the DC operating point). A linear
system converges in one iteration; for nonlinear batches the Jacobian is
refactored only when its values changed.
"""

from __future__ import annotations

from collections import OrderedDict
from dataclasses import dataclass

import numpy as np
from scipy.linalg.lapack import dgetrf, dgetrs

from .errors import SimulationError
from .system import System


class SingularMatrix(Exception):
    """Raised by :class:`Factorizer` with the unknowns that have no solution."""

    def __init__(self, unknowns: tuple[str, ...]):
        self.unknowns = unknowns
        super().__init__(", ".join(unknowns))


class DenseLU:
    """LU factors of a small dense matrix, with the ``solve`` of SuperLU's object.

    ``row_scale``/``col_scale``, when given, are the equilibration of the
    factored matrix ``diag(r) A diag(c)``: ``A x = b`` is solved as
    ``x = c * solve(r * b)``.
    """

    __slots__ = ("lu", "piv", "row_scale", "col_scale")

    def __init__(self, lu: np.ndarray, piv: np.ndarray, row_scale: np.ndarray | None = None,
                 col_scale: np.ndarray | None = None):
        self.lu = lu
        self.piv = piv
        self.row_scale = row_scale
        self.col_scale = col_scale

    def solve(self, rhs: np.ndarray) -> np.ndarray:
        if self.row_scale is None:
            return dgetrs(self.lu, self.piv, rhs)[0]
        return self.col_scale * dgetrs(self.lu, self.piv, self.row_scale * rhs)[0]


class Factorizer:
    """Factors the system matrix, caching by key; counts work for statistics.

    One factorizer belongs to one run (it is never kept on the system). A
    key given to :meth:`factor` must name everything the matrix depends on
    besides the system itself: the integration coefficient and the discrete
    states (:meth:`mna.runstate.DiscreteStates.key`). Without a key the
    last matrix's values are compared instead.
    """

    def __init__(self, system: System, cache_size: int = 8):
        self.system = system
        self.cache_size = cache_size
        self._cache: OrderedDict = OrderedDict()
        self.factorizations = 0
        self.solves = 0
        self._last_data: np.ndarray | None = None
        self._last_lu = None
        self._A = None
        self.dense = system.dense
        self._last_dense: np.ndarray | None = None
        self._last_dense_lu = None

    def factor(self, data: np.ndarray, key=None):
        """LU of the matrix with CSC ``data``. ``key`` identifies data for reuse."""
        if key is not None:
            lu = self._cache.get(key)
            if lu is not None:
                self._cache.move_to_end(key)
                return lu
        elif self._last_data is not None and np.array_equal(data, self._last_data):
            return self._last_lu
        lu = self._dense_lu(self.system.dense_array(data)) if self.dense else None
        if lu is None:
            lu = self._sparse_lu(data)
        self.factorizations += 1
        if key is not None:
            self._cache[key] = lu
            if len(self._cache) > self.cache_size:
                self._cache.popitem(last=False)
        else:
            self._last_data = data.copy()
            self._last_lu = lu
        return lu

    def factor_dense(self, matrix: np.ndarray):
        """LU of a column-major dense matrix, reused while the matrix is unchanged.

        The caller must not change ``matrix`` afterwards (it is kept for the
        comparison).
        """
        if self._last_dense is not None and np.array_equal(matrix, self._last_dense):
            return self._last_dense_lu
        lu = self._dense_lu(matrix)
        if lu is None:
            lu = self._sparse_lu(self.system.csc_data(matrix))
        self.factorizations += 1
        self._last_dense, self._last_dense_lu = matrix, lu
        return lu

    @staticmethod
    def _dense_lu(matrix: np.ndarray) -> DenseLU | None:
        """Dense LU, or None when even the equilibrated matrix has a zero pivot.

        Row pivoting alone can lose a matrix whose entries span 30 orders of
        magnitude (the junction conductances of a wild Newton iterate):
        ``1 + 5e19`` rounds to ``5e19`` and a later pivot cancels to zero.
        Then rows and columns are scaled to a largest entry of 1
        (equilibration, as in LAPACK's expert drivers) and the matrix is
        factored again; if that fails too, the sparse LU decides.
        """
        lu, piv, info = dgetrf(matrix, overwrite_a=0)
        if info == 0 and np.isfinite(lu[-1, -1]):
            return DenseLU(lu, piv)
        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
            r = 1.0 / np.abs(matrix).max(axis=1)
            scaled = matrix * r[:, None]
            c = 1.0 / np.abs(scaled).max(axis=0)
            scaled *= c[None, :]
        if not (np.isfinite(r).all() and np.isfinite(c).all()):
            return None  # an empty row or column: structurally singular
        lu, piv, info = dgetrf(np.asfortranarray(scaled), overwrite_a=1)
        if info != 0 or not np.isfinite(lu[-1, -1]):
            return None
        return DenseLU(lu, piv, r, c)

    def _sparse_lu(self, data: np.ndarray):
        # One CSC matrix object is reused: only its values change, so its
        # structure is not validated again for every factorization.
        if self._A is None:
            self._A = self.system.matrix(data.copy())
        A = self._A
        A.data = data
        try:
            import scipy.sparse.linalg as spla  # only the sparse path pays for its import (0.3-0.8 s)

            return spla.splu(A, permc_spec="COLAMD", options={"SymmetricMode": False})
        except RuntimeError:
            raise SingularMatrix(singular_unknowns(self.system, A)) from None

    def forget(self) -> None:
        """Drop cached factorizations (after an event changed the matrix)."""
        self._cache.clear()
        self._last_data = None
        self._last_lu = None
        self._last_dense = None
        self._last_dense_lu = None


def singular_unknowns(system: System, A) -> tuple[str, ...]:
    """Names of the unknowns that a singular matrix leaves undetermined."""
    n = A.shape[0]
    csr = A.tocsr()
    empty_rows = np.flatnonzero(np.diff(csr.indptr) == 0)
    empty_cols = np.flatnonzero(np.diff(A.tocsc().indptr) == 0)
    if empty_rows.size or empty_cols.size:
        idx = np.union1d(empty_rows, empty_cols)
        return system.describe_unknowns(idx[:8])
    if n <= 2000:
        dense = A.toarray()
        if not np.isfinite(dense).all():  # (an SVD of such a matrix may never return)
            rows = np.flatnonzero(~np.isfinite(dense).all(axis=1))
            return system.describe_unknowns(rows[:8]) + (
                "(the matrix holds an infinite or undefined entry: an element value out of range)",)
        _, sv, vt = np.linalg.svd(dense)
        null = np.abs(vt[-1])
        idx = np.flatnonzero(null > 0.1 * null.max())
        idx = idx[np.argsort(-null[idx])]
        return system.describe_unknowns(idx[:8])
    return ("(too many unknowns to locate the singular part)",)


@dataclass
class NewtonResult:
    """Outcome of :func:`newton`: the last iterate and how it got there.

    ``worst`` names the unknowns that moved most (relative to their
    tolerance) in the last iteration when the solve did not converge.
    """

    x: np.ndarray
    iterations: int
    converged: bool
    worst: tuple[str, ...] = ()


#: Largest number of step halvings per iteration when ``damping`` is on.
MAX_HALVINGS = 8
#: After this many iterations an iterate also counts as converged when every
#: equation balances to RESIDUAL_RELTOL of the magnitudes of its terms (for
#: steps so short, such as the instant after an event, that round-off in the
#: solve exceeds the step tolerance).
STALL_AFTER = 3
RESIDUAL_RELTOL = 1e-12
RESIDUAL_FLOOR = 1e-30


def _abs_matrices(system: System):
    """|G| and |C| of a system (cached on it): the scales of each equation's terms."""
    cached = system.__dict__.get("_abs_matrices")
    if cached is None:
        cached = (abs(system.G).tocsr(), abs(system.C).tocsr())
        system.__dict__["_abs_matrices"] = cached
    return cached


def newton(
    system: System,
    factorizer: Factorizer,
    x0: np.ndarray,
    t: float,
    alpha: float,
    history: np.ndarray | None,
    *,
    max_iterations: int = 50,
    reltol: float = 1e-6,
    extra_diag: np.ndarray | None = None,
    source_scale: float = 1.0,
    damping: bool = False,
    hold: tuple[np.ndarray, np.ndarray] | None = None,
    states=None,
) -> NewtonResult:
    """Solve ``alpha*q(x) + history + f(x, t) = 0`` from the guess ``x0``.

    ``extra_diag`` adds conductances to the diagonal (a DC leak, leak
    step); ``source_scale`` multiplies every independent source (source
    stepping); ``hold`` = (rows, values) replaces those rows by
    ``x[row] = value`` (the DC hold, see
    :meth:`mna.system.Stamper.hold_at_dc`); ``states`` are the run's
    discrete states (:class:`mna.runstate.DiscreteStates`; needed when a
    batch has any). Raises :class:`SingularMatrix`.

    Safeguards, in the order they act on each iteration:

    1. Junction limiting: every batch's ``limit(x_new, x_old)`` may shorten
       the update (a diode's logarithmic limit). An iteration whose step was
       limited never counts as converged.
    2. Damping (``damping=True``): if the residual's 2-norm (SI units) grows,
       the step is halved, up to :data:`MAX_HALVINGS` times; a halved step
       never counts as converged. The trial point's evaluation is reused
       for the next iteration, so an accepted full step costs nothing extra.
    3. Convergence: every unknown moved less than ``reltol*|x| + abstol``
       (abstol per dimension: 1 uV, 1 pA, see :data:`mna.system.ABSTOL`);
       or, after :data:`STALL_AFTER` iterations, every equation balances to
       :data:`RESIDUAL_RELTOL` of the magnitudes of its terms. The second
       test matters only when round-off in the solve is larger than the
       step tolerance: very short steps (the instant after an event), where
       ``alpha*L`` reaches 1e12 and more.

    The matrix is refactored only when its values changed: a batch whose
    Jacobian is constant between events (a switch) reuses one LU.
    """
    s = system.add_sources(np.zeros(system.n), t)
    if source_scale != 1.0:
        s *= source_scale
    if system.is_piecewise_linear:
        f0, q0, jf, jq = system.affine_parts(t, states)
        data = system.matrix_data(alpha, jf, jq, extra_diag)
        rhs = s - history if history is not None else s
        if f0 is not None:
            rhs = rhs - f0 - (alpha * q0 if alpha else 0.0)
        if hold is not None:
            system.hold_matrix(data, hold[0])
            rhs[hold[0]] = hold[1]
        lu = factorizer.factor(data)
        factorizer.solves += 1
        return NewtonResult(lu.solve(rhs), 1, True)

    # The linear part alpha*C + G (+ diag) is summed once per solve: its CSC
    # data seeds every Jacobian, and as an operator it gives the linear
    # terms of the residual in one product.
    linear_data = system.G_data + alpha * system.C_data if alpha else system.G_data.copy()
    if extra_diag is not None:
        linear_data[system.diag_pos] += extra_diag
    dense = system.dense
    linear = system.operator(linear_data)
    constant = -s if history is None else history - s
    limiters = system.limiting_batches
    charges = bool(alpha) and system.has_nonlinear_charges

    def linearise(x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Residual, matrix (dense array or CSC data), and the nonlinear f and q at ``x``."""
        f_nl, q_nl, jf, jq = system.evaluate_batches(x, t, states)
        residual = linear @ x
        residual += f_nl
        residual += constant
        if charges:
            residual += alpha * q_nl
        if dense:
            matrix = system.dense_jacobian(linear, alpha, jf, jq)
            if hold is not None:
                rows = hold[0]
                matrix[rows, :] = 0.0
                matrix[rows, rows] = 1.0
        else:
            matrix = system.matrix_data(alpha, jf, jq, linear=linear_data)
            if hold is not None:
                system.hold_matrix(matrix, hold[0])
        if hold is not None:
            residual[hold[0]] = x[hold[0]] - hold[1]
        return residual, matrix, f_nl, q_nl

    def balanced(x: np.ndarray, residual: np.ndarray, f_nl: np.ndarray, q_nl: np.ndarray) -> bool:
        """Every equation holds to RESIDUAL_RELTOL of the terms that make it up."""
        abs_g, abs_c = _abs_matrices(system)
        ax = np.abs(x)
        terms = abs_g @ ax + np.abs(f_nl) + np.abs(s)
        if alpha:
            terms += alpha * (abs_c @ ax + np.abs(q_nl))
        if history is not None:
            terms += np.abs(history)
        if extra_diag is not None:
            terms += np.abs(extra_diag * x)
        if hold is not None:
            terms[hold[0]] = np.abs(x[hold[0]]) + np.abs(hold[1])
        return bool(np.all(np.abs(residual) <= RESIDUAL_RELTOL * terms + RESIDUAL_FLOOR))

    x = np.array(x0, dtype=float)
    residual, data, f_nl, q_nl = linearise(x)
    step = scale = np.ones(system.n)
    limited = damped = False
    for iteration in range(1, max_iterations + 1):
        if iteration > STALL_AFTER and not limited and not damped and balanced(x, residual, f_nl, q_nl):
            # The update is stuck at round-off while every equation holds to
            # 1e-12 of its terms: nothing more can be gained in floating point.
            return NewtonResult(x, iteration - 1, True)
        lu = factorizer.factor_dense(data) if dense else factorizer.factor(data)
        dx = lu.solve(-residual)
        factorizer.solves += 1
        if not np.isfinite(dx).all():
            return NewtonResult(x, iteration, False, ())
        full = x + dx
        x_new = full
        for batch in limiters:
            x_new = batch.limit(x_new, x)
        limited = x_new is not full and not np.array_equal(x_new, full)
        damped = False
        if damping:
            trial = linearise(x_new)
            norm = np.linalg.norm(residual)
            halvings = 0
            while np.linalg.norm(trial[0]) > norm and halvings < MAX_HALVINGS:
                x_new = x + 0.5 * (x_new - x)
                trial = linearise(x_new)
                halvings += 1
            damped = halvings > 0
        step = np.abs(x_new - x)
        scale = reltol * np.maximum(np.abs(x_new), np.abs(x)) + system.abstol
        x = x_new
        if not limited and not damped and (step <= scale).all():
            return NewtonResult(x, iteration, True)
        residual, data, f_nl, q_nl = trial if damping else linearise(x)
    worst = np.argsort(-(step / scale))[:4]
    return NewtonResult(x, max_iterations, False, system.describe_unknowns(worst))


def raise_singular(exc: SingularMatrix, *, time: float | None, step: float | None, partial=None, what: str):
    names = ", ".join(exc.unknowns)
    raise SimulationError(
        f"{what}: the circuit equations have no unique solution (singular matrix); "
        f"undetermined: {names}",
        time=time,
        step=step,
        unknowns=exc.unknowns,
        partial=partial,
    ) from None
