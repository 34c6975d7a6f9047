"""Power transistors as switches with losses: the ``mosfet`` and ``igbt`` kinds.

Netlist::

    mosfet Q1 d -> s  gate=pwm(frequency=20 kHz, duty=40 %)  on-resistance=12 mohm
        tempco=0.6 %/K  junction=j1
        turn-on-delay=15 ns  rise-time=25 ns  turn-off-delay=40 ns  fall-time=20 ns
        turn-on-energy=85 uJ  turn-off-energy=40 uJ  test-voltage=400 V  test-current=20 A
        diode-drop=0.9 V  diode-current=20 A
        output-capacitance=points(0 V: 2 nF, 50 V: 400 pF, 400 V: 120 pF)
    igbt Q2 c -> e  gate=complement(Q1, dead=500 ns)  knee-voltage=0.8 V  on-resistance=25 mohm ...

A device is a gated switch (the gates of the ``switch`` kind that are set by
time: ``schedule``, ``pwm``, ``complement``) with datasheet behaviour:

- **Channel.** Closed, a MOSFET conducts both ways through
  ``R(Tj) = on-resistance * (1 + tempco * (Tj - reference-temperature))``
  (the datasheet's normalised R_DS(on) against Tj, taken as a straight line);
  an IGBT conducts forward only, ``v = knee-voltage + R(Tj) * i`` (V_CE(sat)
  as a knee and a slope), smoothed over 20 mV below the knee. Open, both
  are ``off=`` (default 10 Mohm).
- **Gate timing.** The conduction state changes at the middle of each
  datasheet transition: ``turn-on-delay + rise-time/2`` after the gate
  closes and ``turn-off-delay + fall-time/2`` after it opens (a linear ramp
  has the same volt-seconds as a step at its midpoint).
- **Body (or anti-parallel) diode** with ``diode-drop=``: an exponential
  junction ``b -> a`` through the datasheet point (V_SD at I_S), whose drop
  moves by ``diode-tempco=`` (default -2 mV/K) with junction temperature.
- **Output capacitance** ``output-capacitance=``: a constant, or
  ``points(V: C, ...)`` from the datasheet's C_oss curve, linear between
  points and flat beyond them; its charge is ``Q(v) = integral of C``.
- **Switching energy.** At each change of state the datasheet's
  ``turn-on-energy`` / ``turn-off-energy`` (measured at ``test-voltage`` and
  ``test-current``) is scaled linearly to the operating point: ``E = E_test
  * (V / V_test) * (I / I_test)``, with V the blocked voltage and I the
  switched channel current (common practice for datasheet switching
  energies; e.g. Wintrich, Nicolai, Tursky and Reimann, "Application Manual
  Power Semiconductors", SEMIKRON 2015, ch. 3 (from memory), which also
  gives exponents other than 1). The blocked voltage before a turn-on and
  the current before a turn-off are read at the instant of the change; the
  other factor at the first time point after it. This energy is an
  estimate from the datasheet, *not drawn from the circuit*: the ideal
  channel changes state instantly. It heats the junction as a rectangular
  pulse lasting the transition (``rise-time``/``fall-time``, at least
  0.5 us) from the first time point after the change; the solver lands on
  the pulse's end.
- **Junction.** With ``junction=NODE`` (a thermal node) the device's
  conduction and switching losses flow into that node as heat, and the
  on-resistance and diode drop follow its temperature. Without it the
  junction stays at ``temperature=`` (default: the ambient).

Results: ``v i p`` as any two-terminal element (``i`` includes the diode
and the output capacitance), ``state`` (1 on), ``Tj`` (K), ``pcond`` (W:
channel and diode conduction, ``v * (i_channel + i_diode)``) and ``esw`` (J:
switching energy so far, a staircase that steps at the first time point
after each change of state) and ``eloss`` (J: conduction and switching
energy so far; ``loss(Q1)`` in a check is its average power).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.constants import Boltzmann, elementary_charge

from .. import netlist as nl
from ..errors import InputError, UnitsError
from ..expressions import evaluate
from ..units import (
    AMPERE,
    DIMENSIONLESS,
    FARAD,
    JOULE,
    KELVIN,
    OHM,
    SECOND,
    VOLT,
    WATT,
    Dimension,
    describe,
)
from .base import CONDUCTOR, ELECTRICAL, THERMAL, Arg, Branch, NonlinearBatch, Port, Unknown
from .batching import NodeSelector
from .passive import TwoTerminal
from .semiconductors import EXP_LIMIT, critical_voltage, limit_junction, safe_exp, scale_step
from .switches import (
    CompareSpec,
    ComplementSpec,
    PwmGate,
    ScheduleGate,
    complement_gate,
    delay_gate,
    pwm_states,
    resolve_gate,
)
from .thermal import ambient_temperature

#: Shortest heat pulse of a switching energy (s): long enough not to force tiny
#: steps, far shorter than the first time constant of any datasheet Zth (~10 us).
MIN_HEAT_PULSE = 0.5e-6
#: Largest change of a junction temperature (K) in one Newton iteration.
MAX_TEMPERATURE_STEP = 25.0
#: Junction temperatures (K) outside this range are taken at its ends by the
#: device law (while Newton iterates, or in a device far past its ratings).
JUNCTION_RANGE = (150.0, 700.0)
#: Width (V) over which an IGBT's forward knee is smoothed.
KNEE_SMOOTHING = 0.02
#: The on-resistance never falls below this fraction of its datasheet value
#: (keeps a large negative tempco from reaching zero resistance).
MIN_RESISTANCE_FRACTION = 0.1

INVERSE_KELVIN = DIMENSIONLESS / KELVIN
VOLT_PER_KELVIN = VOLT / KELVIN


def thermal_voltage(temperature):
    """``k*T/q`` (V) at ``temperature`` (K)."""
    return Boltzmann * temperature / elementary_charge


# --------------------------------------------------------------------------
# Output capacitance table.


def resolve_capacitance(expr, value) -> tuple[np.ndarray, np.ndarray]:
    """(voltages V, capacitances F) of ``output-capacitance=``: a constant or points(V: C, ...)."""
    span = getattr(expr, "span", None)
    what = "output-capacitance="
    if isinstance(expr, nl.Call) and expr.func == "points":
        if expr.named or not expr.args:
            raise InputError(f"{what} points() lists V: C pairs, like points(0 V: 2 nF, 400 V: 120 pF)", span)
        vs, cs = [], []
        for item in expr.args:
            if not isinstance(item, nl.Pair):
                raise InputError(f"{what} each points() entry is V: C, like 50 V: 400 pF",
                                 getattr(item, "span", None))
            vs.append(_value(item.key, value, VOLT, f"a voltage of {what}"))
            cs.append(_value(item.value, value, FARAD, f"a capacitance of {what}"))
        if vs[0] < 0 or any(b <= a for a, b in zip(vs, vs[1:])):
            raise InputError(f"{what} points() voltages start at 0 V or above and increase", span)
        if min(cs) <= 0:
            raise InputError(f"{what} capacitances must be positive", span)
        return np.array(vs), np.array(cs)
    c = _value(expr, value, FARAD, what)
    if c <= 0:
        raise InputError(f"{what} must be positive", span)
    return np.array([0.0]), np.array([c])


def _value(expr, value, want: Dimension, what: str) -> float:
    q = value(expr)
    if q.dim != want:
        raise UnitsError(f"{what} needs {describe(want)}, got {describe(q.dim)}", getattr(expr, "span", None))
    return q.value


class CapacitanceTables:
    """Charge ``Q(v)`` and capacitance ``C(v)`` of many piecewise-linear C(v) curves at once.

    Each row is one device: voltages ``V[k, :]`` (padded by repeating the
    last point) and capacitances. C is linear between points, flat beyond
    them and for v < 0 equal to C at the first point; Q(0) = 0.
    """

    def __init__(self, tables: list[tuple[np.ndarray, np.ndarray]]):
        m = max(len(v) for v, _ in tables)
        self.V = np.array([np.concatenate([v, np.full(m - len(v), v[-1] + 1.0 + np.arange(m - len(v)))])
                           for v, _ in tables])
        self.C = np.array([np.concatenate([c, np.full(m - len(c), c[-1])]) for _, c in tables])
        # Q at each point from 0 V (the first point may lie above 0 V: flat below it)
        q0 = self.C[:, 0] * self.V[:, 0]
        seg = 0.5 * (self.C[:, 1:] + self.C[:, :-1]) * np.diff(self.V, axis=1)
        self.Q = np.concatenate([q0[:, None], q0[:, None] + np.cumsum(seg, axis=1)], axis=1)
        slope = np.diff(self.C, axis=1) / np.diff(self.V, axis=1)
        self.slope = np.concatenate([slope, np.zeros((len(tables), 1))], axis=1)
        self.rows = np.arange(len(tables))

    def __call__(self, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        k = np.clip((v[:, None] >= self.V).sum(axis=1) - 1, 0, self.V.shape[1] - 1)
        below = v < self.V[:, 0]
        dv = v - self.V[self.rows, k]
        slope = np.where(below, 0.0, self.slope[self.rows, k])
        c0 = self.C[self.rows, k]
        c = c0 + slope * dv
        q = self.Q[self.rows, k] + c0 * dv + 0.5 * slope * dv * dv
        q = np.where(below, self.C[:, 0] * v, q)
        c = np.where(below, self.C[:, 0], c)
        return q, c


# --------------------------------------------------------------------------
# The element.


class Mosfet(TwoTerminal):
    """``mosfet Q1 d -> s gate=... on-resistance=12 mohm ...``: see the module docstring."""

    keyword = "mosfet"
    ports = (Port(("a", "b"), ELECTRICAL), Port(("junction",), THERMAL, keyword=True, minimum=0))
    arguments = (
        Arg("gate", kind="expr", resolve=resolve_gate, doc="schedule(...), pwm(...) or complement(OTHER, dead=...)"),
        Arg("on-resistance", OHM, default=10e-3, positive=True,
            doc="R_DS(on) at the reference temperature (for an igbt: the slope r_CE)"),
        Arg("tempco", INVERSE_KELVIN, default=0.0,
            doc="relative rise of the on-resistance per kelvin of junction temperature (e.g. 0.6 %/K)"),
        Arg("reference-temperature", KELVIN, default=298.15, positive=True, absolute=True,
            doc="junction temperature of the datasheet values (default 25 °C)"),
        Arg("off", OHM, default=10e6, positive=True, doc="resistance when off (leakage)"),
        Arg("turn-on-delay", SECOND, default=0.0, nonnegative=True, doc="t_d(on)"),
        Arg("rise-time", SECOND, default=0.0, nonnegative=True, doc="t_r"),
        Arg("turn-off-delay", SECOND, default=0.0, nonnegative=True, doc="t_d(off)"),
        Arg("fall-time", SECOND, default=0.0, nonnegative=True, doc="t_f"),
        Arg("turn-on-energy", JOULE, default=0.0, nonnegative=True, doc="E_on at test-voltage and test-current"),
        Arg("turn-off-energy", JOULE, default=0.0, nonnegative=True, doc="E_off at test-voltage and test-current"),
        Arg("test-voltage", VOLT, default=None, positive=True, doc="voltage of the datasheet's switching test"),
        Arg("test-current", AMPERE, default=None, positive=True, doc="current of the datasheet's switching test"),
        Arg("diode-drop", VOLT, default=None, positive=True,
            doc="body diode forward voltage V_SD at diode-current (no diode without it)"),
        Arg("diode-current", AMPERE, default=1.0, positive=True, doc="current of the diode-drop datasheet point"),
        Arg("diode-tempco", VOLT_PER_KELVIN, default=-2e-3, doc="change of the diode drop per kelvin"),
        Arg("output-capacitance", kind="expr", default=None, resolve=resolve_capacitance,
            doc="C_oss: a capacitance, or points(V: C, ...) from the datasheet curve"),
        Arg("temperature", KELVIN, default=None, positive=True, absolute=True,
            doc="junction temperature without a junction= node (default: the ambient)"),
    )
    outputs = {"v": VOLT, "i": AMPERE, "p": WATT, "state": DIMENSIONLESS, "Tj": KELVIN,
               "pcond": WATT, "esw": JOULE, "eloss": JOULE}
    summary = "power MOSFET: gated channel with R_DS(on)(Tj), timing, body diode, C_oss, switching energy"

    #: An IGBT sets this to its knee voltage; a MOSFET conducts both ways from 0 V.
    forward_only = False
    #: What the loss table reads (mna.losses): part -> (output, "power" in W or "energy" so far in J).
    loss_parts = {"conduction": ("pcond", "power"), "switching": ("esw", "energy")}

    def validate(self):
        p = self.params
        if not p["on-resistance"] < p["off"]:
            raise InputError(f"{self.keyword} {self.name}: on-resistance= must be below off=",
                             self.span_of("on-resistance"))
        if isinstance(p["gate"], nl.Expr.__args__[:-1]):  # built without a circuit
            p["gate"] = resolve_gate(p["gate"], lambda e: evaluate(e, {}))
        if isinstance(p["output-capacitance"], nl.Expr.__args__[:-1]):
            p["output-capacitance"] = resolve_capacitance(p["output-capacitance"], lambda e: evaluate(e, {}))
        self.spec = p["gate"]
        if isinstance(self.spec, CompareSpec):
            raise InputError(f"{self.keyword} {self.name}: a {self.keyword}'s gate is schedule(), pwm() or "
                             "complement(); for a switch driven by a comparison use the switch kind",
                             self.span_of("gate"))
        energies = p["turn-on-energy"] > 0 or p["turn-off-energy"] > 0
        if energies and (p["test-voltage"] is None or p["test-current"] is None):
            raise InputError(f"{self.keyword} {self.name}: switching energies need the datasheet's test-voltage= "
                             "and test-current=", self.span_of("turn-on-energy"))
        if "junction" in self.nodes and p["temperature"] is not None:
            raise InputError(f"{self.keyword} {self.name}: give either junction= (a thermal node) or "
                             "temperature=, not both", self.span_of("temperature"))
        self.gate = None

    @property
    def has_capacitance(self) -> bool:
        return self.params["output-capacitance"] is not None

    def branches(self):
        out = [Branch(self.nodes["a"], self.nodes["b"], CONDUCTOR)]
        return out  # the junction node gets heat only (a flow): its own path to ambient is required

    def unknowns(self):
        if self.has_capacitance:
            return (Unknown("qoss", FARAD * VOLT, "charge of the output capacitance"),)
        return ()

    def stamp(self, s):
        self._a, self._b = s.node(self.nodes["a"]), s.node(self.nodes["b"])
        self._j = s.node(self.nodes["junction"]) if "junction" in self.nodes else -1
        what = f"{self.keyword} {self.name}"
        gate = complement_gate(self.spec, s.circuit, self) if isinstance(self.spec, ComplementSpec) else self.spec
        p = self.params
        on_shift = p["turn-on-delay"] + 0.5 * p["rise-time"]
        off_shift = p["turn-off-delay"] + 0.5 * p["fall-time"]
        self.gate = delay_gate(gate, on_shift, off_shift, what, self.span_of("gate"))
        ambient = ambient_temperature(s.circuit)
        self._ambient = ambient
        self._fixed_temperature = ambient if p["temperature"] is None or self._j >= 0 else p["temperature"]
        self._state_q = None
        self.table = None
        if self.has_capacitance:
            self.table = p["output-capacitance"]
            q = s.own("qoss")
            # the charge leaves a and enters b: d/dt qoss in both KCL rows
            s.c_entry(self._a, q, 1.0)
            s.c_entry(self._b, q, -1.0)
            self._state_q = s.state({q: 1.0})
            self._q = q

    def corners(self, start, stop):
        if isinstance(self.gate, (ScheduleGate, PwmGate)):
            return self.gate.corners(start, stop)
        return np.empty(0)

    # -- results ---------------------------------------------------------------------
    def _log(self, probe):
        log_t, log_v = probe.state_log(self)
        return np.asarray(log_t, dtype=float), np.asarray(log_v, dtype=float).reshape(-1, 2)

    def _column(self, probe, col: int) -> np.ndarray:
        time = np.asarray(probe.time, dtype=float)
        log_t, log_v = self._log(probe)
        if log_t.size == 0:
            return np.zeros_like(time)
        return step_lookup(log_t, log_v[:, col], time)

    def junction_temperature(self, probe) -> np.ndarray:
        if "junction" in self.nodes:
            return probe.node(self.nodes["junction"]) + self._ambient
        return np.full_like(np.asarray(probe.time, dtype=float), self._fixed_temperature)

    def conduction(self, probe) -> np.ndarray:
        """Channel plus diode current a -> b (A) at each recorded time."""
        law = DeviceLaw.of([self])
        v = self.across(probe)
        tj = self.junction_temperature(probe)
        closed = self._column(probe, 0) > 0.5
        i, *_ = law.currents(v, tj, closed)
        return i

    def current(self, probe):
        i = self.conduction(probe)
        if self._state_q is not None:
            i = i + probe.rate(self._state_q)
        return i

    def output(self, quantity, probe):
        if quantity == "state":
            return self._column(probe, 0)
        if quantity == "Tj":
            return self.junction_temperature(probe)
        if quantity == "pcond":
            return self.across(probe) * self.conduction(probe)
        if quantity == "esw":
            return self._column(probe, 1)
        if quantity == "eloss":
            return sum(self.loss_energies(probe).values())
        return super().output(quantity, probe)

    def loss_energies(self, probe) -> dict[str, np.ndarray]:
        """Energy lost so far (J) by kind at each recorded time: what the loss table reads."""
        t = np.asarray(probe.time, dtype=float)
        return {"conduction": cumulative_trapezoid(t, self.output("pcond", probe)),
                "switching": self.output("esw", probe)}


class Igbt(Mosfet):
    """``igbt Q2 c -> e gate=... knee-voltage=0.8 V on-resistance=25 mohm ...``.

    As :class:`Mosfet`, but the channel conducts forward only, with
    ``V_CE = knee-voltage + R(Tj) * I_C`` (the datasheet's V_CE(sat) split
    into a knee and a slope); reverse current needs the anti-parallel
    diode (``diode-drop=``). No tail current is modelled: the datasheet's
    E_off includes it.
    """

    keyword = "igbt"
    arguments = Mosfet.arguments + (
        Arg("knee-voltage", VOLT, default=0.7, nonnegative=True,
            doc="V_CE0: the on-state voltage extrapolated to zero current"),
    )
    summary = "IGBT: gated forward channel V_CE0 + r_CE*I(Tj), timing, anti-parallel diode, switching energy"
    forward_only = True


def step_lookup(log_t: np.ndarray, log_v: np.ndarray, time: np.ndarray) -> np.ndarray:
    """The value of a logged step signal at each recorded time.

    The first of two samples at one time is the one before a change there.
    """
    k = np.searchsorted(log_t, time, side="right") - 1
    first_of_pair = np.zeros(time.size, dtype=bool)
    first_of_pair[:-1] = time[1:] == time[:-1]
    before = np.searchsorted(log_t, time, side="left") - 1
    k = np.where(first_of_pair, before, k)
    return np.where(k >= 0, log_v[np.maximum(k, 0)], log_v[0]).astype(float)


def cumulative_trapezoid(t: np.ndarray, y: np.ndarray) -> np.ndarray:
    out = np.zeros_like(y)
    if len(y) > 1:
        out[1:] = np.cumsum(0.5 * (y[1:] + y[:-1]) * np.diff(t))
    return out


# --------------------------------------------------------------------------
# Device equations for many devices at once.


@dataclass
class DeviceLaw:
    """Per-device constants of the conduction law, as arrays."""

    r_ref: np.ndarray
    tempco: np.ndarray
    t_ref: np.ndarray
    g_off: np.ndarray
    knee: np.ndarray  # nan for a MOSFET (both ways from 0 V)
    has_diode: np.ndarray
    vf_ref: np.ndarray
    i_f: np.ndarray
    vf_tc: np.ndarray

    @classmethod
    def of(cls, elements) -> "DeviceLaw":
        def arr(f):
            return np.array([f(e) for e in elements], dtype=float)

        return cls(
            r_ref=arr(lambda e: e.params["on-resistance"]),
            tempco=arr(lambda e: e.params["tempco"]),
            t_ref=arr(lambda e: e.params["reference-temperature"]),
            g_off=arr(lambda e: 1.0 / e.params["off"]),
            knee=arr(lambda e: e.params["knee-voltage"] if e.forward_only else math.nan),
            has_diode=np.array([e.params["diode-drop"] is not None for e in elements]),
            vf_ref=arr(lambda e: e.params["diode-drop"] or 1.0),
            i_f=arr(lambda e: e.params["diode-current"]),
            vf_tc=arr(lambda e: e.params["diode-tempco"]),
        )

    def __post_init__(self):
        self.all_mos = bool(np.all(np.isnan(self.knee)))
        self.slope_r = self.r_ref * self.tempco

    def resistance(self, tj: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """R(Tj) (ohm) and dR/dTj (ohm/K)."""
        scale = 1.0 + self.tempco * (tj - self.t_ref)
        if np.all(scale >= MIN_RESISTANCE_FRACTION):
            return self.r_ref * scale, self.slope_r
        low = scale < MIN_RESISTANCE_FRACTION
        r = self.r_ref * np.where(low, MIN_RESISTANCE_FRACTION, scale)
        return r, np.where(low, 0.0, self.slope_r)

    def diode_nvt(self, tj: np.ndarray) -> np.ndarray:
        return thermal_voltage(tj)

    def currents(self, v: np.ndarray, tj: np.ndarray, closed: np.ndarray):
        """Conduction current a -> b (A) and its derivatives d/dv (S) and d/dTj (A/K)."""
        r, dr = self.resistance(tj)
        g_on = 1.0 / r
        # channel: a MOSFET both ways from 0 V, an IGBT forward from its knee
        if self.all_mos:
            drive, slope = v, 1.0
        else:
            mos = np.isnan(self.knee)
            u = (v - np.where(mos, 0.0, self.knee)) / KNEE_SMOOTHING
            soft = np.logaddexp(0.0, u) * KNEE_SMOOTHING  # smooth max(v - knee, 0)
            sig = 0.5 * (1.0 + np.tanh(0.5 * u))  # its slope
            drive = np.where(mos, v, soft)
            slope = np.where(mos, 1.0, sig)
        i_ch = np.where(closed, g_on * drive, self.g_off * v)
        g_ch = np.where(closed, g_on * slope, self.g_off)
        dT_ch = np.where(closed, -drive * dr * g_on * g_on, 0.0)
        # body diode, anode at b: i_d (a -> b) = -I_F [exp(w) - exp(w0)],
        # w = (-v - Vf(T)) / Vt(T), w0 = -Vf(T) / Vt(T)
        if not np.any(self.has_diode):
            return i_ch, g_ch, dT_ch
        vt = self.diode_nvt(tj)
        vf = self.vf_ref + self.vf_tc * (tj - self.t_ref)
        w = (-v - vf) / vt
        w0 = np.maximum(-vf / vt, -10 * EXP_LIMIT)
        ew, dew = safe_exp(w)
        e0 = np.exp(w0)
        i_d = -self.i_f * (ew - e0)
        g_d = self.i_f * dew / vt
        dw = -self.vf_tc / vt - w / tj
        dw0 = -self.vf_tc / vt - w0 / tj
        dT_d = -self.i_f * (dew * dw - e0 * dw0)
        on = self.has_diode
        return (i_ch + np.where(on, i_d, 0.0), g_ch + np.where(on, g_d, 0.0), dT_ch + np.where(on, dT_d, 0.0))

    def diode_limits(self, tj: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(Vt, critical voltage) of each diode for junction limiting."""
        vt = self.diode_nvt(tj)
        vf = self.vf_ref + self.vf_tc * (tj - self.t_ref)
        isat = self.i_f * np.exp(np.maximum(-vf / vt, -10 * EXP_LIMIT))
        return vt, critical_voltage(np.maximum(isat, 1e-300), vt)


# --------------------------------------------------------------------------
# Run state and the batch.


class TransistorState:
    """One run's states of every device: on/off, pending switching energies, heat pulses, the log."""

    __slots__ = ("closed", "t_seen", "pending", "pulse_start", "pulse_end", "pulse_power", "energy", "log_t",
                 "log_s")

    def __init__(self, n: int):
        self.closed = np.zeros(n, dtype=bool)
        self.t_seen = -math.inf
        # an energy to compute at the next time point: (time, turn-on?, value at the change)
        self.pending: list[tuple[int, float, bool, float]] = []
        self.pulse_start = np.zeros(n)
        self.pulse_end = np.full(n, -math.inf)
        self.pulse_power = np.zeros(n)
        self.energy = np.zeros(n)  # switching energy so far (J)
        self.log_t: list[float] = []
        self.log_s: list[np.ndarray] = []

    def record(self, t: float) -> None:
        row = np.stack([self.closed.astype(float), self.energy.copy()], axis=1)
        if self.log_t and self.log_t[-1] == t:
            self.log_s[-1] = row
        else:
            self.log_t.append(t)
            self.log_s.append(row)


class TransistorBatch(NonlinearBatch):
    """Every mosfet and igbt: channel, body diode, C_oss and junction heat, one numpy evaluation."""

    def __init__(self, elements, stamper):
        super().__init__(elements, stamper)
        self.size = n = len(elements)
        self.column = {e.name: k for k, e in enumerate(elements)}
        a = np.array([e._a for e in elements], dtype=np.int64)
        b = np.array([e._b for e in elements], dtype=np.int64)
        j = np.array([e._j for e in elements], dtype=np.int64)
        self.va, self.vb, self.tj_rise = NodeSelector(a), NodeSelector(b), NodeSelector(j)
        self.t_fixed = np.array([e._fixed_temperature for e in elements])
        self.law = DeviceLaw.of(elements)
        self.any_diode = bool(np.any(self.law.has_diode))
        # residual rows: +i at a, -i at b, -P at j; then the C_oss rows
        cap = [k for k, e in enumerate(elements) if e.table is not None]
        self.cap_idx = np.array(cap, dtype=np.int64)
        qrow = np.array([elements[k]._q for k in cap], dtype=np.int64)
        self.tables = CapacitanceTables([elements[k].table for k in cap]) if cap else None
        f_rows = np.concatenate([a, b, j, qrow])
        self._f_keep = f_rows >= 0
        self.f_rows = f_rows[self._f_keep]
        # Jacobian blocks (value order in evaluate)
        ca, cb, cj = (np.take(x, self.cap_idx) if cap else np.empty(0, np.int64) for x in (a, b, j))
        blocks = [(a, a), (a, b), (b, a), (b, b), (a, j), (b, j), (j, a), (j, b), (j, j),
                  (qrow, qrow), (qrow, ca), (qrow, cb)]
        jr = np.concatenate([r for r, _ in blocks])
        jc = np.concatenate([c for _, c in blocks])
        self._j_keep = (jr >= 0) & (jc >= 0)
        self.jf_rows, self.jf_cols = jr[self._j_keep], jc[self._j_keep]
        del cj
        # switching energy constants
        p = [e.params for e in elements]
        self.e_on = np.array([q["turn-on-energy"] for q in p])
        self.e_off = np.array([q["turn-off-energy"] for q in p])
        self.v_test = np.array([q["test-voltage"] or 1.0 for q in p])
        self.i_test = np.array([q["test-current"] or 1.0 for q in p])
        self.w_on = np.array([max(q["rise-time"], MIN_HEAT_PULSE) for q in p])
        self.w_off = np.array([max(q["fall-time"], MIN_HEAT_PULSE) for q in p])
        self.heats = j >= 0
        self.any_junction = bool(np.any(self.heats))
        self.j_rows = np.unique(j[j >= 0])
        # time gates
        gates = [e.gate for e in elements]
        self.gates = gates
        pwm = [k for k, g in enumerate(gates) if isinstance(g, PwmGate)]
        self.pwm_idx = np.array(pwm, dtype=np.int64)
        self.pwm_period = np.array([gates[k].period for k in pwm])
        self.pwm_duty = np.array([gates[k].duty for k in pwm])
        self.pwm_delay = np.array([gates[k].delay for k in pwm])
        self.sched_idx = [k for k, g in enumerate(gates) if isinstance(g, ScheduleGate)]

    # -- gates ------------------------------------------------------------------------
    def gate_states(self, t: float) -> np.ndarray:
        closed = np.zeros(self.size, dtype=bool)
        if self.pwm_idx.size:
            closed[self.pwm_idx] = pwm_states(t, self.pwm_period, self.pwm_duty, self.pwm_delay)
        for k in self.sched_idx:
            g = self.gates[k]
            closed[k] = bool(g.states[np.searchsorted(g.times, t * (1 + 1e-12) + 1e-30, side="right") - 1])
        return closed

    # -- run state ----------------------------------------------------------------------
    def new_state(self, t: float = 0.0) -> TransistorState:
        state = TransistorState(self.size)
        state.closed[:] = self.gate_states(t)
        state.t_seen = t
        state.record(t)
        return state

    def snapshot(self, state):
        return (state.t_seen, tuple(bool(c) for c in state.closed))

    def restore(self, snapshot, t):
        return self.new_state(t)

    def state_log(self, state, element):
        k = self.column[element.name]
        return np.array(state.log_t, dtype=float), np.array([s[k] for s in state.log_s], dtype=float)

    def state_key(self, state):
        return None  # nonlinear: Newton refactors anyway

    # -- equations -------------------------------------------------------------------------
    def junction(self, x: np.ndarray) -> np.ndarray:
        """Junction temperatures (K), held within JUNCTION_RANGE for the device law."""
        return np.clip(self.t_fixed + self.tj_rise(x), *JUNCTION_RANGE)

    def evaluate(self, x, t, state):
        v = self.va(x) - self.vb(x)
        tj = self.junction(x)
        i, g, di_dt = self.law.currents(v, tj, state.closed)
        heat = v * i
        dh_dv = i + v * g
        dh_dt = v * di_dt
        active = (state.pulse_start < t) & (t <= state.pulse_end * (1 + 1e-12))
        heat = heat + np.where(active, state.pulse_power, 0.0)
        parts_f = [i, -i, -heat]
        parts_j = [g, -g, -g, g, di_dt, -di_dt, -dh_dv, dh_dv, -dh_dt]
        if self.tables is not None:
            qv, cv = self.tables(v[self.cap_idx])
            y = x[np.array([self.elements[k]._q for k in self.cap_idx])]
            parts_f.append(y - qv)
            parts_j += [np.ones(self.cap_idx.size), -cv, cv]
        f = np.concatenate(parts_f)[self._f_keep]
        jf = np.concatenate(parts_j)[self._j_keep]
        return f, jf, self.empty, self.empty

    def limit(self, x_new, x_old):
        if self.any_junction:
            # Newton may not move a junction by more than MAX_TEMPERATURE_STEP per
            # iteration: a first guess with the full channel current at the
            # blocked voltage would otherwise heat it by megakelvins and the
            # temperature-dependent resistance would never settle.
            # Only the junction temperatures are held back: the electrical
            # unknowns take their full step, so the next iteration sees the
            # heat at the right operating point.
            step = x_new[self.j_rows] - x_old[self.j_rows]
            if np.any(np.abs(step) > MAX_TEMPERATURE_STEP):
                x_new = x_new.copy()
                x_new[self.j_rows] = x_old[self.j_rows] + np.clip(step, -MAX_TEMPERATURE_STEP,
                                                                  MAX_TEMPERATURE_STEP)
        if not self.any_diode:
            return x_new
        v_new = -(self.va(x_new) - self.vb(x_new))
        if np.all(v_new < 0.3):  # no diode anywhere near its knee
            return x_new
        v_old = -(self.va(x_old) - self.vb(x_old))
        vt, vcrit = self.law.diode_limits(self.junction(x_old))
        vcrit = np.where(self.law.has_diode, vcrit, np.inf)
        v_lim = limit_junction(v_new, v_old, vt, vcrit)
        if v_lim is v_new:
            return x_new
        return scale_step(x_new, x_old, v_new, v_old, v_lim)

    # -- events --------------------------------------------------------------------------------
    def update_events(self, t, x, state):
        if t < state.t_seen:
            raise ValueError(f"transistor states asked for t = {t:g} s after t = {state.t_seen:g} s")
        # A heat pulse starting or ending changes only the heat into a junction:
        # it is logged but not reported as an event, so the engine does not
        # restart (the solver lands on each pulse end through event_time).
        changed = False
        v = self.va(x) - self.vb(x)
        if state.pending and t > state.t_seen:
            self._start_pulses(t, v, self.junction(x), state)
        ended = (state.pulse_end <= t * (1 + 1e-12)) & (state.pulse_power > 0)
        if np.any(ended):
            state.pulse_power[ended] = 0.0
        new = self.gate_states(t)
        flip = new != state.closed
        if np.any(flip):
            i, _, _ = self.law.currents(v, self.junction(x), state.closed)
            for k in np.flatnonzero(flip):
                turn_on = bool(new[k])
                state.pending.append((int(k), t, turn_on, float(v[k] if turn_on else i[k])))
            state.closed[:] = new
            changed = True
        state.t_seen = t
        if changed:
            state.record(t)
        return changed

    def _start_pulses(self, t, v, tj, state) -> bool:
        """Switching energies of the changes before t, from the values now; start their heat pulses."""
        i, _, _ = self.law.currents(v, tj, state.closed)
        started = False
        for k, _, turn_on, before in state.pending:
            if turn_on:
                volts, amps, e_test, width = before, i[k], self.e_on[k], self.w_on[k]
            else:
                volts, amps, e_test, width = v[k], before, self.e_off[k], self.w_off[k]
            energy = e_test * max(volts, 0.0) / self.v_test[k] * max(amps, 0.0) / self.i_test[k]
            state.energy[k] += energy
            if energy > 0 and self.heats[k]:
                state.pulse_start[k] = t
                state.pulse_end[k] = t + width
                state.pulse_power[k] = energy / width
                started = True
        logged = bool(state.pending)
        state.pending = []
        if logged:
            state.record(t)  # the energies so far
        return started

    def event_time(self, t0, x0, t1, x1, state):
        live = (state.pulse_power > 0) & (state.pulse_end > t0) & (state.pulse_end < t1)
        if not np.any(live):
            return None
        return float(np.min(state.pulse_end[live]))


Mosfet.Batch = TransistorBatch
Igbt.Batch = TransistorBatch

__all__ = ["CapacitanceTables", "DeviceLaw", "Igbt", "Mosfet", "TransistorBatch"]
