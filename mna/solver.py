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

import math
from collections import OrderedDict
from dataclasses import dataclass

import numpy as np
from scipy.linalg.lapack import dgetrf, dgetrs

from .assembly import Assembly
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
        self._assembly: Assembly | None = None
        self._kept: tuple | None = None  # (key, LU) of Newton's last Jacobian
        self._last_jacobian: tuple | None = None  # (matrix, LU), for compare=True

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

    @property
    def assembly(self) -> Assembly:
        """How Newton's residuals and Jacobians are assembled for this run (made on first use)."""
        if self._assembly is None:
            self._assembly = Assembly(self.system)
        return self._assembly

    def factor_matrix(self, matrix: np.ndarray, compare: bool = False):
        """LU of a new Jacobian: a dense column-major array, or CSC data (large systems).

        ``compare``: reuse the last such LU if the matrix has the same values
        (the caller must not change ``matrix`` afterwards).
        """
        if compare:
            last = self._last_jacobian
            if last is not None and last[0].shape == matrix.shape and np.array_equal(last[0], matrix):
                return last[1]
        lu = None
        original = matrix
        if self.dense:
            lu = self._dense_lu(matrix)
            if lu is None:
                matrix = self.system.csc_data(matrix)
        if lu is None:
            lu = self._sparse_lu(matrix)
        self.factorizations += 1
        self._last_jacobian = (original, lu) if compare else None
        return lu

    def reusable(self, key):
        """The LU Newton kept under ``key`` (:meth:`keep`), or None."""
        if key is not None and self._kept is not None and self._kept[0] == key:
            return self._kept[1]
        return None

    def keep(self, key, lu) -> None:
        """Keep Newton's last LU for the next solve with the same ``key`` (None: keep nothing)."""
        self._kept = (key, lu) if key is not None else None

    def forget(self) -> None:
        """Drop cached factorizations (after an event changed the matrix)."""
        self._kept = None
        self._last_jacobian = None
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
#: Newton keeps a Jacobian while successive updates shrink at least this
#: fast (the ratio of their norms); a slower rate takes a fresh Jacobian.
#: The same bound as in Hairer & Wanner, *Solving Ordinary Differential
#: Equations II*, section IV.8 (from memory), for their simplified Newton.
THETA_REUSE = 0.3
#: Updates below this fraction of the tolerance are round-off: two in a row
#: with an older Jacobian count as converged whatever their ratio.
ROUNDOFF_UPDATE = 1e-3
#: A Jacobian whose last rate was above this is not kept for the next solve.
THETA_KEEP = 0.05
#: With an older Jacobian the iteration converges linearly, so a solve stops
#: only when the predicted remaining error ``theta/(1 - theta)*|dx|`` is this
#: fraction of the tolerance: as far inside it as the quadratic remainder of
#: a last update with a fresh Jacobian usually is.
CHORD_REMAINDER = 0.01
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
    reuse_jacobian: bool = True,
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
    3. Convergence, in the norm ``max |dx| / (reltol*|x| + abstol)``
       (abstol per dimension: 1 uV, 1 pA, see :data:`mna.system.ABSTOL`):
       after an update with a Jacobian evaluated at the iterate it started
       from, the update is at most 1; after an update with an older
       Jacobian, the iteration contracts (rate ``theta`` of successive
       update norms at most :data:`THETA_REUSE`) and the predicted remaining
       error ``theta/(1 - theta)*|dx|`` is at most 1 (a first update with an
       older Jacobian never counts). Or, after :data:`STALL_AFTER`
       iterations, every equation balances to :data:`RESIDUAL_RELTOL` of
       the magnitudes of its terms: for very short steps (the instant after
       an event), where ``alpha*L`` reaches 1e12 and more and round-off in
       the solve exceeds the step tolerance.

    Jacobian reuse (time steps and jump solves: ``alpha != 0``, undamped):
    the Jacobian and its LU are kept while the iteration contracts, within
    one solve and from one solve to the next with the same ``alpha`` and
    discrete states. A limited step or a rate above :data:`THETA_REUSE`
    takes a fresh Jacobian at the new iterate; a rate of 1 or more, or a
    non-finite update, discards the update and takes a fresh Jacobian at
    the last trusted iterate (the guess ``x0`` when the Jacobian came from
    an earlier solve). A solve that fails with reuse is tried again from
    ``x0`` without (``reuse_jacobian=False``): reuse never loses a solve.
    The DC operating point (``alpha = 0``) and damped
    Newton evaluate the Jacobian at every iterate (quadratic convergence
    leaves the operating point far inside the tolerance) and refactor
    only when its values changed. Linear and piecewise-linear parts are
    summed once per state and step (:class:`mna.assembly.Assembly`).
    """
    s = system.add_sources(np.zeros(system.n), t)
    if source_scale != 1.0:
        s *= source_scale
    assembly = factorizer.assembly
    if assembly.piecewise_linear:
        return _affine_solve(system, factorizer, t, alpha, history, s, extra_diag, hold, states)

    lin = assembly.linear(states, t, alpha, extra_diag)
    constant = -s if history is None else history - s
    if lin.offset is not None:
        constant += lin.offset
    reuse = reuse_jacobian and bool(alpha) and not damping
    reuse_key = (lin.key, hold is not None) if reuse else None

    def residual_at(x: np.ndarray):
        """Residual and the batches' Jacobian values at ``x``."""
        residual, values = assembly.residual(lin, x, t, states, alpha)
        residual += constant
        if hold is not None:
            residual[hold[0]] = x[hold[0]] - hold[1]
        return residual, values

    def fresh_lu(values):
        """LU of the Jacobian at the iterate whose batch values are ``values``, and its
        staleness reference."""
        matrix, reference = assembly.jacobian(lin, values, alpha)
        if hold is not None:
            if assembly.dense:
                rows = hold[0]
                matrix[rows, :] = 0.0
                matrix[rows, rows] = 1.0
            else:
                system.hold_matrix(matrix, hold[0])
        return factorizer.factor_matrix(matrix, compare=not reuse), reference

    def balanced(x: np.ndarray, residual: np.ndarray) -> bool:
        """Every equation holds to RESIDUAL_RELTOL of the terms that make it up."""
        f_nl, q_nl, _, _ = system.evaluate_batches(x, t, states)
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

    def _without_reuse(failed: NewtonResult) -> NewtonResult:
        """A solve that failed with Jacobian reuse is tried again from ``x0`` with a fresh
        Jacobian at every iterate, so reuse never loses a solve Newton proper finds."""
        if not reuse:
            return failed
        factorizer.keep(None, None)
        again = newton(system, factorizer, x0, t, alpha, history, max_iterations=max_iterations,
                       reltol=reltol, extra_diag=extra_diag, source_scale=source_scale, hold=hold,
                       states=states, reuse_jacobian=False)
        again.iterations += failed.iterations
        return again

    limiters = system.limiting_batches
    # No limiter acts on an update whose largest entry is below all their
    # ``limit_quiet`` (a converging iteration): then none is called.
    quiet = min((b.limit_quiet for b in limiters), default=0.0)
    floor = system.abstol / reltol  # (the norm is computed in units of reltol)
    x = np.array(x0, dtype=float)
    ax = np.abs(x)
    residual, values = residual_at(x)
    kept = factorizer.reusable(reuse_key)
    if kept is not None and assembly.close(values, alpha, kept[1]):
        (lu, reference), current = kept, False
    else:
        (lu, reference), current = fresh_lu(values), True
    origin = (x, residual, values) if not current else None  # where a kept Jacobian started
    previous = None  # norm of the last update made with this Jacobian
    limited = damped = False
    step = scale = np.ones(system.n)
    for iteration in range(1, max_iterations + 1):
        if iteration > STALL_AFTER and not limited and not damped and balanced(x, residual):
            # The update is stuck at round-off while every equation holds to
            # 1e-12 of its terms: nothing more can be gained in floating point.
            factorizer.keep(reuse_key, (lu, reference))
            return NewtonResult(x, iteration - 1, True)
        dx = lu.solve(residual)  # (the update is -dx)
        factorizer.solves += 1
        full = x - dx
        x_new = full
        step = np.abs(dx)
        if limiters and step.max() > quiet:
            for batch in limiters:
                x_new = batch.limit(x_new, x)
        limited = x_new is not full and not np.array_equal(x_new, full)
        damped = False
        if damping:
            trial = residual_at(x_new)
            norm2 = np.linalg.norm(residual)
            halvings = 0
            while np.linalg.norm(trial[0]) > norm2 and halvings < MAX_HALVINGS:
                x_new = x + 0.5 * (x_new - x)
                trial = residual_at(x_new)
                halvings += 1
            damped = halvings > 0
        ax_new = np.abs(x_new)
        if limited or damped:
            step = np.abs(x_new - x)
        scale = np.maximum(ax_new, ax)
        scale += floor
        norm = float((step / scale).max()) / reltol
        theta = None if (current or previous is None) else norm / max(previous, 1e-300)
        if theta is not None and max(norm, previous) <= ROUNDOFF_UPDATE:
            theta = 0.0  # both updates at round-off: the rate means nothing
        if not norm < math.inf or (theta is not None and theta >= 1.0):
            # An overflowing update, or an older Jacobian that no longer
            # contracts: drop the update; a fresh Jacobian at the last trusted
            # iterate (the guess, if the Jacobian came from an earlier solve).
            if current:
                return _without_reuse(NewtonResult(x, iteration, False, ()))
            if origin is not None:
                x, residual, values = origin
                ax = np.abs(x)
            (lu, reference), current, origin, previous = fresh_lu(values), True, None, None
            continue
        if current:
            converged = norm <= 1.0
        else:
            # (a first update from a kept Jacobian, whose entries were checked
            # at the guess: its rate taken at the bound THETA_REUSE)
            rate = THETA_REUSE if theta is None else theta
            converged = (norm <= 1.0 and rate <= THETA_REUSE
                         and rate * norm <= (1.0 - rate) * CHORD_REMAINDER)
        previous = norm
        x, ax = x_new, ax_new
        if converged and not limited and not damped:
            # The next solve starts from this Jacobian only if it still
            # converges fast: a slower one costs an iteration per solve.
            fast = theta is None or theta <= THETA_KEEP
            factorizer.keep(reuse_key if fast else None, (lu, reference))
            return NewtonResult(x, iteration, True)
        residual, values = trial if damping else residual_at(x)
        if (not reuse or limited or damped or (theta is not None and theta > THETA_REUSE)
                or not assembly.close(values, alpha, reference)):
            (lu, reference), current, origin, previous = fresh_lu(values), True, None, None
        else:
            current = False
    worst = np.argsort(-(step / scale))[:4]  # (scale in units of reltol: the order is the same)
    return _without_reuse(NewtonResult(x, max_iterations, False, system.describe_unknowns(worst)))


def _affine_solve(system: System, factorizer: Factorizer, t: float, alpha: float,
                  history: np.ndarray | None, s: np.ndarray, extra_diag, hold, states) -> NewtonResult:
    """One solve of a system whose batches are all piecewise linear (exact in one iteration)."""
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
