"""Measurements on a frequency response, for ``measure`` and ``check`` lines.

::

    measure f_peak = resonance(z(out -> gnd))
    check   largest(z(out -> gnd)) < 0.5 * Vbus^2 / Pconv
    check   phase(v(out) / v(in), 10 kHz) within 2 deg of -90 deg
    check   phase_margin(v(fb) / v(err)) > 45 deg

Each function takes a small-signal quantity first (``v(out)``, ``i(L1)``,
an impedance ``z(a -> b)`` or a ratio ``v(out) / v(in)``) and reads it from
the last ``simulate frequency`` of the file. Between two analysis
frequencies the magnitude is taken as a straight line in dB against
log-frequency and the phase in degrees against log-frequency, each as the
parabola through the three nearest analysis points (exact at an analysis
frequency); crossings are the roots of those parabolas, and a peak or a
notch is the vertex of the parabola through the three points around it.

The kernels here work on arrays (frequency in Hz, complex values) and know
nothing of the netlist; :mod:`mna.measure` calls :func:`frequency_call` as
part of its call hook. A response that never does what a measurement
looks for raises :class:`NoFrequencyValue`, which the checks report as "no
value" (the check fails).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Callable

import numpy as np

from . import netlist as nl
from .errors import InputError, MeasurementError, UnitsError
from .units import DIMENSIONLESS, HERTZ, Dimension, Quantity, describe, format_si

if TYPE_CHECKING:  # pragma: no cover
    from .results import FrequencyResponse
    from .values import SignalRef

#: 3 dB as a magnitude ratio: the half-power points.
HALF_POWER_DB = 20.0 * math.log10(math.sqrt(2.0))


class NoFrequencyValue(Exception):
    """The response never does what the measurement looks for (no crossing, peak at an end)."""


@dataclass(frozen=True)
class FrequencySpec:
    """How a frequency measurement is written and what it returns."""

    extra: tuple[str, ...]  # positional arguments after the quantity: "frequency", "level?"
    result: str  # "hertz", "same", "plain", "decibel", "angle"
    doc: str


#: Name -> form. Every one takes a small-signal quantity first.
FREQUENCY_MEASUREMENTS: dict[str, FrequencySpec] = {
    "resonance": FrequencySpec((), "hertz", "resonance(x): frequency (Hz) of the largest |x|"),
    "largest": FrequencySpec((), "same", "largest(x): the largest |x| over the analysis (unit of x)"),
    "smallest": FrequencySpec((), "same", "smallest(x): the smallest |x| (a notch, a series resonance)"),
    "bandwidth": FrequencySpec((), "hertz", "bandwidth(x): width (Hz) between the half-power points around the peak"),
    "quality": FrequencySpec((), "plain", "quality(x): Q = resonance(x) / bandwidth(x)"),
    "cutoff": FrequencySpec((), "hertz",
                            "cutoff(x): first frequency where |x| is 3 dB below its value at the lowest frequency"),
    "magnitude": FrequencySpec(("frequency",), "same", "magnitude(x, F): |x| at F"),
    "decibels": FrequencySpec(("frequency",), "decibel", "decibels(x, F): 20*log10(|x|) at F, against 1 unit of x"),
    "phase": FrequencySpec(("frequency",), "angle", "phase(x, F): phase of x at F (shown in deg)"),
    "crossover": FrequencySpec(("level?",), "hertz",
                               "crossover(x[, LEVEL]): first frequency where |x| crosses 1 (or LEVEL)"),
    "phase_margin": FrequencySpec((), "angle", "phase_margin(T): 180 deg + phase of T where |T| crosses 1"),
    "gain_margin": FrequencySpec((), "decibel", "gain_margin(T): dB below 1 of |T| where its phase reaches -180 deg"),
}

#: Display unit of each result kind (mna.measure shows values with it).
HINTS = {"hertz": "Hz", "decibel": "dB", "angle": "deg"}


# --------------------------------------------------------------------------
# Kernels on arrays.


def _db(values: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(np.abs(values))


def continuous_phase_rad(values: np.ndarray) -> np.ndarray:
    """Phase (rad) unwrapped along frequency, the first point within (-pi, pi]."""
    return np.unwrap(np.angle(values))


def _three(n: int, k: int, u: np.ndarray, at: float) -> slice:
    """The three grid points around the interval [k, k+1] nearest to ``at``."""
    if k == 0:
        return slice(0, 3)
    if k + 2 >= n:
        return slice(n - 3, n)
    left = at - u[k - 1]
    right = u[k + 2] - at
    return slice(k - 1, k + 2) if left <= right else slice(k, k + 3)


def _interp_log(f: np.ndarray, y: np.ndarray, at: float) -> float:
    """y at frequency ``at``: the parabola in log f through the three nearest points
    (exact on a grid point; a straight line when the analysis has two points)."""
    u = np.log10(f)
    x = math.log10(at)
    if f.size < 3:
        return float(np.interp(x, u, y))
    k = int(np.clip(np.searchsorted(u, x) - 1, 0, f.size - 2))
    pts = _three(f.size, k, u, x)
    uu, yy = u[pts], y[pts]
    if not np.all(np.isfinite(yy)):
        return float(np.interp(x, u, y))
    total = 0.0
    for i in range(3):
        others = [j for j in range(3) if j != i]
        total += yy[i] * np.prod([(x - uu[j]) / (uu[i] - uu[j]) for j in others])
    return float(total)


def _root(f: np.ndarray, y: np.ndarray, k: int) -> float:
    """Frequency in [f[k], f[k+1]] where y (sampled against log f) crosses zero:
    the root of the parabola through the three nearest points, or of the
    straight line between the two when the parabola has none there."""
    u = np.log10(f)
    t = y[k] / (y[k] - y[k + 1]) if y[k] != y[k + 1] else 0.0
    linear = u[k] + t * (u[k + 1] - u[k])
    if f.size >= 3:
        pts = _three(f.size, k, u, linear)
        uu, yy = u[pts], y[pts]
        if np.all(np.isfinite(yy)):
            a, b, c = np.polyfit(uu - linear, yy, 2)
            for r in np.roots([a, b, c]) if a != 0 else ([-c / b] if b != 0 else []):
                if abs(np.imag(r)) < 1e-12 and u[k] <= linear + np.real(r) <= u[k + 1]:
                    return float(10 ** (linear + np.real(r)))
    return float(10 ** linear)


def _vertex(f: np.ndarray, y: np.ndarray, k: int) -> tuple[float, float] | None:
    """Frequency and value of the minimum of the parabola (in log f) through the
    points k-1, k, k+1 of ``y``, or None when it has none between them."""
    u = np.log10(f[k - 1:k + 2])
    yy = y[k - 1:k + 2]
    if not np.all(np.isfinite(yy)):
        return None
    a, b, c = np.polyfit(u - u[1], yy, 2)
    if not a > 0:
        return None
    du = -b / (2 * a)
    if not u[0] - u[1] <= du <= u[2] - u[1]:
        return None
    return float(10 ** (u[1] + du)), float(c - b * b / (4 * a))


def extreme(f: np.ndarray, values: np.ndarray, largest: bool = True) -> tuple[float, float, int]:
    """(frequency, |x|, grid index) of the largest (or smallest) magnitude.

    Inside the range the extreme is refined on the power: near a resonance
    1/|x|^2 (near a notch |x|^2) is very nearly a parabola in log f (for a
    second-order resonance it is a + b*sinh^2(ln(f/f0))), far more so than
    the magnitude in dB, whose peak is as narrow as the resonance.
    """
    mag = np.abs(values)
    k = int(np.nanargmax(mag) if largest else np.nanargmin(mag))
    if 0 < k < f.size - 1:
        with np.errstate(divide="ignore"):
            power = 1.0 / mag**2 if largest else mag**2
        found = _vertex(f, power, k)
        if found is not None and found[1] >= 0:
            fk, p = found
            return fk, (1.0 / math.sqrt(p) if largest else math.sqrt(p)) if p > 0 else float(mag[k]), k
    return float(f[k]), float(mag[k]), k


def resonance(f, values) -> float:
    fk, _, k = extreme(f, values)
    if k in (0, f.size - 1):
        end = "lowest" if k == 0 else "highest"
        raise NoFrequencyValue(f"|x| is largest at the {end} frequency of the analysis ({_hz(f[k])}), "
                               "so no resonance lies inside it; widen from= and to=")
    return fk


def _first_crossing(f: np.ndarray, y: np.ndarray, start: int, step: int) -> float | None:
    """First frequency from grid index ``start`` in direction ``step`` where ``y``
    (positive at ``start``) reaches zero; None if it never does."""
    k = start
    while 0 <= k + step < f.size:
        if not np.isfinite(y[k + step]):
            return float(f[k + step])
        if y[k + step] <= 0:
            return _root(f, y, min(k, k + step))
        k += step
    return None


def half_power_points(f, values) -> tuple[float, float]:
    """Frequencies around the peak where |x| is the peak over sqrt(2), on the power
    1/|x|^2 as for :func:`extreme`."""
    _, peak, k = extreme(f, values)
    with np.errstate(divide="ignore"):
        y = 2.0 / peak**2 - 1.0 / np.abs(values) ** 2  # > 0 inside the half-power band
    low = _first_crossing(f, y, k, -1)
    high = _first_crossing(f, y, k, +1)
    if low is None or high is None:
        side = "below" if low is None else "above"
        raise NoFrequencyValue(f"|x| does not fall 3 dB below its peak ({_hz(f[k])}) anywhere {side} it "
                               f"within the analysis ({_hz(f[0])} to {_hz(f[-1])}); widen from= and to=")
    return low, high


def bandwidth(f, values) -> float:
    low, high = half_power_points(f, values)
    return high - low


def quality(f, values) -> float:
    return resonance(f, values) / bandwidth(f, values)


def cutoff(f, values) -> float:
    db = _db(values)
    found = _first_crossing(f, db - (db[0] - HALF_POWER_DB), 0, +1)
    if found is None:
        raise NoFrequencyValue(f"|x| never falls 3 dB below its value at {_hz(f[0])} within the analysis")
    return found


def magnitude_at(f, values, at: float) -> float:
    return 10 ** (_interp_log(f, _db(values), at) / 20.0)


def phase_at(f, values, at: float) -> float:
    return _interp_log(f, continuous_phase_rad(values), at)


def crossover(f, values, level: float = 1.0) -> float:
    """First frequency where |x| crosses ``level`` (either way), straight in dB against log f."""
    db = _db(values) - 20.0 * math.log10(level)
    above = db >= 0
    change = np.nonzero(above[1:] != above[:-1])[0]
    if not change.size:
        where = "above" if above[0] else "below"
        raise NoFrequencyValue(f"|x| stays {where} the level over the whole analysis "
                               f"({_hz(f[0])} to {_hz(f[-1])})")
    return _root(f, db, int(change[0]))


def phase_margin(f, values) -> float:
    fc = crossover(f, values)
    return math.pi + phase_at(f, values, fc)


def gain_margin(f, values) -> float:
    phase = continuous_phase_rad(values) + math.pi  # zero where the phase is -180 deg
    sign = phase > 0
    change = np.nonzero(sign[1:] != sign[:-1])[0]
    if not change.size:
        raise NoFrequencyValue("the phase never reaches -180 deg within the analysis")
    f180 = _root(f, phase, int(change[0]))
    return -_interp_log(f, _db(values), f180)


def _hz(f: float) -> str:
    return format_si(float(f), "Hz")


# --------------------------------------------------------------------------
# The hook used by mna.measure.


def result_dimension(spec: FrequencySpec, dim: Dimension) -> Dimension:
    return {"hertz": HERTZ, "same": dim, "plain": DIMENSIONLESS, "decibel": DIMENSIONLESS,
            "angle": DIMENSIONLESS}[spec.result]


def usage(name: str) -> str:
    spec = FREQUENCY_MEASUREMENTS[name]
    extra = {"frequency": ", F", "level?": "[, LEVEL]"}
    return f"write {name}(x{''.join(extra[e] for e in spec.extra)})"


def frequency_call(circuit, call: nl.Call, sub: Callable[[nl.Expr], Quantity],
                   response: "FrequencyResponse | None", dry: bool) -> tuple[Quantity, str]:
    """Evaluate one frequency measurement: (value, display hint).

    With ``dry`` only the form, names and units are checked and the value is NaN.
    """
    spec = FREQUENCY_MEASUREMENTS[call.func]
    if not any(a.analysis == "frequency" for a in circuit.analyses):
        raise InputError(f"{call.func}() measures a frequency response, and this file has no "
                         "'simulate frequency' line", call.span,
                         hint="add one, e.g. 'simulate frequency from=10 Hz to=1 MHz'")
    if call.named:
        raise InputError(f"{call.func}() takes no named arguments; {usage(call.func)}", call.named[0][2])
    if not call.args:
        raise InputError(f"{call.func}() needs a quantity; {usage(call.func)}", call.span)
    ref = _quantity_ref(circuit, call)
    given = call.args[1:]
    required = sum(1 for e in spec.extra if not e.endswith("?"))
    if not required <= len(given) <= len(spec.extra):
        raise InputError(f"{call.func}() takes {1 + len(spec.extra)} argument(s); {usage(call.func)}", call.span)
    extras = {}
    for role, expr in zip(spec.extra, given):
        q = sub(expr)
        if role == "frequency":
            if q.dim != HERTZ:
                raise UnitsError(f"{call.func}() frequency needs {describe(HERTZ)}, got {describe(q.dim)}",
                                 expr.span)
            extras["frequency"] = q.value
            _check_in_range(circuit, q.value, expr, call.func)
        else:
            if q.dim != ref.dimension:
                raise UnitsError(f"{call.func}() level needs {describe(ref.dimension)} like {ref.label}, "
                                 f"got {describe(q.dim)}", expr.span)
            if not math.isnan(q.value) and not q.value > 0:
                raise InputError(f"{call.func}() level must be positive (a magnitude)", expr.span)
            extras["level"] = q.value
    if call.func in ("crossover", "phase_margin", "gain_margin") and "level" not in extras \
            and ref.dimension != DIMENSIONLESS:
        raise UnitsError(f"{call.func}() of {ref.label} ({describe(ref.dimension)}) needs a level in that unit: "
                         f"unity gain is defined for plain ratios only", call.span,
                         hint=f"crossover({ref.label}, LEVEL), or measure a ratio such as v(out) / v(in)")
    dim = result_dimension(spec, ref.dimension)
    hint = HINTS.get(spec.result, "")
    if dry:
        return Quantity(math.nan, dim), hint
    f, values = _values(response, ref, call)
    return Quantity(_compute(call.func, f, values, extras), dim), hint


def _quantity_ref(circuit, call: nl.Call) -> "SignalRef":
    first = call.args[0]
    if isinstance(first, nl.Call) or (isinstance(first, nl.BinaryOp) and first.op == "/"):
        return circuit.signal_ref(first)
    raise InputError(f"{call.func}() measures a small-signal quantity: v(node), i(ELEMENT), an impedance "
                     "z(a -> b) or a ratio such as v(out) / v(in)", getattr(first, "span", call.span))


def _check_in_range(circuit, f: float, expr: nl.Expr, name: str) -> None:
    if math.isnan(f):
        return
    request = [a for a in circuit.analyses if a.analysis == "frequency"][-1]
    s = request.settings
    low, high = (s["at"][0], s["at"][-1]) if s.get("at") else (s["from"], s["to"])
    if not low * (1 - 1e-9) <= f <= high * (1 + 1e-9):
        raise MeasurementError(f"{name}() frequency {_hz(f)} lies outside the analysis, which covers "
                               f"{_hz(low)} to {_hz(high)} (the last 'simulate frequency' line)", expr.span)


def _values(response: "FrequencyResponse | None", ref: "SignalRef", call: nl.Call) -> tuple[np.ndarray, np.ndarray]:
    if response is None:
        raise InputError(f"{call.func}() needs the results of a frequency analysis", call.span)
    if ref.label in response:
        from .values import stored_per_si

        return response.frequency, np.asarray(response[ref.label]) / stored_per_si(ref.quantity)
    if ref.target == "ratio" and all(p.label in response for p in ref.parts):
        num, den = (np.asarray(response[p.label]) for p in ref.parts)
        with np.errstate(divide="ignore", invalid="ignore"):
            return response.frequency, num / den
    raise InputError(f"the frequency results hold no {ref.label}", call.span,
                     hint="run the file with mna.measure.run_and_check, which records what checks need")


def _compute(name: str, f: np.ndarray, values: np.ndarray, extras: dict[str, float]) -> float:
    if name == "resonance":
        return resonance(f, values)
    if name == "largest":
        return extreme(f, values, largest=True)[1]
    if name == "smallest":
        return extreme(f, values, largest=False)[1]
    if name == "bandwidth":
        return bandwidth(f, values)
    if name == "quality":
        return quality(f, values)
    if name == "cutoff":
        return cutoff(f, values)
    if name == "magnitude":
        return magnitude_at(f, values, extras["frequency"])
    if name == "decibels":
        return 20.0 * math.log10(magnitude_at(f, values, extras["frequency"]))
    if name == "phase":
        return phase_at(f, values, extras["frequency"])
    if name == "crossover":
        return crossover(f, values, extras.get("level", 1.0))
    if name == "phase_margin":
        return phase_margin(f, values)
    return gain_margin(f, values)
