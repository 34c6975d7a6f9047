"""A tightly regulated converter seen from its input: the ``constant-power`` kind.

Netlist::

    constant-power Pconv bus -> gnd 150 W minimum-voltage=36 V

A converter that regulates its output draws the same power whatever its
input voltage, so its input current is ``i = P/v`` and its incremental
input resistance is negative, ``dv/di = -v^2/P`` (Middlebrook, "Input
filter considerations in design and application of switching regulators",
IEEE IAS 1976). Below ``minimum-voltage=`` (the converter's undervoltage
lockout, or simply the lowest input it regulates from) the load is a
resistor ``Vmin^2/P``, so the current falls to zero with the voltage and
the circuit has an operating point from rest:

    i(v) = P/v            for v >= Vmin
    i(v) = P*v/Vmin^2     for v <  Vmin   (continuous at Vmin)

The power ``P`` may be a waveform (a load step). Outputs: ``v i p``.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from ..units import VOLT, WATT
from ..waveforms import BatchEvaluator
from .base import CONDUCTOR, Arg, Branch, NonlinearBatch
from .batching import BranchPattern
from .passive import TwoTerminal


def power_current(v: np.ndarray, power: np.ndarray, v_min: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Current (A) and its slope di/dv (S) of constant-power loads at voltage ``v`` (V)."""
    above = v >= v_min
    safe = np.where(above, v, v_min)
    i = np.where(above, power / safe, power * v / v_min**2)
    g = np.where(above, -power / safe**2, power / v_min**2)
    return i, g


class ConstantPower(TwoTerminal):
    """``constant-power P1 a -> b 150 W minimum-voltage=36 V``: i = P/v above Vmin."""

    keyword = "constant-power"
    main = "power"
    arguments = (
        Arg("power", WATT, kind="waveform", doc="power drawn (value or waveform)"),
        Arg("minimum-voltage", VOLT, positive=True, doc="below it the load is a resistor Vmin^2/P"),
    )
    summary = "constant-power load (a regulated converter's input): i = P/v, incremental resistance -v^2/P"

    def validate(self):
        if self.params["power"].value(0.0) < 0:
            raise InputError(f"constant-power {self.name}: power must not be negative (it draws power); "
                             "for a source of power use a current or voltage source", self.span_of("power"))

    def branches(self):
        return [Branch(self.nodes["a"], self.nodes["b"], CONDUCTOR)]

    def stamp(self, s):
        self._a, self._b = s.node(self.nodes["a"]), s.node(self.nodes["b"])

    def corners(self, start, stop):
        return self.params["power"].corners(start, stop)

    def current(self, probe):
        v = self.across(probe)
        power = probe.waveform(self.params["power"])
        i, _ = power_current(np.asarray(v, dtype=float), np.asarray(power, dtype=float),
                             np.float64(self.params["minimum-voltage"]))
        return i


class ConstantPowerBatch(NonlinearBatch):
    """Every constant-power load of a circuit, one numpy call."""

    def __init__(self, elements, stamper):
        super().__init__(elements, stamper)
        self.pattern = BranchPattern(np.array([e._a for e in elements]), np.array([e._b for e in elements]))
        waves = [e.params["power"] for e in elements]
        groups: dict[type, list[int]] = {}
        for k, wave in enumerate(waves):
            groups.setdefault(type(wave), []).append(k)
        # One evaluator per waveform class; ``order`` puts the values back in instance order.
        self.evaluators = [BatchEvaluator([waves[k] for k in ks]) for ks in groups.values()]
        self.order = np.argsort(np.concatenate([np.asarray(ks) for ks in groups.values()]))
        self.v_min = np.array([e.params["minimum-voltage"] for e in elements], dtype=float)
        self.f_rows = self.pattern.f_rows
        self.jf_rows, self.jf_cols = self.pattern.jf_rows, self.pattern.jf_cols

    def evaluate(self, x, t):
        power = np.concatenate([np.broadcast_to(ev(t), (ev._n,)) for ev in self.evaluators])[self.order]
        i, g = power_current(self.pattern.across(x), power, self.v_min)
        return self.pattern.f_values(i), self.pattern.jf_values(g), self.empty, self.empty


ConstantPower.Batch = ConstantPowerBatch

__all__ = ["ConstantPower", "ConstantPowerBatch", "power_current"]
