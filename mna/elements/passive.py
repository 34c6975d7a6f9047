"""Linear passive elements: resistor, capacitor, inductor."""

from __future__ import annotations

import numpy as np

from ..units import AMPERE, FARAD, HENRY, OHM, VOLT, WATT
from .base import CAPACITOR, CONDUCTOR, INDUCTOR, Arg, Branch, Element, Unknown


class TwoTerminal(Element):
    """Shared outputs of two-terminal elements: ``v``, ``i``, ``p``.

    ``v = v(a) - v(b)``; ``i`` flows from ``a`` through the element to ``b``;
    ``p = v * i`` is the power the element absorbs (passive sign convention).
    """

    outputs = {"v": VOLT, "i": AMPERE, "p": WATT}

    def across(self, probe) -> np.ndarray:
        return probe.node(self.nodes["a"]) - probe.node(self.nodes["b"])

    def current(self, probe) -> np.ndarray:
        raise NotImplementedError

    def output(self, quantity, probe):
        if quantity == "v":
            return self.across(probe)
        if quantity == "i":
            return self.current(probe)
        if quantity == "p":
            return self.across(probe) * self.current(probe)
        return super().output(quantity, probe)


class Resistor(TwoTerminal):
    """``resistor R1 a -> b 100 ohm``: i = v / R."""

    keyword = "resistor"
    main = "resistance"
    arguments = (Arg("resistance", OHM, positive=True, doc="resistance"),)
    summary = "linear resistor"

    def branches(self):
        return [Branch(self.nodes["a"], self.nodes["b"], CONDUCTOR)]

    def stamp(self, s):
        s.conductance(s.node(self.nodes["a"]), s.node(self.nodes["b"]), 1.0 / self.params["resistance"])

    def current(self, probe):
        return self.across(probe) / self.params["resistance"]


class Capacitor(TwoTerminal):
    """``capacitor C1 a -> b 47 nF initial=0 V``: i = C dv/dt."""

    keyword = "capacitor"
    main = "capacitance"
    arguments = (
        Arg("capacitance", FARAD, positive=True, doc="capacitance"),
        Arg("initial", VOLT, default=0.0, doc="voltage at t = 0 when the run starts at rest"),
    )
    summary = "linear capacitor"

    def branches(self):
        return [Branch(self.nodes["a"], self.nodes["b"], CAPACITOR)]

    def stamp(self, s):
        a, b = s.node(self.nodes["a"]), s.node(self.nodes["b"])
        c = self.params["capacitance"]
        s.capacitance(a, b, c)
        self._state = s.state({a: c, b: -c})
        q0 = c * self.params["initial"]
        s.initial_charge(a, q0)
        s.initial_charge(b, -q0)

    def current(self, probe):
        return probe.rate(self._state)


class Inductor(TwoTerminal):
    """``inductor L1 a -> b 10 mH resistance=38 ohm initial=0 A``.

    v = L di/dt + R i, with the branch current i as an unknown. Under
    backward Euler the branch is the classic companion model: a resistance
    ``L/h + R`` in series with a source ``(L/h) * i_n``.
    """

    keyword = "inductor"
    main = "inductance"
    arguments = (
        Arg("inductance", HENRY, positive=True, doc="inductance"),
        Arg("resistance", OHM, default=0.0, nonnegative=True, doc="winding resistance in series"),
        Arg("initial", AMPERE, default=0.0, doc="current at t = 0 when the run starts at rest"),
    )
    summary = "linear inductor with optional winding resistance"

    def branches(self):
        return [Branch(self.nodes["a"], self.nodes["b"], INDUCTOR, resistive=self.params["resistance"] > 0)]

    def unknowns(self):
        return (Unknown("i", AMPERE, "branch current a -> b"),)

    def stamp(self, s):
        a, b, i = s.node(self.nodes["a"]), s.node(self.nodes["b"]), s.own("i")
        # KCL: the branch current leaves a and enters b.
        s.g_entry(a, i, 1.0)
        s.g_entry(b, i, -1.0)
        # Branch: L di/dt - (v_a - v_b) + R i = 0.
        s.c_entry(i, i, self.params["inductance"])
        s.g_entry(i, a, -1.0)
        s.g_entry(i, b, 1.0)
        s.g_entry(i, i, self.params["resistance"])
        s.initial_charge(i, self.params["inductance"] * self.params["initial"])

    def current(self, probe):
        return probe.unknown(self, "i")
