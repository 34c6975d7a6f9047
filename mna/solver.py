"""Sparse LU factorisation with reuse, and Newton's method on the system.

:class:`Factorizer` keeps the last few factorisations keyed by what the
matrix depends on (the integration coefficient ``alpha`` and the event
version of switched elements), so a fixed step on a linear circuit factors
once, and it counts factorisations and solves for the run statistics.

:func:`newton` solves ``alpha*q(x) + history + f(x, t) = 0`` for one time
point (``alpha = 0`` and no history is the DC operating point). A linear
system converges in one iteration; for nonlinear batches the Jacobian is
refactored only when its values changed.
"""

from __future__ import annotations

from collections import OrderedDict
from dataclasses import dataclass

import numpy as np
import scipy.sparse.linalg as spla

from .errors import SimulationError
from .system import System


class SingularMatrix(Exception):
    """Raised by :class:`Factorizer` with the unknowns that have no solution."""

    def __init__(self, unknowns: tuple[str, ...]):
        self.unknowns = unknowns
        super().__init__(", ".join(unknowns))


class Factorizer:
    """Factors the system matrix, caching by key; counts work for statistics."""

    def __init__(self, system: System, cache_size: int = 8):
        self.system = system
        self.cache_size = cache_size
        self._cache: OrderedDict = OrderedDict()
        self.factorizations = 0
        self.solves = 0
        self._last_data: np.ndarray | None = None
        self._last_lu = None
        self._A = None

    def factor(self, data: np.ndarray, key=None):
        """LU of the matrix with CSC ``data``. ``key`` identifies data for reuse."""
        if key is not None:
            lu = self._cache.get(key)
            if lu is not None:
                self._cache.move_to_end(key)
                return lu
        elif self._last_data is not None and np.array_equal(data, self._last_data):
            return self._last_lu
        # One CSC matrix object is reused: only its values change, so its
        # structure is not validated again for every factorisation.
        if self._A is None:
            self._A = self.system.matrix(data.copy())
        A = self._A
        A.data = data
        try:
            lu = spla.splu(A, permc_spec="COLAMD", options={"SymmetricMode": False})
        except RuntimeError:
            raise SingularMatrix(singular_unknowns(self.system, A)) from None
        self.factorizations += 1
        if key is not None:
            self._cache[key] = lu
            if len(self._cache) > self.cache_size:
                self._cache.popitem(last=False)
        else:
            self._last_data = data.copy()
            self._last_lu = lu
        return lu

    def forget(self) -> None:
        """Drop cached factorisations (after an event changed the matrix)."""
        self._cache.clear()
        self._last_data = None
        self._last_lu = None


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
        _, sv, vt = np.linalg.svd(dense)
        null = np.abs(vt[-1])
        idx = np.flatnonzero(null > 0.1 * null.max())
        idx = idx[np.argsort(-null[idx])]
        return system.describe_unknowns(idx[:8])
    return ("(too many unknowns to locate the singular part)",)


@dataclass
class NewtonResult:
    x: np.ndarray
    iterations: int
    converged: bool
    worst: tuple[str, ...] = ()


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
    hold: tuple[np.ndarray, np.ndarray] | None = None,
) -> NewtonResult:
    """Solve ``alpha*q(x) + history + f(x, t) = 0`` from the guess ``x0``.

    ``extra_diag`` adds conductances to the diagonal (a DC leak, a gmin
    step); ``source_scale`` multiplies every independent source (source
    stepping); ``hold`` = (rows, values) replaces those rows by
    ``x[row] = value`` (the DC hold, see
    :meth:`mna.system.Stamper.hold_at_dc`). Raises
    :class:`SingularMatrix`.
    """
    s = system.add_sources(np.zeros(system.n), t)
    if source_scale != 1.0:
        s *= source_scale
    if system.is_piecewise_linear:
        f0, q0, jf, jq = system.affine_parts(t)
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
    x = x0.copy()
    for iteration in range(1, max_iterations + 1):
        f_nl, q_nl, jf, jq = system.evaluate_batches(x, t)
        residual = system.G @ x + f_nl - s
        if alpha:
            residual += alpha * (system.C @ x + q_nl)
        if history is not None:
            residual += history
        if extra_diag is not None:
            residual += extra_diag * x
        data = system.matrix_data(alpha, jf, jq, extra_diag)
        if hold is not None:
            system.hold_matrix(data, hold[0])
            residual[hold[0]] = x[hold[0]] - hold[1]
        lu = factorizer.factor(data)
        dx = lu.solve(-residual)
        factorizer.solves += 1
        if not np.all(np.isfinite(dx)):
            return NewtonResult(x, iteration, False, ())
        x_new = x + dx
        for slot in system.batches:
            x_new = slot.batch.limit(x_new, x)
        step = np.abs(x_new - x)
        scale = reltol * np.maximum(np.abs(x_new), np.abs(x)) + system.abstol
        x = x_new
        if np.all(step <= scale):
            return NewtonResult(x, iteration, True)
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
