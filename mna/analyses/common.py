"""What the analyses share: preparing a circuit, choosing and computing signals."""

from __future__ import annotations

import threading
from typing import TYPE_CHECKING, Sequence

import numpy as np

from ..elements.base import ELECTRICAL, REFERENCE, SHAFT, THERMAL
from ..system import Probe, System, compile_circuit
from ..topology import TopologyReport, check_topology
from ..units import AMPERE, ANGULAR_SPEED, KELVIN, VOLT
from ..values import SignalRef, stored_per_si

if TYPE_CHECKING:  # pragma: no cover
    from ..circuit import Circuit

LEAK = 1e-12  # S (or N*m*s/rad): DC leak on nodes with no DC path


#: Compilation stamps the elements (a switch realises its gate), so two
#: threads running one circuit compile it once, in turn.
_COMPILE_LOCK = threading.RLock()


def prepare(circuit: "Circuit") -> tuple[System, TopologyReport]:
    """Topology checks, then compilation. Cached until the circuit changes.

    The compiled :class:`~mna.system.System` is immutable, so the cached one
    serves every run of the circuit, from any thread.
    """
    key = (len(circuit.elements), tuple(circuit.elements))
    cached = getattr(circuit, "_compiled", None)
    if cached is not None and cached[0] == key:
        return cached[1], cached[2]
    with _COMPILE_LOCK:
        cached = getattr(circuit, "_compiled", None)
        if cached is not None and cached[0] == key:
            return cached[1], cached[2]
        report = check_topology(circuit)
        system = compile_circuit(circuit)
        for w in report.warnings:
            if w not in circuit.warnings:
                circuit.warnings.append(w)
        circuit._compiled = (key, system, report)
    return system, report


def dc_leak(system: System, report: TopologyReport) -> np.ndarray | None:
    """Diagonal leak conductances for nodes with no DC path, or None."""
    if not report.dc_floating:
        return None
    diag = np.zeros(system.n)
    for node in report.dc_floating:
        diag[system.node_index[node]] = LEAK
    return diag


def default_signals(circuit: "Circuit") -> list[SignalRef]:
    """Every node potential, every element current, every shaft speed."""
    refs = []
    references = set(REFERENCE.values())
    for node, domain in circuit.nodes.items():
        if node in references:
            continue
        if domain == ELECTRICAL:
            refs.append(SignalRef("v", (node,), "node", VOLT))
        elif domain == SHAFT:
            refs.append(SignalRef("w", (node,), "node", ANGULAR_SPEED))
        elif domain == THERMAL:
            refs.append(SignalRef("T", (node,), "node", KELVIN))
    for element in circuit.elements.values():
        if "i" in element.outputs:
            refs.append(SignalRef("i", (element.name,), "element", AMPERE))
    return refs


def compute_signal(ref: SignalRef, circuit: "Circuit", probe: Probe) -> np.ndarray:
    """The array of one signal from what the probe holds."""
    if ref.target == "across":
        return probe.node(ref.names[0]) - probe.node(ref.names[1])
    if ref.target == "node":
        values = probe.node(ref.names[0])
        if ref.quantity == "angle":
            return _cumulative_trapezoid(probe.time, values)
        if ref.quantity == "T":  # a thermal node holds its rise above the ambient
            from ..elements.thermal import ambient_temperature

            return values + ambient_temperature(circuit)
        return values * stored_per_si(ref.quantity)
    element = circuit.elements[ref.names[0]]
    return np.asarray(element.output(ref.quantity, probe), dtype=float)


def _cumulative_trapezoid(t: np.ndarray, y: np.ndarray) -> np.ndarray:
    out = np.zeros_like(y)
    if len(y) > 1:
        out[1:] = np.cumsum(0.5 * (y[1:] + y[:-1]) * np.diff(t))
    return out


def unit_label(ref: SignalRef) -> str:
    """The unit shown beside a signal (CSV values are SI base units but for ``rpm``)."""
    return ref.unit


def plan(system: System, circuit: "Circuit", refs: Sequence[SignalRef]) -> tuple[list[int], list[int]]:
    """Which unknowns and states a run must keep to compute ``refs``."""
    probe = Probe(system, np.zeros(1))
    for ref in refs:
        compute_signal(ref, circuit, probe)
    return sorted(probe.need_x), sorted(probe.need_states)


def require_finite(signals: dict, what: str, time: np.ndarray | None = None, partial=None) -> None:
    """Raise a :class:`~mna.errors.SimulationError` if any signal holds inf or NaN.

    No result leaves the engine as a success with a value that is not a
    number: ``what`` names the analysis; with ``time`` (s) the error says
    when the first such value appeared, and ``partial`` is kept on it.
    """
    from ..errors import SimulationError

    bad = [label for label, v in signals.items() if not np.isfinite(np.asarray(v, dtype=float)).all()]
    if not bad:
        return
    when = None
    if time is not None and len(time):
        first = min(int(np.argmax(~np.isfinite(np.asarray(signals[b], dtype=float)))) for b in bad)
        when = float(time[first])
    at = f" from t = {when:.6g} s" if when is not None else ""
    if partial is not None:
        partial.status = "failed"
        partial.message = f"{what} gave values that are not finite numbers{at}"
    raise SimulationError(
        f"{what} gave values that are not finite numbers{at} ({', '.join(bad[:6])}"
        f"{', ...' if len(bad) > 6 else ''}): an element value is probably far outside its usual range",
        time=when, unknowns=tuple(bad), partial=partial)
