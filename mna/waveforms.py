"""Source waveforms: values at any time, and their corners (breakpoints).

A waveform is a small frozen object holding its parameters in SI units.
``values(t)`` takes an array of times (s) and returns an array; the
transient solver evaluates all sources of one waveform kind with one call of
:class:`BatchEvaluator` per step, never a Python loop over sources. ``corners``
lists the times where the waveform's slope jumps: the solver lands on each
one exactly.

Kinds (netlist syntax in grammar/README.md):

- :class:`Constant`  -- a plain value
- :class:`Step`      -- ``step(from=, to=, at=, rise=)``, a linear ramp of ``rise`` seconds
- :class:`Pulse`     -- ``pwm(low=, high=, frequency=, duty=, rise=, fall=, delay=)``
- :class:`Sine`      -- ``sine(amplitude=, frequency=, offset=, phase=, delay=)``
- :class:`Piecewise` -- ``piecewise(t0: v0, t1: v1, ...)``, linear between points
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar, Sequence

import numpy as np

from .limits import periodic_edges


class Waveform:
    """Protocol for source waveforms. Subclasses hold parameters only."""

    keyword: ClassVar[str] = ""

    def values(self, t: np.ndarray) -> np.ndarray:
        """Source value (SI) at each time in ``t`` (s)."""
        t = np.asarray(t, dtype=float)
        out = np.asarray(self.packed_values(self.pack([self]), t))
        if out.ndim == t.ndim + 1:
            out = out[0]
        return np.broadcast_to(out, t.shape).astype(float)

    def value(self, t: float) -> float:
        """Source value (SI) at one time ``t`` (s)."""
        return float(self.values(np.array([t]))[0])

    @staticmethod
    def pack(waves: Sequence["Waveform"]):
        """Parameters of many waveforms of one class packed into arrays."""
        raise NotImplementedError

    @staticmethod
    def packed_values(packed, t):
        """Values of all packed waveforms at time ``t`` (s), one numpy call."""
        raise NotImplementedError

    def corners(self, start: float, stop: float) -> np.ndarray:
        """Times in (start, stop] where the slope changes (s)."""
        return np.empty(0)

    def jumps(self, start: float, stop: float) -> np.ndarray:
        """The corners in (start, stop] where the value itself jumps (ideal edges)."""
        return np.empty(0)


#: Stands for 1/edge time when an edge is ideal (zero time): any positive
#: time past the edge saturates the ramp, and the value at the edge's own
#: instant is the value before it (an ideal step is taken just after its
#: corner, so a DC start at t = 0 sees the level before a step at 0).
_IDEAL_EDGE = 1e290
_EDGE_GUARD = 1e-9


def _unit_ramp(x):
    """x clipped to [0, 1] (np.clip's wrapper costs more than the work on short arrays)."""
    return np.minimum(np.maximum(x, 0.0), 1.0)


def _inverse_edge(edges) -> np.ndarray:
    e = np.asarray(edges, dtype=float)
    return np.where(e > 0, 1.0 / np.where(e > 0, e, 1.0), _IDEAL_EDGE)


class BatchEvaluator:
    """Evaluates many waveforms of one class at one time, with numpy only.

    Built once per transient run: the parameters of every waveform of the
    class are packed into arrays so that a step costs one vectorised call.
    """

    def __init__(self, waves: Sequence[Waveform]):
        self.cls = type(waves[0])
        self.waves = list(waves)
        self._packed = self.cls.pack(self.waves)
        self._n = len(self.waves)

    def __call__(self, t: float) -> np.ndarray:
        return self.cls.packed_values(self._packed, t)


@dataclass(frozen=True)
class Constant(Waveform):
    level: float

    keyword: ClassVar[str] = "constant"


    @staticmethod
    def pack(waves):
        return np.array([w.level for w in waves])

    @staticmethod
    def packed_values(levels, t):
        return levels


@dataclass(frozen=True)
class Step(Waveform):
    """From ``start_level`` to ``end_level`` at ``at`` (s), a linear ramp over ``rise`` (s).

    With ``rise = 0`` the value at ``t = at`` itself is still ``start_level``.
    """

    start_level: float
    end_level: float
    at: float = 0.0
    rise: float = 0.0

    keyword: ClassVar[str] = "step"

    @staticmethod
    def pack(waves):
        lo = np.array([w.start_level for w in waves])
        hi = np.array([w.end_level for w in waves])
        at = np.array([w.at for w in waves])
        return lo, hi - lo, at, _inverse_edge([w.rise for w in waves])

    @staticmethod
    def packed_values(p, t):
        lo, span, at, inv_rise = p
        return lo + span * _unit_ramp((t - at) * inv_rise)

    def corners(self, start, stop):
        pts = np.array([self.at, self.at + self.rise])
        return np.unique(pts[(pts > start) & (pts <= stop)])

    def jumps(self, start, stop):
        if self.rise == 0 and start < self.at <= stop and self.start_level != self.end_level:
            return np.array([self.at])
        return np.empty(0)


@dataclass(frozen=True)
class Pulse(Waveform):
    """A periodic pulse train: ``high`` for ``duty`` of each period, else ``low``.

    The period starts (after ``delay``) with the rising edge; ``rise`` and
    ``fall`` are linear edge times (s). The duty fraction is measured from
    the start of the rising edge to the start of the falling edge.
    """

    low: float
    high: float
    frequency: float
    duty: float
    rise: float = 0.0
    fall: float = 0.0
    delay: float = 0.0

    keyword: ClassVar[str] = "pwm"

    @property
    def period(self) -> float:
        return 1.0 / self.frequency

    @staticmethod
    def pack(waves):
        low = np.array([w.low for w in waves])
        span = np.array([w.high - w.low for w in waves])
        period = np.array([w.period for w in waves])
        on = np.array([w.duty * w.period for w in waves])
        delay = np.array([w.delay for w in waves])
        return (low, span, period, on, delay, _inverse_edge([w.rise for w in waves]),
                _inverse_edge([w.fall for w in waves]))

    @staticmethod
    def packed_values(p, t):
        low, span, period, on, delay, inv_rise, inv_fall = p
        # The phase within the period, pulled back by a billionth of a period
        # so that a time computed as delay + k*period (a corner) never lands a
        # rounding error past an ideal edge: the value at an edge's own instant
        # is the value before it, as for an ideal step.
        tau = np.mod(t - delay, period) - _EDGE_GUARD * period
        frac = _unit_ramp(tau * inv_rise) - _unit_ramp((tau - on) * inv_fall)
        return low + span * np.where(t < delay, 0.0, frac)

    def corners(self, start, stop):
        on = self.duty * self.period
        return self._edges(start, stop, [0.0, self.rise, on, on + self.fall])

    def jumps(self, start, stop):
        if self.high == self.low:
            return np.empty(0)
        offsets = ([0.0] if self.rise == 0 and self.duty > 0 else []) + (
            [self.duty * self.period] if self.fall == 0 and 0 < self.duty < 1 else [])
        return self._edges(start, stop, offsets)

    def _edges(self, start, stop, offsets) -> np.ndarray:
        """delay + k*period + offset for every period overlapping (start, stop]."""
        return periodic_edges(start, stop, self.delay, self.period, offsets, "a pwm() source")


@dataclass(frozen=True)
class Sine(Waveform):
    """``offset + amplitude*sin(2*pi*frequency*(t - delay) + phase)`` after ``delay``.

    Before ``delay`` the value is ``offset + amplitude*sin(phase)`` (held).
    """

    amplitude: float
    frequency: float
    offset: float = 0.0
    phase: float = 0.0
    delay: float = 0.0

    keyword: ClassVar[str] = "sine"

    @staticmethod
    def pack(waves):
        return tuple(
            np.array(v) for v in zip(*[(w.amplitude, w.frequency, w.offset, w.phase, w.delay) for w in waves])
        )

    @staticmethod
    def packed_values(p, t):
        amp, freq, off, phase, delay = p
        arg = 2 * np.pi * freq * np.maximum(t - delay, 0.0) + phase
        return off + amp * np.sin(arg)


    def corners(self, start, stop):
        if self.delay > start and self.delay <= stop and self.delay > 0:
            return np.array([self.delay])
        return np.empty(0)


@dataclass(frozen=True)
class Piecewise(Waveform):
    """Linear between ``(time, value)`` points; held flat before the first and after the last."""

    times: tuple[float, ...]
    levels: tuple[float, ...]

    keyword: ClassVar[str] = "piecewise"


    @staticmethod
    def pack(waves):
        return [(np.array(w.times), np.array(w.levels)) for w in waves]

    @staticmethod
    def packed_values(p, t):
        # One np.interp per piecewise source: such sources are few in practice.
        return np.array([np.interp(t, ts, vs) for ts, vs in p])

    def corners(self, start, stop):
        pts = np.array(self.times)
        return pts[(pts > start) & (pts <= stop)]


WAVEFORM_KINDS: dict[str, type[Waveform]] = {
    "step": Step,
    "pwm": Pulse,
    "sine": Sine,
    "piecewise": Piecewise,
}
