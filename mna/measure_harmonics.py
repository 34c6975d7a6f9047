"""Measurements of harmonics: ``harmonic_peak``, ``harmonic_rms``, ``harmonic_phase``, ``distortion``, ``crest``.

::

    measure ripple  = harmonic_peak(v(out), 1)          # the switching-frequency ripple, peak
    measure thd_in  = distortion(i(Lin))                # harmonics 2..40 over the fundamental
    measure cf      = crest(i(Lin))
    measure third   = harmonic_rms(i(Lin), 3, fundamental=50 Hz)   # on a transient run

Each is computed by :func:`mna.harmonics.spectrum` over the last whole
periods of the run. The period is the ``simulate periodic`` result's own,
or ``fundamental=`` (a frequency) for a transient run (which then should
have reached its steady state over those periods). ``distortion()`` takes
``harmonics=`` (the highest harmonic counted, default 40).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Callable

from . import netlist as nl
from .errors import InputError, MeasurementError, UnitsError, UnknownNameError
from .harmonics import THD_HARMONICS, period_of_result, spectrum
from .units import DIMENSIONLESS, HERTZ, Quantity, describe

if TYPE_CHECKING:  # pragma: no cover
    from .measure import _Calls


@dataclass(frozen=True)
class HarmonicSpec:
    order: bool  # takes the harmonic number N after the waveform
    result: str  # "same" | "angle" | "fraction" | "ratio"
    doc: str


HARMONIC_MEASUREMENTS: dict[str, HarmonicSpec] = {
    "harmonic_peak": HarmonicSpec(True, "same", "harmonic_peak(x, N): peak amplitude of harmonic N (0: the DC value)"),
    "harmonic_rms": HarmonicSpec(True, "same", "harmonic_rms(x, N): RMS value of harmonic N"),
    "harmonic_phase": HarmonicSpec(True, "angle",
                                   "harmonic_phase(x, N): phase of harmonic N (cosine reference at the start "
                                   "of the window; shown in deg)"),
    "distortion": HarmonicSpec(False, "fraction",
                               "distortion(x): total harmonic distortion, harmonics 2..40 over the fundamental"),
    "crest": HarmonicSpec(False, "ratio", "crest(x): peak over RMS"),
}
_HINTS = {"angle": "deg", "fraction": "%", "ratio": ""}


def _usage(func: str) -> str:
    spec = HARMONIC_MEASUREMENTS[func]
    n = ", N" if spec.order else ""
    more = ", harmonics=40" if func == "distortion" else ""
    return f"write {func}(x{n}[, fundamental=50 Hz{more}]): {spec.doc}"


def harmonic_call(calls: "_Calls", call: nl.Call, sub: Callable[[nl.Expr], Quantity]) -> tuple[Quantity, str]:
    """Evaluate (or, with ``calls.dry``, validate) one harmonic measurement: (value, display hint)."""
    from .measure import _hint, _is_signal  # noqa: F401 (shared helpers)

    spec = HARMONIC_MEASUREMENTS[call.func]
    if not calls.has_transient:
        raise InputError(f"{call.func}() measures a waveform over whole periods, and this file has no "
                         "'simulate periodic' or 'simulate transient' line", call.span,
                         hint="add 'simulate periodic period-of=Q1' (the switch whose pwm() sets the period)")
    ref = calls._waveform_ref(call, sub)
    want = 1 + spec.order
    if len(call.args) != want:
        raise InputError(_usage(call.func), call.span)
    order = 1
    if spec.order:
        expr = call.args[1]
        q = sub(expr)
        if q.dim != DIMENSIONLESS or (not math.isnan(q.value) and (q.value != int(q.value) or q.value < 0)):
            raise InputError(f"{call.func}(): the harmonic number N is a whole number (1 the fundamental, "
                             f"0 the DC value), got {describe(q.dim) if q.dim != DIMENSIONLESS else q.value}",
                             expr.span)
        order = 0 if math.isnan(q.value) else int(q.value)
    fundamental, top = _options(call, sub)
    period = 1.0 / fundamental if fundamental is not None else None
    if period is None and not _last_is_periodic(calls):
        raise InputError(f"{call.func}() needs the period: give fundamental= (like fundamental=50 Hz), or "
                         "measure a 'simulate periodic' result (its period is known)", call.span)
    hint = _HINTS.get(spec.result, _hint(ref))
    dim = ref.dimension if spec.result == "same" else DIMENSIONLESS
    if calls.dry:
        return Quantity(math.nan, dim), hint
    time, values = calls._samples(ref, call)
    if period is None:
        period = period_of_result(calls.waves)
        if period is None:
            raise InputError(f"{call.func}() needs fundamental= on a transient run", call.span)
    highest = max(order, top if call.func == "distortion" else 1, 1)
    try:
        s = spectrum(time, values, period, highest)
    except MeasurementError as exc:
        raise MeasurementError(f"{call.func}(): {exc.message}", call.span) from None
    if call.func == "harmonic_peak":
        value = float(s.amplitude[order])
    elif call.func == "harmonic_rms":
        value = s.harmonic_rms(order)
    elif call.func == "harmonic_phase":
        value = float(s.phase[order])
    elif call.func == "distortion":
        value = s.thd(top)
    else:
        value = s.crest
    if math.isnan(value):
        from .measure import _NoValue

        raise _NoValue(f"{call.func}(): {ref.label} has no fundamental (or no RMS) over the window")
    return Quantity(value, dim), hint


def _last_is_periodic(calls: "_Calls") -> bool:
    runs = [a for a in calls.circuit.analyses if a.analysis in ("transient", "periodic")]
    return bool(runs) and runs[-1].analysis == "periodic"


def _options(call: nl.Call, sub: Callable[[nl.Expr], Quantity]) -> tuple[float | None, int]:
    allowed = ("fundamental", "harmonics") if call.func == "distortion" else ("fundamental",)
    fundamental, top = None, THD_HARMONICS
    seen: set[str] = set()
    for key, expr, key_span in call.named:
        if key not in allowed:
            raise UnknownNameError(f"{call.func}() has no argument {key}=", key_span, hint=_usage(call.func))
        if key in seen:
            raise InputError(f"{key}= is given twice", key_span)
        seen.add(key)
        q = sub(expr)
        if key == "fundamental":
            if q.dim != HERTZ:
                raise UnitsError(f"fundamental= needs hertz (Hz), got {describe(q.dim)}", expr.span)
            if not math.isnan(q.value) and not q.value > 0:
                raise InputError("fundamental= must be positive", expr.span)
            fundamental = None if math.isnan(q.value) else q.value
        else:
            if q.dim != DIMENSIONLESS or (not math.isnan(q.value) and (q.value != int(q.value) or q.value < 2)):
                raise InputError("harmonics= is the highest harmonic counted, a whole number of at least 2",
                                 expr.span)
            top = THD_HARMONICS if math.isnan(q.value) else int(q.value)
    return fundamental, top
