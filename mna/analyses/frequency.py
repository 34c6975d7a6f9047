"""Small-signal frequency response, linearised at the DC operating point.

The descriptor system ``d/dt q(x) + f(x, t) = 0`` is linearised at the
operating point ``x0`` (:func:`mna.analyses.dc.solve_dc`, sources at their
t = 0 values). With ``x = x0 + Re(X e^{jwt})`` the phasor ``X`` solves

    (G + jw C) X = S

where ``G = df/dx`` and ``C = dq/dx`` at ``x0``: the constant stamps plus
every batch's Jacobian, so a diode is its conductance at its bias point, a
saturating choke its incremental inductance at its bias current, a switch
its resistance in its DC state, a DC machine the winding, back-EMF and shaft
it is in the transient. ``S`` holds the small-signal part of the sources:
each source with a ``stimulus=`` (magnitude, and ``stimulus-phase=``)
contributes through the same source rows it stamps for the transient.

Impedances ``z(a -> b)`` are solved as separate right-hand sides: a 1 A test
current into ``a`` and out of ``b`` with every stimulus at zero, so ``Z =
V(a) - V(b)`` in ohms is the impedance seen between the two nodes with the
independent sources killed.

All right-hand sides share one factorization per frequency. Small systems
(up to :data:`mna.system.DENSE_LIMIT` unknowns) are solved as one stack of
dense matrices per block of frequencies; larger ones with SuperLU on the
shared CSC pattern, with the fill-reducing column order found at the first
frequency reused for every other one (only the values change).

Element outputs (``i(D1)``, ``torque(M1)``, ``p(R1)``) are linearised by
central differences of the element's own ``output`` in each quantity it
reads (node potentials, own unknowns, state rates, source waveforms), each
perturbed on its own by a step scaled to its operating value, so a linear
output is reproduced to rounding and a product such as ``p = v*i`` becomes
``v0*I + i0*V``.
"""

from __future__ import annotations

import math
import time as _time
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Sequence

import numpy as np

from ..errors import InputError, SimulationError
from ..results import FrequencyResponse
from ..runstate import DiscreteStates
from ..solver import Factorizer
from ..system import DENSE_LIMIT, System
from ..units import OHM
from .common import dc_leak, default_signals, prepare, unit_label
from .dc import solve_dc

if TYPE_CHECKING:  # pragma: no cover
    from ..circuit import Circuit, SignalRef

#: Frequencies solved together as one stack of dense matrices (bounds memory:
#: 200 * 80^2 complex values is 20 MB).
DENSE_BLOCK = 200
#: Relative step of the central differences that linearise element outputs.
RELATIVE_STEP = 1e-6


# --------------------------------------------------------------------------
# The frequency grid.


def frequency_grid(settings: dict[str, Any]) -> np.ndarray:
    """The analysis frequencies (Hz) from ``from=``/``to=``/``per-decade=`` or ``at=``.

    A sweep holds every decade's ``per-decade`` points spaced evenly in
    log f, from ``from`` to ``to`` inclusive.
    """
    points = settings.get("at")
    if points is not None:
        return np.asarray(points, dtype=float)
    low, high = float(settings["from"]), float(settings["to"])
    per_decade = float(settings.get("per-decade") or 50)
    count = max(2, int(math.ceil(per_decade * math.log10(high / low) - 1e-9)) + 1)
    return np.logspace(math.log10(low), math.log10(high), count)


# --------------------------------------------------------------------------
# The linearised system.


@dataclass
class SmallSignal:
    """``G + jw C`` on the system's CSC pattern, and the stimulus vector.

    ``G_data`` and ``C_data`` are CSC data (real); ``stimulus`` maps
    ``id(waveform)`` to its phasor (source unit).
    """

    system: System
    x0: np.ndarray
    G_data: np.ndarray
    C_data: np.ndarray
    stimulus: dict[int, complex]
    rhs: np.ndarray  # complex, the small-signal source vector S
    discrete: DiscreteStates | None = None

    def matrix_data(self, omega: float) -> np.ndarray:
        return self.G_data + 1j * omega * self.C_data


def stimuli(circuit: "Circuit") -> dict[int, complex]:
    """Phasor of each source waveform that has a ``stimulus=`` (keyed by ``id(waveform)``)."""
    found: dict[int, complex] = {}
    for element in circuit.elements.values():
        phasor = getattr(element, "stimulus", None)
        if phasor is None:
            continue
        found[id(element.waveform)] = complex(phasor)
    return found


def linearise(system: System, x0: np.ndarray, leak: np.ndarray | None, stimulus: dict[int, complex],
              discrete: DiscreteStates | None = None) -> SmallSignal:
    """The small-signal system at the operating point ``x0`` (batches evaluated at t = 0,
    switches in the states ``discrete`` of the operating point)."""
    G_data = system.G_data.copy()
    C_data = system.C_data.copy()
    if system.batches:
        _, _, jf, jq = system.evaluate_batches(x0, 0.0, discrete)
        size = G_data.size
        for slot, vf, vq in zip(system.batches, jf, jq):
            if vf.size:
                G_data += np.bincount(slot.jf_pos, vf, minlength=size)
            if vq.size:
                C_data += np.bincount(slot.jq_pos, vq, minlength=size)
    if leak is not None:
        G_data[system.diag_pos] += leak
    rhs = np.zeros(system.n, dtype=complex)
    if stimulus and system.source_rows.size:
        for row, coef, wave in zip(system.source_rows, system.source_coefs, system.source_waveforms):
            phasor = stimulus.get(id(wave))
            if phasor is not None:
                rhs[row] += coef * phasor
    return SmallSignal(system, x0, G_data, C_data, stimulus, rhs, discrete)


# --------------------------------------------------------------------------
# Solving at every frequency.


class FrequencySolver:
    """Solves ``(G + jw C) X = B`` for a block of right-hand sides at each frequency."""

    def __init__(self, small: SmallSignal):
        self.small = small
        self.system = small.system
        self.dense = self.system.n <= DENSE_LIMIT
        self.factorizations = 0
        self._perm: np.ndarray | None = None
        self._perm_data: np.ndarray | None = None
        self._perm_indptr: np.ndarray | None = None
        self._perm_indices: np.ndarray | None = None

    def solve(self, frequencies: np.ndarray, rhs: np.ndarray, keep: np.ndarray | None = None) -> np.ndarray:
        """X with shape (kept unknowns, right-hand sides, frequencies).

        ``keep`` lists the unknowns whose phasors are kept (all by default):
        a large circuit's answer at every frequency would not fit in memory.
        """
        n, m = rhs.shape
        keep = np.arange(n) if keep is None else np.asarray(keep, dtype=np.int64)
        out = np.empty((keep.size, m, frequencies.size), dtype=complex)
        if self.dense:
            self._solve_dense(frequencies, rhs, out, keep)
        else:
            self._solve_sparse(frequencies, rhs, out, keep)
        return out

    def _solve_dense(self, frequencies, rhs, out, keep) -> None:
        system = self.system
        G = system.dense_array(self.small.G_data)
        C = system.dense_array(self.small.C_data)
        block = max(1, min(DENSE_BLOCK, DENSE_BLOCK * 6400 // max(system.n ** 2, 1)))
        for start in range(0, frequencies.size, block):
            f = frequencies[start:start + block]
            omega = 2.0 * np.pi * f
            A = G[None, :, :] + 1j * omega[:, None, None] * C[None, :, :]
            try:
                X = np.linalg.solve(A, np.broadcast_to(rhs, (f.size,) + rhs.shape))
            except np.linalg.LinAlgError:
                self._singular_in(f, G, C)
                raise  # pragma: no cover - _singular_in always raises
            self.factorizations += f.size
            bad = ~np.isfinite(X).all(axis=(1, 2))
            if bad.any():
                self._raise_singular(float(f[np.argmax(bad)]))
            out[:, :, start:start + f.size] = np.moveaxis(X[:, keep, :], 0, 2)

    def _singular_in(self, f: np.ndarray, G: np.ndarray, C: np.ndarray) -> None:
        for fk in f:
            try:
                np.linalg.solve(G + 2j * np.pi * fk * C, np.eye(G.shape[0]))
            except np.linalg.LinAlgError:
                self._raise_singular(float(fk))
        self._raise_singular(float(f[0]))

    def _raise_singular(self, f: float) -> None:
        raise SimulationError(
            f"frequency response: the small-signal equations have no unique solution at {f:.6g} Hz "
            "(singular matrix): a part of the circuit is not tied to gnd at that frequency, or a loop "
            "of voltage sources and inductors has no impedance",
        )

    def _solve_sparse(self, frequencies, rhs, out, keep) -> None:
        import scipy.sparse as sp
        import scipy.sparse.linalg as spla

        system = self.system
        n = system.n
        for k, f in enumerate(frequencies):
            data = self.small.matrix_data(2.0 * np.pi * float(f))
            try:
                if self._perm is None:
                    A = sp.csc_matrix((data, system.indices, system.indptr), shape=(n, n))
                    lu = spla.splu(A, permc_spec="COLAMD")
                    self._remember_order(lu.perm_c)
                    X = lu.solve(rhs)
                else:
                    B = sp.csc_matrix((data[self._perm_data], self._perm_indices, self._perm_indptr), shape=(n, n))
                    lu = spla.splu(B, permc_spec="NATURAL")
                    X = np.empty_like(rhs)
                    X[self._perm] = lu.solve(rhs)
            except RuntimeError:  # SuperLU: "Factor is exactly singular"
                self._raise_singular(float(f))
            self.factorizations += 1
            if not np.isfinite(X).all():
                self._raise_singular(float(f))
            out[:, :, k] = X[keep]

    def _remember_order(self, perm_c: np.ndarray) -> None:
        """Column order of the first factorization, as a permuted CSC structure.

        SuperLU factors ``A Pc``; column ``perm_c[j]`` of ``A Pc`` is column
        ``j`` of ``A``. The permuted matrix ``B = A[:, p]`` with ``p =
        argsort(perm_c)`` is factored with the natural order afterwards, and
        ``A x = b`` is ``B y = b`` with ``x[p] = y``.
        """
        system = self.system
        p = np.argsort(perm_c)
        starts, ends = system.indptr[p], system.indptr[p + 1]
        lengths = ends - starts
        self._perm_indptr = np.concatenate([[0], np.cumsum(lengths)]).astype(np.int32)
        self._perm_data = np.concatenate([np.arange(s, e) for s, e in zip(starts, ends)]).astype(np.int64)
        self._perm_indices = system.indices[self._perm_data]
        self._perm = p


# --------------------------------------------------------------------------
# Outputs as phasors.


class _PlanProbe:
    """Learns which operating values an element output reads (the Probe protocol)."""

    planning = True

    def __init__(self, system: System):
        self.system = system
        self.time = np.zeros(1)
        self.deps: dict[tuple[str, Any], Any] = {}

    def x(self, index: int) -> np.ndarray:
        if index >= 0:
            self.deps[("x", index)] = index
        return np.zeros(1)

    def node(self, name: str) -> np.ndarray:
        return self.x(self.system.node_index.get(name, -1))

    def unknown(self, element, local: str) -> np.ndarray:
        return self.x(self.system.own_index[(element.name, local)])

    def rate(self, state: int) -> np.ndarray:
        self.deps[("rate", state)] = state
        return np.zeros(1)

    def waveform(self, wave) -> np.ndarray:
        self.deps[("wave", id(wave))] = wave
        return np.zeros(1)

    def state_log(self, element) -> tuple[np.ndarray, np.ndarray]:
        return np.empty(0), np.empty(0)


class _PerturbedProbe:
    """Operating values with each dependency stepped by +-h in its own pair of samples."""

    planning = False

    def __init__(self, system: System, x0: np.ndarray, deps: list, steps: np.ndarray, discrete=None):
        self.system = system
        self._discrete = discrete
        m = 2 * len(deps)
        self.time = np.zeros(m)
        self._x0 = x0
        self._column = {key: j for j, key in enumerate(deps)}
        self._steps = steps
        self._m = m

    def _series(self, key, base: float) -> np.ndarray:
        values = np.full(self._m, base, dtype=float)
        j = self._column.get(key)
        if j is not None:
            values[2 * j] += self._steps[j]
            values[2 * j + 1] -= self._steps[j]
        return values

    def x(self, index: int) -> np.ndarray:
        if index < 0:
            return np.zeros(self._m)
        return self._series(("x", index), float(self._x0[index]))

    def node(self, name: str) -> np.ndarray:
        return self.x(self.system.node_index.get(name, -1))

    def unknown(self, element, local: str) -> np.ndarray:
        return self.x(self.system.own_index[(element.name, local)])

    def rate(self, state: int) -> np.ndarray:
        return self._series(("rate", state), 0.0)

    def waveform(self, wave) -> np.ndarray:
        return self._series(("wave", id(wave)), float(wave.value(0.0)))

    def state_log(self, element) -> tuple[np.ndarray, np.ndarray]:
        """The operating point's discrete states (a switch's closed = 1.0), held."""
        if self._discrete is None:
            return np.empty(0), np.empty(0)
        return self._discrete.log(element)


def _step(key, value, x0: np.ndarray) -> float:
    kind, what = key
    if kind == "x":
        base = abs(float(x0[what]))
    elif kind == "wave":
        base = abs(float(value.value(0.0)))
    else:
        base = 0.0
    return RELATIVE_STEP * max(base, 1e-3)


def output_sensitivities(element, quantity: str, system: System, x0: np.ndarray, discrete=None) -> dict:
    """d output / d dependency at the operating point, for each dependency the output reads."""
    plan = _PlanProbe(system)
    element.output(quantity, plan)
    keys = list(plan.deps)
    if not keys:
        return {}
    steps = np.array([_step(k, plan.deps[k], x0) for k in keys])
    probe = _PerturbedProbe(system, x0, keys, steps, discrete)
    values = np.asarray(element.output(quantity, probe), dtype=float)
    values = np.broadcast_to(values, (2 * len(keys),))
    slopes = (values[0::2] - values[1::2]) / (2.0 * steps)
    return {k: float(s) for k, s in zip(keys, slopes) if s != 0.0}


@dataclass
class _Solution:
    """Phasors of the kept unknowns over frequency for one excitation."""

    X: np.ndarray  # (kept unknowns, frequencies)
    row: dict[int, int]  # unknown index -> row of X
    stimulus: dict[int, complex]

    def x(self, index: int) -> np.ndarray:
        return self.X[self.row[index]]


class _Phasors:
    """Turns solutions into the phasor of each recorded quantity."""

    def __init__(self, circuit: "Circuit", small: SmallSignal, frequencies: np.ndarray):
        self.circuit = circuit
        self.small = small
        self.system = small.system
        self.omega = 2.0 * np.pi * frequencies
        self._sensitivities: dict[tuple[str, str], dict] = {}

    def node(self, sol: _Solution, name: str) -> np.ndarray:
        i = self.system.node_index.get(name, -1)
        return sol.x(i) if i >= 0 else np.zeros(self.omega.size, dtype=complex)

    def sensitivities(self, element, quantity: str) -> dict:
        key = (element.name, quantity)
        slopes = self._sensitivities.get(key)
        if slopes is None:
            slopes = self._sensitivities[key] = output_sensitivities(element, quantity, self.system,
                                                                     self.small.x0, self.small.discrete)
        return slopes

    def needed(self, ref: "SignalRef") -> set[int]:
        """The unknowns whose phasors ``ref`` reads."""
        if ref.target == "ratio":
            return set().union(*(self.needed(p) for p in ref.parts))
        if ref.target in ("node", "across", "impedance"):
            return {i for i in (self.system.node_index.get(n, -1) for n in ref.names) if i >= 0}
        found: set[int] = set()
        for kind, what in self.sensitivities(self.circuit.elements[ref.names[0]], ref.quantity):
            if kind == "x":
                found.add(what)
            elif kind == "rate":
                found.update(int(c) for c in self.system.Cs.getrow(what).indices)
        return found

    def of(self, ref: "SignalRef", sol: _Solution) -> np.ndarray:
        if ref.target == "across":
            return self.node(sol, ref.names[0]) - self.node(sol, ref.names[1])
        if ref.target == "node":
            values = self.node(sol, ref.names[0])
            if ref.quantity == "rpm":
                return values * (60.0 / (2.0 * math.pi))
            if ref.quantity == "angle":
                return values / (1j * self.omega)
            return values
        return self._element_output(ref, sol)

    def _element_output(self, ref: "SignalRef", sol: _Solution) -> np.ndarray:
        slopes = self.sensitivities(self.circuit.elements[ref.names[0]], ref.quantity)
        total = np.zeros(self.omega.size, dtype=complex)
        for (kind, what), slope in slopes.items():
            if kind == "x":
                total += slope * sol.x(what)
            elif kind == "rate":
                row = self.system.Cs.getrow(what)
                charge = sum((c * sol.x(int(i)) for i, c in zip(row.indices, row.data)),
                             np.zeros(self.omega.size, dtype=complex))
                total += slope * 1j * self.omega * charge
            else:
                total += slope * sol.stimulus.get(what, 0.0)
        return total


# --------------------------------------------------------------------------
# The analysis.


def frequency_response(circuit: "Circuit", settings: dict[str, Any],
                       records: Sequence["SignalRef"] | None = None) -> FrequencyResponse:
    """Solve the small-signal response over the frequencies of ``settings``.

    ``records`` are the quantities to keep: node voltages, element outputs,
    impedances ``z(a -> b)`` and ratios of two quantities; by default every
    node voltage and element current under the stimuli.
    """
    started = _time.perf_counter()
    frequencies = frequency_grid(settings)
    system, report = prepare(circuit)
    leak = dc_leak(system, report)
    info: dict = {}
    discrete = DiscreteStates(system, 0.0)
    x0, iterations = solve_dc(system, Factorizer(system), leak, info=info, discrete=discrete)
    stimulus = stimuli(circuit)
    small = linearise(system, x0, leak, stimulus, discrete)
    refs = list(records) if records else (list(circuit.frequency_records) or default_signals(circuit))
    columns, pairs = _right_hand_sides(small, refs)
    if not stimulus and any(_needs_stimulus(r) for r in refs):
        first = next(r for r in refs if _needs_stimulus(r))
        raise InputError(
            f"the frequency response of {first.label} needs a small-signal source: no source has a stimulus=",
            first.span,
            hint="give one source a stimulus, e.g. 'voltage-source Vin in -> gnd 12 V stimulus=1 V', "
                 "or record an impedance z(a -> b)")
    solver = FrequencySolver(small)
    phasors = _Phasors(circuit, small, frequencies)
    keep = np.array(sorted(set().union(*(phasors.needed(r) for r in refs))), dtype=np.int64)
    X = solver.solve(frequencies, columns, keep)
    row = {int(i): k for k, i in enumerate(keep)}
    solutions = {"stimulus": _Solution(X[:, 0, :], row, stimulus)}
    for k, pair in enumerate(pairs):
        solutions[pair] = _Solution(X[:, 1 + k, :], row, {})
    signals: dict[str, np.ndarray] = {}
    units: dict[str, str] = {}
    for ref in refs:
        signals[ref.label] = _quantity(ref, phasors, solutions)
        units[ref.label] = _unit(ref)
    return FrequencyResponse(
        frequency=frequencies,
        signals=signals,
        units=units,
        statistics={
            "unknowns": system.n,
            "frequencies": int(frequencies.size),
            "right_hand_sides": int(columns.shape[1]),
            "solver": "dense" if solver.dense else "sparse",
            "factorizations": solver.factorizations,
            "dc_newton_iterations": iterations,
            "dc_method": info.get("dc_method", "newton"),
            "wall_time_s": _time.perf_counter() - started,
        },
        warnings=list(circuit.warnings),
    )


def _needs_stimulus(ref: "SignalRef") -> bool:
    if ref.target == "impedance":
        return False
    if ref.target == "ratio":
        return any(_needs_stimulus(p) for p in ref.parts)
    return True


def _right_hand_sides(small: SmallSignal, refs: Sequence["SignalRef"]) -> tuple[np.ndarray, list]:
    """Column 0: the stimuli; then one unit test current per impedance pair."""
    pairs: list[tuple[str, str]] = []
    for ref in refs:
        for part in (ref.parts if ref.target == "ratio" else (ref,)):
            if part.target == "impedance" and part.names not in pairs:
                pairs.append(part.names)
    system = small.system
    columns = np.zeros((system.n, 1 + len(pairs)), dtype=complex)
    columns[:, 0] = small.rhs
    for k, (a, b) in enumerate(pairs):
        ia, ib = system.node_index.get(a, -1), system.node_index.get(b, -1)
        if ia >= 0:
            columns[ia, 1 + k] += 1.0  # 1 A into a ...
        if ib >= 0:
            columns[ib, 1 + k] -= 1.0  # ... and out of b
    return columns, pairs


def _quantity(ref: "SignalRef", phasors: _Phasors, solutions: dict) -> np.ndarray:
    if ref.target == "ratio":
        num, den = (_quantity(p, phasors, solutions) for p in ref.parts)
        zero = den == 0
        if zero.any():
            f = phasors.omega[np.argmax(zero)] / (2.0 * np.pi)
            raise SimulationError(
                f"{ref.label}: {ref.parts[1].label} has no small-signal part at {f:.6g} Hz (it is exactly "
                "zero there), so the ratio has no value; divide by a quantity the stimulus reaches")
        return num / den
    if ref.target == "impedance":
        sol = solutions[ref.names]
        return phasors.node(sol, ref.names[0]) - phasors.node(sol, ref.names[1])  # volts per test ampere
    return phasors.of(ref, solutions["stimulus"])


def _unit(ref: "SignalRef") -> str:
    from ..units import DIMENSIONLESS, unit_symbol

    if ref.target == "impedance":
        return unit_symbol(OHM)
    if ref.target == "ratio":
        return "" if ref.dimension == DIMENSIONLESS else unit_symbol(ref.dimension)
    return unit_label(ref)
