"""Measurement kernels over sampled waveforms.

Plain functions on numpy arrays; they know nothing of circuits or units
(``mna.measure`` wraps them with units and the netlist's ``from=``/``to=``
arguments). Times are in seconds; values are in whatever SI unit the caller
holds, and results come back in that unit (``integral`` in unit*s).

The signal model
----------------
The transient solver stores samples at its own, possibly non-uniform, time
points. Between two samples the signal is taken as linear, so every
measurement here is exact for the piecewise-linear signal through the
samples: integrals use the trapezoidal rule on the solver's time points
(exact for a piecewise-linear signal), the integral of the square over a
segment is ``h*(a**2 + a*b + b**2)/3``, and crossings and window ends are
located by linear interpolation.

``time`` must be non-decreasing. At a discontinuity (a switch event, an
ideal step) the solver may store two samples at the same time, the value
just before and the value just after. Such a zero-width segment adds
nothing to an integral, a crossing inside it is reported at its time, and
``value_at`` at that time returns the value just after (the last sample at
that time). A window is the closed interval ``[start, stop]``: when start
or stop falls on a discontinuity, both samples there belong to the window.

Every windowed function takes keyword-only ``start`` and ``stop`` (s);
``None`` means the start or the end of the run. A window end that lies
outside the run by no more than a rounding error (1e-9 of the run's time
span) is moved onto the run's end; further outside is an error.

Errors are :class:`MeasurementError` (a ``ValueError``), with messages that
use the netlist's names ``from=`` and ``to=`` for the window ends.
"""

from __future__ import annotations

import math

import numpy as np

from mna.errors import MeasurementError

__all__ = [
    "MeasurementError",
    "window",
    "maximum",
    "minimum",
    "peak",
    "mean",
    "rms",
    "integral",
    "final",
    "value_at",
    "overshoot",
    "settling",
    "settling_fraction",
    "crossing",
]

# A window end this far outside the run (relative to the run's time span)
# is taken as rounding in the caller's arithmetic and moved onto the run.
_END_TOLERANCE = 1e-9

_DIRECTIONS = ("rising", "falling", "either")

_PREFIXES = ((1.0, ""), (1e-3, "m"), (1e-6, "u"), (1e-9, "n"), (1e-12, "p"), (1e-15, "f"))


# --------------------------------------------------------------------------
# private helpers


def _format_time(seconds: float) -> str:
    """A time in seconds written with an engineering prefix: ``0.004`` -> ``'4 ms'``."""
    if seconds == 0 or not math.isfinite(seconds):
        return f"{seconds:g} s"
    magnitude = abs(seconds)
    for scale, prefix in _PREFIXES:
        if magnitude >= scale * (1 - 1e-12):
            return f"{seconds / scale:.6g} {prefix}s"
    return f"{seconds / 1e-15:.6g} fs"


def _checked(time: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The two arrays as 1-D float arrays, after checking they form a waveform."""
    t = np.asarray(time, dtype=float)
    v = np.asarray(values, dtype=float)
    if t.ndim != 1 or v.ndim != 1:
        raise MeasurementError(
            f"a waveform needs 1-D arrays of times and values, got shapes {t.shape} and {v.shape}"
        )
    if t.size != v.size:
        raise MeasurementError(
            f"a waveform needs one value per time point, got {t.size} times and {v.size} values"
        )
    if t.size == 0:
        raise MeasurementError("the run holds no samples: there is nothing to measure")
    bad = ~np.isfinite(t)
    if bad.any():
        raise MeasurementError(f"the time axis holds {t[bad][0]} at sample {int(np.argmax(bad))}")
    bad = ~np.isfinite(v)
    if bad.any():
        k = int(np.argmax(bad))
        raise MeasurementError(f"the waveform is {v[k]} at t = {_format_time(t[k])} (sample {k})")
    back = np.diff(t) < 0
    if back.any():
        k = int(np.argmax(back))
        raise MeasurementError(
            f"the time axis runs backwards at sample {k + 1}: "
            f"{_format_time(t[k])} then {_format_time(t[k + 1])}"
        )
    return t, v


def _snap(t: np.ndarray, moment: float) -> float:
    """``moment`` moved onto the run's first or last time if it misses it by rounding only."""
    tolerance = _END_TOLERANCE * max(t[-1] - t[0], abs(t[0]), abs(t[-1]))
    if t[0] - tolerance <= moment < t[0]:
        return float(t[0])
    if t[-1] < moment <= t[-1] + tolerance:
        return float(t[-1])
    return float(moment)


def _interpolate(t: np.ndarray, v: np.ndarray, moment: float) -> float:
    """The piecewise-linear signal at ``moment`` (inside the run); the last sample on a tie."""
    k = int(np.searchsorted(t, moment, side="right"))
    if k > 0 and t[k - 1] == moment:
        return float(v[k - 1])
    t0, t1, v0, v1 = t[k - 1], t[k], v[k - 1], v[k]
    return float(v0 + (v1 - v0) * (moment - t0) / (t1 - t0))


def _resolve_window(t: np.ndarray, start: float | None, stop: float | None) -> tuple[float, float]:
    """Window ends in seconds, defaulted to the run and checked against it."""
    run = f"the run covers {_format_time(t[0])} to {_format_time(t[-1])}"
    lo = float(t[0]) if start is None else _snap(t, float(start))
    hi = float(t[-1]) if stop is None else _snap(t, float(stop))
    if not (math.isfinite(lo) and math.isfinite(hi)):
        raise MeasurementError(f"window from={lo} to={hi} is not a finite time range")
    if lo > t[-1]:
        raise MeasurementError(
            f"window from={_format_time(lo)} starts after the run ends at {_format_time(t[-1])}"
        )
    if hi < t[0]:
        raise MeasurementError(
            f"window to={_format_time(hi)} ends before the run starts at {_format_time(t[0])}"
        )
    if t[-1] == t[0]:
        raise MeasurementError(
            f"the run holds a single instant ({_format_time(t[0])}); "
            "a measurement over a window needs a run of nonzero duration"
        )
    if lo >= hi:
        raise MeasurementError(
            f"window from={_format_time(lo)} to={_format_time(hi)} is empty: "
            "from= must come before to="
        )
    if lo < t[0]:
        raise MeasurementError(
            f"window from={_format_time(lo)} starts before the run starts ({run})"
        )
    if hi > t[-1]:
        raise MeasurementError(f"window to={_format_time(hi)} ends after the run ends ({run})")
    return lo, hi


def _windowed(time, values, start, stop) -> tuple[np.ndarray, np.ndarray]:
    t, v = _checked(time, values)
    lo, hi = _resolve_window(t, start, stop)
    first = int(np.searchsorted(t, lo, side="left"))
    last = int(np.searchsorted(t, hi, side="right"))
    wt, wv = t[first:last], v[first:last]
    if wt.size == 0 or wt[0] != lo:
        wt = np.concatenate(([lo], wt))
        wv = np.concatenate(([_interpolate(t, v, lo)], wv))
    if wt[-1] != hi:
        wt = np.concatenate((wt, [hi]))
        wv = np.concatenate((wv, [_interpolate(t, v, hi)]))
    return wt, wv


def _describe_window(t: np.ndarray) -> str:
    return f"from={_format_time(t[0])} to={_format_time(t[-1])}"


def _step_ends(t: np.ndarray, v: np.ndarray) -> tuple[float, float]:
    """(initial, final) of a step response: first and last value in the window."""
    initial, final_value = float(v[0]), float(v[-1])
    if final_value == initial:
        raise MeasurementError(
            f"the waveform ends where it starts ({initial:g}) in the window "
            f"{_describe_window(t)}, so it is no step response; "
            "put the window's from= before the step and its to= after it has settled"
        )
    return initial, final_value


# --------------------------------------------------------------------------
# public kernels


def window(
    time: np.ndarray,
    values: np.ndarray,
    *,
    start: float | None = None,
    stop: float | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """The samples inside ``[start, stop]`` (s), as new arrays ``(time, values)``.

    Samples interpolated linearly are added exactly at ``start`` and ``stop``
    when they fall between samples. Raises :class:`MeasurementError` when the
    window lies outside the run, when ``start >= stop``, or when the run holds
    no samples.
    """
    return _windowed(time, values, start, stop)


def maximum(time: np.ndarray, values: np.ndarray, *, start: float | None = None,
            stop: float | None = None) -> float:
    """Largest value in the window, interpolated end samples included (values' unit)."""
    _, v = _windowed(time, values, start, stop)
    return float(np.max(v))


def minimum(time: np.ndarray, values: np.ndarray, *, start: float | None = None,
            stop: float | None = None) -> float:
    """Smallest value in the window, interpolated end samples included (values' unit)."""
    _, v = _windowed(time, values, start, stop)
    return float(np.min(v))


def peak(time: np.ndarray, values: np.ndarray, *, start: float | None = None,
         stop: float | None = None) -> float:
    """Largest magnitude in the window, returned as a magnitude (>= 0), in the values' unit."""
    _, v = _windowed(time, values, start, stop)
    return float(np.max(np.abs(v)))


def integral(time: np.ndarray, values: np.ndarray, *, start: float | None = None,
             stop: float | None = None) -> float:
    """Integral over the window by the trapezoidal rule, in the values' unit times seconds."""
    t, v = _windowed(time, values, start, stop)
    return float(np.sum(np.diff(t) * (v[:-1] + v[1:])) / 2)


def mean(time: np.ndarray, values: np.ndarray, *, start: float | None = None,
         stop: float | None = None) -> float:
    """Time average over the window (trapezoid integral / duration), in the values' unit."""
    t, v = _windowed(time, values, start, stop)
    return float(np.sum(np.diff(t) * (v[:-1] + v[1:])) / 2 / (t[-1] - t[0]))


def rms(time: np.ndarray, values: np.ndarray, *, start: float | None = None,
        stop: float | None = None) -> float:
    """Root mean square over the window, in the values' unit.

    The square is integrated exactly for the piecewise-linear signal: over a
    segment of width h from a to b, the integral of v**2 is
    h*(a**2 + a*b + b**2)/3. (The trapezoidal rule applied to v**2,
    h*(a**2 + b**2)/2, overestimates it by h*(a - b)**2/6 per segment.)
    """
    t, v = _windowed(time, values, start, stop)
    a, b = v[:-1], v[1:]
    square = np.sum(np.diff(t) * (a * a + a * b + b * b)) / 3
    return float(math.sqrt(max(square / (t[-1] - t[0]), 0.0)))


def final(time: np.ndarray, values: np.ndarray, *, start: float | None = None,
          stop: float | None = None) -> float:
    """Last value in the window (at ``stop``), in the values' unit."""
    _, v = _windowed(time, values, start, stop)
    return float(v[-1])


def value_at(time: np.ndarray, values: np.ndarray, at: float) -> float:
    """The waveform at time ``at`` (s), by linear interpolation between samples.

    At a discontinuity stored as two samples at the same time, the value just
    after (the last sample at that time) is returned. Raises
    :class:`MeasurementError` if ``at`` lies outside the run.
    """
    t, v = _checked(time, values)
    moment = _snap(t, float(at))
    if not (t[0] <= moment <= t[-1]):
        raise MeasurementError(
            f"at={_format_time(moment)} lies outside the run, which covers "
            f"{_format_time(t[0])} to {_format_time(t[-1])}"
        )
    return _interpolate(t, v, moment)


def overshoot(time: np.ndarray, values: np.ndarray, *, start: float | None = None,
              stop: float | None = None) -> float:
    """Percent overshoot of a step response in the window (dimensionless, in %).

    ``100 * (extreme - final) / (final - initial)``, where initial and final
    are the first and last values in the window and the extreme is the
    maximum for a rising step, the minimum for a falling one. 0 if the
    waveform never goes beyond its final value. Raises
    :class:`MeasurementError` if final == initial (no step).
    """
    t, v = _windowed(time, values, start, stop)
    initial, final_value = _step_ends(t, v)
    extreme = np.max(v) if final_value > initial else np.min(v)
    return max(0.0, float(100 * (extreme - final_value) / (final_value - initial)))


def settling(time: np.ndarray, values: np.ndarray, band: float, *,
             start: float | None = None, stop: float | None = None) -> float:
    """When (s, on the run's axis) the waveform enters ±band of its final value for good.

    ``band`` is absolute, in the values' unit, and > 0. The final value is the
    last value in the window. The result is the moment of the last exit from
    the band, located by linear interpolation between the last sample
    outside the band and the next one; it is the window start if the
    waveform never leaves the band.
    """
    band = float(band)
    if not (band > 0 and math.isfinite(band)):
        raise MeasurementError(f"a settling band must be a positive finite width, got {band:g}")
    t, v = _windowed(time, values, start, stop)
    final_value = v[-1]
    outside = np.flatnonzero(np.abs(v - final_value) > band)
    if outside.size == 0:
        return float(t[0])
    k = int(outside[-1])  # never the last sample, which is the final value itself
    edge = final_value + band if v[k] > final_value else final_value - band
    return float(t[k] + (edge - v[k]) / (v[k + 1] - v[k]) * (t[k + 1] - t[k]))


def settling_fraction(time: np.ndarray, values: np.ndarray, fraction: float, *,
                      start: float | None = None, stop: float | None = None) -> float:
    """Settling time (s) of a step response with band = fraction * |final - initial|.

    ``fraction`` is dimensionless (0.02 for the usual 2 % settling time);
    initial and final are the first and last values in the window, as in
    :func:`overshoot`.
    """
    fraction = float(fraction)
    if not (fraction > 0 and math.isfinite(fraction)):
        raise MeasurementError(
            f"a settling band must be a positive fraction of the step, got {fraction:g}"
        )
    t, v = _windowed(time, values, start, stop)
    initial, final_value = _step_ends(t, v)
    return settling(t, v, fraction * abs(final_value - initial))


def crossing(time: np.ndarray, values: np.ndarray, level: float, *,
             start: float | None = None, stop: float | None = None,
             direction: str = "either") -> float:
    """First time (s, on the run's time axis) the waveform reaches ``level`` in the window.

    ``direction`` is ``"rising"`` (from below to at or above the level),
    ``"falling"`` (from above to at or below) or ``"either"``. The moment is
    found by linear interpolation between samples. If the first sample in
    the window already equals the level, its time is returned whatever the
    direction. Raises :class:`MeasurementError` if the level is never
    reached: a check on a crossing that never happened must not pass.
    """
    if direction not in _DIRECTIONS:
        raise MeasurementError(
            f"crossing direction must be one of {', '.join(_DIRECTIONS)}; got {direction!r}"
        )
    level = float(level)
    t, v = _windowed(time, values, start, stop)
    if v[0] == level:
        return float(t[0])
    d = v - level
    rising = (d[:-1] < 0) & (d[1:] >= 0)
    falling = (d[:-1] > 0) & (d[1:] <= 0)
    hits = {"rising": rising, "falling": falling, "either": rising | falling}[direction]
    if not hits.any():
        how = "" if direction == "either" else f" {direction}"
        raise MeasurementError(
            f"the waveform never reaches {level:g}{how} in the window {_describe_window(t)}; "
            f"there it stays between {np.min(v):g} and {np.max(v):g}"
        )
    k = int(np.argmax(hits))
    return float(t[k] + (level - v[k]) / (v[k + 1] - v[k]) * (t[k + 1] - t[k]))
