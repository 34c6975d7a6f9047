"""Independent sources: voltage-source, current-source."""

from __future__ import annotations

import numpy as np

import cmath

from ..units import AMPERE, DIMENSIONLESS, VOLT
from ..waveforms import Waveform
from .base import CURRENT, VOLTAGE, Arg, Branch, Unknown
from .passive import TwoTerminal


class SmallSignalSource(TwoTerminal):
    """A source with an optional small-signal part for ``simulate frequency``:
    ``stimulus=`` (magnitude, the source's unit) and ``stimulus-phase=``."""

    @property
    def waveform(self) -> Waveform:
        return self.params[self.main]

    @property
    def stimulus(self) -> complex | None:
        """The small-signal phasor (SI), or None without ``stimulus=``."""
        magnitude = self.params.get("stimulus")
        if magnitude is None:
            return None
        return cmath.rect(magnitude, self.params.get("stimulus-phase") or 0.0)


def _stimulus_args(unit) -> tuple[Arg, ...]:
    return (
        Arg("stimulus", unit, default=None, nonnegative=True,
            doc="small-signal magnitude for simulate frequency"),
        Arg("stimulus-phase", DIMENSIONLESS, default=0.0, doc="phase of the stimulus (deg or rad)"),
    )


class VoltageSource(SmallSignalSource):
    """``voltage-source V1 a -> b 24 V`` (or a waveform): v(a) - v(b) = V(t).

    Its current flows from ``a`` through the source to ``b``, so a source
    delivering power has a negative ``p``.
    """

    keyword = "voltage-source"
    main = "voltage"
    arguments = (Arg("voltage", VOLT, kind="waveform", doc="value or waveform"), *_stimulus_args(VOLT))
    summary = "independent voltage source"

    def branches(self):
        return [Branch(self.nodes["a"], self.nodes["b"], VOLTAGE)]

    def unknowns(self):
        return (Unknown("i", AMPERE, "source current a -> b"),)

    def stamp(self, s):
        a, b, i = s.node(self.nodes["a"]), s.node(self.nodes["b"]), s.own("i")
        s.g_entry(a, i, 1.0)
        s.g_entry(b, i, -1.0)
        s.g_entry(i, a, 1.0)
        s.g_entry(i, b, -1.0)
        s.source(i, 1.0, self.waveform)

    def corners(self, start, stop):
        return self.waveform.corners(start, stop)

    def jumps(self, start, stop):
        return self.waveform.jumps(start, stop)

    def across(self, probe):
        return probe.waveform(self.waveform)

    def current(self, probe):
        return probe.unknown(self, "i")


class CurrentSource(SmallSignalSource):
    """``current-source I1 a -> b 2 A`` (or a waveform): I(t) flows a -> b through it."""

    keyword = "current-source"
    main = "current"
    arguments = (Arg("current", AMPERE, kind="waveform", doc="value or waveform"), *_stimulus_args(AMPERE))
    summary = "independent current source"

    def branches(self):
        return [Branch(self.nodes["a"], self.nodes["b"], CURRENT)]

    def stamp(self, s):
        a, b = s.node(self.nodes["a"]), s.node(self.nodes["b"])
        # f[a] += I(t) (current leaves a through the source), f[b] -= I(t).
        s.source(a, -1.0, self.waveform)
        s.source(b, 1.0, self.waveform)

    def corners(self, start, stop):
        return self.waveform.corners(start, stop)

    def jumps(self, start, stop):
        return self.waveform.jumps(start, stop)

    def current(self, probe):
        return probe.waveform(self.waveform)
