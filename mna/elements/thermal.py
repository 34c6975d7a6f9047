"""The thermal domain: junctions, cases, heatsinks and the ambient.

A thermal node carries a temperature as its potential and heat flow (W) as
its flow; ``ambient`` is the reference. The equations are the electrical
ones with the analogy temperature <-> voltage, heat flow <-> current,
thermal resistance (K/W) <-> resistance, heat capacity (J/K) <-> capacitance
(the usual thermal-electrical analogy; e.g. Lutz, Schlangenotto, Scheuermann
and De Doncker, "Semiconductor Power Devices", Springer 2011, ch. 13).

The unknown of a thermal node is its *rise above the ambient*; the ambient
temperature is a constant of the circuit, 25 °C unless an
``ambient-temperature`` line sets it. ``T(node)`` reports the absolute
temperature (K): rise + ambient. Elements that need an absolute
temperature (a temperature source, a transistor's junction) read the
ambient with :func:`ambient_temperature`.

Kinds:

- ``ambient-temperature TA 40 °C``: the temperature of the ``ambient``
  reference (at most one per circuit);
- ``thermal-resistance Rth a -> b 0.8 K/W``: heat flow ``(T_a - T_b)/R``;
- ``thermal-capacitance Cth a -> b 5 J/K``: heat flow ``C d(T_a - T_b)/dt``
  (``b`` is usually ``ambient``: a heat capacity stores heat against the
  absolute zero, and the ambient is a constant temperature);
- ``foster Zth j -> c stages(R1: tau1, R2: tau2, ...)``: the datasheet
  transient thermal impedance ``Zth(t) = sum R_i (1 - exp(-t/tau_i))`` as a
  chain of parallel R_i || C_i cells, ``C_i = tau_i / R_i``;
- ``cauer Zth j -> c stages(R1: C1, R2: C2, ...)``: a ladder with C_i from
  the node before R_i to the ambient reference (the physical layer
  model: each layer's heat capacity to thermal ground);
- ``temperature-source TH hs 60 °C``: holds a node at a temperature (a
  large heatsink or a cold plate), a value or a waveform;
- ``heat-source P1 j 12 W``: a heat flow into a node (a fixed loss).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from .. import netlist as nl
from ..errors import InputError, UnitsError
from ..units import (
    CELSIUS_ZERO,
    KELVIN,
    SECOND,
    THERMAL_CAPACITANCE,
    THERMAL_RESISTANCE,
    WATT,
    Dimension,
    Quantity,
    describe,
)
from ..waveforms import Constant, Waveform
from .base import (
    CAPACITOR,
    CONDUCTOR,
    CURRENT,
    REFERENCE,
    THERMAL,
    VOLTAGE,
    Arg,
    Branch,
    Element,
    Port,
    Unknown,
)

AMBIENT = REFERENCE[THERMAL]

#: The ambient temperature when no ``ambient-temperature`` line sets it: 25 °C,
#: the reference temperature of most datasheet tables.
DEFAULT_AMBIENT = CELSIUS_ZERO + 25.0

#: One thermal node, written positionally: ``heat-source P1 j ...``.
THERMAL_NODE = (Port(("node",), THERMAL),)
#: Two thermal nodes: ``thermal-resistance Rth j -> c ...``.
THERMAL_PAIR = (Port(("a", "b"), THERMAL),)


def _warn(circuit, message: str) -> None:
    if message not in circuit.warnings:
        circuit.warnings.append(message)


def ambient_temperature(circuit) -> float:
    """The temperature of the ``ambient`` reference (K) of ``circuit``."""
    for element in circuit.elements.values():
        if isinstance(element, AmbientTemperature):
            return float(element.params["temperature"])
    return DEFAULT_AMBIENT


class ThermalPair(Element):
    """A two-node thermal part: ``heat(X)`` flows from a to b (W), ``dT(X) = T_a - T_b`` (K)."""

    ports = THERMAL_PAIR
    outputs = {"heat": WATT, "dT": KELVIN}

    def validate(self):
        if self.nodes["a"] == self.nodes["b"]:
            raise InputError(f"{self.keyword} {self.name} connects {self.nodes['a']!r} to itself", self.span)

    def difference(self, probe) -> np.ndarray:
        return probe.node(self.nodes["a"]) - probe.node(self.nodes["b"])

    def heat(self, probe) -> np.ndarray:
        raise NotImplementedError

    def output(self, quantity, probe):
        if quantity == "heat":
            return self.heat(probe)
        if quantity == "dT":
            return self.difference(probe)
        return super().output(quantity, probe)


class AmbientTemperature(Element):
    """``ambient-temperature TA 40 °C``: the temperature of the ``ambient`` reference.

    A constant for the whole run. Without this line the ambient is 25 °C.
    """

    keyword = "ambient-temperature"
    ports = ()
    main = "temperature"
    arguments = (Arg("temperature", KELVIN, positive=True, absolute=True,
                     doc="absolute temperature of the ambient (K or °C)"),)
    summary = "the temperature of the thermal reference node 'ambient' (default 25 °C)"

    @classmethod
    def check_stamped(cls, elements, s):
        if len(elements) > 1:
            first, second = elements[0], elements[1]
            raise InputError(f"ambient-temperature {second.name}: the ambient temperature is already set by "
                             f"{first.name}; a circuit has one ambient", second.span)


class ThermalResistance(ThermalPair):
    """``thermal-resistance Rth j -> c 0.8 K/W``: heat flow ``(T_a - T_b) / R`` (W)."""

    keyword = "thermal-resistance"
    main = "resistance"
    arguments = (Arg("resistance", THERMAL_RESISTANCE, positive=True,
                     doc="thermal resistance (K/W, also written °C/W)"),)
    summary = "thermal resistance between two thermal nodes (K/W)"

    def branches(self):
        return [Branch(self.nodes["a"], self.nodes["b"], CONDUCTOR)]

    def stamp(self, s):
        s.conductance(s.node(self.nodes["a"]), s.node(self.nodes["b"]), 1.0 / self.params["resistance"])

    def heat(self, probe):
        return self.difference(probe) / self.params["resistance"]


class ThermalCapacitance(ThermalPair):
    """``thermal-capacitance Cth j -> ambient 5 J/K``: heat flow ``C d(T_a - T_b)/dt`` (W).

    ``initial=`` is the difference ``T_a - T_b`` (K) at t = 0 for a run that
    starts at rest (every other node then starts at the ambient).
    """

    keyword = "thermal-capacitance"
    main = "capacitance"
    arguments = (
        Arg("capacitance", THERMAL_CAPACITANCE, positive=True, doc="heat capacity (J/K)"),
        Arg("initial", KELVIN, default=0.0, doc="T_a - T_b at t = 0 when the run starts at rest (K)"),
    )
    summary = "heat capacity between two thermal nodes, usually to ambient (J/K)"

    def branches(self):
        return [Branch(self.nodes["a"], self.nodes["b"], CAPACITOR)]

    def stamp(self, s):
        a, b = s.node(self.nodes["a"]), s.node(self.nodes["b"])
        c = self.params["capacitance"]
        s.capacitance(a, b, c)
        self._state = s.state({a: c, b: -c})
        s.initial_charge(a, c * self.params["initial"])
        s.initial_charge(b, -c * self.params["initial"])

    def heat(self, probe):
        return probe.rate(self._state)


# --------------------------------------------------------------------------
# Ladders from datasheet tables.


@dataclass(frozen=True)
class Stage:
    """One pair of a ladder's table, evaluated: R and the second number, with their spans."""

    r: Quantity
    x: Quantity
    r_span: Any = None
    x_span: Any = None


def resolve_stages(expr: nl.Expr, value) -> tuple[Stage, ...]:
    """The ``stages(A: B, ...)`` pairs of a ladder's main value, each number evaluated."""
    span = getattr(expr, "span", None)
    if not (isinstance(expr, nl.Call) and expr.func == "stages"):
        raise InputError("a ladder takes its table as stages(R1: X1, R2: X2, ...)", span)
    if expr.named or not expr.args:
        raise InputError("stages() lists R: X pairs, like stages(0.12 K/W: 0.4 ms)", span)
    out = []
    for item in expr.args:
        if not isinstance(item, nl.Pair):
            raise InputError("each stages() entry is a pair R: X, like 0.12 K/W: 0.4 ms",
                             getattr(item, "span", None))
        out.append(Stage(value(item.key), value(item.value), getattr(item.key, "span", None),
                         getattr(item.value, "span", None)))
    return tuple(out)


def _stage_value(q: Quantity, want: Dimension, what: str, span) -> float:
    if q.dim != want:
        raise UnitsError(f"{what} needs {describe(want)}, got {describe(q.dim)}", span)
    if not q.value > 0:
        raise InputError(f"{what} must be positive, got {q.value:g}", span)
    return q.value


class Ladder(ThermalPair):
    """Shared parts of the Foster and Cauer ladders: ``n`` stages, ``n - 1`` inner nodes."""

    main = "stages"
    #: The dimension of the second number of each pair.
    second: Dimension = SECOND
    second_name = "tau"

    def validate(self):
        super().validate()
        stages = self.params["stages"]
        if isinstance(stages, nl.Call):  # built without a circuit
            
            stages = resolve_stages(stages, lambda e: evaluate(e, {}))
        rs, xs = [], []
        for k, st in enumerate(stages, start=1):
            what = f"stage {k} of {self.keyword} {self.name}"
            rs.append(_stage_value(st.r, THERMAL_RESISTANCE, f"R of {what}", st.r_span))
            xs.append(_stage_value(st.x, self.second, f"{self.second_name} of {what}", st.x_span))
        self.r, self.x = np.array(rs), np.array(xs)

    def unknowns(self):
        return tuple(Unknown(f"stage{k}", KELVIN, f"rise of the node after stage {k}")
                     for k in range(1, len(self.r)))

    def branches(self):
        return [Branch(self.nodes["a"], self.nodes["b"], CONDUCTOR)]

    def chain(self, s) -> list[int]:
        """Indices of the chain's nodes: a, the inner nodes, b."""
        inner = [s.own(f"stage{k}") for k in range(1, len(self.r))]
        return [s.node(self.nodes["a"]), *inner, s.node(self.nodes["b"])]


class Foster(Ladder):
    """``foster Zth j -> c stages(0.12 K/W: 0.4 ms, 0.35 K/W: 3 ms, ...)``.

    The transient thermal impedance of a datasheet, ``Zth(t) = sum R_i (1 -
    exp(-t/tau_i))``, as n cells R_i || C_i in series (``C_i = tau_i /
    R_i``). Its inner nodes have no physical meaning: connect a Foster
    ladder straight to a temperature that is held (the ambient, a
    temperature source), not in front of a second ladder whose heat
    capacities it would bypass. ``heat(Z)`` is the heat flow entering at
    ``a`` (W).
    """

    keyword = "foster"
    arguments = (Arg("stages", kind="expr", resolve=resolve_stages,
                     doc="stages(R1: tau1, R2: tau2, ...): K/W and s, from Zth(t)"),)
    summary = "datasheet transient thermal impedance: Foster ladder of R_i, tau_i pairs"

    @classmethod
    def check_stamped(cls, elements, s):
        """Warn about a ladder that ends on a node nothing holds: heat would pass through it at once."""
        held = {AMBIENT}
        for element in s.circuit.elements.values():
            if isinstance(element, (ThermalCapacitance, Cauer)):
                held.update((element.nodes["a"], element.nodes["b"]) if isinstance(element, ThermalCapacitance)
                            else (element.nodes["a"],))
            elif isinstance(element, TemperatureSource):
                held.add(element.nodes["node"])
        for ladder in elements:
            end = ladder.nodes["b"]
            if end not in held:
                _warn(s.circuit,
                    f"foster {ladder.name} ends on thermal node {end!r}, which no heat capacity, Cauer ladder "
                    "or temperature source holds: a Foster ladder's capacitances are not to ground, so a step "
                    f"of heat passes through it at once and {end!r} jumps; put the case or heatsink's heat "
                    "capacity (thermal-capacitance to ambient) on that node")

    def stamp(self, s):
        r, tau = self.r, self.x
        nodes = self.chain(s)
        self._states = []
        for k in range(len(r)):
            a, b = nodes[k], nodes[k + 1]
            c = tau[k] / r[k]
            s.conductance(a, b, 1.0 / r[k])
            s.capacitance(a, b, c)
        self._r, self._first = r[0], (nodes[0], nodes[1], tau[0] / r[0])
        a, b, c = self._first
        self._state = s.state({a: c, b: -c})

    def heat(self, probe):
        # heat entering at a = through R_1 plus into C_1 of the first cell
        inner = probe.unknown(self, "stage1") if len(self.r) > 1 else probe.node(self.nodes["b"])
        return (probe.node(self.nodes["a"]) - inner) / self._r + probe.rate(self._state)


class Cauer(Ladder):
    """``cauer Zth j -> c stages(0.05 K/W: 0.02 J/K, 0.2 K/W: 0.5 J/K, ...)``.

    A ladder: node ``a`` has C_1 to the ambient reference, R_1 leads to the
    next node with C_2 to the ambient, and so on; R_n ends at ``b``. Each
    pair is one layer (die, solder, baseplate...): its thermal resistance
    and heat capacity. ``heat(Z)`` is the heat flow entering at ``a`` (W).
    """

    keyword = "cauer"
    second = THERMAL_CAPACITANCE
    second_name = "C"
    arguments = (Arg("stages", kind="expr", resolve=resolve_stages,
                     doc="stages(R1: C1, R2: C2, ...): K/W and J/K, one pair per layer"),)
    summary = "thermal ladder of layers: R_i in series, C_i to ambient (Cauer)"

    def stamp(self, s):
        r, c = self.r, self.x
        nodes = self.chain(s)
        for k in range(len(r)):
            s.conductance(nodes[k], nodes[k + 1], 1.0 / r[k])
            s.capacitance(nodes[k], -1, c[k])
        self._r = r[0]
        self._state = s.state({nodes[0]: c[0]})

    def heat(self, probe):
        inner = probe.unknown(self, "stage1") if len(self.r) > 1 else probe.node(self.nodes["b"])
        return (probe.node(self.nodes["a"]) - inner) / self._r + probe.rate(self._state)


# --------------------------------------------------------------------------
# Sources.


class TemperatureSource(Element):
    """``temperature-source TH hs 60 °C`` (or a waveform): holds a node at T(t).

    An ideal heatsink or cold plate. Its own unknown is the heat flow it
    takes from the node; ``heat(TH)`` is the heat it absorbs (W, positive
    when it cools the node).
    """

    keyword = "temperature-source"
    ports = THERMAL_NODE
    main = "temperature"
    arguments = (Arg("temperature", KELVIN, kind="waveform", absolute=True,
                     doc="absolute temperature (K or °C), a value or a waveform"),)
    outputs = {"heat": WATT}
    summary = "holds a thermal node at a set temperature (heatsink, cold plate)"

    def validate(self):
        if self.nodes["node"] == AMBIENT:
            raise InputError(f"temperature-source {self.name} is connected to {AMBIENT!r}, the reference; set "
                             "the ambient with an ambient-temperature line instead", self.span)

    @property
    def waveform(self) -> Waveform:
        return self.params["temperature"]

    def branches(self):
        return [Branch(self.nodes["node"], AMBIENT, VOLTAGE)]

    def unknowns(self):
        return (Unknown("heat", WATT, "heat flow from the node into the source"),)

    def stamp(self, s):
        n, h = s.node(self.nodes["node"]), s.own("heat")
        s.g_entry(n, h, 1.0)
        s.g_entry(h, n, 1.0)
        s.source(h, 1.0, self.waveform)  # rise = T(t) - T_ambient
        s.source(h, -1.0, Constant(ambient_temperature(s.circuit)))

    def corners(self, start, stop):
        return self.waveform.corners(start, stop)

    def jumps(self, start, stop):
        return self.waveform.jumps(start, stop)

    def output(self, quantity, probe):
        if quantity == "heat":
            return probe.unknown(self, "heat")
        return super().output(quantity, probe)


class HeatSource(Element):
    """``heat-source P1 j 12 W`` (or a waveform): a heat flow into a thermal node.

    A fixed or scheduled loss. ``heat(P1)`` is the heat flow it delivers (W).
    """

    keyword = "heat-source"
    ports = THERMAL_NODE
    main = "heat"
    arguments = (Arg("heat", WATT, kind="waveform", doc="heat flow into the node (W), a value or a waveform"),)
    outputs = {"heat": WATT}
    summary = "heat flow into a thermal node (a fixed loss)"

    @property
    def waveform(self) -> Waveform:
        return self.params["heat"]

    def validate(self):
        if self.nodes["node"] == AMBIENT:
            raise InputError(f"heat-source {self.name} heats {AMBIENT!r}, the reference, where it does nothing: "
                             "give it a thermal node", self.span)

    def branches(self):
        return [Branch(self.nodes["node"], AMBIENT, CURRENT)]

    def stamp(self, s):
        s.source(s.node(self.nodes["node"]), 1.0, self.waveform)

    def corners(self, start, stop):
        return self.waveform.corners(start, stop)

    def jumps(self, start, stop):
        return self.waveform.jumps(start, stop)

    def output(self, quantity, probe):
        if quantity == "heat":
            return np.broadcast_to(np.asarray(self.waveform.values(probe.time), dtype=float),
                                   np.shape(probe.time)).copy()
        return super().output(quantity, probe)


__all__ = [
    "AMBIENT",
    "DEFAULT_AMBIENT",
    "AmbientTemperature",
    "Cauer",
    "Foster",
    "HeatSource",
    "TemperatureSource",
    "ThermalCapacitance",
    "ThermalResistance",
    "ambient_temperature",
]
