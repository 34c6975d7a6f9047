"""The rotating shaft: inertia, friction, load, speed-source, gear.

A shaft node carries the angular speed ``w`` (rad/s) as its potential and
torque (N*m) as its flow; ``frame`` is the stationary reference. The
equations are the electrical ones with the analogy speed <-> voltage,
torque <-> current (Franklin, Powell & Emami-Naeini, *Feedback Control of Dynamic Systems*, ch. 2, from memory):

- ``inertia``: ``J dw/dt`` flows from the shaft to the frame -- a
  capacitance ``J`` to frame (kinetic energy ``J w^2 / 2``);
- ``friction``: viscous, ``B (w_a - w_b)`` -- a conductance ``B``;
- ``load``: torque drawn from the shaft against rotation -- a current
  source whose sign follows the speed (smoothed, see :func:`smooth_sign`),
  plus an optional fan/pump part ``c w |w|``;
- ``speed-source``: holds the shaft at a set speed (a prime mover) -- a
  voltage source whose own unknown is the torque it applies;
- ``gear``: an ideal lossless transmission between two shafts.

Sign of ``torque(X)``: a passive part (inertia, friction, load) reports the
torque it *takes* from its shaft (positive when it resists forward
rotation) and ``p(X)`` the power it absorbs, ``torque * w``; an active part
(speed-source, and the machines in :mod:`mna.elements.machines`) reports
the torque it *applies* to its shaft and ``pmech(X)`` the mechanical power
it delivers.
"""

from __future__ import annotations

from collections import defaultdict
from typing import Sequence

import numpy as np

from ..errors import InputError
from ..units import (
    ANGULAR_SPEED,
    DIMENSIONLESS,
    INERTIA,
    ROTATIONAL_DAMPING,
    TORQUE,
    WATT,
)
from ..waveforms import BatchEvaluator, Constant, Waveform
from .base import (
    CAPACITOR,
    CONDUCTOR,
    CURRENT,
    REFERENCE,
    SHAFT,
    VOLTAGE,
    Arg,
    Branch,
    Element,
    NonlinearBatch,
    Port,
    Unknown,
)

FRAME = REFERENCE[SHAFT]

#: One shaft node, written positionally: ``inertia J1 rotor ...``.
SHAFT_NODE = (Port(("shaft",), SHAFT),)
#: Two shaft nodes: ``friction B1 rotor -> frame ...``.
SHAFT_PAIR = (Port(("a", "b"), SHAFT),)

#: A fan coefficient c in T = c*w*|w| has the unit N*m per (rad/s)^2 = N*m*s^2 (= kg*m^2).
FAN_COEFFICIENT = TORQUE / ANGULAR_SPEED**2


# --------------------------------------------------------------------------
# Numerical kernels (plain functions on arrays).


def smooth_sign(u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """A sign function made continuous and once differentiable, and its slope.

    ``s(u) = 1.5 u - 0.5 u^3`` for ``|u| < 1``, ``sign(u)`` outside. It meets
    +-1 with zero slope at ``|u| = 1``, so past the band the value and the
    Jacobian are exactly constant (a solver can keep its factorization),
    and ``s'(0) = 1.5``. Used for a load torque that opposes rotation
    (``u = w / band``) and for a machine's brush drop (``u = i / band``).
    """
    # clip to [-1, 1] (minimum/maximum: cheaper than np.clip on small arrays);
    # the cubic meets +-1 with zero slope at c = +-1, so no branch is needed
    c = np.minimum(np.maximum(u, -1.0), 1.0)
    c2 = c * c
    return c * (1.5 - 0.5 * c2), 1.5 * (1.0 - c2)


class WaveformSet:
    """Values of many waveforms at one time, one numpy call per waveform class.

    For nonlinear batches whose terms carry a time-varying amplitude (a load
    torque that steps). Built once per compile.
    """

    def __init__(self, waves: Sequence[Waveform]):
        groups: dict[type, list[int]] = defaultdict(list)
        for k, w in enumerate(waves):
            groups[type(w)].append(k)
        self._evaluators = [BatchEvaluator([waves[k] for k in ks]) for ks in groups.values()]
        order = np.concatenate([np.asarray(ks, dtype=np.int64) for ks in groups.values()]) if waves else np.empty(0, np.int64)
        self._order = np.empty(order.size, dtype=np.int64)
        self._order[order] = np.arange(order.size)
        constant = all(isinstance(w, Constant) for w in waves)
        self._constant = np.array([w.level for w in waves]) if constant else None
        self._last: tuple[float, np.ndarray] | None = None

    def __call__(self, t: float) -> np.ndarray:
        if self._constant is not None:
            return self._constant
        last = self._last  # (read once: another thread's run may replace it meanwhile)
        if last is not None and last[0] == t:  # Newton iterates at one time
            return last[1]
        values = np.concatenate([np.asarray(ev(t), dtype=float) for ev in self._evaluators])[self._order]
        self._last = (t, values)
        return values


def _not_frame(element: Element, terminal: str) -> None:
    node = element.nodes[terminal]
    if node == FRAME:
        raise InputError(
            f"{element.keyword} {element.name} is connected to {FRAME!r}, the stationary reference, "
            "where it can do nothing: give it a shaft node",
            element.spans.get(terminal, element.span),
        )


class ShaftPart(Element):
    """A passive single-node shaft part: ``torque`` taken from the shaft, ``p`` absorbed."""

    ports = SHAFT_NODE
    outputs = {"torque": TORQUE, "p": WATT}

    def validate(self) -> None:
        _not_frame(self, "shaft")

    def speed(self, probe) -> np.ndarray:
        return probe.node(self.nodes["shaft"])

    def torque(self, probe) -> np.ndarray:
        raise NotImplementedError

    def output(self, quantity, probe):
        if quantity == "torque":
            return self.torque(probe)
        if quantity == "p":
            return self.torque(probe) * self.speed(probe)
        return super().output(quantity, probe)


# --------------------------------------------------------------------------
# Kinds.


class Inertia(ShaftPart):
    """``inertia J1 rotor 2e-4 kg*m^2 initial=0 rpm``: torque ``J dw/dt``.

    Stamps like a capacitor from the shaft to ``frame`` (capacitance J);
    ``initial=`` is the speed at t = 0 for a run that starts at rest.
    ``torque(J1)`` is the accelerating torque ``J dw/dt`` (N*m) and ``p(J1)``
    the rate of change of kinetic energy ``J w^2 / 2`` (W).
    """

    keyword = "inertia"
    main = "inertia"
    arguments = (
        Arg("inertia", INERTIA, positive=True, doc="moment of inertia (kg*m^2)"),
        Arg("initial", ANGULAR_SPEED, default=0.0, angular=True,
            doc="speed at t = 0 when the run starts at rest (rad/s or rpm)"),
    )
    summary = "moment of inertia of a shaft (J dw/dt)"

    def branches(self):
        return [Branch(self.nodes["shaft"], FRAME, CAPACITOR)]

    def stamp(self, s):
        w = s.node(self.nodes["shaft"])
        j = self.params["inertia"]
        s.c_entry(w, w, j)
        self._state = s.state({w: j})
        s.initial_charge(w, j * self.params["initial"])

    def torque(self, probe):
        return probe.rate(self._state)


class Friction(Element):
    """``friction B1 rotor -> frame 1e-5 N*m*s/rad``: viscous torque ``B (w_a - w_b)``.

    Stamps like a conductance ``B``. Between two shafts it is a viscous
    coupling (a fluid clutch). ``torque(B1)`` is the torque it takes from
    ``a`` (and gives to ``b``), ``p(B1)`` the power it dissipates,
    ``B (w_a - w_b)^2`` (W).
    """

    keyword = "friction"
    ports = SHAFT_PAIR
    main = "coefficient"
    arguments = (
        Arg("coefficient", ROTATIONAL_DAMPING, positive=True, doc="viscous friction coefficient (N*m*s/rad)"),
    )
    outputs = {"torque": TORQUE, "p": WATT}
    summary = "viscous friction on a shaft, or between two shafts"

    def validate(self):
        if self.nodes["a"] == self.nodes["b"]:
            raise InputError(f"friction {self.name} connects {self.nodes['a']!r} to itself", self.span)

    def branches(self):
        return [Branch(self.nodes["a"], self.nodes["b"], CONDUCTOR)]

    def stamp(self, s):
        s.conductance(s.node(self.nodes["a"]), s.node(self.nodes["b"]), self.params["coefficient"])

    def slip(self, probe) -> np.ndarray:
        return probe.node(self.nodes["a"]) - probe.node(self.nodes["b"])

    def output(self, quantity, probe):
        torque = self.params["coefficient"] * self.slip(probe)
        if quantity == "torque":
            return torque
        if quantity == "p":
            return torque * self.slip(probe)
        return super().output(quantity, probe)


class LoadBatch(NonlinearBatch):
    """All nonlinear loads: ``f[w] += T(t) s(w/band) + c w |w|``, one numpy call."""

    def __init__(self, elements, stamper):
        super().__init__(elements, stamper)
        rows = np.array([stamper.node(e.nodes["shaft"]) for e in elements], dtype=np.int64)
        self.f_rows = rows
        self.jf_rows = rows
        self.jf_cols = rows
        self.fan = np.array([e.fan_coefficient for e in elements])
        self.band = np.array([e.params["band"] for e in elements])
        self.torques = WaveformSet([e.waveform if e.opposing else Constant(0.0) for e in elements])

    def evaluate(self, x, t):
        w = x[self.f_rows]
        s, ds = smooth_sign(w / self.band)
        level = self.torques(t)
        fan_w = self.fan * np.abs(w)
        return level * s + fan_w * w, level * ds / self.band + 2.0 * fan_w, self.empty, self.empty


class Load(ShaftPart):
    """``load T1 rotor torque=0.2 N*m``: a mechanical load on a shaft.

    The torque taken from the shaft is

        T_load = T(t) * s(w / band) + c * w * |w|

    - ``torque=`` ``T(t)`` (a value or a waveform, so a load can step on
      and off): a constant torque that opposes rotation, like a conveyor's
      belt friction or a cutting force. Its sign follows the speed through
      :func:`smooth_sign` over ``|w| < band`` (default 0.1 rad/s, about
      1 rpm): at rest it is zero, and a motor torque smaller than T only
      creeps the shaft at less than ``band`` instead of holding it exactly
      still (the model has no stiction).
      With ``direction=fixed`` the torque instead always acts against
      positive rotation, whatever the speed, like the weight on a hoist
      drum: it is linear and can drive the shaft backwards.
    - ``fan=`` ``c`` (N*m*s^2, i.e. N*m per (rad/s)^2), or ``fan-torque=``
      with ``fan-speed=`` (``c = fan-torque / fan-speed^2``): a fan or
      centrifugal pump, torque proportional to speed squared.

    ``torque(T1)`` is the torque taken from the shaft (N*m), ``p(T1)`` the
    power the load absorbs (W).
    """

    keyword = "load"
    main = "torque"
    arguments = (
        Arg("torque", TORQUE, default=None, kind="waveform",
            doc="torque opposing rotation (N*m), a value or a waveform"),
        Arg("direction", None, default="opposing", kind="choice", choices=("opposing", "fixed"),
            doc="opposing: against the direction of rotation; fixed: always against positive rotation"),
        Arg("band", ANGULAR_SPEED, default=0.1, positive=True, angular=True,
            doc="speed band over which an opposing torque builds up from zero (rad/s or rpm)"),
        Arg("fan", FAN_COEFFICIENT, default=None, nonnegative=True, unit="N*m*s^2 (N*m per (rad/s)^2)",
            doc="fan/pump coefficient c in c*w*|w| (N*m*s^2)"),
        Arg("fan-torque", TORQUE, default=None, positive=True, doc="fan torque at fan-speed (N*m)"),
        Arg("fan-speed", ANGULAR_SPEED, default=None, positive=True, angular=True,
            doc="speed at which the fan takes fan-torque (rad/s or rpm)"),
    )
    summary = "load torque on a shaft: constant against rotation and/or fan (speed squared)"
    Batch = LoadBatch

    def validate(self):
        super().validate()
        p = self.params
        given = [k for k in ("torque", "fan", "fan-torque", "fan-speed") if p.get(k) is not None]
        if not given:
            raise InputError(
                f"load {self.name} needs a torque= (constant against rotation) or a fan "
                "(fan= coefficient, or fan-torque= with fan-speed=)", self.span)
        if (p.get("fan-torque") is None) != (p.get("fan-speed") is None):
            missing = "fan-speed" if p.get("fan-speed") is None else "fan-torque"
            raise InputError(f"load {self.name}: fan-torque= and fan-speed= go together; add {missing}=",
                             self.span_of("fan-torque" if missing == "fan-speed" else "fan-speed"))
        if p.get("fan") is not None and p.get("fan-torque") is not None:
            raise InputError(f"load {self.name}: give the fan either as fan= or as fan-torque= with "
                             "fan-speed=, not both", self.span_of("fan"))
        if p.get("torque") is not None and not isinstance(p["torque"], Waveform):
            p["torque"] = Constant(float(p["torque"]))
        if not (self.opposing or self.fan_coefficient > 0):
            # A fixed torque alone is linear: this instance stays out of the
            # nonlinear batch, so the engine keeps its one-factorization path.
            self.Batch = None

    @property
    def fan_coefficient(self) -> float:
        """c in ``c * w * |w|`` (N*m*s^2); 0 without a fan."""
        p = self.params
        if p.get("fan") is not None:
            return float(p["fan"])
        if p.get("fan-torque") is not None:
            return p["fan-torque"] / p["fan-speed"] ** 2
        return 0.0

    @property
    def waveform(self) -> Waveform | None:
        return self.params.get("torque")

    @property
    def opposing(self) -> bool:
        """Whether the constant part follows the sign of the speed (nonlinear)."""
        return self.waveform is not None and self.params["direction"] == "opposing"

    def branches(self):
        return [Branch(self.nodes["shaft"], FRAME, CURRENT)]

    def stamp(self, s):
        if self.waveform is not None and not self.opposing:
            # A fixed torque leaving the shaft: f[w] += T(t).
            s.source(s.node(self.nodes["shaft"]), -1.0, self.waveform)

    def corners(self, start, stop):
        return self.waveform.corners(start, stop) if self.waveform is not None else np.empty(0)

    def torque(self, probe):
        w = self.speed(probe)
        out = self.fan_coefficient * w * np.abs(w)
        if self.waveform is not None:
            level = np.asarray(self.waveform.values(probe.time), dtype=float)
            if self.opposing:
                level = level * smooth_sign(w / self.params["band"])[0]
            out = out + level
        return out


class SpeedSource(Element):
    """``speed-source W1 rotor 3000 rpm`` (or a waveform): the shaft turns at W(t).

    A prime mover that holds its shaft at the set speed whatever torque it
    takes -- a voltage source in the analogy, whose own unknown is the
    torque. ``torque(W1)`` is the torque it applies to the shaft (N*m,
    positive when driving forward rotation) and ``pmech(W1)`` the power it
    delivers, ``torque * w`` (W).
    """

    keyword = "speed-source"
    ports = SHAFT_NODE
    main = "speed"
    arguments = (Arg("speed", ANGULAR_SPEED, kind="waveform", angular=True,
                     doc="speed (rad/s or rpm), a value or a waveform"),)
    outputs = {"torque": TORQUE, "pmech": WATT}
    summary = "prime mover: drives a shaft at a set speed"

    def validate(self):
        _not_frame(self, "shaft")

    @property
    def waveform(self) -> Waveform:
        return self.params["speed"]

    def branches(self):
        return [Branch(self.nodes["shaft"], FRAME, VOLTAGE)]

    def unknowns(self):
        return (Unknown("torque", TORQUE, "torque flowing from the shaft into the source"),)

    def stamp(self, s):
        w, t = s.node(self.nodes["shaft"]), s.own("torque")
        s.g_entry(w, t, 1.0)
        s.g_entry(t, w, 1.0)
        s.source(t, 1.0, self.waveform)

    def corners(self, start, stop):
        return self.waveform.corners(start, stop)

    def output(self, quantity, probe):
        applied = -probe.unknown(self, "torque")
        if quantity == "torque":
            return applied
        if quantity == "pmech":
            return applied * probe.node(self.nodes["shaft"])
        return super().output(quantity, probe)


class Gear(Element):
    """``gear GB1 motor -> drum 12.5``: an ideal lossless gearbox of ratio n.

    ``input -> output``: the output shaft turns n times slower than the
    input, ``w_out = w_in / n``, and carries n times the torque: the
    torque taken from the input shaft, T, is delivered to the output shaft
    as ``n T``, so the power ``T w_in = (n T) w_out`` passes unchanged. A
    negative ratio reverses the direction of rotation (a single pair of
    spur gears). Its own unknown is T; ``torque(GB1)`` is T (N*m, taken
    from the input shaft) and ``torque_out(GB1)`` is ``n T`` (N*m, applied
    to the output shaft). Backlash, losses and the gears' own inertia are
    not modelled: add an inertia or friction on either shaft for those.
    """

    keyword = "gear"
    ports = (Port(("input", "output"), SHAFT),)
    main = "ratio"
    arguments = (Arg("ratio", DIMENSIONLESS, doc="speed ratio n = w_in / w_out (negative reverses)"),)
    outputs = {"torque": TORQUE, "torque_out": TORQUE}
    summary = "ideal gearbox between two shafts (w_out = w_in / ratio)"

    def validate(self):
        if self.params["ratio"] == 0:
            raise InputError(f"gear {self.name}: ratio cannot be zero", self.span_of("ratio"))
        if FRAME in (self.nodes["input"], self.nodes["output"]):
            raise InputError(f"gear {self.name} connects {FRAME!r}: a gear joins two shaft nodes",
                             self.span)
        if self.nodes["input"] == self.nodes["output"]:
            raise InputError(f"gear {self.name} connects {self.nodes['input']!r} to itself", self.span)

    def branches(self):
        # It fixes w_in - n*w_out: a speed constraint, like a voltage source for the checks.
        return [Branch(self.nodes["input"], self.nodes["output"], VOLTAGE)]

    def unknowns(self):
        return (Unknown("torque", TORQUE, "torque taken from the input shaft"),)

    def stamp(self, s):
        n = float(self.params["ratio"])
        a, b, t = s.node(self.nodes["input"]), s.node(self.nodes["output"]), s.own("torque")
        s.g_entry(a, t, 1.0)  # T leaves the input shaft ...
        s.g_entry(b, t, -n)  # ... and n*T enters the output shaft
        s.g_entry(t, a, 1.0)  # w_in - n*w_out = 0
        s.g_entry(t, b, -n)

    def output(self, quantity, probe):
        torque = probe.unknown(self, "torque")
        if quantity == "torque":
            return torque
        if quantity == "torque_out":
            return self.params["ratio"] * torque
        return super().output(quantity, probe)

