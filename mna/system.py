"""The compiled MNA system: unknowns, sparse matrices, source terms, batches.

Every element contributes to one descriptor system

    d/dt q(x) + f(x, t) = 0

with x = [node potentials (V or rad/s), extra unknowns (branch currents...)].
Linear parts are constant sparse matrices, ``q = C x`` and
``f = G x - s(t)``; nonlinear kinds add values and Jacobian entries through
their :class:`~mna.elements.base.NonlinearBatch`.

Compilation happens once. Every matrix the solver needs, ``alpha*C + G +
(batch Jacobians)``, shares one sparsity pattern (the union of all stamps),
and each stamp's position in the CSC data array is precomputed, so
assembling a matrix is a couple of numpy calls with no Python loop over
elements.
"""

from __future__ import annotations

from collections import defaultdict
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Sequence

import numpy as np
import scipy.sparse as sp

from .elements.base import REFERENCE, Element, NonlinearBatch
from .errors import LimitError
from .units import AMPERE, ANGULAR_SPEED, KELVIN, VOLT, Dimension
from .waveforms import BatchEvaluator, Waveform

if TYPE_CHECKING:  # pragma: no cover
    from .circuit import Circuit

#: Absolute Newton tolerance per unknown dimension (SI): 1 uV, 1 pA, 1 urad/s, 1 uK.
ABSTOL = {VOLT: 1e-6, AMPERE: 1e-12, ANGULAR_SPEED: 1e-6, KELVIN: 1e-6}
DEFAULT_ABSTOL = 1e-9

#: Systems with at most this many unknowns keep their matrices dense: they
#: are factored with LAPACK (getrf/getrs, partial pivoting) and multiplied
#: as arrays. For small circuits the call overhead of sparse routines
#: dominates: on 5 unknowns SuperLU takes about 20-30 us per factorization
#: and 3 us per solve, getrf 1 us and getrs 0.6 us, and a sparse mat-vec
#: 3 us against 1 us. On ladder matrices dense factorization stops winning
#: near 90 unknowns (``benchmarks/bench_small_systems.py`` prints the ratios).
DENSE_LIMIT = 80


class Stamper:
    """Collects element contributions at compile time.

    Indices are into the unknown vector; ``-1`` is the reference node of a
    domain and every stamp on it is dropped. Elements call these methods
    from their ``stamp``; this is the only place Python loops over elements.
    """

    def __init__(self, circuit: "Circuit"):
        self.circuit = circuit
        self.names: list[str] = []
        self.dims: list[Dimension] = []
        self.node_index: dict[str, int] = {}
        self.own_index: dict[tuple[str, str], int] = {}
        references = set(REFERENCE.values())
        from .elements.base import SHAFT, THERMAL

        for node, domain in circuit.nodes.items():
            if node in references:
                continue
            self.node_index[node] = len(self.names)
            if domain == SHAFT:
                self.names.append(f"w({node})")
                self.dims.append(ANGULAR_SPEED)
            elif domain == THERMAL:
                # the temperature rise above the ambient reference (K)
                self.names.append(f"T({node})")
                self.dims.append(KELVIN)
            else:
                self.names.append(f"v({node})")
                self.dims.append(VOLT)
        self.tolerances: dict[int, float] = {}  # unknown index -> its own Newton tolerance
        for element in circuit.elements.values():
            for u in element.unknowns():
                self.own_index[(element.name, u.name)] = len(self.names)
                if getattr(u, "tolerance", None) is not None:
                    self.tolerances[len(self.names)] = float(u.tolerance)
                self.names.append(f"{u.name}({element.name})")
                self.dims.append(u.dimension)
        self.n = len(self.names)
        self._g: tuple[list, list, list] = ([], [], [])
        self._c: tuple[list, list, list] = ([], [], [])
        self.sources: list[tuple[int, float, Waveform]] = []
        self.states: list[dict[int, float]] = []
        self.q_initial = np.zeros(self.n)
        self.dc_holds: dict[int, float] = {}
        self.current: Element | None = None

    # -- indices ---------------------------------------------------------------
    def node(self, name: str) -> int:
        """Index of a node's potential, -1 for a reference node."""
        return self.node_index.get(name, -1)

    def own(self, local: str) -> int:
        """Index of the current element's own extra unknown ``local``."""
        return self.own_index[(self.current.name, local)]

    def unknown_of(self, element: str, local: str) -> int:
        """Index of another element's extra unknown (for coupling)."""
        return self.own_index[(element, local)]

    # -- linear stamps -------------------------------------------------------
    def g_entry(self, row: int, col: int, value: float) -> None:
        """Add ``value`` at (row, col) of G, the linear part of f."""
        if row >= 0 and col >= 0 and value != 0.0:
            self._g[0].append(row)
            self._g[1].append(col)
            self._g[2].append(value)

    def c_entry(self, row: int, col: int, value: float) -> None:
        """Add ``value`` at (row, col) of C, the linear part of q."""
        if row >= 0 and col >= 0 and value != 0.0:
            self._c[0].append(row)
            self._c[1].append(col)
            self._c[2].append(value)

    # The names before g_entry/c_entry, kept so kinds written against them
    # (plugins included) still stamp.
    G = g_entry
    C = c_entry

    def conductance(self, a: int, b: int, g: float) -> None:
        """A conductance ``g`` (S) between nodes a and b."""
        self.g_entry(a, a, g)
        self.g_entry(b, b, g)
        self.g_entry(a, b, -g)
        self.g_entry(b, a, -g)

    def capacitance(self, a: int, b: int, c: float) -> None:
        """A capacitance ``c`` (F) between nodes a and b."""
        self.c_entry(a, a, c)
        self.c_entry(b, b, c)
        self.c_entry(a, b, -c)
        self.c_entry(b, a, -c)

    def source(self, row: int, coef: float, waveform: Waveform) -> None:
        """Independent term: ``f[row] -= coef * waveform(t)``."""
        if row >= 0:
            self.sources.append((row, coef, waveform))

    def state(self, coefs: dict[int, float]) -> int:
        """Declare a recordable charge or flux ``sum(coef * x[col])``; returns its id.

        The solver can report the rate of change of a state (a capacitor's
        current) with the same integration formula it uses for the system.
        """
        self.states.append({c: v for c, v in coefs.items() if c >= 0})
        return len(self.states) - 1

    def initial_charge(self, row: int, value: float) -> None:
        """Row ``row`` of q at t = 0 for a run that starts at rest (``initial=``)."""
        if row >= 0:
            self.q_initial[row] += value

    def hold_at_dc(self, index: int, value: float) -> None:
        """At the DC operating point, replace row ``index`` by ``x[index] = value``.

        For a state whose rate equation has no steady state of its own, such
        as a coil generator's angle (``d angle/dt = w``): the operating point
        freezes it at its initial value instead of leaving it undetermined.
        Transient steps keep the row's own equation.
        """
        if index >= 0:
            self.dc_holds[index] = float(value)


@dataclass
class BatchSlot:
    batch: NonlinearBatch
    jf_pos: np.ndarray
    jq_pos: np.ndarray


@dataclass(frozen=True)
class System:
    """A compiled circuit, ready for the analyses. Built by :func:`compile_circuit`.

    Immutable: nothing a run changes is kept here (switch states live in a
    :class:`~mna.runstate.DiscreteStates`, factorizations in a
    :class:`~mna.solver.Factorizer`, both made per run). The only entries
    added after construction are derived arrays computed on first use
    (``dense_flat``, the batch plan...), the same on every computation.
    """

    circuit: "Circuit"
    names: list[str]
    dims: list[Dimension]
    node_index: dict[str, int]
    own_index: dict[tuple[str, str], int]
    G: sp.csc_matrix
    C: sp.csc_matrix
    indptr: np.ndarray
    indices: np.ndarray
    G_data: np.ndarray
    C_data: np.ndarray
    batches: list[BatchSlot]
    source_rows: np.ndarray
    source_coefs: np.ndarray
    source_order: np.ndarray
    evaluators: list[BatchEvaluator]
    source_rows_unique: bool
    Cs: sp.csr_matrix
    q_initial: np.ndarray
    abstol: np.ndarray
    diag_pos: np.ndarray
    elements_by_name: dict[str, Element] = field(default_factory=dict)
    dc_hold_rows: np.ndarray = field(default_factory=lambda: np.empty(0, dtype=np.int64))
    dc_hold_values: np.ndarray = field(default_factory=lambda: np.empty(0))
    dc_hold_mask: np.ndarray | None = None  # CSC data entries in the held rows
    source_waveforms: list[Waveform] = field(default_factory=list)  # of each source entry, in order

    @property
    def n(self) -> int:
        return len(self.names)

    @property
    def is_linear(self) -> bool:
        """No nonlinear or event-switched element: one solve per step."""
        return not self.batches

    @property
    def is_piecewise_linear(self) -> bool:
        """Every batch is affine between events: one solve per step, LU reused until an event."""
        return all(slot.batch.piecewise_linear for slot in self.batches)

    @property
    def limiting_batches(self) -> list[NonlinearBatch]:
        """Batches that override ``limit`` (junction limiting), in order."""
        found = self.__dict__.get("_limiting_batches")
        if found is None:
            found = self.__dict__["_limiting_batches"] = [
                slot.batch for slot in self.batches if type(slot.batch).limit is not NonlinearBatch.limit]
        return found

    def affine_parts(self, t: float, states: "Sequence | None" = None):
        """For a piecewise-linear system: f and q offsets at x = 0 and the batch Jacobians.

        Valid until the next event. Returns ``(f0, q0, jf, jq)``.
        ``states``: the run's discrete states, as for :meth:`evaluate_batches`.
        """
        if not self.batches:
            return None, None, None, None
        return self.evaluate_batches(np.zeros(self.n), t, states)

    # -- sources -----------------------------------------------------------------
    def source_values(self, t: float) -> np.ndarray:
        """Values of every waveform at time t (s), in source-entry order."""
        if not self.evaluators:
            return np.empty(0)
        if len(self.evaluators) == 1:
            w = self.evaluators[0](t)
        else:
            w = np.concatenate([ev(t) for ev in self.evaluators])
        return w[self.source_order]

    def add_sources(self, rhs: np.ndarray, t: float) -> np.ndarray:
        """``rhs += s(t)`` in place (s is the independent part, f = G x - s)."""
        if self.source_rows.size:
            vals = self.source_coefs * self.source_values(t)
            if self.source_rows_unique:
                rhs[self.source_rows] += vals
            else:
                np.add.at(rhs, self.source_rows, vals)
        return rhs

    def s(self, t: float) -> np.ndarray:
        return self.add_sources(np.zeros(self.n), t)

    def rates(self, x: np.ndarray, t: float, states: "Sequence | None" = None) -> np.ndarray:
        """``d/dt q`` at a consistent point: ``-f(x, t)`` row by row (SI units per second).

        The descriptor equation ``d/dt q(x) + f(x, t) = 0`` holds on every
        row, so on the rows that carry charge or flux this is their rate of
        change (a capacitor current, an inductor voltage); on purely
        algebraic rows it is the equation's residual (zero).
        """
        f = self.add_sources(np.zeros(self.n), t)
        f -= self.G @ x
        if self.batches:
            f -= self.evaluate_batches(x, t, states)[0]
        return f

    # -- matrices ----------------------------------------------------------------
    def matrix_data(self, alpha: float, jf: list[np.ndarray] | None = None,
                    jq: list[np.ndarray] | None = None, extra_diag: np.ndarray | None = None,
                    linear: np.ndarray | None = None) -> np.ndarray:
        """CSC data of ``alpha*C + G + dfnl/dx + alpha*dqnl/dx (+ diag)``.

        ``linear``, if given, is the data of ``alpha*C + G (+ diag)`` already
        summed (it is copied, not changed); ``extra_diag`` is then ignored.
        """
        if linear is not None:
            data = linear.copy()
            extra_diag = None
        else:
            data = self.G_data + alpha * self.C_data if alpha else self.G_data.copy()
        if jf is not None:
            for slot, vals in zip(self.batches, jf):
                if vals.size:
                    data += np.bincount(slot.jf_pos, vals, minlength=data.size)
        if jq is not None and alpha:
            for slot, vals in zip(self.batches, jq):
                if vals.size:
                    data += alpha * np.bincount(slot.jq_pos, vals, minlength=data.size)
        if extra_diag is not None:
            data[self.diag_pos] += extra_diag
        return data

    @property
    def dc_hold(self) -> tuple[np.ndarray, np.ndarray] | None:
        """Rows held at the DC operating point and their values, or None."""
        if not self.dc_hold_rows.size:
            return None
        return self.dc_hold_rows, self.dc_hold_values

    def hold_matrix(self, data: np.ndarray, rows: np.ndarray) -> None:
        """Make the held ``rows`` of the matrix with CSC ``data`` identity rows (in place)."""
        data[self.dc_hold_mask] = 0.0
        data[self.diag_pos[rows]] = 1.0

    def matrix(self, data: np.ndarray) -> sp.csc_matrix:
        return sp.csc_matrix((data, self.indices, self.indptr), shape=(self.n, self.n))

    @property
    def dense(self) -> bool:
        """Whether matrices are kept dense (at most DENSE_LIMIT unknowns)."""
        return self.n <= DENSE_LIMIT

    @property
    def dense_flat(self) -> np.ndarray:
        """Position of each CSC data entry in a column-major n x n array."""
        flat = self.__dict__.get("_dense_flat")
        if flat is None:
            cols = np.repeat(np.arange(self.n), np.diff(self.indptr))
            flat = self.__dict__["_dense_flat"] = cols * self.n + self.indices
        return flat

    def dense_array(self, data: np.ndarray) -> np.ndarray:
        """The matrix with CSC ``data`` as a new column-major dense array."""
        buf = np.zeros(self.n * self.n)
        buf[self.dense_flat] = data
        return buf.reshape((self.n, self.n), order="F")

    def csc_data(self, dense: np.ndarray) -> np.ndarray:
        """The CSC data of a column-major dense array on the shared pattern."""
        return dense.reshape(-1, order="F")[self.dense_flat]

    def dense_jacobian(self, linear: np.ndarray, alpha: float, jf: list[np.ndarray],
                       jq: list[np.ndarray]) -> np.ndarray:
        """``linear + dfnl/dx + alpha*dqnl/dx`` as a new column-major dense array.

        ``linear`` is the dense ``alpha*C + G (+ diag)`` (not changed).
        """
        J = linear.copy(order="F")
        flat = J.reshape(-1, order="F")  # a view: J is column-major
        for plan, vals_f, vals_q in zip(self._batch_plan, jf, jq):
            if vals_f.size:
                if plan.jf_unique:
                    flat[plan.jf_flat] += vals_f
                else:
                    np.add.at(flat, plan.jf_flat, vals_f)
            if alpha and vals_q.size:
                np.add.at(flat, plan.jq_flat, alpha * vals_q)
        return J

    def operator(self, data: np.ndarray):
        """The matrix with CSC ``data``, in the form that multiplies fastest (``@``)."""
        return self.dense_array(data) if self.dense else self.matrix(data)

    @property
    def C_operator(self):
        """C for ``C @ x`` (dense for small systems), built once."""
        op = self.__dict__.get("_C_operator")
        if op is None:
            op = self.__dict__["_C_operator"] = self.C.toarray() if self.dense else self.C
        return op

    # -- nonlinear parts -----------------------------------------------------------
    @property
    def _batch_plan(self) -> list["_BatchPlan"]:
        plan = self.__dict__.get("_batch_plan_cache")
        if plan is None:
            flat = self.dense_flat if self.dense else None
            plan = self.__dict__["_batch_plan_cache"] = [_BatchPlan.of(slot, flat) for slot in self.batches]
        return plan

    @property
    def has_nonlinear_charges(self) -> bool:
        """Whether any batch contributes to q (a saturating choke's flux)."""
        return any(p.q_rows.size for p in self._batch_plan)

    def evaluate_batches(self, x: np.ndarray, t: float, states: "Sequence | None" = None):
        """Nonlinear f and q (as full vectors) and the Jacobian values per batch.

        ``states`` holds the run's state object of each batch, in the order
        of ``self.batches`` (see :class:`mna.runstate.DiscreteStates`); it
        may be None when no batch has a state. When no batch has charges, q
        is a shared read-only zero vector.
        """
        n = self.n
        f = np.zeros(n)
        q = None
        jf, jq = [], []
        for k, plan in enumerate(self._batch_plan):
            state = states[k] if states is not None else None
            if state is None:
                fv, jfv, qv, jqv = plan.batch.evaluate(x, t)
            else:
                fv, jfv, qv, jqv = plan.batch.evaluate(x, t, state)
            if plan.f_rows.size:
                if plan.f_unique:
                    f[plan.f_rows] += fv
                else:
                    f += np.bincount(plan.f_rows, fv, minlength=n)
            if plan.q_rows.size:
                if q is None:
                    q = np.zeros(n)
                q += np.bincount(plan.q_rows, qv, minlength=n)
            jf.append(np.asarray(jfv, dtype=float))
            jq.append(np.asarray(jqv, dtype=float))
        if q is None:
            q = self._zero_charges
        return f, q, jf, jq

    @property
    def _zero_charges(self) -> np.ndarray:
        z = self.__dict__.get("_zero_charges_cache")
        if z is None:
            z = self.__dict__["_zero_charges_cache"] = np.zeros(self.n)
            z.flags.writeable = False
        return z

    def charges(self, x: np.ndarray, t: float = 0.0, states: "Sequence | None" = None) -> np.ndarray:
        """q(x): linear charges plus any nonlinear ones."""
        q = self.C_operator @ x
        if self.has_nonlinear_charges:
            q += self.evaluate_batches(x, t, states)[1]
        return q

    def corners(self, start: float, stop: float) -> np.ndarray:
        """Every waveform corner and event time in (start, stop], sorted (s)."""
        pts = [_named(e, e.corners, start, stop) for e in self.circuit.elements.values()]
        pts += [slot.batch.corners(start, stop) for slot in self.batches]
        pts = [p for p in pts if len(p)]
        return np.unique(np.concatenate(pts)) if pts else np.empty(0)

    def jumps(self, start: float, stop: float) -> np.ndarray:
        """Corners in (start, stop] where a source value jumps, sorted (s)."""
        pts = [p for p in (_named(e, e.jumps, start, stop) for e in self.circuit.elements.values()) if len(p)]
        return np.unique(np.concatenate(pts)) if pts else np.empty(0)

    def describe_unknowns(self, indices) -> tuple[str, ...]:
        return tuple(self.names[i] for i in indices)


def _named(element, times, start: float, stop: float) -> np.ndarray:
    """``times(start, stop)`` of an element; a work limit it meets names the element and its line."""
    try:
        return times(start, stop)
    except LimitError as exc:
        raise LimitError(f"{element.keyword} {element.name}: {exc.message}", element.span, hint=exc.hint) from None


@dataclass
class _BatchPlan:
    """How one batch's values land in the system's vectors and dense matrix."""

    batch: NonlinearBatch
    f_rows: np.ndarray
    f_unique: bool  # no repeated row: a fancy-index add is exact
    q_rows: np.ndarray
    jf_flat: np.ndarray | None  # dense column-major positions (small systems)
    jf_unique: bool
    jq_flat: np.ndarray | None

    @classmethod
    def of(cls, slot: BatchSlot, dense_flat: np.ndarray | None) -> "_BatchPlan":
        b = slot.batch
        f_rows = np.asarray(b.f_rows, dtype=np.int64)
        jf_flat = dense_flat[slot.jf_pos] if dense_flat is not None else None
        jq_flat = dense_flat[slot.jq_pos] if dense_flat is not None else None
        return cls(
            batch=b,
            f_rows=f_rows,
            f_unique=np.unique(f_rows).size == f_rows.size,
            q_rows=np.asarray(b.q_rows, dtype=np.int64),
            jf_flat=jf_flat,
            jf_unique=jf_flat is not None and np.unique(jf_flat).size == jf_flat.size,
            jq_flat=jq_flat,
        )


def _csc_pattern(n: int, rows: np.ndarray, cols: np.ndarray):
    """CSC structure of the union pattern and each triplet's data position."""
    keys = cols.astype(np.int64) * n + rows.astype(np.int64)
    unique = np.unique(keys)
    pos = np.searchsorted(unique, keys)
    u_cols = unique // n
    u_rows = unique % n
    indptr = np.zeros(n + 1, dtype=np.int64)
    np.add.at(indptr, u_cols + 1, 1)
    indptr = np.cumsum(indptr)
    return indptr.astype(np.int32), u_rows.astype(np.int32), pos, unique


class _ReferencesDropped:
    """A batch whose index arrays name a reference node (-1), seen without it.

    A reference node's potential is zero and it has no equation, so its
    residual rows and its Jacobian rows and columns are dropped: the arrays
    the engine sees are filtered once here, and every evaluation's values
    with the same masks. Everything else is the batch's own.
    """

    def __init__(self, batch: NonlinearBatch):
        self._batch = batch
        self._f = np.asarray(batch.f_rows, np.int64) >= 0
        self._jf = (np.asarray(batch.jf_rows, np.int64) >= 0) & (np.asarray(batch.jf_cols, np.int64) >= 0)
        self._q = np.asarray(batch.q_rows, np.int64) >= 0
        self._jq = (np.asarray(batch.jq_rows, np.int64) >= 0) & (np.asarray(batch.jq_cols, np.int64) >= 0)
        self.f_rows = np.asarray(batch.f_rows, np.int64)[self._f]
        self.jf_rows = np.asarray(batch.jf_rows, np.int64)[self._jf]
        self.jf_cols = np.asarray(batch.jf_cols, np.int64)[self._jf]
        self.q_rows = np.asarray(batch.q_rows, np.int64)[self._q]
        self.jq_rows = np.asarray(batch.jq_rows, np.int64)[self._jq]
        self.jq_cols = np.asarray(batch.jq_cols, np.int64)[self._jq]

    def __getattr__(self, name: str):
        return getattr(self._batch, name)

    def limit(self, x_new: np.ndarray, x_old: np.ndarray) -> np.ndarray:
        return self._batch.limit(x_new, x_old)

    def evaluate(self, x: np.ndarray, t: float, *state):
        fv, jfv, qv, jqv = self._batch.evaluate(x, t, *state)
        return (np.asarray(fv, float)[self._f], np.asarray(jfv, float)[self._jf],
                np.asarray(qv, float)[self._q] if self._q.size else qv,
                np.asarray(jqv, float)[self._jq] if self._jq.size else jqv)


def _without_references(batch: NonlinearBatch) -> NonlinearBatch:
    """The batch itself, or a view without reference-node entries when it has any."""
    arrays = (batch.f_rows, batch.jf_rows, batch.jf_cols, batch.q_rows, batch.jq_rows, batch.jq_cols)
    if all(np.all(np.asarray(a) >= 0) for a in arrays):
        return batch
    return _ReferencesDropped(batch)  # type: ignore[return-value]


def compile_circuit(circuit: "Circuit") -> System:
    """Index the unknowns, collect every stamp, build the shared sparse pattern."""
    s = Stamper(circuit)
    n = s.n
    by_kind: dict[type, list[Element]] = defaultdict(list)
    kinds: dict[type, list[Element]] = defaultdict(list)
    for element in circuit.elements.values():
        s.current = element
        element.stamp(s)
        kinds[type(element)].append(element)
        if element.Batch is not None:
            by_kind[type(element)].append(element)
    s.current = None
    for cls, elems in kinds.items():
        cls.check_stamped(elems, s)
    batches = [_without_references(cls.Batch(elems, s)) for cls, elems in by_kind.items()]

    g_r, g_c, g_v = (np.asarray(a) for a in s._g)
    c_r, c_c, c_v = (np.asarray(a) for a in s._c)
    g_r = g_r.astype(np.int64) if g_r.size else np.empty(0, np.int64)
    g_c = g_c.astype(np.int64) if g_c.size else np.empty(0, np.int64)
    c_r = c_r.astype(np.int64) if c_r.size else np.empty(0, np.int64)
    c_c = c_c.astype(np.int64) if c_c.size else np.empty(0, np.int64)
    g_v = g_v.astype(float) if g_v.size else np.empty(0)
    c_v = c_v.astype(float) if c_v.size else np.empty(0)
    diag = np.arange(n, dtype=np.int64)
    parts_r = [g_r, c_r, diag]
    parts_c = [g_c, c_c, diag]
    for b in batches:
        parts_r += [np.asarray(b.jf_rows, np.int64), np.asarray(b.jq_rows, np.int64)]
        parts_c += [np.asarray(b.jf_cols, np.int64), np.asarray(b.jq_cols, np.int64)]
    rows = np.concatenate(parts_r)
    cols = np.concatenate(parts_c)
    indptr, indices, pos, _ = _csc_pattern(n, rows, cols)
    nnz = indices.size
    offsets = np.cumsum([0] + [p.size for p in parts_r])
    g_pos = pos[offsets[0]:offsets[1]]
    c_pos = pos[offsets[1]:offsets[2]]
    diag_pos = pos[offsets[2]:offsets[3]]
    slots = []
    for k, b in enumerate(batches):
        jf_pos = pos[offsets[3 + 2 * k]:offsets[4 + 2 * k]]
        jq_pos = pos[offsets[4 + 2 * k]:offsets[5 + 2 * k]]
        slots.append(BatchSlot(b, jf_pos, jq_pos))
    G_data = np.bincount(g_pos, g_v, minlength=nnz) if g_v.size else np.zeros(nnz)
    C_data = np.bincount(c_pos, c_v, minlength=nnz) if c_v.size else np.zeros(nnz)
    G = sp.csc_matrix((G_data.copy(), indices.copy(), indptr.copy()), shape=(n, n))
    C = sp.csc_matrix((C_data.copy(), indices.copy(), indptr.copy()), shape=(n, n))
    G.eliminate_zeros()
    C.eliminate_zeros()

    # Sources: group waveforms by class so each class is evaluated in one call.
    groups: dict[type, list[int]] = defaultdict(list)
    for k, (_, _, wave) in enumerate(s.sources):
        groups[type(wave)].append(k)
    evaluators, order = [], []
    for cls, ks in groups.items():
        evaluators.append(BatchEvaluator([s.sources[k][2] for k in ks]))
        order.extend(ks)
    # source_order maps entry k -> its position in the concatenated values.
    source_order = np.empty(len(order), dtype=np.int64)
    source_order[np.asarray(order, dtype=np.int64)] = np.arange(len(order))
    source_rows = np.array([r for r, _, _ in s.sources], dtype=np.int64)
    source_coefs = np.array([c for _, c, _ in s.sources], dtype=float)

    n_states = len(s.states)
    st_r, st_c, st_v = [], [], []
    for k, coefs in enumerate(s.states):
        for col, v in coefs.items():
            st_r.append(k)
            st_c.append(col)
            st_v.append(v)
    Cs = sp.csr_matrix((st_v, (st_r, st_c)), shape=(n_states, n))
    abstol = np.array([s.tolerances.get(k, ABSTOL.get(d, DEFAULT_ABSTOL)) for k, d in enumerate(s.dims)])
    hold_rows = np.array(sorted(s.dc_holds), dtype=np.int64)
    hold_values = np.array([s.dc_holds[r] for r in hold_rows.tolist()], dtype=float)
    return System(
        circuit=circuit,
        names=s.names,
        dims=s.dims,
        node_index=s.node_index,
        own_index=s.own_index,
        G=G,
        C=C,
        indptr=indptr,
        indices=indices,
        G_data=G_data,
        C_data=C_data,
        batches=slots,
        source_rows=source_rows,
        source_coefs=source_coefs,
        source_order=source_order,
        evaluators=evaluators,
        source_rows_unique=len(set(source_rows.tolist())) == len(source_rows),
        Cs=Cs,
        q_initial=s.q_initial,
        abstol=abstol,
        diag_pos=diag_pos,
        elements_by_name=dict(circuit.elements),
        dc_hold_rows=hold_rows,
        dc_hold_values=hold_values,
        dc_hold_mask=np.isin(indices, hold_rows) if hold_rows.size else None,
        source_waveforms=[wave for _, _, wave in s.sources],
    )


class Probe:
    """What a run recorded, as elements see it when computing their outputs.

    ``node(name)`` gives a node potential over time, ``unknown(element,
    local)`` an element's own unknown, ``rate(state)`` the rate of change of
    a declared state (a capacitor's current), ``state_log(element)`` the log
    of an element's discrete state (a switch's open/closed). Built twice: once in planning
    mode, to learn which unknowns and states a run must keep, then over the
    recorded arrays.
    """

    def __init__(self, system: System, time: np.ndarray, x: dict[int, np.ndarray] | None = None,
                 rates: dict[int, np.ndarray] | None = None, discrete=None):
        self.system = system
        self.time = time
        self._x = x
        self._rates = rates
        self._discrete = discrete
        self.planning = x is None
        self.need_x: set[int] = set()
        self.need_states: set[int] = set()

    def x(self, index: int) -> np.ndarray:
        if index < 0:
            return np.zeros_like(self.time)
        if self.planning:
            self.need_x.add(index)
            return np.zeros_like(self.time)
        return self._x[index]

    def node(self, name: str) -> np.ndarray:
        return self.x(self.system.node_index.get(name, -1))

    def unknown(self, element: Element, local: str) -> np.ndarray:
        return self.x(self.system.own_index[(element.name, local)])

    def state_log(self, element: Element) -> tuple[np.ndarray, np.ndarray]:
        """Times and values of an element's discrete state over the run (a
        switch's closed = 1.0), from the run's :class:`~mna.runstate.DiscreteStates`."""
        if self.planning or self._discrete is None:
            return np.empty(0), np.empty(0)
        return self._discrete.log(element)

    def rate(self, state: int) -> np.ndarray:
        if self.planning:
            self.need_states.add(state)
            return np.zeros_like(self.time)
        return self._rates[state]

    def waveform(self, wave: Waveform) -> np.ndarray:
        """A source waveform's values at the recorded times (read through the probe so a
        small-signal analysis can see what a source's output depends on)."""
        return np.asarray(wave.values(self.time), dtype=float)
