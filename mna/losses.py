"""The loss table of a run: per device, conduction, switching and recovery loss, and the efficiency.

A ``losses`` line in a circuit file asks for it::

    losses input=Vbus output=Rload from=10 ms

After the last transient run, every element that reports losses (a kind
with a ``loss_parts`` table: ``mosfet``, ``igbt``, ``diode``) gets one row
per kind of loss: the energy (J) lost over the window and its average
power (W). The window is ``from=`` to ``to=`` (default: the whole run). With
``input=`` and ``output=`` (elements), the table adds the energy the input
delivers (``-integral of p(input)``, passive sign convention), the energy
the output absorbs (``integral of p(output)``) and the efficiency
``output / input``.

Each loss part is read from an element output: a power (W), integrated by
the trapezoidal rule on the solver's time points, or a cumulative energy
(J), read as its rise over the window. Conduction and recovery losses are
what the circuit itself dissipates in the device (``v * i``); switching
losses of a transistor are the datasheet estimate (see
:mod:`mna.elements.transistors`), which the circuit does not draw. So the
input energy equals the output energy plus the conduction and recovery
losses plus everything else the circuit dissipates or stores (resistors,
windings, capacitors), while the switching losses come on top: the table
shows the efficiency both ways.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from . import waveform_math as wm
from .errors import InputError
from .units import format_si

if TYPE_CHECKING:  # pragma: no cover
    from .circuit import Circuit, SignalRef
    from .results import Waveforms

#: Loss parts in the order the table shows them.
PARTS = ("conduction", "switching", "recovery")


@dataclass
class LossRequest:
    """What a ``losses`` line asks: the ports of the efficiency and the window (s)."""

    input: str | None = None
    output: str | None = None
    start: float | None = None
    stop: float | None = None
    span: Any = None


@dataclass
class LossRow:
    element: str
    kind: str  # the element's keyword
    part: str
    energy: float  # J over the window
    power: float  # W, energy / window
    drawn: bool  # True when the circuit itself dissipates it (v*i); False for a datasheet estimate


@dataclass
class LossReport:
    start: float
    stop: float
    rows: list[LossRow] = field(default_factory=list)
    input: str | None = None
    output: str | None = None
    input_energy: float | None = None
    output_energy: float | None = None

    @property
    def window(self) -> float:
        return self.stop - self.start

    @property
    def total_energy(self) -> float:
        return float(sum(r.energy for r in self.rows))

    @property
    def total_power(self) -> float:
        return self.total_energy / self.window if self.window > 0 else float("nan")

    @property
    def efficiency(self) -> float | None:
        """Output energy over input energy, as the circuit computed them."""
        if self.input_energy is None or self.output_energy is None or self.input_energy == 0:
            return None
        return self.output_energy / self.input_energy

    @property
    def efficiency_with_estimates(self) -> float | None:
        """Output over input plus the losses the circuit does not draw (datasheet switching energies)."""
        if self.efficiency is None:
            return None
        extra = sum(r.energy for r in self.rows if not r.drawn)
        return self.output_energy / (self.input_energy + extra)

    def to_json(self) -> dict[str, Any]:
        return {
            "window_s": [self.start, self.stop],
            "devices": [asdict(r) for r in self.rows],
            "total": {"energy_J": self.total_energy, "power_W": self.total_power},
            "input": None if self.input is None else {"element": self.input, "energy_J": self.input_energy,
                                                      "power_W": self.input_energy / self.window},
            "output": None if self.output is None else {"element": self.output, "energy_J": self.output_energy,
                                                        "power_W": self.output_energy / self.window},
            "efficiency": self.efficiency,
            "efficiency_with_switching_estimates": self.efficiency_with_estimates,
        }


def loss_elements(circuit: "Circuit") -> list:
    """Elements that report losses, in file order."""
    return [e for e in circuit.elements.values() if getattr(e, "loss_parts", None)]


def loss_signals(circuit: "Circuit") -> list["SignalRef"]:
    """The element outputs the loss table reads (empty without a ``losses`` line)."""
    request = getattr(circuit, "loss_request", None)
    if request is None:
        return []
    from . import netlist as nl

    refs = []
    for element in loss_elements(circuit):
        for quantity, _ in element.loss_parts.values():
            refs.append(circuit.signal_ref(nl.Call(quantity, (nl.Name(element.name, None),), (), None)))
    for name in (request.input, request.output):
        if name is not None:
            refs.append(circuit.signal_ref(nl.Call("p", (nl.Name(name, None),), (), None)))
    return refs


def check_request(circuit: "Circuit", request: LossRequest) -> None:
    """The ports must be elements with a power ``p``."""
    for role, name in (("input", request.input), ("output", request.output)):
        if name is None:
            continue
        element = circuit.elements.get(name)
        if element is None:
            raise InputError(f"losses {role}={name}: no element named {name!r}", request.span)
        if "p" not in element.outputs:
            raise InputError(f"losses {role}={name}: {element.keyword} {name} has no power p({name})", request.span)
    if (request.input is None) != (request.output is None):
        raise InputError("losses: give both input= and output= for the efficiency (or neither)", request.span)
    if request.start is not None and request.stop is not None and not request.stop > request.start:
        raise InputError("losses: to= must come after from=", request.span)


def _part_energy(time: np.ndarray, values: np.ndarray, how: str, start: float, stop: float) -> float:
    if how == "power":
        return wm.integral(time, values, start=start, stop=stop)
    t, v = wm.window(time, values, start=start, stop=stop)
    return float(v[-1] - v[0])


def _recorded(waves: "Waveforms", label: str) -> tuple[np.ndarray, np.ndarray]:
    """(time, values) of a signal on every recorded point: the step ends and the
    points of the method's dense output inside each step when the run kept them
    (the grid a cumulative energy such as ``eloss`` was integrated on)."""
    if getattr(waves, "fine_time", None) is not None and label in (waves.fine_signals or {}):
        return np.asarray(waves.fine_time, dtype=float), np.asarray(waves.fine_signals[label], dtype=float)
    return np.asarray(waves.time, dtype=float), np.asarray(waves[label], dtype=float)


def loss_report(circuit: "Circuit", waves: "Waveforms") -> LossReport:
    """The loss table of ``circuit`` over its ``losses`` window, from a transient run's waveforms."""
    request = circuit.loss_request
    time = np.asarray(waves.time, dtype=float)
    start = request.start if request.start is not None else float(time[0])
    stop = request.stop if request.stop is not None else float(time[-1])
    report = LossReport(start, stop, input=request.input, output=request.output)
    for element in loss_elements(circuit):
        for part in PARTS:
            if part not in element.loss_parts:
                continue
            quantity, how = element.loss_parts[part]
            energy = _part_energy(*_recorded(waves, f"{quantity}({element.name})"), how, start, stop)
            report.rows.append(LossRow(element.name, element.keyword, part, energy, energy / (stop - start),
                                       drawn=how == "power"))
    if request.input is not None:
        report.input_energy = -wm.integral(*_recorded(waves, f"p({request.input})"), start=start, stop=stop)
        report.output_energy = wm.integral(*_recorded(waves, f"p({request.output})"), start=start, stop=stop)
    return report


def table_lines(report: LossReport) -> list[str]:
    """The loss table as console lines."""
    lines = [f"  losses from {format_si(report.start, 's')} to {format_si(report.stop, 's')}:",
             f"    {'device':<12} {'loss':<11} {'energy':>11} {'average':>11}"]
    for r in report.rows:
        note = "" if r.drawn else "  (datasheet estimate)"
        lines.append(f"    {r.element:<12} {r.part:<11} {format_si(r.energy, 'J'):>11} "
                     f"{format_si(r.power, 'W'):>11}{note}")
    lines.append(f"    {'total':<24} {format_si(report.total_energy, 'J'):>11} "
                 f"{format_si(report.total_power, 'W'):>11}")
    if report.efficiency is not None:
        w = report.window
        lines.append(f"    input  {report.input:<17} {format_si(report.input_energy, 'J'):>11} "
                     f"{format_si(report.input_energy / w, 'W'):>11}")
        lines.append(f"    output {report.output:<17} {format_si(report.output_energy, 'J'):>11} "
                     f"{format_si(report.output_energy / w, 'W'):>11}")
        lines.append(f"    efficiency {100 * report.efficiency:.2f} % (output / input in the circuit)")
        if any(not r.drawn for r in report.rows):
            lines.append(f"    efficiency {100 * report.efficiency_with_estimates:.2f} % with the datasheet "
                         "switching energies added to the input")
    return lines
