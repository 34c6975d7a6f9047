"""Electromechanical converters: the DC machine and the coil generator.

Both couple an electrical branch ``a -> b`` to a shaft node (``shaft=``)
through the same pair of laws, so that the electrical power converted,
``e * i``, equals the mechanical power ``T * w`` exactly:

    back-EMF  e = K * w        torque on the shaft  T = K * i

with ``K`` the machine constant (V*s/rad, which in SI is the same number as
the torque constant in N*m/A) for a permanent-magnet DC machine, and
``K = N*B*A*sin(angle)`` for a single coil turning in a uniform field.
Models: (DC machine; Franklin, Powell & Emami-Naeini ch. 2,
Nise ch. 2) and §7 (coil in a field; Halliday, Resnick & Walker).

Sign conventions (the passive convention of every two-terminal element):
``i(M)`` flows from ``a`` through the winding to ``b`` and ``p(M) = v*i`` is
the electrical power taken in, so a machine working as a generator shows a
negative ``p``, a negative ``torque`` (it brakes the shaft) and a negative
``pmech``. ``torque(M)`` is the torque the machine applies to its shaft,
``pmech(M) = torque * w`` the mechanical power it delivers to the shaft,
``emf(M)`` the EMF it generates (``v(a) - v(b)`` with no current).
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from ..units import (
    AMPERE,
    ANGULAR_SPEED,
    AREA,
    DIMENSIONLESS,
    HENRY,
    MACHINE_CONSTANT,
    OHM,
    TESLA,
    TORQUE,
    VOLT,
    WATT,
)
from .base import (
    CONDUCTOR,
    CURRENT,
    ELECTRICAL,
    GYRATOR,
    INDUCTOR,
    SHAFT,
    VOLTAGE,
    Arg,
    Branch,
    Element,
    NonlinearBatch,
    Port,
    Unknown,
)
from .mechanical import FRAME, smooth_sign

#: ``a -> b`` for the winding, ``shaft=NODE`` for the rotor.
MACHINE_PORTS = (Port(("a", "b"), ELECTRICAL), Port(("shaft",), SHAFT, keyword=True))

MACHINE_OUTPUTS = {
    "v": VOLT,
    "i": AMPERE,
    "p": WATT,
    "emf": VOLT,
    "torque": TORQUE,
    "pmech": WATT,
}

RATING = ("no-load-speed", "stall-current", "stall-torque")


# --------------------------------------------------------------------------
# Rating data -> resistance and machine constant.


def rating_constants(
    voltage: float,
    *,
    resistance: float | None = None,
    no_load_speed: float | None = None,
    no_load_current: float | None = None,
    stall_current: float | None = None,
    stall_torque: float | None = None,
    brush_drop: float = 0.0,
) -> tuple[float, float]:
    """Armature resistance R (ohm) and machine constant k (V*s/rad) from rating data.

    From the steady-state equations of the DC machine (Franklin, Powell & Emami-Naeini, *Feedback Control of Dynamic Systems*, ch. 2, from memory),
    ``V = R*i + Vb + k*w`` and ``T = k*i``, at the rated voltage V (V), with
    ``V' = V - Vb`` where ``Vb`` is the brush drop:

    - at stall (w = 0): ``I_stall = V'/R`` and ``T_stall = k*I_stall``;
    - at no load: ``V_nl = R*I_nl + k*w_nl``, where ``V_nl = V'`` when the
      no-load current I_nl is given and ``V_nl = V`` (no current, no brush
      drop, ideal machine) when it is not.

    Accepted pairs (anything else is under- or over-determined):

    ===============================  ==============================================
    no-load-speed + stall-current    R = V'/I_stall;  k = (V_nl - R*I_nl)/w_nl
    no-load-speed + stall-torque     k = V_nl/(w_nl + V'*I_nl/T_stall);  R = k*V'/T_stall
    stall-current + stall-torque     k = T_stall/I_stall;  R = V'/I_stall
    resistance + no-load-speed       k = (V_nl - R*I_nl)/w_nl
    ===============================  ==============================================

    (I_nl = 0 when not given.) Raises ``ValueError`` with an engineer's
    message when the data do not fit these forms or give a non-positive R
    or k.
    """
    have = {
        "resistance": resistance,
        "no-load-speed": no_load_speed,
        "stall-current": stall_current,
        "stall-torque": stall_torque,
    }
    given = frozenset(k for k, v in have.items() if v is not None)
    pairs = {
        frozenset({"no-load-speed", "stall-current"}),
        frozenset({"no-load-speed", "stall-torque"}),
        frozenset({"stall-current", "stall-torque"}),
        frozenset({"resistance", "no-load-speed"}),
    }
    if given not in pairs:
        listed = ", ".join(f"{k}=" for k in sorted(given)) or "none"
        raise ValueError(
            f"rating data must fix the resistance and the machine constant exactly once; got {listed}. "
            "With rated-voltage= give one of: no-load-speed= and stall-current=; no-load-speed= and "
            "stall-torque=; stall-current= and stall-torque=; resistance= and no-load-speed="
        )
    if no_load_current is not None and no_load_speed is None:
        raise ValueError("no-load-current= refines no-load-speed=; it needs no-load-speed=")
    v_stall = voltage - brush_drop
    if v_stall <= 0:
        raise ValueError(f"the brush drop ({brush_drop:g} V) is not below the rated voltage ({voltage:g} V)")
    i_nl = no_load_current or 0.0
    v_nl = v_stall if no_load_current else voltage
    if given == frozenset({"no-load-speed", "stall-current"}):
        r = v_stall / stall_current
        k = (v_nl - r * i_nl) / no_load_speed
    elif given == frozenset({"no-load-speed", "stall-torque"}):
        k = v_nl / (no_load_speed + v_stall * i_nl / stall_torque)
        r = k * v_stall / stall_torque
    elif given == frozenset({"stall-current", "stall-torque"}):
        k = stall_torque / stall_current
        r = v_stall / stall_current
    else:
        r = resistance
        k = (v_nl - r * i_nl) / no_load_speed
    if not (r > 0 and k > 0):
        raise ValueError(
            f"the rating data give R = {r:.4g} ohm and k = {k:.4g} V*s/rad; both must be positive "
            "(is the no-load current times the resistance above the rated voltage?)"
        )
    return r, k


# --------------------------------------------------------------------------
# The DC machine.


class DCMachineBatch(NonlinearBatch):
    """The brush drops of all DC machines that have one: ``Vb * s(i / band)``."""

    def __init__(self, elements, stamper):
        super().__init__(elements, stamper)
        rows = np.array([stamper.own_index[(e.name, "i")] for e in elements], dtype=np.int64)
        self.f_rows = rows
        self.jf_rows = rows
        self.jf_cols = rows
        self.drop = np.array([e.params["brush-drop"] for e in elements])
        self.band = np.array([e.params["brush-band"] for e in elements])

    def evaluate(self, x, t):
        s, ds = smooth_sign(x[self.f_rows] / self.band)
        return self.drop * s, self.drop * ds / self.band, self.empty, self.empty


class DCMachine(Element):
    """``dc-machine M1 a -> b shaft=rotor resistance=0.8 ohm inductance=1.2 mH constant=0.05 V*s/rad``.

    A permanent-magnet (or separately excited, constant-field) DC machine,
    the same element as motor and as generator (Franklin, Powell & Emami-Naeini, *Feedback Control of Dynamic Systems*, ch. 2, from memory):

        v(a) - v(b) = R*i + L di/dt + Vb*s(i/band) + k*w      (armature)
        torque on the shaft = k*i                            (shaft)

    ``constant`` k may be written in V*s/rad (back-EMF constant) or N*m/A
    (torque constant): in SI they are the same number, because the power
    converted is ``e*i = k*w*i = T*w``.

    Unknown: the armature current i (A), from ``a`` through the winding to
    ``b``. Without a brush drop the machine is linear (a run keeps one
    factorization). ``inductance`` may be 0 (the current is then algebraic).

    Brush drop ``brush-drop=`` Vb (typically about 2 V for carbon brushes,
    common practice): a voltage that opposes the current, ``Vb*sign(i)``,
    made smooth by :func:`mna.elements.mechanical.smooth_sign` over
    ``|i| < brush-band`` (default 10 mA) so Newton's method sees a
    continuous slope; beyond the band it is exactly Vb.

    Rating data instead of ``resistance`` / ``constant``: ``rated-voltage=``
    with two of ``no-load-speed=``, ``stall-current=``, ``stall-torque=``
    (or ``resistance=`` with ``no-load-speed=``), optionally
    ``no-load-current=``; see :func:`rating_constants` for the formulas.
    The derived values are :attr:`resistance` and :attr:`constant`. The
    no-load current comes from the motor's own friction, which this element
    does not add: put ``friction B = k*I_nl/w_nl`` on the shaft to
    reproduce it.

    ``shaft=frame`` locks the rotor (a stall test).

    Outputs: ``v``, ``i``, ``p`` (electrical power in, v*i), ``emf`` (k*w),
    ``torque`` (k*i, applied to the shaft), ``pmech`` (torque*w, delivered
    to the shaft).
    """

    keyword = "dc-machine"
    ports = MACHINE_PORTS
    main = None
    arguments = (
        Arg("resistance", OHM, default=None, positive=True, doc="armature resistance"),
        Arg("inductance", HENRY, default=0.0, nonnegative=True, doc="armature inductance"),
        Arg("constant", MACHINE_CONSTANT, default=None, positive=True,
            doc="machine constant k: back-EMF k*w, torque k*i (V*s/rad = N*m/A)"),
        Arg("brush-drop", VOLT, default=0.0, nonnegative=True, doc="brush voltage drop against the current"),
        Arg("brush-band", AMPERE, default=10e-3, positive=True,
            doc="current over which the brush drop builds up from zero"),
        Arg("rated-voltage", VOLT, default=None, positive=True, doc="voltage at which the rating data hold"),
        Arg("no-load-speed", ANGULAR_SPEED, default=None, positive=True, angular=True,
            doc="speed with no load at the rated voltage (rad/s or rpm)"),
        Arg("no-load-current", AMPERE, default=None, nonnegative=True, doc="current with no load"),
        Arg("stall-current", AMPERE, default=None, positive=True, doc="current with the rotor locked"),
        Arg("stall-torque", TORQUE, default=None, positive=True, doc="torque with the rotor locked"),
        Arg("initial", AMPERE, default=0.0, doc="armature current at t = 0 when the run starts at rest"),
    )
    outputs = MACHINE_OUTPUTS
    summary = "DC machine (motor or generator): back-EMF k*w, torque k*i"
    Batch = DCMachineBatch

    resistance: float
    constant: float

    def validate(self):
        p = self.params
        rating = [k for k in RATING if p.get(k) is not None]
        voltage = p.get("rated-voltage")
        if voltage is None and (rating or p.get("no-load-current") is not None):
            first = (rating or ["no-load-current"])[0]
            raise InputError(f"dc-machine {self.name}: rating data ({first}=) need rated-voltage=",
                             self.span_of(first))
        if voltage is not None:
            if p.get("constant") is not None:
                raise InputError(
                    f"dc-machine {self.name}: constant= is derived from the rating data; give either "
                    "constant= with resistance=, or rated-voltage= with rating data", self.span_of("constant"))
            try:
                self.resistance, self.constant = rating_constants(
                    voltage, resistance=p.get("resistance"), no_load_speed=p.get("no-load-speed"),
                    no_load_current=p.get("no-load-current"), stall_current=p.get("stall-current"),
                    stall_torque=p.get("stall-torque"), brush_drop=p["brush-drop"])
            except ValueError as exc:
                raise InputError(f"dc-machine {self.name}: {exc}", self.span_of("rated-voltage")) from None
        else:
            missing = [k for k in ("resistance", "constant") if p.get(k) is None]
            if missing:
                raise InputError(
                    f"dc-machine {self.name} needs {' and '.join(m + '=' for m in missing)} "
                    "(or rated-voltage= with rating data such as no-load-speed= and stall-current=)",
                    self.span)
            self.resistance, self.constant = float(p["resistance"]), float(p["constant"])
        if p["brush-drop"] == 0.0:
            # Linear: stays out of the nonlinear batch (one factorization per run).
            self.Batch = None

    def branches(self):
        winding = INDUCTOR if self.params["inductance"] > 0 else CONDUCTOR
        return [Branch(self.nodes["a"], self.nodes["b"], winding, resistive=self.resistance > 0),
                Branch(self.nodes["shaft"], FRAME, GYRATOR)]

    def unknowns(self):
        return (Unknown("i", AMPERE, "armature current a -> b"),)

    def stamp(self, s):
        a, b, i = s.node(self.nodes["a"]), s.node(self.nodes["b"]), s.own("i")
        w = s.node(self.nodes["shaft"])
        k, L = self.constant, self.params["inductance"]
        s.g_entry(a, i, 1.0)  # KCL: i leaves a, enters b
        s.g_entry(b, i, -1.0)
        s.c_entry(i, i, L)  # L di/dt + R i + k w - (v_a - v_b) = 0
        s.g_entry(i, i, self.resistance)
        s.g_entry(i, w, k)
        s.g_entry(i, a, -1.0)
        s.g_entry(i, b, 1.0)
        s.g_entry(w, i, -k)  # shaft: a torque k*i enters the shaft node
        s.initial_charge(i, L * self.params["initial"])

    def output(self, quantity, probe):
        i = probe.unknown(self, "i")
        w = probe.node(self.nodes["shaft"])
        k = self.constant
        if quantity == "i":
            return i
        if quantity == "v":
            return probe.node(self.nodes["a"]) - probe.node(self.nodes["b"])
        if quantity == "p":
            return (probe.node(self.nodes["a"]) - probe.node(self.nodes["b"])) * i
        if quantity == "emf":
            return k * w
        if quantity == "torque":
            return k * i
        if quantity == "pmech":
            return k * i * w
        return super().output(quantity, probe)


# --------------------------------------------------------------------------
# The coil generator.


class CoilGeneratorBatch(NonlinearBatch):
    """All coil generators: EMF ``K w sin(angle)`` and torque ``K i sin(angle)``.

    With ``K = N*B*A`` per coil; one numpy evaluation for every instance.
    A coil on ``frame`` (locked) has no speed column and no shaft row.
    """

    def __init__(self, elements, stamper):
        super().__init__(elements, stamper)
        own = stamper.own_index
        self.ii = np.array([own[(e.name, "i")] for e in elements], dtype=np.int64)
        self.ia = np.array([own[(e.name, "angle")] for e in elements], dtype=np.int64)
        iw = np.array([stamper.node(e.nodes["shaft"]) for e in elements], dtype=np.int64)
        self.turning = iw >= 0
        self.iw = np.where(self.turning, iw, 0)
        self.K = np.array([e.flux_linkage for e in elements])
        m = self.turning
        wv = self.iw[m]
        # f: EMF in each coil row, reaction torque in each shaft row.
        self.f_rows = np.concatenate([self.ii, wv])
        # Jacobian: (i, angle), (i, w), (w, angle), (w, i).
        self.jf_rows = np.concatenate([self.ii, self.ii[m], wv, wv])
        self.jf_cols = np.concatenate([self.ia, wv, self.ia[m], self.ii[m]])

    def evaluate(self, x, t):
        m = self.turning
        w = np.where(m, x[self.iw], 0.0)
        i = x[self.ii]
        sin, cos = np.sin(x[self.ia]), np.cos(x[self.ia])
        Ks, Kc = self.K * sin, self.K * cos
        f = np.concatenate([Ks * w, (-Ks * i)[m]])
        jf = np.concatenate([Kc * w, Ks[m], (-Kc * i)[m], -Ks[m]])
        return f, jf, self.empty, self.empty


class CoilGenerator(Element):
    """``coil-generator G1 a -> b shaft=rotor turns=200 field=0.5 T area=40 cm^2``.

    A single rectangular (or any flat) coil of N turns and area A turning
    on the shaft in a uniform field B (Halliday, Resnick
    & Walker). With ``angle`` measured from the position where the coil's
    plane is square to the field (flux linkage ``N*B*A*cos(angle)``, EMF
    zero):

        v(a) - v(b) = R*i + L di/dt + N*B*A*w*sin(angle)
        torque on the shaft = N*B*A*i*sin(angle)
        d angle / dt = w

    so ``e*i = T*w`` exactly. Its own unknowns are the coil current i (A)
    and the angle (rad), integrated by the engine like any other state;
    ``initial-angle=`` is the angle at t = 0 (rad or deg). The peak EMF is
    ``N*B*A*w`` at electrical frequency ``w / (2*pi)``. ``resistance`` and
    ``inductance`` are optional (0 by default; with no inductance the coil
    current is algebraic). At the DC operating point the angle is held at
    its initial value (a turning coil has no steady state; start a
    transient at rest for a coil that is already turning).

    Outputs: ``v``, ``i``, ``p`` (electrical power in), ``emf``,
    ``torque`` (applied to the shaft), ``pmech``, ``angle`` (rad, its own
    unknown).
    """

    keyword = "coil-generator"
    ports = MACHINE_PORTS
    main = None
    arguments = (
        Arg("turns", DIMENSIONLESS, positive=True, doc="number of turns N"),
        Arg("field", TESLA, positive=True, doc="flux density B of the uniform field"),
        Arg("area", AREA, positive=True, doc="area A enclosed by one turn"),
        Arg("resistance", OHM, default=0.0, nonnegative=True, doc="coil resistance"),
        Arg("inductance", HENRY, default=0.0, nonnegative=True, doc="coil inductance"),
        Arg("initial-angle", DIMENSIONLESS, default=0.0, unit="an angle in rad or deg",
            doc="angle at t = 0 (rad or deg)"),
        Arg("initial", AMPERE, default=0.0, doc="coil current at t = 0 when the run starts at rest"),
    )
    outputs = {**MACHINE_OUTPUTS, "angle": DIMENSIONLESS}
    summary = "single coil turning in a uniform field: EMF N*B*A*w*sin(angle)"
    Batch = CoilGeneratorBatch

    @property
    def flux_linkage(self) -> float:
        """N*B*A (Wb = V*s/rad): the peak flux linkage, and the peak EMF per rad/s."""
        p = self.params
        return p["turns"] * p["field"] * p["area"]

    def branches(self):
        p = self.params
        winding = INDUCTOR if p["inductance"] > 0 else CONDUCTOR if p["resistance"] > 0 else VOLTAGE
        # Its torque constant N*B*A*sin(angle) vanishes twice a turn, so the
        # coil cannot be counted on to hold a shaft: a torque source for the checks.
        return [Branch(self.nodes["a"], self.nodes["b"], winding),
                Branch(self.nodes["shaft"], FRAME, CURRENT)]

    def unknowns(self):
        return (Unknown("i", AMPERE, "coil current a -> b"), Unknown("angle", DIMENSIONLESS, "coil angle (rad)"))

    def stamp(self, s):
        p = self.params
        a, b = s.node(self.nodes["a"]), s.node(self.nodes["b"])
        i, angle, w = s.own("i"), s.own("angle"), s.node(self.nodes["shaft"])
        s.g_entry(a, i, 1.0)
        s.g_entry(b, i, -1.0)
        s.c_entry(i, i, p["inductance"])  # L di/dt + R i + e - (v_a - v_b) = 0; e in the batch
        s.g_entry(i, i, p["resistance"])
        s.g_entry(i, a, -1.0)
        s.g_entry(i, b, 1.0)
        s.c_entry(angle, angle, 1.0)  # d angle/dt - w = 0
        s.g_entry(angle, w, -1.0)
        s.initial_charge(angle, p["initial-angle"])
        s.initial_charge(i, p["inductance"] * p["initial"])
        s.hold_at_dc(angle, p["initial-angle"])

    def output(self, quantity, probe):
        i = probe.unknown(self, "i")
        angle = probe.unknown(self, "angle")
        w = probe.node(self.nodes["shaft"])
        K = self.flux_linkage
        if quantity == "i":
            return i
        if quantity in ("v", "p"):
            v = probe.node(self.nodes["a"]) - probe.node(self.nodes["b"])
            return v if quantity == "v" else v * i
        if quantity == "angle":
            return angle
        if quantity == "emf":
            return K * w * np.sin(angle)
        if quantity == "torque":
            return K * i * np.sin(angle)
        if quantity == "pmech":
            return K * i * np.sin(angle) * w
        return super().output(quantity, probe)
