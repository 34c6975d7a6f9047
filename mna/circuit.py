"""Circuit: named elements with checked values, nodes with domains.

This is the embedding API's entry point::

    import mna
    circuit = mna.load("circuits/solenoid_valve.mna")   # or mna.parse(text)
    op = circuit.dc()                                     # op["v(coil)"] -> float
    res = circuit.transient(until=4e-3, step=1e-6)        # res.time, res["i(Lcoil)"]

or, without any text::

    c = mna.Circuit("rl")
    c.add("voltage-source", "V1", "in", "gnd", 10)        # SI floats...
    c.add("resistor", "R1", "in", "x", "5 ohm")           # ...or quantity text
    c.add("inductor", "L1", "x", "gnd", "10 mH")
    res = c.transient(until=5e-3, step=1e-6)

Elaboration turns netlist statements into elements: it resolves each
element kind, maps the operands to terminals, evaluates every argument and
checks its dimension, and validates the ``simulate``, ``record``,
``measure`` and ``check`` lines against the circuit's names.
"""

from __future__ import annotations

import copy
import difflib
import gc
import math
import re
from contextlib import contextmanager
from dataclasses import dataclass, field
from numbers import Real
from pathlib import Path
from typing import Any, Iterable, Mapping, Sequence

from . import netlist as nl
from .elements.base import ELEMENT, ELECTRICAL, REFERENCE, SHAFT, THERMAL, Arg, Element
from .elements.registry import is_builtin, lookup, suggest
from .errors import InputError, NetlistSyntaxError, Span, UnitsError, UnknownNameError, plugin_fault
from .expressions import FUNCTIONS, children, evaluate, walk
from .methods import METHODS
from .units import (
    AMPERE,
    DIMENSIONLESS,
    HERTZ,
    KELVIN,
    PREFIXES,
    SECOND,
    VOLT,
    Dimension,
    DimensionError,
    FARAD,
    HENRY,
    OHM,
    format_si,
    unit_symbol,
    Quantity,
    describe,
    parse_quantity,
    refuse_celsius,
)
from .units import UnitError
from .elements.switches import duty_hint
from .values import QUANTITIES, AnalysisRequest, SignalRef, node_quantity
from .waveforms import Constant, Piecewise, Pulse, Sine, Step, Waveform

# --------------------------------------------------------------------------
# Requests the file makes: analyses, recorded signals.


TRANSIENT_SETTINGS: dict[str, Arg] = {
    "until": Arg("until", SECOND, positive=True, doc="end time"),
    "step": Arg("step", SECOND, default=None, positive=True, doc="fixed time step"),
    # (None: exact intervals where the circuit is piecewise linear, else the default method)
    "method": Arg("method", None, default=None, kind="choice", choices=tuple(METHODS)),
    "start": Arg("start", None, default="dc", kind="choice", choices=("dc", "rest")),
    "tolerance": Arg("tolerance", DIMENSIONLESS, default=None, positive=True,
                     doc="relative local error per step (error-controlled runs)"),
    "voltage-tolerance": Arg("voltage-tolerance", VOLT, default=None, positive=True,
                             doc="absolute floor of the local error on voltages"),
    "current-tolerance": Arg("current-tolerance", AMPERE, default=None, positive=True,
                             doc="absolute floor of the local error on currents"),
    "max-step": Arg("max-step", SECOND, default=None, positive=True, doc="largest step"),
    "min-step": Arg("min-step", SECOND, default=None, positive=True, doc="smallest step before failing"),
    "event-tolerance": Arg("event-tolerance", SECOND, default=None, positive=True,
                           doc="how precisely switching events are located in time"),
    "sample": Arg("sample", SECOND, default=None, positive=True,
                  doc="also resample the results on a uniform grid of this spacing"),
    # Work limits (mna.limits): raise them to allow a longer run.
    "step-limit": Arg("step-limit", DIMENSIONLESS, default=None, positive=True, doc="most steps a run may take"),
    "edge-limit": Arg("edge-limit", DIMENSIONLESS, default=None, positive=True,
                      doc="most edges of periodic sources and gates over a run"),
    "point-limit": Arg("point-limit", DIMENSIONLESS, default=None, positive=True,
                       doc="most output points a run may record"),
    "memory-limit": Arg("memory-limit", DIMENSIONLESS, default=None, positive=True,
                        doc="most memory for a run's recorded results, in MB"),
}
FREQUENCY_SETTINGS: dict[str, Arg] = {
    "from": Arg("from", HERTZ, default=None, positive=True, doc="lowest frequency of a sweep"),
    "to": Arg("to", HERTZ, default=None, positive=True, doc="highest frequency of a sweep"),
    "per-decade": Arg("per-decade", DIMENSIONLESS, default=50, positive=True, doc="points per decade"),
    "at": Arg("at", None, default=None, kind="expr", doc="list(F1, F2, ...): these frequencies only"),
}
PERIODIC_SETTINGS: dict[str, Arg] = {
    "period": Arg("period", SECOND, default=None, positive=True, doc="the period of the sources and gates"),
    "period-of": Arg("period-of", None, default=None, kind="expr",
                     doc="an element whose pwm() gate or pwm()/sine() waveform sets the period"),
    "repeat-tolerance": Arg("repeat-tolerance", DIMENSIONLESS, default=None, positive=True,
                            doc="largest change of the state over one period, relative to its scale"),
    "newton-limit": Arg("newton-limit", DIMENSIONLESS, default=None, positive=True,
                        doc="most Newton iterations on the period map"),
    "period-limit": Arg("period-limit", DIMENSIONLESS, default=None, positive=True,
                        doc="most periods integrated in all"),
    "warmup": Arg("warmup", DIMENSIONLESS, default=None, positive=True,
                  doc="plain periods from the start before Newton's method"),
    "periods": Arg("periods", DIMENSIONLESS, default=None, positive=True,
                   doc="periods in steady state kept in the results"),
    **{k: v for k, v in TRANSIENT_SETTINGS.items() if k != "until"},
}
ANALYSES: dict[str, dict[str, Arg]] = {"dc": {}, "transient": TRANSIENT_SETTINGS, "frequency": FREQUENCY_SETTINGS,
                                       "periodic": PERIODIC_SETTINGS}


# --------------------------------------------------------------------------
# Value conversion shared by the netlist path and the Python API.

_WAVEFORM_ARGS: dict[str, dict[str, tuple[str, Any]]] = {
    # name -> (dimension role, default). "value" means the source's own unit.
    "step": {"from": ("value", 0.0), "to": ("value", None), "at": ("time", 0.0), "rise": ("time", 0.0)},
    "pwm": {
        "low": ("value", 0.0), "high": ("value", None), "frequency": ("frequency", None),
        "duty": ("fraction", None), "rise": ("time", 0.0), "fall": ("time", 0.0), "delay": ("time", 0.0),
    },
    "sine": {
        "amplitude": ("value", None), "frequency": ("frequency", None), "offset": ("value", 0.0),
        "phase": ("angle", 0.0), "delay": ("time", 0.0),
    },
}
_ROLE_DIMENSION = {"time": SECOND, "frequency": HERTZ, "fraction": DIMENSIONLESS, "angle": DIMENSIONLESS}


_NUMBER_PART = re.compile(r"^[ \t]*[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")
_UNIT_TOKEN = re.compile(r"[^\W\d_]+")


def _refuse_celsius(q: Quantity, what: str, span: Span | None) -> None:
    try:
        refuse_celsius(q, what)
    except DimensionError as exc:
        raise UnitsError(str(exc), span) from None


#: Element arguments, waveform parameters and run settings are 0 or of a
#: magnitude between 1e-100 and 1e100 (SI): an element's formulas multiply
#: and square its values, and floating point ends near 1e308.
MAGNITUDE_LIMIT = 1e100


def _check_magnitude(value: float, what: str, span: Span | None) -> float:
    """``value`` (SI) if it is finite and 0 or within 1e-100..1e100; an input error otherwise."""
    size = abs(value)
    if not (size == 0.0 or 1.0 / MAGNITUDE_LIMIT <= size <= MAGNITUDE_LIMIT):
        raise InputError(f"{what} is {value:g} in SI units, outside the range mna computes with "
                         f"(0, or a magnitude from {1 / MAGNITUDE_LIMIT:g} to {MAGNITUDE_LIMIT:g})", span)
    return value


def _check_range(arg: Arg, value: float, what: str, span: Span | None) -> None:
    """The physical range an argument declares (``Arg.minimum``, ``Arg.maximum``)."""
    low, high = arg.minimum, arg.maximum
    if (low is not None and value < low) or (high is not None and value > high):
        from .units import unit_symbol

        unit = f" {unit_symbol(arg.dimension)}" if arg.dimension is not None else ""
        if low is not None and high is not None:
            bounds = f"between {low:g}{unit} and {high:g}{unit}"
        else:
            bounds = f"at least {low:g}{unit}" if low is not None else f"at most {high:g}{unit}"
        raise InputError(f"{what} must be {bounds} (the range its model holds for), got {value:g}{unit}", span)


#: Values of parts as they are made (common practice, from catalogues of
#: inductors, capacitors and resistors): far outside, a value is more likely
#: a prefix slip (10 MH for 10 mH) than a part, and gets a warning.
PART_RANGES: dict[Dimension, tuple[float, float]] = {
    HENRY: (1e-12, 100.0),  # 1 pH (a trace) to 100 H (a large choke)
    FARAD: (1e-15, 100.0),  # 1 fF to 100 F (a supercapacitor bank)
    OHM: (1e-6, 1e12),  # 1 uohm (a busbar) to 1 Tohm (insulation)
}
_PREFIX_SLIPS = (("M", "m"), ("m", "u"), ("u", "n"), ("n", "p"), ("G", "M"))


def _part_warning(value: float, dim: Dimension | None, expr: nl.Expr, what: str) -> str | None:
    """A warning for a literal far outside what parts are made with, naming the likely prefix."""
    limits = PART_RANGES.get(dim) if dim is not None else None
    if limits is None or not isinstance(expr, nl.Number) or value == 0:
        return None
    low, high = limits
    if low <= abs(value) <= high:
        return None
    text = expr.text.strip()
    number = _NUMBER_PART.match(text)
    unit = text[number.end():].strip() if number else ""
    guess = ""
    for wrong, right in _PREFIX_SLIPS:
        if unit.startswith(wrong) and unit[len(wrong):] and len(unit) > len(wrong):
            base = unit[len(wrong):]
            if base in ("H", "F", "ohm", "Ω"):
                scaled = value * 10.0 ** (PREFIXES.get(right, 0) - PREFIXES[wrong])
                if low <= abs(scaled) <= high:
                    guess = f"; did you mean {number.group().strip()} {right}{base}?"
                    break
    if not guess:
        guess = "; check its prefix"
    where = f"line {expr.span.line}: " if expr.span is not None else ""
    side = "above" if abs(value) > high else "below"
    return (f"{where}{what} is {text}, {side} what parts are made with "
            f"({format_si(low, unit_symbol(dim))} to {format_si(high, unit_symbol(dim))}){guess}")


def _check_dimension(q: Quantity, want: Dimension, what: str, span: Span | None, got_text: str | None = None) -> float:
    if q.dim != want:
        got = describe(q.dim)
        if got_text:
            got = f"{got_text} ({describe(q.dim)})"
        raise UnitsError(f"{what} needs {describe(want)}, got {got}", span)
    return q.value


def _is_hertz(text: str) -> bool:
    """Whether a quantity's text uses hertz (``50 Hz``, ``1.2kHz``) in its unit."""
    unit = _NUMBER_PART.sub("", text, count=1)
    return any(tok[:-2] in PREFIXES or tok == "Hz" for tok in _UNIT_TOKEN.findall(unit) if tok.endswith("Hz"))


def _speed_parts(expr: nl.Expr) -> tuple[nl.Expr, ...]:
    """The parts of a value that carry an angular speed: a waveform's own
    ``frequency=`` (and its times) are not speeds and are not looked at."""
    if isinstance(expr, nl.Call) and expr.func in _WAVEFORM_ARGS:
        spec = _WAVEFORM_ARGS[expr.func]
        return tuple(v for k, v, _ in expr.named if spec.get(k, ("",))[0] == "value")
    if isinstance(expr, nl.Call) and expr.func == "piecewise":
        return tuple(a.value for a in expr.args if isinstance(a, nl.Pair))
    return children(expr)


def _hertz_literal(expr: nl.Expr, definitions: dict[str, nl.Expr],
                   via: nl.Name | None = None) -> tuple[nl.Number, nl.Name | None] | None:
    """The first literal in hertz inside an angular-speed value, or None.

    A ``let`` parameter used in the value is followed to its definition, so
    ``let f = 50 Hz`` then ``speed=(2 * f)`` is caught; the second item is
    the parameter name (at its use) through which the literal was reached.
    """
    for node in walk(expr, _speed_parts):
        if isinstance(node, nl.Number) and _is_hertz(node.text):
            return node, via
        if isinstance(node, nl.Name) and node.name in definitions:
            found = _hertz_literal(definitions[node.name], definitions, via or node)
            if found is not None:
                return found
    return None


#: How an angular-speed argument's unit is described (hertz is refused there).
ANGULAR_TEXT = "an angular speed in rad/s or rpm"


def _angular_units_error(exc: UnitsError) -> UnitsError:
    """A dimension error on an angular speed, worded without the hertz it refuses."""
    return UnitsError(exc.message.replace(describe(HERTZ), ANGULAR_TEXT), exc.span, hint=exc.hint)


def _hertz_message(what: str, text: str) -> str:
    return (f"{what} is an angular speed, and hertz is ambiguous there (cycles or radians "
            f"per second?); got {text}: write it in rad/s or rpm (1 rev/s = 2*pi rad/s = 60 rpm)")


class Elaborator:
    """Builds elements and requests from statements, one circuit at a time."""

    def __init__(self, circuit: "Circuit"):
        self.circuit = circuit
        self._absolute = False  # the argument being read takes an absolute temperature (degC allowed)
        #: The block instance being expanded (``mna.blocks.Scope``), or None
        #: at the top level of the file.
        self.scope = None

    # -- names inside a block instance ------------------------------------------
    @property
    def params(self) -> dict[str, Quantity]:
        """The parameters visible here: the file's, or the block instance's."""
        return self.circuit.params if self.scope is None else self.scope.params

    def node_name(self, name: str) -> str:
        """A node as written here -> its name in the circuit (``mid`` -> ``S1.mid``)."""
        return name if self.scope is None else self.scope.node(name)

    def element_name(self, name: str) -> str:
        """An element as written here -> its name in the circuit (``Rs`` -> ``S1.Rs``)."""
        return name if self.scope is None else self.scope.prefix + name

    def place(self, st: nl.ElementStatement) -> None:
        """Add the element a statement describes, or expand the block it uses."""
        block = self.circuit.blocks.get(st.kind)
        if block is not None:
            from .blocks import expand

            expand(self, block, st)
            return
        self.circuit._add_element(self.element(st), st.name_span)

    # -- values ---------------------------------------------------------------
    def _value(self, expr: nl.Expr) -> Quantity:
        return evaluate(expr, self.params)

    def quantity(self, expr: nl.Expr, want: Dimension | None, what: str) -> float:
        q = evaluate(expr, self.params)
        if not self._absolute:
            _refuse_celsius(q, what, expr.span)
        if want is None:
            return q.value
        text = expr.text if isinstance(expr, nl.Number) else None
        return _check_magnitude(_check_dimension(q, want, what, expr.span, text), what, expr.span)

    def waveform(self, expr: nl.Expr, want: Dimension, what: str) -> Waveform:
        if isinstance(expr, nl.Call) and expr.func in ("step", "pwm", "sine", "piecewise"):
            if expr.func == "piecewise":
                return self._piecewise(expr, want, what)
            spec = _WAVEFORM_ARGS[expr.func]
            if expr.args:
                raise InputError(
                    f"{expr.func}() takes named arguments only, like {expr.func}({next(iter(spec))}=...)",
                    expr.args[0].span,
                )
            values: dict[str, float] = {}
            for key, value, key_span in expr.named:
                if key not in spec:
                    raise UnknownNameError(
                        f"{expr.func}() has no argument {key!r}", key_span,
                        hint="it takes " + ", ".join(f"{k}=" for k in spec),
                    )
                if key in values:
                    raise InputError(f"{key}= is given twice", key_span)
                role = spec[key][0]
                dim = want if role == "value" else _ROLE_DIMENSION[role]
                values[key] = self.quantity(value, dim, f"{expr.func}() argument {key}")
                if key == "duty" and not 0.0 <= values[key] <= 1.0:
                    raise InputError(f"pwm() duty= must lie between 0 % and 100 %, got {values[key] * 100:g} %",
                                     value.span, hint=duty_hint(value))
            for key, (role, default) in spec.items():
                if key not in values:
                    if default is None:
                        raise InputError(f"{expr.func}() needs {key}=", expr.span)
                    values[key] = default
            return self._build_waveform(expr.func, values, expr.span)
        if isinstance(expr, nl.Call) and lookup(expr.func) is None and expr.func not in FUNCTIONS:
            raise UnknownNameError(
                f"unknown waveform {expr.func}()", expr.span,
                hint="waveforms are step(...), pwm(...), sine(...) and piecewise(...)",
            )
        return Constant(self.quantity(expr, want, what))

    def _build_waveform(self, func: str, v: dict[str, float], span: Span) -> Waveform:
        if func == "step":
            if v["rise"] < 0:
                raise InputError("step() rise= cannot be negative", span)
            return Step(v["from"], v["to"], v["at"], v["rise"])
        if func == "pwm":
            if v["frequency"] <= 0:
                raise InputError("pwm() frequency= must be positive", span)
            if not 0.0 <= v["duty"] <= 1.0:
                raise InputError(f"pwm() duty= must lie between 0 % and 100 %, got {v['duty'] * 100:g} %", span)
            period = 1.0 / v["frequency"]
            on = v["duty"] * period
            if v["rise"] < 0 or v["fall"] < 0:
                raise InputError("pwm() rise= and fall= cannot be negative", span)
            if v["rise"] > on or v["fall"] > period - on:
                raise InputError(
                    "pwm() edges do not fit the period: rise= must fit in the on time "
                    "(duty*period) and fall= in the off time", span,
                )
            return Pulse(v["low"], v["high"], v["frequency"], v["duty"], v["rise"], v["fall"], v["delay"])
        if v["frequency"] <= 0:
            raise InputError("sine() frequency= must be positive", span)
        return Sine(v["amplitude"], v["frequency"], v["offset"], v["phase"], v["delay"])

    def _piecewise(self, expr: nl.Call, want: Dimension, what: str) -> Piecewise:
        if expr.named or not expr.args:
            raise InputError("piecewise() takes TIME: VALUE points, like piecewise(0 s: 0 V, 1 ms: 5 V)", expr.span)
        times, levels = [], []
        for item in expr.args:
            if not isinstance(item, nl.Pair):
                raise InputError("each piecewise() point is TIME: VALUE, like 1 ms: 5 V", item.span)
            t = self.quantity(item.key, SECOND, "piecewise() point time")
            if times and t <= times[-1]:
                raise InputError("piecewise() times must increase from point to point", item.span)
            times.append(t)
            levels.append(self.quantity(item.value, want, f"{what} in piecewise()"))
        return Piecewise(tuple(times), tuple(levels))

    def choice(self, expr: nl.Expr, arg: Arg, what: str) -> str:
        word = expr.name if isinstance(expr, nl.Name) else expr.word if isinstance(expr, nl.Word) else None
        if word is None or word not in arg.choices:
            raise InputError(f"{what} must be one of {', '.join(arg.choices)}", expr.span)
        return word

    def argument(self, arg: Arg, expr: nl.Expr, what: str) -> Any:
        self._absolute = arg.absolute
        try:
            return self._angular_argument(arg, expr, what)
        finally:
            self._absolute = False

    def _angular_argument(self, arg: Arg, expr: nl.Expr, what: str) -> Any:
        if arg.angular:
            found = _hertz_literal(expr, self.circuit.definitions)
            if found is not None:
                literal, via = found
                if via is None:
                    raise UnitsError(_hertz_message(what, literal.text), literal.span)
                raise UnitsError(_hertz_message(what, f"{via.name} = {literal.text} (line {literal.span.line})"),
                                 via.span)
            try:
                return self._argument(arg, expr, what)
            except UnitsError as exc:
                raise _angular_units_error(exc) from None
        return self._argument(arg, expr, what)

    def _argument(self, arg: Arg, expr: nl.Expr, what: str) -> Any:
        if arg.kind == "quantity":
            value = self.quantity(expr, arg.dimension, what)
        elif arg.kind == "waveform":
            return self.waveform(expr, arg.dimension, what)
        elif arg.kind == "choice":
            return self.choice(expr, arg, what)
        elif arg.kind == "expr":
            return arg.resolve(expr, self._value) if arg.resolve is not None else expr
        else:  # pragma: no cover - a kind declared a bad Arg
            raise TypeError(f"unknown argument kind {arg.kind!r}")
        if arg.positive and not value > 0:
            raise InputError(f"{what} must be positive, got {value:g}", expr.span)
        if arg.nonnegative and value < 0:
            raise InputError(f"{what} cannot be negative, got {value:g}", expr.span)
        _check_range(arg, value, what, expr.span)
        warning = _part_warning(value, arg.dimension, expr, what)
        if warning is not None and warning not in self.circuit.warnings:
            self.circuit.warnings.append(warning)
        return value

    # -- elements -------------------------------------------------------------
    def element(self, st: nl.ElementStatement) -> Element:
        cls = lookup(st.kind)
        if cls is None:
            close = difflib.get_close_matches(st.kind, sorted(set(self.circuit.blocks) | set(suggest(st.kind))),
                                              n=1, cutoff=0.6)
            hint = f"did you mean {close[0]!r}?" if close else "run 'mna kinds' for the list of element kinds"
            raise UnknownNameError(f"unknown element kind {st.kind!r}", st.kind_span, hint=hint)
        label = self.element_name(st.name)
        nodes, params, spans = self.bind(cls, st)
        try:
            return cls(label, nodes, params, span=st.name_span, spans=spans)
        except InputError:
            raise
        except Exception as exc:  # noqa: BLE001 - a plugin's own fault is reported as such
            fault = None if is_builtin(cls) else plugin_fault(exc)
            if fault is not None:
                raise fault from exc
            if isinstance(exc, (ValueError, TypeError)):
                raise InputError(f"{st.kind} {label}: {exc}", st.name_span) from None
            if isinstance(exc, ArithmeticError):  # an overflow or a division by zero in the model's formulas
                raise InputError(f"{st.kind} {label}: its arguments lie outside the range its model can "
                                 f"compute with ({exc})", st.name_span,
                                 hint="check the values against the element's data sheet") from None
            raise

    def bind(self, cls, st: nl.ElementStatement) -> tuple[dict[str, Any], dict[str, Any], dict[str, Span]]:
        """Map a statement's operands and arguments onto a kind's ports and arguments.

        ``cls`` is an element kind or a block definition (anything with
        ``ports``, ``main``, ``arguments`` and ``arg()``). Returns the nodes
        (named as in the circuit), the argument values (SI) and their spans.
        """
        label = self.element_name(st.name)
        if "." in st.name:
            raise InputError(
                f"{st.kind} {label}: an element's name cannot contain '.'", st.name_span,
                hint="a dot joins a block instance's name and a name inside it, as in S1.Rs",
            )
        operands = list(st.operands)
        nodes: dict[str, Any] = {}
        spans: dict[str, Span] = {}
        for port in cls.ports:
            if port.keyword:
                continue
            if port.variadic:
                names = []
                while operands and isinstance(operands[0], (nl.Node, nl.Name)) and (
                    len(operands) > 1 or _name(operands[0]) not in self.params
                ):
                    op = operands.pop(0)
                    names.append(self.element_name(_name(op)))
                    spans.setdefault(port.names[0], op.span)
                if len(names) < port.minimum:
                    raise InputError(
                        f"{st.kind} {label} needs at least {port.minimum} {port.names[0]} names", st.name_span
                    )
                nodes[port.names[0]] = names
                continue
            if not operands:
                raise InputError(
                    f"{st.kind} {label} needs its terminals: {_port_text(port)}", st.name_span
                )
            op = operands.pop(0)
            if len(port.names) == 2:
                if not isinstance(op, nl.NodePair):
                    raise InputError(
                        f"{st.kind} {label}: expected terminals as {_port_text(port)}", op.span
                    )
                nodes[port.names[0]], nodes[port.names[1]] = self._node(op.a, op.a_span), self._node(op.b, op.b_span)
                spans[port.names[0]], spans[port.names[1]] = op.a_span, op.b_span
            else:
                if not isinstance(op, (nl.Node, nl.Name)):
                    raise InputError(
                        f"{st.kind} {label}: expected a {port.domain} node name for {port.names[0]}", op.span
                    )
                nodes[port.names[0]] = self._node(_name(op), op.span)
                spans[port.names[0]] = op.span
        # What is left is the main value (at most one operand).
        if len(operands) > 1:
            raise InputError(
                f"{st.kind} {label}: too many values; write extra settings as name=value "
                "or put an expression in parentheses", operands[1].span,
            )
        raw: dict[str, tuple[nl.Expr, Span]] = {}
        if operands:
            op = operands[0]
            if isinstance(op, nl.NodePair):
                raise InputError(f"{st.kind} {label} has no more terminals; unexpected '->'", op.span)
            if cls.main is None:
                raise InputError(f"{st.kind} takes no value after its terminals; use name=value", op.span)
            value_expr = nl.Name(op.name, op.span) if isinstance(op, nl.Node) else op
            if self.scope is not None:
                value_expr = self.scope.value(value_expr)
            raw[cls.main] = (value_expr, op.span)
        keyword_ports = {p.names[0]: p for p in cls.ports if p.keyword}
        for a in st.arguments:
            if a.key in keyword_ports:
                port = keyword_ports[a.key]
                if not isinstance(a.value, nl.Name):
                    raise InputError(f"{a.key}= takes a {port.domain} node name", a.value.span)
                nodes[a.key] = self._node(a.value.name, a.value.span)
                spans[a.key] = a.value.span
                continue
            if a.key in raw:
                what = "the value after the terminals" if a.key == cls.main and raw[a.key][1] is not a.span else f"{a.key}="
                raise InputError(f"{st.kind} {label}: {a.key} is given twice ({what})", a.span)
            if cls.arg(a.key) is None:
                known = [x.name for x in cls.arguments] + list(keyword_ports)
                close = difflib.get_close_matches(a.key, known, n=1)
                hint = f"did you mean {close[0]}=?" if close else "it takes " + ", ".join(f"{k}=" for k in known)
                raise UnknownNameError(f"{st.kind} has no argument {a.key!r}", a.span, hint=hint)
            raw[a.key] = (a.value, a.span)
        for name, port in keyword_ports.items():
            if name not in nodes and port.minimum > 0:
                raise InputError(f"{st.kind} {label} needs {name}=NODE", st.name_span)
        params: dict[str, Any] = {}
        for arg in cls.arguments:
            if arg.name in raw:
                expr, _ = raw[arg.name]
                params[arg.name] = self.argument(arg, expr, f"{arg.name} of {st.kind} {label}")
                spans[arg.name] = expr.span
            elif arg.required:
                how = "as the value after its terminals" if arg.name == cls.main else f"as {arg.name}=..."
                raise InputError(f"{st.kind} {label} needs its {arg.name} ({how})", st.name_span)
            else:
                params[arg.name] = arg.default
        return nodes, params, spans

    def _node(self, name: str, span: Span | None) -> str:
        if "." in name:
            owner = name.split(".", 1)[0]
            raise InputError(
                f"{name!r} is a node inside block instance {owner}; connect to a block through its terminals",
                span, hint="a terminal name cannot contain '.'",
            )
        return self.node_name(name)

    # -- signals --------------------------------------------------------------
    def signal(self, expr: nl.Expr) -> SignalRef:
        return self.circuit.signal_ref(expr)

    # -- analyses -------------------------------------------------------------
    def losses(self, st: nl.LossesStatement) -> None:
        """A ``losses`` line: the ports of the efficiency and the window of the loss table."""
        from .losses import LossRequest, check_request

        if self.circuit.loss_request is not None:
            raise InputError("a circuit has one 'losses' line", st.span)
        request = LossRequest(span=st.span)
        seen: set[str] = set()
        for a in st.arguments:
            if a.key in seen:
                raise InputError(f"{a.key}= is given twice", a.span)
            seen.add(a.key)
            if a.key in ("input", "output"):
                if not isinstance(a.value, nl.Name):
                    raise InputError(f"losses {a.key}= names an element, like {a.key}=Vbus", a.value.span)
                setattr(request, a.key, a.value.name)
            elif a.key in ("from", "to"):
                seconds = self.quantity(a.value, SECOND, f"losses {a.key}=")
                setattr(request, "start" if a.key == "from" else "stop", seconds)
            else:
                raise UnknownNameError(f"losses has no setting {a.key!r}", a.span,
                                       hint="it takes input=, output=, from= and to=")
        check_request(self.circuit, request)
        self.circuit.loss_request = request

    def analysis(self, st: nl.SimulateStatement) -> AnalysisRequest:
        spec = ANALYSES.get(st.analysis)
        if spec is None:
            close = difflib.get_close_matches(st.analysis, list(ANALYSES), n=1)
            raise UnknownNameError(
                f"unknown analysis {st.analysis!r}", st.analysis_span,
                hint=f"did you mean {close[0]!r}?" if close else "analyses are: " + ", ".join(ANALYSES),
            )
        settings: dict[str, Any] = {}
        spans: dict[str, Span] = {}
        for a in st.arguments:
            arg = spec.get(a.key)
            if arg is None:
                raise UnknownNameError(
                    f"simulate {st.analysis} has no setting {a.key!r}", a.span,
                    hint=("it takes " + ", ".join(f"{k}=" for k in spec)) if spec else "it takes no settings",
                )
            if a.key in settings:
                raise InputError(f"{a.key}= is given twice", a.span)
            settings[a.key] = self.argument(arg, a.value, f"simulate {st.analysis} {a.key}=")
            spans[a.key] = a.value.span
        for key, arg in spec.items():
            if key not in settings:
                if arg.required:
                    raise InputError(f"simulate {st.analysis} needs {key}=", st.analysis_span)
                settings[key] = arg.default
        if st.analysis == "transient":
            from .analyses.settings import check_request

            self.circuit.warnings.extend(check_request(settings, st.analysis_span))
        if st.analysis == "periodic" and settings.get("period-of") is not None:
            expr = settings["period-of"]
            if not isinstance(expr, nl.Name):
                raise InputError("period-of= takes an element name, like period-of=Q1", expr.span)
            settings["period-of"] = expr.name
        if st.analysis == "frequency":
            from .frequency_settings import check_frequency_settings

            check_frequency_settings(settings, spans, st, self)
        return AnalysisRequest(st.analysis, settings, st.analysis_span, spans)


def _a(word: str) -> str:
    """The indefinite article for a domain name: "an electrical", "a shaft"."""
    return "an" if word[:1] in "aeiou" else "a"


def _name(op) -> str:
    return op.name


def _port_text(port) -> str:
    return " -> ".join(port.names) if len(port.names) == 2 else port.names[0]


# --------------------------------------------------------------------------


class Circuit:
    """A circuit: elements, nodes (with domains), parameters and requests.

    Build it from text with :func:`mna.parse` / :func:`mna.load`, or in
    Python with :meth:`add`. Run it with :meth:`dc`, :meth:`transient` or
    :meth:`run` (the file's own ``simulate`` lines).
    """

    def __init__(self, name: str = "circuit", title: str | None = None):
        self.name = name
        self.title = title
        self.file: str | None = None
        self.elements: dict[str, Element] = {}
        self.nodes: dict[str, str] = {node: domain for domain, node in REFERENCE.items()}
        self.node_spans: dict[str, Span | None] = {}
        self.params: dict[str, Quantity] = {}
        self.definitions: dict[str, nl.Expr] = {}  # let NAME -> its expression, as written
        self.unconnected: dict[str, Span] = {}  # nodes meant to have one terminal only
        self.analyses: list[AnalysisRequest] = []
        self.records: list[SignalRef] = []
        self.loss_request = None  # a losses line: mna.losses.LossRequest
        self.frequency_records: list[SignalRef] = []  # records of simulate frequency (with z() and ratios)
        self.measures: list[nl.MeasureStatement] = []
        self.checks: list[nl.CheckStatement] = []
        self.warnings: list[str] = []
        #: Block definitions this circuit may use, kind -> ``mna.blocks.BlockDefinition``.
        self.blocks: dict[str, Any] = {}
        #: The parameters of every block instance, by hierarchical name (``S1.resistance``).
        self.block_parameters: dict[str, Quantity] = {}
        #: Every block instance placed, by hierarchical name -> the span of its use.
        self.block_instances: dict[str, Span | None] = {}
        #: Values that replace block parameters when instances are expanded (``S1.resistance``).
        self.block_overrides: dict[str, Quantity] = {}
        self._elaborator = Elaborator(self)
        #: The parsed netlist this circuit was elaborated from (None if built in Python).
        self.netlist: nl.Netlist | None = None
        #: The ``let`` values given in place of the netlist's (name -> Quantity).
        self.overrides: dict[str, Quantity] = {}
        # What was added from Python after elaboration, replayed by with_parameters.
        self._python_steps: list[tuple[str, tuple, dict]] = []

    def __repr__(self) -> str:
        return f"<Circuit {self.name}: {len(self.elements)} elements, {len(self.nodes) - len(REFERENCE)} nodes>"

    # -- building -------------------------------------------------------------
    def add_element(self, element: Element, span: Span | None = None) -> Element:
        """Add an already built element, checking its name and node domains."""
        self._add_element(element, span)
        self._python_steps.append(("add_element", (element, span), {}))
        return element

    def _add_element(self, element: Element, span: Span | None = None) -> Element:
        if element.name in self.elements:
            first = self.elements[element.name].span
            where = f" (first defined at {first.where()})" if first else ""
            raise InputError(f"duplicate element name {element.name!r}{where}", span or element.span)
        for port in element.ports:
            if port.domain == ELEMENT:
                continue
            for terminal in port.names:
                if terminal not in element.nodes:  # an optional keyword connection left out
                    continue
                node = element.nodes[terminal]
                self._use_node(node, port.domain, element.spans.get(terminal, span or element.span), element)
        self.elements[element.name] = element
        return element

    def _use_node(self, node: str, domain: str, span: Span | None, element: Element) -> None:
        known = self.nodes.get(node)
        if known is None:
            self.nodes[node] = domain
            self.node_spans[node] = span
        elif known != domain:
            if node in REFERENCE.values():
                msg = (f"{node!r} is the {known} reference; {element.keyword} {element.name} needs "
                       f"{_a(domain)} {domain} node here")
            else:
                first = self.node_spans.get(node)
                where = f" (used as {known} at {first.where()})" if first else ""
                msg = (f"node {node!r} is {_a(known)} {known} node{where}, but {element.keyword} "
                       f"{element.name} connects it as {_a(domain)} {domain} node")
            raise InputError(msg, span)

    def add(self, kind: str, name: str, *terminals: str | Sequence[str], value: Any = None, **arguments: Any) -> Element:
        """Add an element from Python.

        ``terminals`` are node names in port order (``"a", "b"`` for a
        two-terminal kind); a last positional value that is not a node name
        may be given as ``value=``. Values are SI floats, quantity text
        (``"10 mH"``) or waveform objects; argument names use ``_`` for
        ``-`` (``saturation_current=1e-14``). Returns the element, or None
        for a use of a block (see :meth:`define`), whose elements are
        named ``NAME.x``.
        """
        result = self._add(kind, name, *terminals, value=value, **arguments)
        self._python_steps.append(("add", (kind, name, *terminals), {"value": value, **arguments}))
        return result

    def _add(self, kind: str, name: str, *terminals: str | Sequence[str], value: Any = None,
             **arguments: Any) -> Element | None:
        """:meth:`add`, without keeping the call for :meth:`with_parameters` (blocks use it)."""
        block = self.blocks.get(kind)
        if block is not None:
            from .blocks import python_statement

            self._elaborator.place(python_statement(block, name, terminals, value, arguments, self.params))
            return None
        cls = lookup(kind)
        if cls is None:
            close = suggest(kind)
            raise UnknownNameError(f"unknown element kind {kind!r}" + (f"; did you mean {close[0]!r}?" if close else ""))
        flat = [t for t in terminals]
        nodes: dict[str, Any] = {}
        for port in cls.ports:
            if port.keyword:
                key = port.names[0]
                if key not in arguments:
                    if port.minimum == 0:  # an optional connection
                        continue
                    raise InputError(f"{kind} {name} needs {key}=NODE")
                nodes[key] = arguments.pop(key)
                continue
            if port.variadic:
                nodes[port.names[0]] = [str(x) for x in flat]
                flat = []
                continue
            for terminal in port.names:
                if not flat:
                    raise InputError(f"{kind} {name} needs terminals {', '.join(port.names)}")
                nodes[terminal] = str(flat.pop(0))
        if flat:
            if value is not None or len(flat) > 1:
                raise InputError(f"{kind} {name}: too many terminals {flat}")
            value = flat[0]
        params: dict[str, Any] = {}
        given = {k.replace("_", "-"): v for k, v in arguments.items()}
        if value is not None:
            if cls.main is None:
                raise InputError(f"{kind} takes no main value")
            given[cls.main] = value
        for key in given:
            if cls.arg(key) is None:
                raise UnknownNameError(f"{kind} has no argument {key!r}")
        for arg in cls.arguments:
            if arg.name in given:
                params[arg.name] = _python_value(arg, given[arg.name], f"{arg.name} of {kind} {name}", self.params)
            elif arg.required:
                raise InputError(f"{kind} {name} needs {arg.name}")
            else:
                params[arg.name] = arg.default
        return self._add_element(cls(name, nodes, params))

    def define(self, block) -> None:
        """Make a block (an :class:`mna.Block`) usable in :meth:`add` under its keyword."""
        from .blocks import _add

        definition = block.definition() if hasattr(block, "definition") else block
        _add(self.blocks, definition)
        self._python_steps.append(("define", (block,), {}))

    def with_parameters(self, values: Mapping[str, Any] | None = None, /, **more: Any) -> "Circuit":
        """A new circuit in which the given ``let`` parameters have new values.

        ``values`` maps a parameter name to its value; keyword arguments add
        more (``c.with_parameters(Rload="5 ohm")``, or
        ``c.with_parameters({"Rload": 5.0})``; the mapping form also takes
        names that are not Python identifiers, such as a block instance's
        parameter ``"S1.resistance"``). A value is quantity text
        (``"5 ohm"``, ``"40 %"``), a :class:`~mna.units.Quantity`, or a
        float in SI units; it must have the dimension of the value the
        netlist gives (a wrong unit is a :class:`~mna.errors.UnitsError`,
        an unknown name an :class:`~mna.errors.UnknownNameError` with the
        closest name).

        The circuit is elaborated again from its parsed netlist with the new
        values, so everything that depends on them changes with them:
        element values, waveforms, gate schedules, other ``let`` values
        computed from them, ``simulate`` settings, measurements and checks.
        Elements, records and ``let`` values added from Python are added
        again in the same order. This circuit is not changed.
        """
        given = dict(values or {})
        given.update(more)
        if self.netlist is None:
            lets = [k for k in given if "." not in k]
            if lets:
                _unknown_parameter(lets[0], self.params)
            fresh = Circuit(self.name, self.title)
            fresh.block_overrides = {**self.block_overrides,
                                     **{k: _block_override(k, v, self.block_parameters) for k, v in given.items()}}
        else:
            merged = {**self.overrides, **{k: v for k, v in given.items() if "." not in k}}
            blocks = {**self.block_overrides,
                      **{k: _block_override(k, v, self.block_parameters) for k, v in given.items() if "." in k}}
            fresh = elaborate(self.netlist, merged, blocks)
        for kind, args, kwargs in self._python_steps:
            if kind == "add_element":  # its own copy: compilation stamps an element
                args = (copy.copy(args[0]), *args[1:])
            getattr(fresh, kind)(*args, **kwargs)
        if self.netlist is None and fresh.block_overrides:
            from .blocks import check_overrides

            check_overrides(fresh)
        return fresh

    def record(self, *signals: str) -> None:
        """Choose what results keep, as in a ``record`` line: ``c.record("v(x)", "i(L1)")``."""
        from .netlist import parse_netlist

        for text in signals:
            st = parse_netlist(f"record {text}").statements[0]
            for q in st.quantities:
                self._add_record(self.signal_ref(q))
        self._python_steps.append(("record", signals, {}))

    def _add_record(self, ref: SignalRef) -> None:
        """Keep a recorded quantity: every one for ``simulate frequency``, and those
        that exist over time (not impedances and ratios) for the other analyses."""
        if ref.small_signal_only and self.analyses and not any(a.analysis == "frequency" for a in self.analyses):
            raise InputError(f"{ref.label} is a small-signal quantity: only 'simulate frequency' computes it",
                             ref.span, hint="add a line such as 'simulate frequency from=10 Hz to=1 MHz'")
        if not any(r.label == ref.label for r in self.frequency_records):
            self.frequency_records.append(ref)
        if not ref.small_signal_only and not any(r.label == ref.label for r in self.records):
            self.records.append(ref)

    # -- signal references ------------------------------------------------------
    def signal_ref(self, expr: nl.Expr) -> SignalRef:
        """Resolve ``v(sw)``, ``i(L1)``, ``v(a -> b)``, ``v(R1)``, ``z(a -> b)``, ``v(out) / v(in)``
        ... against this circuit."""
        small = _small_signal_ref(self, expr)
        if small is not None:
            return small
        if (not isinstance(expr, nl.Call) or expr.named or len(expr.args) != 1
                or not isinstance(expr.args[0], (nl.Name, nl.NodePair))):
            if (isinstance(expr, nl.Call) and not expr.named and len(expr.args) == 2
                    and all(isinstance(a, nl.Name) for a in expr.args)):
                a, b = (x.name for x in expr.args)
                raise InputError(f"the voltage between two nodes is written with an arrow: "
                                 f"{expr.func}({a} -> {b}), not {expr.func}({a}, {b})", expr.span,
                                 hint=f"write {expr.func}({a} -> {b}): the voltage of {a} measured from {b}")
            raise InputError(
                "expected a circuit quantity such as v(node), v(a -> b), i(ELEMENT) or p(ELEMENT)",
                getattr(expr, "span", None),
            )
        q = expr.func
        (arg,) = expr.args
        if isinstance(arg, nl.NodePair):
            if q != "v":
                raise InputError(f"{q}() takes one name; only v() takes two nodes, v(a -> b)", expr.span)
            self._require_node(arg.a, ELECTRICAL, arg.a_span)
            self._require_node(arg.b, ELECTRICAL, arg.b_span)
            return SignalRef("v", (arg.a, arg.b), "across", QUANTITIES["v"].dimension, expr.span)
        target = arg.name
        on_node = node_quantity(q)
        if on_node is not None and self.nodes.get(target) == on_node.domain:
            return SignalRef(q, (target,), "node", on_node.dimension, expr.span)
        element = self.elements.get(target)
        if element is not None:
            if q not in element.outputs:
                have = ", ".join(f"{k}({target})" for k in element.outputs) or "nothing"
                close = difflib.get_close_matches(q, list(element.outputs), n=1, cutoff=0.5)
                raise UnknownNameError(
                    f"{element.keyword} {target} has no quantity {q}(); it offers {have}", expr.span,
                    hint=f"did you mean {close[0]}({target})?" if close else None)
            return SignalRef(q, (target,), "element", element.outputs[q], expr.span)
        if on_node is not None:
            self._require_node(target, on_node.domain, arg.span)
        if q in _element_quantities():
            close = difflib.get_close_matches(target, list(self.elements), n=1)
            raise UnknownNameError(
                f"no element named {target!r}", arg.span,
                hint=f"did you mean {close[0]!r}?" if close else None,
            )
        names = sorted(set(QUANTITIES) | _element_quantities())
        close = difflib.get_close_matches(q, names, n=1)
        raise UnknownNameError(f"unknown quantity {q}()", expr.span,
                               hint=f"did you mean {close[0]}({target})?" if close else
                               "quantities: " + ", ".join(f"{n}()" for n in names))

    def _require_node(self, node: str, domain: str, span: Span | None) -> None:
        have = self.nodes.get(node)
        if have == domain:
            return
        if have is None:
            close = difflib.get_close_matches(node, [n for n, d in self.nodes.items() if d == domain], n=1)
            raise UnknownNameError(f"no {domain} node named {node!r}", span,
                                   hint=f"did you mean {close[0]!r}?" if close else None)
        raise InputError(f"{node!r} is {_a(have)} {have} node, not {_a(domain)} {domain} node", span)

    # -- analyses -------------------------------------------------------------
    def dc(self, **options: Any):
        """The DC operating point (inductors shorted, capacitors open, sources at t = 0)."""
        from .analyses.dc import operating_point

        return operating_point(self, **options)

    def transient(
        self,
        until: float | str,
        step: float | str | None = None,
        method: str | None = None,
        start: Any = "dc",
        record: Iterable[str] | None = None,
        **options: Any,
    ):
        """Transient analysis from 0 to ``until`` (s); returns :class:`~mna.results.Waveforms`.

        ``step`` (s) fixes the time step. ``start`` is ``"dc"`` (from the
        operating point), ``"rest"`` (every state zero except the
        ``initial=`` values), or a :class:`~mna.runstate.CircuitState` such
        as an earlier run's ``final_state``: the run then starts at the
        state's time with its values and switch states and ends at
        ``until`` (``state.at(0.0)`` restarts the clock). Times may be floats in seconds or text
        (``"4 ms"``). ``options`` are the other settings of ``simulate
        transient``, with ``_`` for ``-`` (``max_step=1e-6``,
        ``voltage_tolerance=1e-6``); the netlist spelling
        (``**{"max-step": 1e-6}``) works too. An unknown option is an
        :class:`~mna.errors.InputError`.
        """
        from .analyses.transient import transient

        settings = {"until": _seconds(until, "until"), "step": _seconds(step, "step") if step is not None else None,
                    "method": method, "start": start}
        for key, value in options.items():
            name = key.replace("_", "-")
            if name not in TRANSIENT_SETTINGS or name in settings:
                known = ", ".join(k.replace("-", "_") for k in TRANSIENT_SETTINGS if k not in settings)
                raise InputError(f"transient() got an unknown option {key!r}; the options are {known}")
            settings[name] = _python_value(TRANSIENT_SETTINGS[name], value, f"transient() {key}=")
        records = self._record_refs(record)
        return transient(self, settings, records)

    def _record_refs(self, record: Iterable[str] | None):
        """The quantities named in ``record`` (texts as on a record line), or None."""
        if record is None:
            return None
        refs = []
        for text in record:
            st = nl.parse_netlist(f"record {text}").statements[0]
            refs.extend(self.signal_ref(q) for q in st.quantities)
        return refs

    def frequency(
        self,
        low: float | str | None = None,
        high: float | str | None = None,
        per_decade: float = 50,
        at: Iterable[float | str] | None = None,
        record: Iterable[str] | None = None,
    ):
        """Small-signal frequency response at the DC operating point.

        Sweeps ``low`` to ``high`` (Hz, or text such as ``"10 Hz"``) with
        ``per_decade`` points per decade, or solves at the frequencies
        ``at``. ``record`` names quantities as in a ``record`` line
        (``"v(out)"``, ``"z(out -> gnd)"``, ``"v(out) / v(in)"``); by default
        the file's records, else every node voltage and element current.
        Returns :class:`~mna.results.FrequencyResponse`: ``res.frequency``
        (Hz) and ``res["v(out)"]``, complex numpy arrays (SI units).
        """
        from .analyses.frequency import frequency_response
        from .frequency_settings import python_settings

        settings = python_settings(low, high, per_decade, at)
        records = self._record_refs(record)
        return frequency_response(self, settings, records)

    def periodic(
        self,
        period: float | str | None = None,
        period_of: str | None = None,
        record: Iterable[str] | None = None,
        **options: Any,
    ):
        """Periodic steady state: the periods after every slow mode has died out.

        ``period`` (s, or text such as ``"10 us"``) or ``period_of`` (the name
        of a switch with a ``pwm()`` gate, or of a source with a ``pwm()`` or
        ``sine()`` waveform) sets the period. ``options``: ``repeat_tolerance``
        (default 1e-6), ``newton_limit`` (12), ``period_limit`` (2000),
        ``warmup`` (1), ``periods`` (1, the periods kept), and every setting
        of :meth:`transient` but ``until`` for the period runs. Returns
        :class:`~mna.results.Waveforms` over ``periods`` periods from t = 0
        with ``analysis == "periodic"`` and ``statistics["period_s"]``,
        ``["periods_integrated"]``, ``["newton_iterations_shooting"]``,
        ``["steady_state"]`` (how it was reached). See
        :mod:`mna.analyses.periodic`.
        """
        from .analyses.periodic import periodic

        settings: dict[str, Any] = {"period": _seconds(period, "period") if period is not None else None,
                                    "period-of": period_of}
        for key, value in options.items():
            name = key.replace("_", "-")
            if name not in PERIODIC_SETTINGS or name in settings:
                known = ", ".join(k.replace("-", "_") for k in PERIODIC_SETTINGS if k not in settings)
                raise InputError(f"periodic() got an unknown option {key!r}; the options are {known}")
            arg = PERIODIC_SETTINGS[name]
            if isinstance(value, str) and arg.kind == "quantity" and arg.dimension is not None:
                value = _python_value(arg, value, f"periodic() {key}")
            settings[name] = value
        records = self._record_refs(record)
        return periodic(self, settings, records)

    def run(self) -> list:
        """Run the file's own ``simulate`` lines, in order; returns their results.

        The same runner as ``mna run`` and ``mna check``
        (:func:`mna.measure.run_and_check`); a failed analysis raises its
        :class:`~mna.errors.SimulationError`.
        """
        from .measure import run_and_check

        outcome = run_and_check(self)
        if outcome.failure is not None:
            raise outcome.failure
        return outcome.results


def _element_quantities() -> set[str]:
    """Every quantity some element kind offers (built-in and plugin kinds)."""
    from .elements.registry import keywords, lookup
    from .errors import PluginError

    found: set[str] = set()
    for keyword in keywords():
        try:
            found.update(lookup(keyword).outputs)
        except PluginError:  # a broken plugin is reported when it is used, not here
            continue
    return found


def _small_signal_ref(circuit: "Circuit", expr: nl.Expr) -> SignalRef | None:
    """``z(a -> b)`` (impedance between two nodes) or ``Q1 / Q2`` (a ratio), else None."""
    from .units import OHM

    if isinstance(expr, nl.Call) and expr.func == "z":
        if len(expr.args) != 1 or expr.named or not isinstance(expr.args[0], nl.NodePair):
            raise InputError("z() takes two nodes with an arrow: z(a -> b), the impedance seen from a to b",
                             expr.span)
        pair = expr.args[0]
        for node, span in ((pair.a, pair.a_span), (pair.b, pair.b_span)):
            circuit._require_node(node, ELECTRICAL, span)
        if pair.a == pair.b:
            raise InputError(f"z({pair.a} -> {pair.b}) joins a node to itself", pair.span)
        return SignalRef("z", (pair.a, pair.b), "impedance", OHM, expr.span)
    if isinstance(expr, nl.BinaryOp) and expr.op == "/":
        parts = []
        for side in (expr.left, expr.right):
            if not isinstance(side, nl.Call):
                raise InputError("a ratio divides one circuit quantity by another, like v(out) / v(in)",
                                 getattr(side, "span", expr.span))
            parts.append(circuit.signal_ref(side))
        if any(p.target == "ratio" for p in parts):  # pragma: no cover - the grammar nests left to right
            raise InputError("a ratio of ratios is not a quantity; write one ratio", expr.span)
        return SignalRef("ratio", (), "ratio", parts[0].dimension / parts[1].dimension, expr.span, tuple(parts))
    return None


def _seconds(value: float | str, what: str) -> float:
    return _python_value(Arg(what, SECOND), value, what)


def _python_value(arg: Arg, value: Any, what: str, params: dict[str, Quantity] | None = None) -> Any:
    """A value given from Python -> what the element expects."""
    if arg.kind == "waveform":
        if isinstance(value, Waveform):
            return value
        return Constant(_python_value(Arg(arg.name, arg.dimension, angular=arg.angular), value, what))
    if arg.kind == "choice":
        if value not in arg.choices:
            raise InputError(f"{what} must be one of {', '.join(arg.choices)}")
        return value
    if arg.kind == "expr":
        if isinstance(value, str):
            st = nl.parse_netlist(f"let x = {value}").statements[0]  # (names start with a letter)
            value = st.value
        if arg.resolve is not None and isinstance(value, nl.Expr.__args__[:-1]):
            return arg.resolve(value, lambda e: evaluate(e, params or {}))
        return value
    if isinstance(value, str):
        if arg.angular and _is_hertz(value):
            raise UnitsError(_hertz_message(what, value))
        try:
            q = parse_quantity(value)
        except UnitError as exc:
            raise UnitsError(f"{what}: {exc}") from None
        if not arg.absolute:
            _refuse_celsius(q, what, None)
        try:
            number = _check_dimension(q, arg.dimension, what, None, value)
        except UnitsError as exc:
            raise (_angular_units_error(exc) if arg.angular else exc) from None
    elif isinstance(value, Quantity):
        if not arg.absolute:
            _refuse_celsius(value, what, None)
        number = _check_dimension(value, arg.dimension, what, None)
    elif isinstance(value, Real) and not isinstance(value, bool):
        number = float(value)
    else:
        raise InputError(f"{what} needs a number or a quantity like '4.7 uF', got {value!r}")
    if not math.isfinite(number):
        raise InputError(f"{what} must be a finite number, got {number!r}")
    _check_magnitude(number, what, None)
    if arg.positive and not number > 0:
        raise InputError(f"{what} must be positive, got {number:g}")
    if arg.nonnegative and number < 0:
        raise InputError(f"{what} cannot be negative, got {number:g}")
    _check_range(arg, number, what, None)
    return number


# --------------------------------------------------------------------------
# Netlist -> Circuit.


def elaborate(netlist: nl.Netlist, parameters: Mapping[str, Any] | None = None,
              block_overrides: Mapping[str, Any] | None = None) -> Circuit:
    """Build a :class:`Circuit` from parsed statements (checks names and units).

    ``parameters`` gives ``let`` values in place of the netlist's (see
    :meth:`Circuit.with_parameters`); a dotted name in it (``S1.resistance``)
    is a block parameter and joins ``block_overrides``, which replaces block
    parameters by hierarchical name (``{"S1.resistance": Quantity(22.0,
    OHM)}``), whatever the use gives.
    """
    name = Path(netlist.file).stem if netlist.file else "circuit"
    circuit = Circuit(name)
    circuit.file = netlist.file
    circuit.netlist = netlist
    pending = {k: v for k, v in (parameters or {}).items() if "." not in k}
    circuit.block_overrides = dict(block_overrides or {})
    circuit.block_overrides.update({k: _block_override(k, v, {}) for k, v in (parameters or {}).items()
                                    if "." in k})
    el = circuit._elaborator
    pending_records: list[nl.RecordStatement] = []
    pending_losses: list[nl.LossesStatement] = []
    seen_circuit: nl.CircuitStatement | None = None
    from .blocks import gather_definitions

    circuit.blocks.update(gather_definitions(netlist))  # may be used above their definition
    for st in netlist.statements:
        if isinstance(st, (nl.BlockStatement, nl.BlocksFromStatement)):
            continue
        if isinstance(st, nl.ParameterStatement):
            raise InputError(f"a 'parameter' line belongs inside a block; at the top level write "
                             f"'let {st.name.replace('-', '_')} = ...'", st.span)
        if isinstance(st, nl.LetStatement):
            if "." in st.name:
                raise InputError(f"parameter name {st.name!r} cannot contain '.'", st.span,
                                 hint="a dot joins a block instance's name and a name inside it, as in S1.Rs")
            if st.name in circuit.params:
                raise InputError(f"parameter {st.name!r} is already defined", st.span)
            if st.name == "pi":
                raise InputError("'pi' is a built-in constant and cannot be redefined", st.span)
            value = evaluate(st.value, circuit.params)
            definition = st.value
            if st.name in pending:
                given = pending.pop(st.name)
                value = _override(st, value, given)
                circuit.overrides[st.name] = value
                # (as written, so a speed given in hertz is still refused)
                definition = nl.Number(value, given if isinstance(given, str) else repr(value), st.span)
            circuit.params[st.name] = value
            circuit.definitions[st.name] = definition
        elif isinstance(st, nl.CircuitStatement):
            if seen_circuit is not None:
                raise InputError("a file describes one circuit: only one 'circuit' line", st.span)
            seen_circuit = st
            circuit.name, circuit.title = st.name, st.title
        elif isinstance(st, nl.ElementStatement):
            el.place(st)
        elif isinstance(st, nl.SimulateStatement):
            circuit.analyses.append(el.analysis(st))
        elif isinstance(st, nl.LossesStatement):
            pending_losses.append(st)
        elif isinstance(st, nl.RecordStatement):
            pending_records.append(st)
        elif isinstance(st, nl.UnconnectedStatement):
            for name, span in zip(st.names, st.spans):
                circuit.unconnected[name] = span
        elif isinstance(st, nl.MeasureStatement):
            circuit.measures.append(st)
        elif isinstance(st, nl.CheckStatement):
            circuit.checks.append(st)
    if pending:
        _unknown_parameter(next(iter(pending)), circuit.params)
    from .blocks import check_overrides

    check_overrides(circuit)
    _check_single_terminal_nodes(circuit)
    # Records may name elements defined further down the file.
    for st in pending_records:
        for q in st.quantities:
            circuit._add_record(circuit.signal_ref(q))
    for st in pending_losses:  # (so may a losses line)
        el.losses(st)
    from .measure import validate  # measure and check lines, before anything runs

    validate(circuit)
    return circuit


def _check_single_terminal_nodes(circuit: "Circuit") -> None:
    """A node that only one terminal touches gets a warning with its line,
    column and a did-you-mean (a misspelled node name, most of the time)
    unless an ``unconnected`` line says it is meant so.

    Nodes an element only senses (a switch gate's ``v(g)``) do not count as
    touched; an ``unconnected`` name that is no node is an error too.
    """
    touched: dict[str, int] = {}
    for element in circuit.elements.values():
        for port in element.ports:
            if port.domain == ELEMENT:
                continue
            for terminal in port.names:
                node = element.nodes.get(terminal)
                if isinstance(node, str):
                    touched[node] = touched.get(node, 0) + 1
        for node in element.sensed_nodes():
            touched[node] = touched.get(node, 0) + 2
    references = set(REFERENCE.values())
    for name, span in circuit.unconnected.items():
        if name not in circuit.nodes:
            close = difflib.get_close_matches(name, [n for n in circuit.nodes if n not in references], n=1)
            raise UnknownNameError(f"unconnected names no node {name!r}", span,
                                   hint=f"did you mean {close[0]!r}?" if close else None)
    for node, count in touched.items():
        if count != 1 or node in references or node in circuit.unconnected:
            continue
        domain = circuit.nodes.get(node)
        others = [n for n, c in touched.items() if c > 1 and n != node and circuit.nodes.get(n) == domain]
        close = difflib.get_close_matches(node, others + [r for r in references if REFERENCE.get(domain) == r],
                                          n=1, cutoff=0.6)
        hint = (f"did you mean {close[0]!r}? " if close else "") + (
            f"if {node!r} is meant to have one connection only (a test point, an open winding end), "
            f"say so with a line 'unconnected {node}'")
        span = circuit.node_spans.get(node)
        where = f"line {span.line}, column {span.column}: " if span is not None else ""
        warning = f"{where}node {node!r} is touched by one terminal only: nothing else connects to it; {hint}"
        if warning not in circuit.warnings:
            circuit.warnings.append(warning)


@contextmanager
def _bulk_allocation():
    """Pause the cyclic garbage collector while building many small objects.

    Parsing creates several objects per netlist line and none of them form
    reference cycles; with the collector running, a 30,000-line netlist
    spends most of its time in collections (measured: 1.1 s vs 0.35 s).
    """
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


def parse(text: str, file: str | None = None, parameters: Mapping[str, Any] | None = None) -> Circuit:
    """Parse netlist text into a :class:`Circuit`.

    ``parameters`` gives ``let`` values in place of those in the text, as
    :meth:`Circuit.with_parameters` does (``{"Rload": "5 ohm"}``).
    """
    with _bulk_allocation():
        return elaborate(nl.parse_netlist(text, file), parameters)


def load(path: str | Path, parameters: Mapping[str, Any] | None = None) -> Circuit:
    """Read a netlist file into a :class:`Circuit` (``parameters`` as for :func:`parse`)."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except IsADirectoryError:
        raise InputError(f"{path}: is a folder, not a netlist file") from None
    except UnicodeDecodeError as exc:
        raise NetlistSyntaxError(f"{path}: not UTF-8 text ({exc.reason} at byte {exc.start})") from None
    except OSError as exc:  # no permission, a broken device...
        raise InputError(f"{path}: cannot read the file: {exc.strerror or exc}") from None
    return parse(text, str(path), parameters)


def _override(st: nl.LetStatement, original: Quantity, value: Any) -> Quantity:
    """A value given for ``let NAME`` in place of the netlist's, checked against its dimension."""
    where = f" (line {st.span.line})" if st.span is not None and st.span.line else ""
    what = f"parameter {st.name}{where}"
    if isinstance(value, str):
        try:
            q = parse_quantity(value)
        except UnitError as exc:
            raise UnitsError(f"{what}: {exc}") from None
        _check_dimension(q, original.dim, what, None, value)
        return q
    if isinstance(value, Quantity):
        _check_dimension(value, original.dim, what, None)
        return value
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(f"{what}: expected quantity text such as '5 ohm' or a number in SI units, "
                         f"got {type(value).__name__}")
    if not math.isfinite(value):
        raise InputError(f"{what} must be a finite number, got {value!r}")
    return Quantity(float(value), original.dim)


def _block_override(name: str, value: Any, known: Mapping[str, Quantity]) -> Any:
    """A value for a block parameter ``INSTANCE.NAME``: text becomes a Quantity
    (its dimension is checked when the instance is expanded); a float stays SI,
    in the parameter's dimension."""
    if isinstance(value, str):
        try:
            return parse_quantity(value)
        except UnitError as exc:
            raise UnitsError(f"block parameter {name}: {exc}") from None
    if isinstance(value, Quantity):
        return value
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(f"block parameter {name}: expected quantity text such as '5 ohm' or a number in "
                         f"SI units, got {type(value).__name__}")
    if name in known:
        return Quantity(float(value), known[name].dim)
    return float(value)


def _unknown_parameter(name: str, params: Mapping[str, Quantity]) -> None:
    close = difflib.get_close_matches(name, list(params), n=1)
    if close:
        hint = f"did you mean {close[0]!r}?"
    elif params:
        hint = "the let parameters are " + ", ".join(sorted(params))
    else:
        hint = "the circuit has no let parameters"
    raise UnknownNameError(f"no let parameter named {name!r}", hint=hint)
