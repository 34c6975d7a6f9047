"""Measurements and checks: the ``measure`` and ``check`` lines of a circuit file.

::

    measure t90  = crossing(w(rotor), 0.9 * final(w(rotor)))
    check   t90 < 300 ms
    check   max(v(sw)) < 60 V
    check   final(v(out)) within 2 % of 5 V

A measurement call (``max mean rms crossing ...``, see :data:`MEASUREMENTS`)
takes a circuit quantity (``v(x)``, ``i(E)``, ``p(E)``, ``w(shaft)``...) as
its first argument and reduces that waveform to one
:class:`~mna.units.Quantity` with the kernels of :mod:`mna.waveform_math`
(trapezoidal rule on the solver's own time points, signals linear between
samples). Around the calls, expressions follow the parameter rules of
:mod:`mna.expressions` (this module plugs in as its ``call_handler``): units
propagate and are checked, and names are ``let`` parameters and the
measurements defined above.

Three stages, one per public function:

- :func:`validate` runs when a file is elaborated, before any simulation:
  every ``measure``/``check`` expression is evaluated with NaN standing for
  each measurement, so unknown names and signals, unit mismatches and
  windows outside the run are input errors with line and column.
- :func:`run_and_check` runs the file's analyses, keeping the signals the
  measurements need besides the ``record`` list, and
- :func:`evaluate_checks` evaluates measurements and checks on the results
  of the last transient run (or, for a file with ``simulate dc`` and no
  transient, plain quantities at the operating point).

A waveform that never does what a measurement looks for (a level never
crossed, a response with no step) gives a measurement with no value; a
check on it fails rather than passes. Problems of the request itself
(window outside the run, bad band) are input errors.
"""

from __future__ import annotations

import difflib
import math
from dataclasses import asdict, dataclass, field
from typing import TYPE_CHECKING, Any, Callable, Iterator, Mapping, Sequence

import numpy as np

from . import netlist as nl
from . import waveform_math as wm
from .errors import InputError, MeasurementError, SimulationError, UnitsError, UnknownNameError
from .expressions import CONSTANTS, FUNCTIONS, Samples, children, evaluate, is_quantity_call, walk
from .units import (
    CELSIUS,
    CELSIUS_ZERO,
    DIMENSIONLESS,
    JOULE,
    KELVIN,
    SECOND,
    Dimension,
    Quantity,
    describe,
    format_si,
    unit_symbol,
)
from .measure_frequency import FREQUENCY_MEASUREMENTS, NoFrequencyValue, frequency_call
from .measure_harmonics import HARMONIC_MEASUREMENTS, harmonic_call
from .values import RPM, SignalRef, stored_per_si

if TYPE_CHECKING:  # pragma: no cover
    from .circuit import Circuit
    from .results import OperatingPoint, Waveforms

__all__ = [
    "MEASUREMENTS",
    "CheckReport",
    "CheckResult",
    "MeasureResult",
    "RunOutcome",
    "evaluate_checks",
    "recording",
    "run_and_check",
    "signals_used",
    "validate",
]


# --------------------------------------------------------------------------
# The measurement functions.


@dataclass(frozen=True)
class _Spec:
    """How a measurement call is written and what it returns."""

    extra: tuple[str, ...] = ()  # positional arguments after the waveform
    windowed: bool = True  # takes from= and to=
    result: str = "same"  # "same" | "times-seconds" | "seconds" | "fraction" | "energy"
    doc: str = ""


#: Measurement name -> its form. Each takes a circuit quantity first
#: (``energy`` an element name); windowed ones take ``from=`` and ``to=``.
MEASUREMENTS: dict[str, _Spec] = {
    "max": _Spec(doc="largest value"),
    "min": _Spec(doc="smallest value"),
    "peak": _Spec(doc="largest magnitude"),
    "mean": _Spec(doc="time average (mean(p(E)) is the average power)"),
    "rms": _Spec(doc="root mean square"),
    "integral": _Spec(result="times-seconds", doc="integral over time"),
    "energy": _Spec(result="energy", doc="energy(E): integral of p(E), in J"),
    "loss": _Spec(result="rate", doc="loss(E): average loss power of a device over the window, in W"),
    "final": _Spec(doc="value at the end of the window"),
    "at": _Spec(extra=("time",), windowed=False, doc="at(x, T): value at time T"),
    "overshoot": _Spec(result="fraction", doc="percent overshoot of a step response"),
    "settling": _Spec(extra=("band",), result="seconds",
                      doc="settling(x, BAND): time after which x stays within BAND of its final value"),
    "crossing": _Spec(extra=("level",), result="seconds",
                      doc="crossing(x, LEVEL): first time x reaches LEVEL"),
    "time_of_max": _Spec(result="seconds", doc="time_of_max(x): when x is largest (the first sample holding it)"),
    "time_of_min": _Spec(result="seconds", doc="time_of_min(x): when x is smallest (the first sample holding it)"),
}

_DIRECTIONS = ("rising", "falling", "either")
# A window end this far outside the run (relative to its length) is rounding
# (the same allowance as mna.waveform_math).
_END_TOLERANCE = 1e-9


class _NoValue(Exception):
    """The waveform never does what the measurement looks for (no crossing, no step)."""


def _is_signal(expr: nl.Expr) -> bool:
    """True for a circuit quantity such as ``v(out)``, ``v(a -> b)``, ``i(L1)``."""
    return is_quantity_call(expr) and expr.func not in MEASUREMENTS


def _is_measurement(call: nl.Call) -> bool:
    """True for a measurement call; ``max(a, b)`` of parameters stays a plain function."""
    if call.func not in MEASUREMENTS:
        return False
    if call.func in FUNCTIONS:  # max, min
        return bool(call.args) and (_is_signal(call.args[0]) or _has_signal(call.args[0]))
    return True


def _walk(expr: nl.Expr) -> Iterator[tuple[str, Any]]:
    """The names, signals and energy calls an expression uses.

    Yields ``("name", Name)`` for a parameter or measurement name,
    ``("signal", Call)`` for a circuit quantity and ``("energy", Call)``
    for ``energy(E, ...)``.
    """
    for node in walk(expr, _enter):
        if isinstance(node, nl.Name):
            yield "name", node
        elif _is_signal(node):
            yield "signal", node
        elif _is_energy(node):
            yield "energy", node


#: Measurements that take an element name first, and the quantity of that element they read.
ELEMENT_MEASUREMENTS = {"energy": "p", "loss": "eloss"}


def _is_energy(expr: nl.Expr) -> bool:
    return (isinstance(expr, nl.Call) and expr.func in ELEMENT_MEASUREMENTS and bool(expr.args)
            and isinstance(expr.args[0], nl.Name))


def _enter(expr: nl.Expr) -> tuple[nl.Expr, ...]:
    """What :func:`_walk` looks inside: not a signal's names, an energy call's
    element name, nor the word of ``direction=``."""
    if not isinstance(expr, nl.Call):
        return children(expr)
    if _is_signal(expr):
        return ()
    args = expr.args[1:] if _is_energy(expr) else expr.args
    return (*args, *(value for key, value, _ in expr.named if key != "direction"))


def _statements(circuit: "Circuit") -> list[nl.MeasureStatement | nl.CheckStatement]:
    """Measure and check lines in file order."""
    return sorted([*circuit.measures, *circuit.checks], key=lambda st: (st.span.line, st.span.column))


def _expressions(st: nl.MeasureStatement | nl.CheckStatement) -> list[nl.Expr]:
    if isinstance(st, nl.MeasureStatement):
        return [st.value]
    return [e for e in (st.left, st.right, st.tolerance) if e is not None]


def _energy_signal(call: nl.Call) -> nl.Call:
    """``energy(R1, ...)`` -> the call ``p(R1)`` it integrates; ``loss(Q1)`` -> ``eloss(Q1)``."""
    name = call.args[0]
    return nl.Call(ELEMENT_MEASUREMENTS[call.func], (name,), (), name.span)


def signals_used(circuit: "Circuit") -> list["SignalRef"]:
    """The circuit quantities the file's measure and check lines read (no repeats)."""
    found: dict[str, "SignalRef"] = {}
    for st in _statements(circuit):
        for expr in _expressions(st):
            for kind, node in _walk(expr):
                if kind == "name":
                    continue
                ref = circuit.signal_ref(node if kind == "signal" else _energy_signal(node))
                found.setdefault(ref.label, ref)
    return list(found.values())


def recording(circuit: "Circuit") -> list["SignalRef"]:
    """What a transient run must keep: the ``record`` list (or every default
    signal without one) plus the signals measurements need."""
    from .analyses.common import default_signals

    from .losses import loss_signals

    refs = {r.label: r for r in (circuit.records or default_signals(circuit))}
    for ref in [*signals_used(circuit), *loss_signals(circuit)]:
        if not ref.small_signal_only:  # z(a -> b) and ratios: for simulate frequency only
            refs.setdefault(ref.label, ref)
    return list(refs.values())


def frequency_recording(circuit: "Circuit") -> list["SignalRef"]:
    """What a frequency analysis keeps: the file's records (or the default set)
    plus the quantities the measurements read."""
    from .analyses.common import default_signals

    from .analyses.frequency import stimuli

    # Without record lines: every node voltage and current when a source has a
    # stimulus; with none, only the impedances the measurements read.
    default = default_signals(circuit) if stimuli(circuit) else []
    refs = {r.label: r for r in (circuit.frequency_records or default)}
    for st in _statements(circuit):
        for expr in _expressions(st):
            for node in walk(expr):
                if isinstance(node, nl.Call) and node.func in FREQUENCY_MEASUREMENTS and node.args:
                    first = node.args[0]
                    if isinstance(first, nl.Call) or (isinstance(first, nl.BinaryOp) and first.op == "/"):
                        ref = circuit.signal_ref(first)
                        refs.setdefault(ref.label, ref)
    return list(refs.values())


# --------------------------------------------------------------------------
# Evaluating calls: the hook given to mna.expressions.evaluate.


class _Calls:
    """Evaluates measurement calls and plain circuit quantities on results.

    With ``dry=True`` it validates instead (no results needed): every
    measurement is NaN of the right dimension, so units and names are
    checked, and window ends known before the run are checked against
    ``until``, the end of the last transient run (s).
    """

    def __init__(self, circuit: "Circuit", scope: Mapping[str, Quantity], waves: "Waveforms | None" = None,
                 op: "OperatingPoint | None" = None, *, dry: bool = False):
        self.circuit = circuit
        self.scope = scope  # parameters and the measurements defined so far
        self.waves = waves
        self.op = op
        self.dry = dry
        transients = [a for a in circuit.analyses if a.analysis in ("transient", "periodic")]
        self.has_transient = bool(transients)
        self.has_dc = any(a.analysis == "dc" for a in circuit.analyses)
        self.until = _run_end(transients[-1]) if transients else None
        self.hints: dict[int, str] = {}  # id(call) -> display unit ("rpm", "%"...)
        self.response = None  # the last frequency analysis's FrequencyResponse

    # -- the hook -------------------------------------------------------------
    def __call__(self, call: nl.Call, sub: Callable[[nl.Expr], Quantity]) -> Quantity | None:
        if call.func in FREQUENCY_MEASUREMENTS:
            return self._frequency_measurement(call, sub)
        if call.func in HARMONIC_MEASUREMENTS:
            q, self.hints[id(call)] = harmonic_call(self, call, sub)
            return q
        if _is_measurement(call):
            return self._measurement(call, sub)
        if call.func in FUNCTIONS:
            return None
        if _is_signal(call):
            return self._plain_signal(call)
        close = difflib.get_close_matches(
            call.func, [*MEASUREMENTS, *FREQUENCY_MEASUREMENTS, *HARMONIC_MEASUREMENTS, *FUNCTIONS], n=1)
        raise UnknownNameError(
            f"unknown function {call.func}()", call.span,
            hint=f"did you mean {close[0]}()?" if close else
            "measurements: " + " ".join(MEASUREMENTS) + "; of harmonics: " + " ".join(HARMONIC_MEASUREMENTS)
            + "; of a frequency response: "
            + " ".join(FREQUENCY_MEASUREMENTS) + "; functions: " + " ".join(FUNCTIONS),
        )

    def _frequency_measurement(self, call: nl.Call, sub: Callable[[nl.Expr], Quantity]) -> Quantity:
        """resonance(), largest(), phase_margin()... on the last frequency response
        (:mod:`mna.measure_frequency`)."""
        try:
            q, hint = frequency_call(self.circuit, call, sub, self.response, self.dry)
        except NoFrequencyValue as exc:
            raise _NoValue(f"{call.func}(): {exc}") from None
        except MeasurementError as exc:
            raise MeasurementError(exc.message if exc.span else f"{call.func}(): {exc.message}",
                                   exc.span or call.span, hint=exc.hint) from None
        self.hints[id(call)] = hint
        return q

    # -- plain quantities (operating point) --------------------------------------
    def _plain_signal(self, call: nl.Call) -> Quantity:
        ref = self.circuit.signal_ref(call)
        if self.has_transient:
            raise InputError(
                f"{ref.label} changes over the transient run; say which value to check",
                call.span, hint=f"measure it: final({ref.label}), max({ref.label}) or at({ref.label}, 1 ms)",
            )
        if not self.has_dc:
            frequency = any(a.analysis == "frequency" for a in self.circuit.analyses)
            raise InputError(f"{ref.label} needs a 'simulate dc' or 'simulate transient' line", call.span,
                             hint=f"of a frequency response, measure it: magnitude({ref.label}, 1 kHz), "
                                  f"largest({ref.label})" if frequency else None)
        self.hints[id(call)] = _hint(ref)
        if self.dry:
            return Quantity(math.nan, ref.dimension)
        if self.op is None or ref.label not in self.op:
            raise InputError(f"the operating point holds no {ref.label}", call.span)
        return Quantity(_to_si(ref, np.asarray([self.op[ref.label]]))[0], ref.dimension)

    # -- measurements -----------------------------------------------------------
    def _measurement(self, call: nl.Call, sub: Callable[[nl.Expr], Quantity]) -> Quantity:
        spec = MEASUREMENTS[call.func]
        if not self.has_transient:
            raise InputError(
                f"{call.func}() measures a waveform over time, and this file has no "
                "'simulate transient' line", call.span,
                hint="add one, e.g. 'simulate transient until=20 ms'; with 'simulate dc' alone, "
                "check plain quantities such as v(out) > 4.5 V",
            )
        ref = self._waveform_ref(call, sub)
        extras = self._extras(call, spec, ref, sub)
        start, stop, direction = self._options(call, spec, sub)
        result_dim = _result_dimension(spec, ref)
        if call.func in ("max", "min", "peak", "mean", "rms", "final", "at"):
            self.hints[id(call)] = _hint(ref)
        elif call.func == "overshoot":
            self.hints[id(call)] = "%"
        if self.dry:
            return Quantity(math.nan, result_dim)
        time, values = self._samples(ref, call)
        try:
            value = _compute(call.func, time, values, extras, start, stop, direction)
        except MeasurementError as exc:
            raise MeasurementError(f"{call.func}(): {exc.message}", call.span) from None
        except _NoValue:
            raise _NoValue(self._why_no_value(call, ref, time, values, extras, start, stop, direction)) from None
        return Quantity(value, result_dim)

    def _why_no_value(self, call: nl.Call, ref: "SignalRef", time: np.ndarray, values: np.ndarray,
                      extras: dict[str, float], start: float | None, stop: float | None, direction: str) -> str:
        """The reason, in the signal's unit, that a measurement has no value."""
        t, v = wm.window(time, values, start=start, stop=stop)
        hint = _hint(ref)

        def show(x: float) -> str:
            return _show(x, ref.dimension, hint)

        where = f"between {_seconds(t[0])} and {_seconds(t[-1])}"
        if call.func == "crossing":
            how = "" if direction == "either" else f" ({direction})"
            return (f"{ref.label} never reaches {show(extras['level'])}{how} {where}; "
                    f"it stays between {show(float(v.min()))} and {show(float(v.max()))}")
        return (f"{ref.label} ends where it starts ({show(float(v[0]))}) {where}, so it has no step "
                f"for {call.func}() to measure; put from= before the step and to= after it settles")

    def _waveform_ref(self, call: nl.Call, sub: Callable[[nl.Expr], Quantity]) -> "SignalRef | _Derived":
        first = call.args[0] if call.args else None
        if first is not None and not _is_signal(first) and call.func not in ELEMENT_MEASUREMENTS \
                and _has_signal(first):
            return _Derived(first, self)
        if call.func in ELEMENT_MEASUREMENTS:
            if not isinstance(first, nl.Name):
                raise InputError(f"{call.func}() takes an element name first, like {call.func}(Q1, from=2 ms)",
                                 first.span if first is not None else call.span)
            element = self.circuit.elements.get(first.name)
            needs = ELEMENT_MEASUREMENTS[call.func]
            if element is not None and needs not in element.outputs:
                what = (f"a power p({first.name})" if needs == "p"
                        else "losses (a mosfet, igbt or diode)")
                raise InputError(f"{call.func}({first.name}) needs an element with {what}; "
                                 f"{element.keyword} {first.name} has none", first.span)
            return self.circuit.signal_ref(_energy_signal(call))
        if first is None or not _is_signal(first):
            raise InputError(
                f"{call.func}() measures a waveform: its first argument is a circuit quantity such as "
                "v(node), v(a -> b), i(ELEMENT), p(ELEMENT) or w(shaft), or an expression of them "
                "such as i(F1)^2",
                first.span if first is not None else call.span,
            )
        return self.circuit.signal_ref(first)

    def _extras(self, call: nl.Call, spec: _Spec, ref: "SignalRef",
                sub: Callable[[nl.Expr], Quantity]) -> dict[str, float]:
        given = call.args[1:]
        if len(given) != len(spec.extra):
            raise InputError(_usage(call.func, spec), call.span)
        out: dict[str, float] = {}
        for role, expr in zip(spec.extra, given):
            q = sub(expr)
            if role == "time":
                out["time"] = self._moment(q, expr, "the time of at()")
            elif role == "level":
                if q.dim != ref.dimension:
                    raise UnitsError(f"crossing() level needs {describe(ref.dimension)} like {ref.label}, "
                                     f"got {describe(q.dim)}", expr.span)
                out["level"] = q.value
            elif role == "band":
                if q.dim == DIMENSIONLESS:
                    out["fraction"] = q.value
                elif q.dim == ref.dimension:
                    out["band"] = q.value
                else:
                    raise UnitsError(
                        f"settling() band is a percentage of the step (2 %) or a width in "
                        f"{describe(ref.dimension)}; got {describe(q.dim)}", expr.span)
                width = out.get("fraction", out.get("band"))
                if not math.isnan(width) and not width > 0:
                    raise InputError(f"settling() band must be positive, got {_literal_text(expr) or q.value}",
                                     expr.span)
        return out

    def _options(self, call: nl.Call, spec: _Spec,
                 sub: Callable[[nl.Expr], Quantity]) -> tuple[float | None, float | None, str]:
        allowed = (("from", "to") if spec.windowed else ()) + (("direction",) if call.func == "crossing" else ())
        window: dict[str, float] = {}
        direction = "either"
        seen: set[str] = set()
        for key, expr, key_span in call.named:
            if key not in allowed:
                raise UnknownNameError(f"{call.func}() has no argument {key}=", key_span,
                                       hint=_usage(call.func, spec))
            if key in seen:
                raise InputError(f"{key}= is given twice", key_span)
            seen.add(key)
            if key == "direction":
                word = expr.name if isinstance(expr, nl.Name) else getattr(expr, "word", None)
                if word not in _DIRECTIONS:
                    raise InputError("direction= is rising, falling or either", expr.span)
                direction = word
                continue
            window[key] = self._moment(sub(expr), expr, f"{key}=")
        start, stop = window.get("from"), window.get("to")
        if (start is not None and stop is not None and not math.isnan(start + stop) and start >= stop):
            raise MeasurementError(
                f"{call.func}() window from={_seconds(start)} to={_seconds(stop)} is empty: "
                "from= must come before to=", call.span)
        return start, stop, direction

    def _moment(self, q: Quantity, expr: nl.Expr, what: str) -> float:
        """A time (s) checked for its unit and, when known, against the run."""
        if q.dim != SECOND:
            raise UnitsError(f"{what} needs seconds (s), got {describe(q.dim)}", expr.span)
        t = q.value
        if self.dry and self.until is not None and not math.isnan(t):
            slack = _END_TOLERANCE * self.until
            if not -slack <= t <= self.until + slack:
                raise MeasurementError(
                    f"{what} {_seconds(t)} lies outside the run, which covers 0 s to "
                    f"{_seconds(self.until)} (the last 'simulate transient' line)", expr.span)
        return t

    def _samples(self, ref: "SignalRef", call: nl.Call) -> tuple[np.ndarray, np.ndarray]:
        if self.waves is None:
            raise InputError(f"{call.func}() needs the results of a transient run", call.span)
        if isinstance(ref, _Derived):
            return self.waves.time, ref.values(self.waves)
        if ref.label not in self.waves:
            raise InputError(
                f"the transient results hold no {ref.label}", call.span,
                hint="run the file with mna.measure.run_and_check, which records what checks need")
        return self.waves.time, _to_si(ref, self.waves[ref.label])


def _run_end(request) -> float | None:
    """The end time (s) of a transient or periodic request's results, when known before the run."""
    settings = request.settings
    if request.analysis == "periodic":
        period = settings.get("period")
        return None if period is None else float(period) * float(settings.get("periods") or 1)
    return float(settings["until"])


def _has_signal(expr: nl.Expr) -> bool:
    return any(kind == "signal" for kind, _ in _walk(expr))


class _Derived:
    """A waveform computed sample by sample from circuit quantities:
    ``i(F1)^2`` (for the Joule integral I^2*t), ``v(a) * i(L1)``, ``abs(i(L1))``.

    It is evaluated by :func:`mna.expressions.evaluate` with circuit
    quantities as :class:`~mna.expressions.Samples`, so arithmetic follows
    the parameter rules (units propagate and are checked); parameters and
    earlier measures are constants; a measurement call inside is not
    allowed (measure it first, then use its name).
    """

    quantity = ""  # no special display unit

    def __init__(self, expr: nl.Expr, calls: "_Calls"):
        self.expr = expr
        self.calls = calls
        self.label = _expr_text(expr)
        # Evaluating on one NaN sample gives the dimension and checks the units.
        self.dimension = self._evaluate(lambda ref: np.full(1, math.nan)).dim

    def values(self, waves: "Waveforms") -> np.ndarray:
        v = self._evaluate(lambda ref: _to_si(ref, waves[ref.label]))
        return np.broadcast_to(np.asarray(v.value, dtype=float), waves.time.shape)

    def _evaluate(self, samples: Callable[[SignalRef], np.ndarray]) -> Quantity | Samples:
        def handler(call: nl.Call, sub: Callable[[nl.Expr], Any]) -> Any:
            if _is_signal(call):
                ref = self.calls.circuit.signal_ref(call)
                return Samples(samples(ref), ref.dimension)
            if _is_measurement(call):
                raise InputError(f"{call.func}() inside a waveform expression: measure it on its own "
                                 "line first, then use its name", call.span)
            return self.calls(call, sub)

        return evaluate(self.expr, self.calls.scope, handler)


def _expr_text(expr: nl.Expr) -> str:
    """An expression written back as text (labels of derived waveforms)."""
    if isinstance(expr, nl.Number):
        return expr.text
    if isinstance(expr, nl.Name):
        return expr.name
    if isinstance(expr, nl.Call):
        args = [_expr_text(a) for a in expr.args] + [f"{k}={_expr_text(v)}" for k, v, _ in expr.named]
        return f"{expr.func}({', '.join(args)})"
    if isinstance(expr, nl.BinaryOp):
        sep = "^" if expr.op == "^" else f" {expr.op} "
        return f"{_expr_text(expr.left)}{sep}{_expr_text(expr.right)}"
    if isinstance(expr, nl.Negate):
        return f"-{_expr_text(expr.operand)}"
    return "?"


def _usage(func: str, spec: _Spec) -> str:
    parts = [f"{func}(E" if func in ELEMENT_MEASUREMENTS else f"{func}(x"]
    parts += [f", {role.upper()}" for role in spec.extra]
    if spec.windowed:
        parts.append(", from=T1, to=T2")
    if func == "crossing":
        parts.append(", direction=rising")
    optional = {True: " (from=, to= and direction= are optional)", False: " (from= and to= are optional)"}
    return f"write {''.join(parts)})" + (optional[func == "crossing"] if spec.windowed else "")


def _hint(ref: "SignalRef | _Derived") -> str:
    """The display unit for values of a signal's own dimension ("" for the SI symbol)."""
    shown = ref.unit if isinstance(ref, SignalRef) else ""
    return shown if shown in ("rpm", "rad/s", "N*m") else ""


def _to_si(ref: "SignalRef", values: np.ndarray) -> np.ndarray:
    """Signal samples in SI base units (``rpm(x)`` is stored in rpm)."""
    factor = stored_per_si(ref.quantity)
    return values if factor == 1.0 else values / factor


def _result_dimension(spec: _Spec, ref: "SignalRef") -> Dimension:
    return {
        "same": ref.dimension,
        "times-seconds": ref.dimension * SECOND,
        "energy": JOULE,
        "rate": ref.dimension / SECOND,
        "seconds": SECOND,
        "fraction": DIMENSIONLESS,
    }[spec.result]


def _compute(func: str, time: np.ndarray, values: np.ndarray, extras: dict[str, float],
             start: float | None, stop: float | None, direction: str) -> float:
    """One measurement on SI samples; raises _NoValue when the waveform never does the thing."""
    simple = {"max": wm.maximum, "min": wm.minimum, "peak": wm.peak, "mean": wm.mean, "rms": wm.rms,
              "integral": wm.integral, "energy": wm.integral, "final": wm.final}
    if func in simple:
        return simple[func](time, values, start=start, stop=stop)
    if func == "at":
        return wm.value_at(time, values, extras["time"])
    if func == "loss":  # a cumulative energy: its rise over the window, per second
        t, v = wm.window(time, values, start=start, stop=stop)
        if not t[-1] > t[0]:
            raise _NoValue("the window has no length")
        return float((v[-1] - v[0]) / (t[-1] - t[0]))
    # The window is cut first, so a MeasurementError after that is about the
    # waveform (never crosses, no step), not about the request.
    t, v = wm.window(time, values, start=start, stop=stop)
    if func in ("time_of_max", "time_of_min"):
        return float(t[int(np.argmax(v) if func == "time_of_max" else np.argmin(v))])
    try:
        if func == "overshoot":
            return wm.overshoot(t, v) / 100.0
        if func == "crossing":
            return wm.crossing(t, v, extras["level"], direction=direction)
        if "fraction" in extras:
            return wm.settling_fraction(t, v, extras["fraction"])
        return wm.settling(t, v, extras["band"])
    except MeasurementError as exc:
        raise _NoValue(exc.message) from None


def _seconds(t: float) -> str:
    return format_si(t, "s")


def _literal_text(expr: nl.Expr | None) -> str | None:
    """A literal quantity as written (``60 V``, ``-5 V``), or None for anything else."""
    if isinstance(expr, nl.Number):
        return expr.text
    if isinstance(expr, nl.Negate) and isinstance(expr.operand, nl.Number):
        return "-" + expr.operand.text
    return None


# --------------------------------------------------------------------------
# Names: parameters and the measurements above.


def _check_names(expr: nl.Expr, scope: Mapping[str, Quantity], measures: Mapping[str, nl.MeasureStatement]) -> None:
    """Unknown names, with a hint when the name is a measurement defined further down."""
    for kind, node in _walk(expr):
        if kind != "name" or node.name in scope or node.name in CONSTANTS:
            continue
        later = measures.get(node.name)
        if later is not None and later.span.line >= node.span.line:
            raise UnknownNameError(
                f"measurement {node.name!r} is used before it is defined", node.span,
                hint=f"it is defined at line {later.span.line}; move that 'measure' line above this one")
        close = difflib.get_close_matches(node.name, [*scope, *CONSTANTS], n=1)
        raise UnknownNameError(
            f"unknown name {node.name!r}", node.span,
            hint=f"did you mean {close[0]!r}?" if close else
            "names here are parameters (let) and measurements (measure) defined above")


def _define(st: nl.MeasureStatement, circuit: "Circuit", defined: Mapping[str, int]) -> None:
    if st.name in circuit.params:
        raise InputError(f"measure {st.name}: the name is already a parameter ('let {st.name} = ...')", st.span)
    if st.name in CONSTANTS:
        raise InputError(f"measure {st.name}: {st.name!r} is a built-in constant", st.span)
    if st.name in defined:
        raise InputError(f"measurement {st.name!r} is already defined at line {defined[st.name]}", st.span)


# --------------------------------------------------------------------------
# Validation at load time.


def validate(circuit: "Circuit") -> None:
    """Check every measure and check line before any simulation runs.

    Called at the end of :func:`mna.circuit.elaborate`. Raises
    :class:`~mna.errors.UnknownNameError` (unknown name or signal),
    :class:`~mna.errors.UnitsError` (``check max(v(a)) < 2 A``),
    :class:`~mna.errors.MeasurementError` (a constant window outside the
    last transient run) or another :class:`~mna.errors.InputError`.
    """
    if not circuit.measures and not circuit.checks:
        return
    scope: dict[str, Quantity] = dict(circuit.params)
    calls = _Calls(circuit, scope, dry=True)
    measures = {m.name: m for m in circuit.measures}
    defined: dict[str, int] = {}
    for st in _statements(circuit):
        for expr in _expressions(st):
            _check_names(expr, scope, measures)
        if isinstance(st, nl.MeasureStatement):
            _define(st, circuit, defined)
            scope[st.name] = evaluate(st.value, scope, calls)
            defined[st.name] = st.span.line
        else:
            _judge(st, *_sides(st, scope, calls))


def _sides(st: nl.CheckStatement, scope: Mapping[str, Quantity],
           calls: _Calls) -> tuple[Quantity, Quantity, Quantity | None]:
    left = evaluate(st.left, scope, calls)
    right = evaluate(st.right, scope, calls)
    tolerance = evaluate(st.tolerance, scope, calls) if st.tolerance is not None else None
    return left, right, tolerance


def _judge(st: nl.CheckStatement, left: Quantity, right: Quantity,
           tolerance: Quantity | None) -> tuple[bool, float, float | None]:
    """(passed, margin, band) of a check; the margin (SI) is > 0 on the passing side.

    Checks the units of both sides (and of the tolerance); with NaN values
    (validation) only the units matter.
    """
    if left.dim != right.dim:
        raise UnitsError(f"check compares {describe(left.dim)} with {describe(right.dim)}", st.span,
                         hint="both sides of a check need the same unit")
    if st.op != "within":
        margin = right.value - left.value if st.op in ("<", "<=") else left.value - right.value
        return margin > 0 or (margin == 0 and st.op.endswith("=")), margin, None
    assert tolerance is not None
    if tolerance.dim == DIMENSIONLESS:
        band = abs(tolerance.value * right.value)
        if right.value == 0:
            raise InputError(
                f"a tolerance of {_literal_text(st.tolerance) or 'a fraction'} of 0 is no band at all", st.tolerance.span,
                hint=f"give the tolerance in {describe(right.dim)}, like 'within 10 mV of 0 V'")
    elif tolerance.dim == left.dim:
        band = tolerance.value
    else:
        raise UnitsError(
            f"a tolerance is a percentage (2 %) or a value in {describe(left.dim)}; "
            f"got {describe(tolerance.dim)}", st.tolerance.span)
    if tolerance.value < 0:
        raise InputError("a tolerance cannot be negative", st.tolerance.span)
    deviation = abs(left.value - right.value)
    return deviation <= band, band - deviation, band


# --------------------------------------------------------------------------
# Results.


@dataclass
class MeasureResult:
    """One ``measure`` line after a run. ``value`` is SI (None without one)."""

    name: str
    text: str
    line: int
    status: str  # "ok", "none" (the waveform never did it) or "error"
    value: float | None = None
    unit: str = ""  # SI unit symbol of value
    shown: str = ""  # the value as printed: "2.303 ms"
    message: str = ""


@dataclass
class CheckResult:
    """One ``check`` line after a run; values in SI, ``shown_*`` as printed."""

    text: str
    line: int
    op: str
    status: str  # "pass", "fail" or "error"
    value: float | None = None
    limit: float | None = None  # the right side (the target of "within")
    band: float | None = None  # "within": the allowed deviation, SI
    margin: float | None = None  # > 0 on the passing side
    unit: str = ""
    shown_value: str = ""
    shown_limit: str = ""  # "< 60 V", "5 V ± 2 %"
    shown_margin: str = ""
    message: str = ""


@dataclass
class CheckReport:
    """All measurements and checks of one file, in file order."""

    measurements: list[MeasureResult] = field(default_factory=list)
    checks: list[CheckResult] = field(default_factory=list)

    def count(self, status: str) -> int:
        """How many checks have ``status`` ("pass", "fail", "error")."""
        return sum(c.status == status for c in self.checks)

    @property
    def exit_code(self) -> int:
        """2 if a measurement or check could not be evaluated, else 1 if a check failed, else 0."""
        if self.count("error") or any(m.status == "error" for m in self.measurements):
            return 2
        return 1 if self.count("fail") else 0

    def to_json(self) -> dict[str, list[dict[str, Any]]]:
        return {"measurements": [asdict(m) for m in self.measurements],
                "checks": [asdict(c) for c in self.checks]}


# --------------------------------------------------------------------------
# Evaluation after a run.


def evaluate_checks(circuit: "Circuit", results: Sequence[Any]) -> CheckReport:
    """Evaluate the file's measure and check lines on ``results``.

    ``results`` are the analyses' results in file order; measurements use
    the last :class:`~mna.results.Waveforms` (the last ``simulate
    transient``), plain quantities the last operating point. A line that
    cannot be evaluated is reported with status ``"error"`` and its message;
    the others go on.
    """
    from .results import OperatingPoint, Waveforms

    waves = next((r for r in reversed(results) if isinstance(r, Waveforms)), None)
    op = next((r for r in reversed(results) if isinstance(r, OperatingPoint)), None)
    if waves is not None and waves.status != "ok":
        raise SimulationError(f"the transient run failed ({waves.message}); checks need a whole run")
    scope: dict[str, Quantity] = dict(circuit.params)
    calls = _Calls(circuit, scope, waves, op)
    calls.response = next((r for r in reversed(results) if getattr(r, "analysis", "") == "frequency"), None)
    hints: dict[str, str] = {}  # measurement name -> display unit
    missing: dict[str, str] = {}  # measurement name -> why it has no value
    report = CheckReport()
    for st in _statements(circuit):
        blocked = _blocked_by(st, missing)
        if isinstance(st, nl.MeasureStatement):
            result, q = _measure_one(st, scope, calls, blocked, hints)
            if q is not None:
                scope[st.name] = q
            else:
                missing[st.name] = result.message
            report.measurements.append(result)
        else:
            report.checks.append(_check_one(st, scope, calls, blocked, hints))
    return report


def _blocked_by(st, missing: Mapping[str, str]) -> str | None:
    """Why a line cannot be evaluated: it uses a measurement that has no value."""
    for expr in _expressions(st):
        for kind, node in _walk(expr):
            if kind == "name" and node.name in missing:
                return f"{node.name} has no value ({missing[node.name]})"
    return None


def _measure_one(st: nl.MeasureStatement, scope: Mapping[str, Quantity], calls: _Calls,
                 blocked: str | None, hints: dict[str, str]) -> tuple[MeasureResult, Quantity | None]:
    result = MeasureResult(st.name, st.text, st.span.line, "none", message=blocked or "")
    if blocked:
        return result, None
    try:
        q = evaluate(st.value, scope, calls)
    except _NoValue as exc:
        result.message = str(exc)
        return result, None
    except InputError as exc:
        result.status, result.message = "error", str(exc)
        return result, None
    hints[st.name] = _expr_hint(st.value, calls, hints)
    result.status, result.value = "ok", q.value
    result.unit = _si_symbol(q.dim, hints[st.name])
    result.shown = _show(q.value, q.dim, hints[st.name], digits=5)
    return result, q


def _check_one(st: nl.CheckStatement, scope: Mapping[str, Quantity], calls: _Calls, blocked: str | None,
               hints: Mapping[str, str]) -> CheckResult:
    result = CheckResult(st.text, st.span.line, st.op, "error")
    try:
        right = evaluate(st.right, scope, calls)
        tolerance = evaluate(st.tolerance, scope, calls) if st.tolerance is not None else None
        left, no_value = None, blocked
        if no_value is None:
            try:
                left = evaluate(st.left, scope, calls)
            except _NoValue as exc:
                no_value = str(exc)
        hint = _expr_hint(st.left, calls, hints) or _expr_hint(st.right, calls, hints) or _literal_hint(st.right)
        result.limit, result.unit = right.value, _si_symbol(right.dim, hint)
        result.shown_limit = _shown_limit(st, right, tolerance, hint)
        if left is None:
            result.status, result.message, result.shown_value = "fail", no_value or "", "none"
            return result
        passed, margin, band = _judge(st, left, right, tolerance)
    except _NoValue as exc:  # a limit computed from a measurement that has no value
        result.status, result.message = "fail", str(exc)
        return result
    except InputError as exc:
        result.message = str(exc)
        return result
    result.status = "pass" if passed else "fail"
    result.value, result.margin, result.band = left.value, margin, band
    result.shown_value = _show(left.value, left.dim, hint, digits=5)
    result.shown_margin = _show(margin, left.dim, hint, signed=True)
    return result


# --------------------------------------------------------------------------
# Showing values: SI prefixes, and rpm, rad/s or % where the signal says so.


def _expr_hint(expr: nl.Expr, calls: _Calls, hints: Mapping[str, str]) -> str:
    """The display unit of an expression: that of its measurement or measurement name,
    kept through sums and through scaling by a plain number (``0.9 * final(w(rotor))``)."""
    if isinstance(expr, nl.Name):
        return hints.get(expr.name, "")
    if isinstance(expr, nl.Negate):
        return _expr_hint(expr.operand, calls, hints)
    if isinstance(expr, nl.BinaryOp):
        left, right = _expr_hint(expr.left, calls, hints), _expr_hint(expr.right, calls, hints)
        if expr.op in "+-":
            return left or right
        if expr.op in "*/" and _plain_number(expr.right):
            return left
        if expr.op == "*" and _plain_number(expr.left):
            return right
        return ""
    return calls.hints.get(id(expr), "")


def _plain_number(expr: nl.Expr) -> bool:
    return isinstance(expr, nl.Number) and expr.value.dim == DIMENSIONLESS


def _literal_hint(expr: nl.Expr) -> str:
    """``rpm`` or ``%`` when the limit is written in it (``2900 rpm``, ``5 %``)."""
    if isinstance(expr, nl.Number):
        unit = expr.text.lstrip("+-0123456789.eE ").strip()
        if unit in ("rpm", "%"):
            return unit
        if unit in CELSIUS:
            return "°C"
    return ""


def _si_symbol(dim: Dimension, hint: str) -> str:
    if hint in ("rpm", "rad/s"):
        return "rad/s"
    if hint == "Hz":
        return "Hz"
    if hint == "N*m":
        return "N*m"
    return unit_symbol(dim)


def _show(value: float, dim: Dimension, hint: str = "", *, signed: bool = False, digits: int = 4) -> str:
    """A value (SI) as printed: ``2.303 ms``, ``2865 rpm``, ``4.32 %``."""
    sign = "+" if signed and value > 0 else ""
    if hint == "rpm":
        return f"{sign}{value / RPM:.{digits}g} rpm"
    if hint == "%" and dim == DIMENSIONLESS:
        return f"{sign}{value * 100:.{digits}g} %"
    if hint == "rad/s":
        return f"{sign}{value:.{digits}g} rad/s"
    if hint == "deg" and dim == DIMENSIONLESS:
        return f"{sign}{math.degrees(value):.{digits}g} deg"
    if hint == "dB" and dim == DIMENSIONLESS:
        return f"{sign}{value:.{digits}g} dB"
    if hint == "°C" and dim == KELVIN:  # a margin is a difference: kelvins
        return sign + format_si(value, "K", digits) if signed else f"{value - CELSIUS_ZERO:.{digits}g} °C"
    symbol = hint or unit_symbol(dim)
    if symbol in ("", "1/s"):
        return f"{sign}{value:.{digits}g}" + (f" {symbol}" if symbol else "")
    return sign + format_si(value, symbol, digits)


def _shown_limit(st: nl.CheckStatement, right: Quantity, tolerance: Quantity | None, hint: str) -> str:
    """The limit column: ``< 60 V``, ``5 V ± 2 %`` (a literal as written, else computed)."""

    def text(expr: nl.Expr, q: Quantity) -> str:
        literal = _literal_text(expr)
        return literal if literal is not None else _show(q.value, q.dim, hint)

    if st.op != "within":
        return f"{st.op} {text(st.right, right)}"
    assert tolerance is not None and st.tolerance is not None
    return f"{text(st.right, right)} ± {text(st.tolerance, tolerance)}"


# --------------------------------------------------------------------------
# Running a file's analyses for its checks.


@dataclass
class RunOutcome:
    """The analyses' results, the failure that stopped them (if any), the checks."""

    results: list[Any]
    failure: SimulationError | None
    report: CheckReport

    @property
    def exit_code(self) -> int:
        """3 if a simulation failed, else the checks' code (2 error, 1 failed, 0 passed)."""
        return 3 if self.failure is not None else self.report.exit_code


def run_and_check(circuit: "Circuit", progress: Callable[[float, float], None] | None = None) -> RunOutcome:
    """Run the file's ``simulate`` lines in order, then its measure and check lines.

    Transient runs keep the ``record`` signals plus those the checks read.
    ``progress(t, until)`` (s) is passed on to transient runs. A failed
    analysis stops the run: its partial waveforms are kept in ``results``,
    the error in ``failure``, and the checks are not evaluated.
    """
    from .results import Waveforms

    results: list[Any] = []
    keep = recording(circuit)
    for request in circuit.analyses:
        try:
            if request.analysis == "dc":
                results.append(circuit.dc(signals=signals_used(circuit)))
            elif request.analysis == "frequency":
                from .analyses.frequency import frequency_response

                results.append(frequency_response(circuit, dict(request.settings), frequency_recording(circuit)))
            elif request.analysis == "periodic":
                from .analyses.periodic import periodic

                results.append(periodic(circuit, dict(request.settings), keep))
            else:
                from .analyses.transient import transient

                settings = dict(request.settings)
                if progress is not None:
                    settings["progress"] = progress
                results.append(transient(circuit, settings, keep))
        except SimulationError as exc:
            if isinstance(exc.partial, Waveforms):
                results.append(exc.partial)
            return RunOutcome(results, exc, _not_run(circuit, f"not evaluated: the simulation failed: {exc}"))
    return RunOutcome(results, None, evaluate_checks(circuit, results))


def _not_run(circuit: "Circuit", reason: str) -> CheckReport:
    """Every measurement and check as an error with ``reason``."""
    report = CheckReport()
    for st in _statements(circuit):
        if isinstance(st, nl.MeasureStatement):
            report.measurements.append(MeasureResult(st.name, st.text, st.span.line, "error", message=reason))
        else:
            report.checks.append(CheckResult(st.text, st.span.line, st.op, "error", message=reason))
    return report
