"""Gated switches: the ``switch`` kind and its gates.

Netlist::

    switch Q1 d -> s  on=50 mohm  off=10 Mohm  gate=schedule(closed, 2 ms: open, 5 ms: closed)
    switch Q2 d -> s  gate=pwm(frequency=100 kHz, duty=40 %, delay=0 s)
    switch Q3 d -> s  gate=v(g) > 2.5 V  hysteresis=0.2 V
    switch Q4 d -> s  gate=i(L1) < 1 A   hysteresis=100 mA

A switch is a resistance ``on=`` when closed and ``off=`` when open
(defaults 10 mohm and 10 Mohm): ``i = v / R(state)``. Between state
changes it is linear, so its batch is piecewise linear and the transient
engine reuses one LU factorization until the next change.

Gates:

``schedule(STATE, TIME: STATE, ...)``
    The first state holds from t = 0; each ``TIME: STATE`` changes it at
    that time (times positive and increasing; they may be ``let`` names).
    States are ``closed``/``open`` (also ``on``/``off``).
``pwm(frequency=, duty=, delay=)``
    Closed during the first ``duty`` of each period, starting at ``delay``
    (open before it). ``delay`` defaults to 0 s.
``QUANTITY > LEVEL`` or ``QUANTITY < LEVEL``
    Closed while the comparison holds. QUANTITY is ``v(node)``,
    ``v(a -> b)`` or ``i(E)`` of an element whose current is an unknown of the
    circuit (inductor, choke, voltage source; for any other element compare
    the voltage across a sense resistor). ``hysteresis=H`` (same unit) makes a
    band centred on LEVEL: with ``>`` the switch closes when the quantity
    rises above LEVEL + H/2 and opens when it falls below LEVEL - H/2
    (mirrored for ``<``). ``<=`` and ``>=`` mean the same as ``<`` and ``>``.

Schedule and PWM edges are corners: the solver lands on each exactly and
the state changes there. A comparison's crossing is located between two
time points by linear interpolation (``event_time``) and the solver steps
onto it. At a state change the engine records two samples at the same
time: the one before the change and the one just after (the switch
voltage at 0+).

The operating point takes schedule and PWM gates at t = 0; a comparison
gate starts open and then takes the state its comparison gives at the
operating point (inside a hysteresis band it stays open).

Results: ``v i p`` as any two-terminal element, and ``state`` (1 closed,
0 open). The states of a run, and their log, live in the run's
:class:`SwitchState` (never on the batch or the element); the probe hands
the log to :meth:`Switch.output`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from .. import netlist as nl
from ..errors import InputError, SimulationError, UnitsError, UnknownNameError
from ..expressions import evaluate
from ..limits import periodic_edges
from ..units import AMPERE, DIMENSIONLESS, HERTZ, OHM, SECOND, VOLT, WATT, Dimension, Quantity, describe
from .base import CONDUCTOR, Arg, Branch, NonlinearBatch
from .batching import BranchPattern, NodeSelector, states_from_log
from .passive import TwoTerminal

STATE_WORDS = {"closed": True, "on": True, "open": False, "off": False}

#: A comparison-gated switch that changes state at this many consecutive
#: time points is chattering: the run stops with a SimulationError.
MAX_CHATTER = 100

# --------------------------------------------------------------------------
# Gates are resolved in one stage, at elaboration: shape, names of the
# comparison and every number (``let`` values are known then). Only the
# unknown indices of a comparison gate wait for compilation.


@dataclass(frozen=True)
class CompareSpec:
    """A comparison gate before compilation: what it compares, and the level (SI)."""

    quantity: str  # "v" or "i"
    names: tuple[str, ...]
    sign: float  # +1: closed while quantity > level; -1: while quantity < level
    level: float  # V or A
    span: Any = None
    name_spans: tuple = field(default_factory=tuple)

    @property
    def dimension(self) -> Dimension:
        return VOLT if self.quantity == "v" else AMPERE

    @property
    def label(self) -> str:
        return f"{self.quantity}({' -> '.join(self.names)})"


@dataclass
class ComplementSpec:
    """``complement(Q1, dead=200 ns)``: closed while Q1's gate is open, less a dead time at both edges.

    Realised at compile time (:func:`complement_gate`), when Q1 is known.
    """

    other: str
    dead: float  # s
    span: Any = None
    name_span: Any = None


GATE_HELP = ("a gate is schedule(closed, 2 ms: open, ...), pwm(frequency=.., duty=.., delay=..), "
             "complement(Q1, dead=200 ns) or a comparison such as v(g) > 2.5 V or i(L1) < 1 A")

Evaluate = Callable[[nl.Expr], Quantity]


def _state_word(expr: nl.Expr) -> bool:
    word = expr.name if isinstance(expr, nl.Name) else expr.word if isinstance(expr, nl.Word) else None
    if word not in STATE_WORDS:
        raise InputError("a schedule state is closed or open (also on or off)", getattr(expr, "span", None))
    return STATE_WORDS[word]


def resolve_gate(expr: nl.Expr, value: Evaluate) -> "ScheduleGate | PwmGate | CompareSpec":
    """A gate expression -> its gate, every number evaluated with ``value`` (checked units)."""
    span = getattr(expr, "span", None)
    if isinstance(expr, nl.Call) and expr.func == "schedule":
        return _schedule(expr, value, span)
    if isinstance(expr, nl.Call) and expr.func == "pwm":
        return _pwm(expr, value, span)
    if isinstance(expr, nl.Call) and expr.func == "complement":
        return _complement(expr, value, span)
    if isinstance(expr, nl.Compare):
        return _comparison(expr, value, span)
    if isinstance(expr, nl.Call):
        raise UnknownNameError(f"unknown gate {expr.func}()", span, hint=GATE_HELP)
    raise InputError("this is not a gate", span, hint=GATE_HELP)


def _schedule(expr: nl.Call, value: Evaluate, span) -> "ScheduleGate":
    if expr.named or not expr.args:
        raise InputError("schedule() lists a first state then TIME: STATE changes, like "
                         "schedule(closed, 2 ms: open)", span)
    first, *rest = expr.args
    if isinstance(first, nl.Pair):
        raise InputError("schedule() starts with the state at t = 0 (closed or open), then "
                         "TIME: STATE changes", first.span)
    times, states = [0.0], [_state_word(first)]
    for item in rest:
        if not isinstance(item, nl.Pair):
            raise InputError("after the first state, each schedule() entry is TIME: STATE, like 2 ms: open",
                             getattr(item, "span", None))
        t = _quantity(item.key, value, SECOND, "a schedule() time")
        if not t > times[-1]:
            raise InputError("schedule() times must be positive and increase from entry to entry",
                             getattr(item.key, "span", None))
        times.append(t)
        states.append(_state_word(item.value))
    return ScheduleGate(np.array(times), np.array(states, dtype=bool))


def _pwm(expr: nl.Call, value: Evaluate, span) -> "PwmGate":
    if expr.args:
        raise InputError("a pwm() gate takes named arguments only: pwm(frequency=.., duty=.., delay=..)",
                         expr.args[0].span)
    named: dict[str, nl.Expr] = {}
    for key, given, key_span in expr.named:
        if key not in ("frequency", "duty", "delay"):
            raise UnknownNameError(f"a pwm() gate has no argument {key!r}", key_span,
                                   hint="it takes frequency=, duty= and delay= (the switch is closed "
                                        "during the duty part of each period)")
        if key in named:
            raise InputError(f"{key}= is given twice", key_span)
        named[key] = given
    for key in ("frequency", "duty"):
        if key not in named:
            raise InputError(f"a pwm() gate needs {key}=", span)
    f = _quantity(named["frequency"], value, HERTZ, "pwm() frequency")
    d = _quantity(named["duty"], value, DIMENSIONLESS, "pwm() duty")
    delay = _quantity(named["delay"], value, SECOND, "pwm() delay") if "delay" in named else 0.0
    if not f > 0:
        raise InputError("pwm() frequency= must be positive", named["frequency"].span)
    if not 0.0 <= d <= 1.0:
        raise InputError(f"pwm() duty= must lie between 0 % and 100 %, got {d * 100:g} %", named["duty"].span,
                         hint=duty_hint(named["duty"]))
    if delay < 0:
        raise InputError("pwm() delay= cannot be negative", named["delay"].span)
    return PwmGate(f, d, delay)


def _complement(expr: nl.Call, value: Evaluate, span) -> ComplementSpec:
    if len(expr.args) != 1 or not isinstance(expr.args[0], nl.Name):
        raise InputError("complement() names the switch whose gate it inverts, like "
                         "complement(Qhigh, dead=200 ns)", span)
    dead = 0.0
    for key, given, key_span in expr.named:
        if key != "dead":
            raise UnknownNameError(f"complement() has no argument {key!r}", key_span,
                                   hint="it takes dead= (the dead time at both edges)")
        dead = _quantity(given, value, SECOND, "complement() dead")
        if dead < 0:
            raise InputError("complement() dead= cannot be negative", given.span)
    return ComplementSpec(expr.args[0].name, dead, span, expr.args[0].span)


def duty_hint(expr: nl.Expr) -> str | None:
    """``duty=60`` is a fraction 60 (6000 %): suggest ``60 %``."""
    if isinstance(expr, nl.Number) and expr.value.dim == DIMENSIONLESS and 1 < expr.value.value <= 100:
        return (f"a duty is a fraction (0 to 1) or a percentage: write duty={expr.text.strip()} % "
                f"(or duty={expr.value.value / 100:g})")
    return None


def _comparison(expr: nl.Compare, value: Evaluate, span) -> CompareSpec:
    left, right, op = expr.left, expr.right, expr.op
    if _is_signal(right) and not _is_signal(left):
        left, right = right, left
        op = {"<": ">", "<=": ">=", ">": "<", ">=": "<="}[op]
    if not _is_signal(left):
        raise InputError("a comparison gate compares a circuit quantity with a level: v(node), v(a -> b) "
                         "or i(ELEMENT), like v(g) > 2.5 V", span)
    if len(left.args) != 1:
        if left.func == "v" and len(left.args) == 2 and all(isinstance(a, nl.Name) for a in left.args):
            a, b = (x.name for x in left.args)
            raise InputError(f"the voltage between two nodes is written with an arrow: v({a} -> {b}), "
                             f"not v({a}, {b})", left.span)
        raise InputError(f"{left.func}() in a gate takes one name, or for v() two nodes v(a -> b)", left.span)
    (arg,) = left.args
    if isinstance(arg, nl.NodePair):
        if left.func != "v":
            raise InputError("i() in a gate takes one element name", left.span)
        names, spans = (arg.a, arg.b), (arg.a_span, arg.b_span)
    else:
        names, spans = (arg.name,), (arg.span,)
    sign = 1.0 if op in (">", ">=") else -1.0
    want = VOLT if left.func == "v" else AMPERE
    level = _quantity(right, value, want, "the level of a comparison gate")
    return CompareSpec(left.func, names, sign, level, span, spans)


def _is_signal(expr: nl.Expr) -> bool:
    return (isinstance(expr, nl.Call) and expr.func in ("v", "i") and not expr.named and bool(expr.args)
            and all(isinstance(a, (nl.Name, nl.NodePair)) for a in expr.args))


def _quantity(expr: nl.Expr, value: Evaluate, want: Dimension, what: str) -> float:
    q = value(expr)
    if q.dim != want:
        raise UnitsError(f"{what} needs {describe(want)}, got {describe(q.dim)}", getattr(expr, "span", None))
    return q.value


def resolve_quantity(expr: nl.Expr, value: Evaluate) -> Quantity:
    """An expression argument whose unit the element checks itself (``hysteresis=``)."""
    return value(expr)


# --------------------------------------------------------------------------
# Realised gates: numbers and unknown indices.


@dataclass
class ScheduleGate:
    """States by time: ``states[k]`` holds from ``times[k]`` (``times[0] = 0``)."""

    times: np.ndarray
    states: np.ndarray

    def state_at(self, t: float) -> bool:
        return bool(self.states[np.searchsorted(self.times, t, side="right") - 1])

    def corners(self, start: float, stop: float) -> np.ndarray:
        pts = self.times[1:]
        return pts[(pts > start) & (pts <= stop)]


@dataclass
class PwmGate:
    frequency: float
    duty: float
    delay: float

    @property
    def period(self) -> float:
        return 1.0 / self.frequency

    def state_at(self, t: float) -> bool:
        return bool(pwm_states(np.array([t]), np.array([self.period]), np.array([self.duty]),
                               np.array([self.delay]))[0])

    def corners(self, start: float, stop: float) -> np.ndarray:
        if not 0.0 < self.duty < 1.0 or stop <= self.delay:
            pts = np.array([self.delay]) if self.duty > 0 and self.delay > 0 else np.empty(0)
            return pts[(pts > start) & (pts <= stop)]
        return periodic_edges(start, stop, self.delay, self.period, [0.0, self.duty * self.period],
                              "a pwm() gate")


def pwm_states(t: np.ndarray | float, period: np.ndarray, duty: np.ndarray, delay: np.ndarray) -> np.ndarray:
    """Closed (True) during the first ``duty`` of each period after ``delay``, for many gates at once.

    A time within 1e-9 of a period from an edge counts as past it, so the
    state at an edge the solver landed on is the state after the edge.
    """
    eps = 1e-9
    since = t - delay
    cycles = np.floor(since / period + eps)
    tau = since - cycles * period
    return (since >= -eps * period) & (tau < duty * period - eps * period)


@dataclass
class CompareGate:
    """Closed while ``sign*(signal - level) > 0``, with a band ``hysteresis`` wide."""

    pos: int  # unknown index added (-1: none)
    neg: int  # unknown index subtracted (-1: none)
    sign: float
    level: float
    hysteresis: float
    label: str


def compare_gate(spec: CompareSpec, hysteresis: float, stamper, switch: "Switch") -> CompareGate:
    """A comparison gate with its unknown indices (at compile time)."""
    pos, neg = _signal_indices(spec, stamper, switch)
    return CompareGate(pos, neg, spec.sign, spec.level, hysteresis, spec.label)


def complement_gate(spec: ComplementSpec, circuit, switch, depth: int = 0) -> "ScheduleGate | PwmGate":
    """The gate of ``complement(OTHER, dead=...)`` (at compile time, when OTHER is known)."""
    what = f"{switch.keyword} {switch.name}"
    other = circuit.elements.get(spec.other)
    if other is None or not hasattr(other, "spec"):
        found = "no element" if other is None else f"a {other.keyword}, which has no gate"
        raise UnknownNameError(f"{what}: complement() names {spec.other!r}, {found}", spec.name_span)
    if other is switch or depth > 8:
        raise InputError(f"{what}: complement() refers back to itself", spec.span)
    reference = other.spec
    if isinstance(reference, ComplementSpec):
        reference = complement_gate(reference, circuit, other, depth + 1)
    if isinstance(reference, PwmGate):
        return complement_pwm(reference, spec.dead, what, spec.span)
    if isinstance(reference, ScheduleGate):
        return complement_schedule(reference, spec.dead, what, spec.span)
    raise InputError(f"{what}: complement() follows a schedule() or pwm() gate; {spec.other}'s gate is a "
                     "comparison", spec.span)


def complement_pwm(gate: PwmGate, dead: float, what: str, span) -> PwmGate:
    """The complement of a PWM gate with ``dead`` seconds at both edges.

    The reference is closed over [delay, delay + D*T) of each period T; the
    complement over [delay + D*T + dead, delay + T - dead): a PWM of duty
    ``1 - D - 2*dead/T`` starting ``D*T + dead`` after the reference (taken
    modulo T, so the pattern repeats from t = 0).
    """
    period = gate.period
    duty = 1.0 - gate.duty - 2.0 * dead / period
    if duty < 0:
        raise InputError(f"{what}: the dead time ({dead:g} s on each edge) is longer than half the reference's "
                         f"off time ({(1 - gate.duty) * period:g} s)", span)
    delay = math.fmod(gate.delay + gate.duty * period + dead, period)
    return PwmGate(gate.frequency, duty, delay)


def complement_schedule(gate: ScheduleGate, dead: float, what: str, span) -> ScheduleGate:
    """The complement of a schedule: it opens ``dead`` before the reference closes
    and closes ``dead`` after the reference opens."""
    changes = [(t - dead if s else t + dead, not s) for t, s in zip(gate.times[1:], gate.states[1:])]
    first = not bool(gate.states[0])
    if changes and changes[0][0] <= 0:
        first, changes = False, changes[1:]  # the reference closes within the dead time after t = 0
    times = [0.0] + [t for t, _ in changes]
    if any(b <= a for a, b in zip(times, times[1:])):
        raise InputError(f"{what}: complement() dead time ({dead:g} s) is longer than an interval of the "
                         "reference's schedule", span)
    return ScheduleGate(np.array(times), np.array([first] + [s for _, s in changes], dtype=bool))


def delay_gate(gate, on_delay: float, off_delay: float, what: str, span):
    """A time gate whose closing edges come ``on_delay`` and opening edges ``off_delay`` later (s)."""
    if on_delay == 0.0 and off_delay == 0.0:
        return gate
    if isinstance(gate, PwmGate):
        duty = gate.duty + (off_delay - on_delay) * gate.frequency
        if not 0.0 <= duty <= 1.0:
            raise InputError(f"{what}: the switching times do not fit the PWM period", span)
        return PwmGate(gate.frequency, duty, gate.delay + on_delay)
    if isinstance(gate, ScheduleGate):
        times = [0.0] + [t + (on_delay if s else off_delay) for t, s in zip(gate.times[1:], gate.states[1:])]
        if any(b <= a for a, b in zip(times, times[1:])):
            raise InputError(f"{what}: the switching times are longer than an interval of the schedule", span)
        return ScheduleGate(np.array(times), gate.states.copy())
    raise InputError(f"{what}: turn-on and turn-off times apply to schedule(), pwm() and complement() gates; "
                     "a comparison gate switches at its crossing", span)


def _signal_indices(spec: CompareSpec, s, switch: "Switch") -> tuple[int, int]:
    circuit = s.circuit
    if spec.quantity == "v":
        idx = []
        for name, span in zip(spec.names, spec.name_spans):
            if circuit.nodes.get(name) != "electrical":
                raise UnknownNameError(f"switch {switch.name}: the gate names no electrical node {name!r}", span)
            idx.append(s.node(name))
        if len(idx) == 1:
            idx.append(-1)
        if idx[0] == idx[1]:
            raise InputError(f"switch {switch.name}: the gate's voltage is always 0 V", spec.span)
        return idx[0], idx[1]
    (name,) = spec.names
    span = spec.name_spans[0] if spec.name_spans else spec.span
    element = circuit.elements.get(name)
    if element is None:
        raise UnknownNameError(f"switch {switch.name}: the gate names no element {name!r}", span)
    index = s.own_index.get((name, "i"))
    if index is None:
        raise InputError(
            f"switch {switch.name}: a gate can compare i() of an element whose current is an unknown of the "
            f"circuit (inductor, choke, voltage source); {name} is a {element.keyword}",
            span, hint="compare v(a -> b) across a resistor instead, or put a sense element in series",
        )
    return index, -1


# --------------------------------------------------------------------------
# The element.


class Switch(TwoTerminal):
    """``switch Q1 a -> b on=50 mohm off=10 Mohm gate=...``: a gated resistance.

    See the module docstring for the gates. ``i(Q1)`` flows from a to b;
    ``state(Q1)`` is 1 when closed and 0 when open.
    """

    keyword = "switch"
    arguments = (
        Arg("on", OHM, default=10e-3, positive=True, doc="resistance when closed"),
        Arg("off", OHM, default=10e6, positive=True, doc="resistance when open"),
        Arg("gate", kind="expr", resolve=resolve_gate,
            doc="schedule(...), pwm(...), complement(OTHER, dead=...) or a comparison such as v(g) > 2.5 V"),
        Arg("hysteresis", kind="expr", default=None, resolve=resolve_quantity,
            doc="width of the band around a comparison gate's level (V or A)"),
    )
    outputs = {"v": VOLT, "i": AMPERE, "p": WATT, "state": DIMENSIONLESS}
    summary = "switch with on/off resistance, gated by a schedule, a PWM or a comparison"

    def validate(self):
        p = self.params
        if not p["on"] < p["off"]:
            raise InputError(f"switch {self.name}: on= ({p['on']:g} ohm) must be below off= ({p['off']:g} ohm)",
                             self.span_of("on"))
        if isinstance(p["gate"], (nl.Call, nl.Compare, nl.Name, nl.Number)):  # built without a circuit
            p["gate"] = resolve_gate(p["gate"], lambda e: evaluate(e, {}))
        if isinstance(p["hysteresis"], (nl.Call, nl.Compare, nl.Name, nl.Number, nl.BinaryOp)):
            p["hysteresis"] = evaluate(p["hysteresis"], {})
        self.spec = p["gate"]
        self.hysteresis = self._hysteresis(p["hysteresis"])
        self.gate = None if isinstance(self.spec, (CompareSpec, ComplementSpec)) else self.spec

    def sensed_nodes(self) -> tuple[str, ...]:
        if isinstance(self.spec, CompareSpec) and self.spec.quantity == "v":
            return self.spec.names
        return ()

    def _hysteresis(self, given: Quantity | None) -> float:
        """The hysteresis band (V or A), checked against what the gate compares."""
        if given is None:
            return 0.0
        if not isinstance(self.spec, CompareSpec):
            raise InputError(f"switch {self.name}: hysteresis= applies only to a comparison gate",
                             self.span_of("hysteresis"))
        want = self.spec.dimension
        if given.dim != want:
            raise UnitsError(f"hysteresis of switch {self.name} (its gate compares "
                             f"{'a voltage' if want == VOLT else 'a current'}) needs {describe(want)}, "
                             f"got {describe(given.dim)}", self.span_of("hysteresis"))
        if given.value < 0:
            raise InputError("hysteresis= cannot be negative", self.span_of("hysteresis"))
        return given.value

    def branches(self):
        return [Branch(self.nodes["a"], self.nodes["b"], CONDUCTOR)]

    def stamp(self, s):
        self._a, self._b = s.node(self.nodes["a"]), s.node(self.nodes["b"])
        if isinstance(self.spec, CompareSpec):
            self.gate = compare_gate(self.spec, self.hysteresis, s, self)
        elif isinstance(self.spec, ComplementSpec):
            self.gate = complement_gate(self.spec, s.circuit, self)

    def corners(self, start, stop):
        if isinstance(self.gate, (ScheduleGate, PwmGate)):
            return self.gate.corners(start, stop)
        return np.empty(0)

    # -- results ---------------------------------------------------------------------
    def states(self, probe) -> np.ndarray:
        """Closed (1.0) or open (0.0) at each recorded time, from the run's state log."""
        return states_from_log(probe, self)

    def current(self, probe):
        closed = self.states(probe)
        g = np.where(closed > 0.5, 1.0 / self.params["on"], 1.0 / self.params["off"])
        return g * self.across(probe)

    def output(self, quantity, probe):
        if quantity == "state":
            return self.states(probe)
        return super().output(quantity, probe)


# --------------------------------------------------------------------------
# The batch: every switch of a circuit.


class SwitchState:
    """The discrete states of every switch in one run (made by :meth:`SwitchBatch.new_state`).

    ``closed`` holds each switch's state; ``log_t``/``log_s`` the times of
    every change and the states from then on; ``cursor`` the next entry of
    the merged schedule table; ``pending`` a comparison crossing the batch
    located and the solver is stepping onto; ``chatter`` the consecutive
    changes of each comparison gate.
    """

    __slots__ = ("closed", "cursor", "pending", "chatter", "t_seen", "log_t", "log_s", "g_cache")

    def __init__(self, n: int, n_compare: int):
        self.closed = np.zeros(n, dtype=bool)
        self.cursor = 0
        self.pending: tuple[float, float, np.ndarray] | None = None
        self.chatter = np.zeros(n_compare, dtype=np.int64)
        self.t_seen = -math.inf
        self.log_t: list[float] = []
        self.log_s: list[np.ndarray] = []
        self.g_cache: tuple | None = None


@dataclass(frozen=True)
class SwitchSnapshot:
    """The switch states at one instant, immutable (part of a run's end state)."""

    time: float
    closed: tuple[bool, ...]
    chatter: tuple[int, ...]


class SwitchBatch(NonlinearBatch):
    """All switches: ``f = g(state)*(v_a - v_b)``, piecewise linear between events.

    Time gates (schedules, PWM) and comparison gates are each evaluated
    with a handful of numpy calls per accepted time point, whatever the
    number of switches. The batch holds only what compilation fixed; the
    states of a run live in a :class:`SwitchState` from :meth:`new_state`.
    """

    piecewise_linear = True

    def __init__(self, elements, stamper):
        super().__init__(elements, stamper)
        self.column = {e.name: k for k, e in enumerate(elements)}
        n = len(elements)
        self.size = n
        self.pattern = BranchPattern(np.array([e._a for e in elements]), np.array([e._b for e in elements]))
        self.f_rows = self.pattern.f_rows
        self.jf_rows, self.jf_cols = self.pattern.jf_rows, self.pattern.jf_cols
        self.g_on = np.array([1.0 / e.params["on"] for e in elements])
        self.g_off = np.array([1.0 / e.params["off"] for e in elements])
        gates = [e.gate for e in elements]
        # Schedules: one merged, time-sorted table of changes.
        sched = [k for k, g in enumerate(gates) if isinstance(g, ScheduleGate)]
        self.sched_idx = np.array(sched, dtype=np.int64)
        self.sched_first = np.array([gates[k].states[0] for k in sched], dtype=bool)
        rows = [(t, k, s) for k in sched for t, s in zip(gates[k].times[1:], gates[k].states[1:])]
        rows.sort(key=lambda r: r[0])
        self.change_t = np.array([r[0] for r in rows], dtype=float)
        self.change_k = np.array([r[1] for r in rows], dtype=np.int64)
        self.change_s = np.array([r[2] for r in rows], dtype=bool)
        # PWM gates: vectorised formula.
        pwm = [k for k, g in enumerate(gates) if isinstance(g, PwmGate)]
        self.pwm_idx = np.array(pwm, dtype=np.int64)
        self.pwm_period = np.array([gates[k].period for k in pwm])
        self.pwm_duty = np.array([gates[k].duty for k in pwm])
        self.pwm_delay = np.array([gates[k].delay for k in pwm])
        # Comparison gates.
        cmp_ = [k for k, g in enumerate(gates) if isinstance(g, CompareGate)]
        self.cmp_idx = np.array(cmp_, dtype=np.int64)
        self.cmp_pos = NodeSelector(np.array([gates[k].pos for k in cmp_], dtype=np.int64))
        self.cmp_neg = NodeSelector(np.array([gates[k].neg for k in cmp_], dtype=np.int64))
        self.cmp_sign = np.array([gates[k].sign for k in cmp_])
        self.cmp_level = np.array([gates[k].level for k in cmp_])
        self.cmp_half = np.array([gates[k].hysteresis / 2.0 for k in cmp_])
        scale = np.maximum.reduce([np.abs(self.cmp_level), 2 * self.cmp_half, np.ones(len(cmp_))]) \
            if cmp_ else np.empty(0)
        self.cmp_tol = 1e-9 * scale
        self.names = [e.name for e in elements]

    # -- run state ------------------------------------------------------------------
    def new_state(self, t: float = 0.0) -> SwitchState:
        """Every switch as its gate sets it at time t (comparison gates open), log started."""
        state = SwitchState(self.size, self.cmp_idx.size)
        self._rewind(state, t)
        return state

    def _rewind(self, state: SwitchState, t: float) -> None:
        closed = state.closed
        closed[:] = False
        closed[self.sched_idx] = self.sched_first
        state.cursor = 0
        self._advance_schedules(state, t)
        if self.pwm_idx.size:
            closed[self.pwm_idx] = pwm_states(t, self.pwm_period, self.pwm_duty, self.pwm_delay)
        state.chatter[:] = 0
        state.pending = None
        state.t_seen = t
        state.log_t = [t]
        state.log_s = [closed.copy()]

    def snapshot(self, state: SwitchState) -> SwitchSnapshot:
        return SwitchSnapshot(state.t_seen, tuple(bool(v) for v in state.closed),
                              tuple(int(v) for v in state.chatter))

    def restore(self, snapshot: SwitchSnapshot, t: float) -> SwitchState:
        """A state at t with the switches as in ``snapshot``: comparison gates keep
        their state; schedules and PWM gates take the state their time gives."""
        state = self.new_state(t)
        if self.cmp_idx.size:
            state.closed[self.cmp_idx] = np.asarray(snapshot.closed, dtype=bool)[self.cmp_idx]
            state.chatter[:] = snapshot.chatter
        state.log_s = [state.closed.copy()]
        return state

    def state_log(self, state: SwitchState, element) -> tuple[np.ndarray, np.ndarray]:
        k = self.column[element.name]
        return np.array(state.log_t, dtype=float), np.array([s[k] for s in state.log_s], dtype=float)

    def state_key(self, state: SwitchState):
        return state.closed.tobytes()

    # -- time gates -----------------------------------------------------------------
    def _advance_schedules(self, state: SwitchState, t: float) -> None:
        end = int(np.searchsorted(self.change_t, t * (1 + 1e-12) + 1e-30, side="right"))
        if end > state.cursor:
            state.closed[self.change_k[state.cursor:end]] = self.change_s[state.cursor:end]
            state.cursor = end

    def _signal(self, x: np.ndarray) -> np.ndarray:
        """``sign*(signal - level)`` of every comparison gate: > 0 means the comparison holds."""
        s = self.cmp_pos(x) - self.cmp_neg(x)
        return self.cmp_sign * (s - self.cmp_level)

    # -- protocol -----------------------------------------------------------------------
    def evaluate(self, x, t, state: SwitchState):
        g, jf = self._conductances(state)
        v = self.pattern.across(x)
        return self.pattern.f_values(g * v), jf, self.empty, self.empty

    def _conductances(self, state: SwitchState) -> tuple[np.ndarray, np.ndarray]:
        """Per-switch conductance and the Jacobian values, cached until a state changes."""
        key = state.closed.tobytes()
        cache = state.g_cache
        if cache is None or cache[0] != key:
            g = np.where(state.closed, self.g_on, self.g_off)
            cache = state.g_cache = (key, g, self.pattern.jf_values(g))
        return cache[1], cache[2]

    def update_events(self, t, x, state: SwitchState):
        if t < state.t_seen:
            raise ValueError(f"switch states asked for t = {t:g} s after t = {state.t_seen:g} s: "
                             "a run's state cannot go back in time (start a new run)")
        state.t_seen = t
        old = state.closed.copy()
        self._advance_schedules(state, t)
        if self.pwm_idx.size:
            state.closed[self.pwm_idx] = pwm_states(t, self.pwm_period, self.pwm_duty, self.pwm_delay)
        if self.cmp_idx.size:
            self._update_comparisons(state, t, x)
        changed = bool(np.any(state.closed != old))
        if changed:
            state.log_t.append(t)
            state.log_s.append(state.closed.copy())
        return changed

    def _update_comparisons(self, state: SwitchState, t: float, x: np.ndarray) -> None:
        y = self._signal(x)
        closed = state.closed[self.cmp_idx]
        turn_on = ~closed & (y > self.cmp_half - self.cmp_tol)
        turn_off = closed & (y < -self.cmp_half + self.cmp_tol)
        if state.pending is not None:
            te, span, which = state.pending
            if abs(t - te) <= 1e-6 * span:
                # The solver landed on a crossing this batch located: take it.
                turn_on |= which & ~closed
                turn_off |= which & closed
            state.pending = None
        flip = turn_on | turn_off
        state.closed[self.cmp_idx] = closed ^ flip
        state.chatter = np.where(flip, state.chatter + 1, 0)
        if np.any(state.chatter >= MAX_CHATTER):
            k = int(self.cmp_idx[np.argmax(state.chatter)])
            raise SimulationError(
                f"switch {self.names[k]} changes state at each of the last {MAX_CHATTER} time points "
                f"(t = {t:.6g} s): its comparison gate chatters (no or too little hysteresis while its own "
                "switching drives the compared quantity back across the level), or the step is too long "
                "to resolve its switching; add hysteresis= or shorten step=",
                time=t, unknowns=(self.names[k],),
            )

    def event_time(self, t0, x0, t1, x1, state: SwitchState):
        if not self.cmp_idx.size or not t1 > t0:
            return None
        y0, y1 = self._signal(x0), self._signal(x1)
        closed = state.closed[self.cmp_idx]
        target = np.where(closed, -self.cmp_half, self.cmp_half)
        crosses = np.where(closed, (y0 >= target) & (y1 < target), (y0 <= target) & (y1 > target))
        if not np.any(crosses):
            return None
        with np.errstate(invalid="ignore", divide="ignore"):
            frac = np.where(crosses, (target - y0) / (y1 - y0), np.inf)
        frac = np.clip(frac, 0.0, 1.0)
        te_all = t0 + frac * (t1 - t0)
        te = float(np.min(te_all))
        span = t1 - t0
        state.pending = (te, span, crosses & (te_all <= te + 1e-6 * span))
        return te

    def corners(self, start, stop):
        return np.empty(0)


Switch.Batch = SwitchBatch
