"""Magnetic elements: ``coupling``, ``transformer``, ``choke`` (saturating) and ``solenoid``.

Netlist::

    coupling     Core  Lpri Lsec 0.98                  # k: M = k*sqrt(Lpri*Lsec)
    transformer  T1  a -> b, c -> d  ratio=10  magnetising=2 mH  leakage=20 uH
    choke        L2  a -> b  100 uH  saturation-current=5 A  saturated-inductance=10 uH
    solenoid     L3  a -> b  turns=120  diameter=16 mm  length=40 mm  permeability=1

Dot convention (coupling and transformer): the first terminal of each
winding (``a`` of ``inductor L1 a -> b``; ``a`` and ``c`` of a transformer)
carries the dot. Currents entering the dotted terminals make aiding
fluxes: ``v1 = L1 di1/dt + M di2/dt``, ``v2 = M di1/dt + L2 di2/dt``
(Alexander & Sadiku, *Fundamentals of Electric Circuits*, ch. 13). To
reverse a winding's sense, swap its terminals.

A coupling coefficient must satisfy 0 < k < 1. k = 1 (no leakage at all)
makes the inductance matrix singular (det = L1*L2*(1 - k^2) = 0): the
fluxes are then not independent states, and the circuit equations lose
a state. It is rejected; use k = 0.999 or a ``transformer`` with a small
``leakage=``. With three or more inductors every pair gets the same k (the
inductance matrix stays positive definite for 0 < k < 1).
"""

from __future__ import annotations

import math

import numpy as np

from ..coil_geometry import solenoid_inductance
from ..errors import InputError, UnknownNameError
from ..units import AMPERE, DIMENSIONLESS, HENRY, METRE, OHM, VOLT, WATT, WEBER
from .base import ELECTRICAL, ELEMENT, INDUCTOR, Arg, Branch, Element, NonlinearBatch, Port, Unknown
from .passive import Inductor, TwoTerminal

# --------------------------------------------------------------------------
# Coupled inductors.


class Coupling(Element):
    """``coupling Core Lpri Lsec 0.98``: mutual inductance ``M = k*sqrt(L1*L2)`` between inductors.

    Linear: it adds ``M`` to the capacitance-like matrix between the
    inductors' branch rows and currents, and ``M*I0`` to each one's initial
    flux for a run that starts at rest. See the module docstring for the dot
    convention and the range of k.
    """

    keyword = "coupling"
    ports = (Port(("inductors",), ELEMENT, variadic=True, minimum=2),)
    main = "coefficient"
    arguments = (Arg("coefficient", DIMENSIONLESS, positive=True, doc="coupling coefficient k, 0 < k < 1"),)
    summary = "magnetic coupling between two or more inductors (M = k*sqrt(L1*L2))"

    def validate(self):
        k = self.params["coefficient"]
        if k >= 1.0:
            raise InputError(
                f"coupling {self.name}: k = {k:g} is not below 1; perfect coupling (k = 1) makes the "
                "inductance matrix singular (no leakage at all)",
                self.span_of("coefficient"),
                hint="use k = 0.999 or less, or a transformer with a small leakage=",
            )
        names = self.nodes["inductors"]
        repeated = sorted({n for n in names if names.count(n) > 1})
        if repeated:
            raise InputError(f"coupling {self.name} names {', '.join(repeated)} more than once",
                             self.span_of("inductors"))

    @classmethod
    def check_stamped(cls, couplings, s) -> None:
        """The inductance matrix of every group of coupled windings must be
        positive definite (stored energy 1/2 i'Li > 0 for any currents): each
        k < 1 alone ensures it for a pair, but several coupling lines can
        together ask for more than the windings can share."""
        groups: dict[str, set[str]] = {}
        for k in couplings:
            names = set(k.nodes["inductors"])
            for other in [g for g in groups.values() if g & names]:
                names |= other
            for n in names:
                groups[n] = names
        seen = []
        for names in groups.values():
            if any(names is g for g in seen) or len(names) < 3:
                continue
            seen.append(names)
            order = sorted(names)
            index = {n: i for i, n in enumerate(order)}
            L = np.zeros((len(order), len(order)))
            for n in order:
                L[index[n], index[n]] = s.circuit.elements[n].params["inductance"]
            for k in couplings:
                ind = [n for n in k.nodes["inductors"] if n in index]
                for a in range(len(ind)):
                    for b in range(a + 1, len(ind)):
                        m = k.params["coefficient"] * math.sqrt(L[index[ind[a]], index[ind[a]]]
                                                                * L[index[ind[b]], index[ind[b]]])
                        L[index[ind[a]], index[ind[b]]] = L[index[ind[b]], index[ind[a]]] = m
            scale = np.sqrt(np.outer(np.diag(L), np.diag(L)))
            if np.linalg.eigvalsh(L / scale).min() <= 1e-12:
                lines = [k for k in couplings if set(k.nodes["inductors"]) <= names]
                raise InputError(
                    f"the couplings {', '.join(k.name for k in lines)} ask {', '.join(order)} to share more "
                    "flux than any set of windings can: their inductance matrix is not positive definite",
                    lines[-1].span,
                    hint="lower one of the coupling coefficients",
                )

    def coupled(self, s) -> list[Inductor]:
        """The coupled inductors, checked against the circuit."""
        out = []
        for name in self.nodes["inductors"]:
            element = s.circuit.elements.get(name)
            if element is None:
                raise UnknownNameError(f"coupling {self.name}: no element named {name!r}",
                                       self.span_of("inductors"))
            if not isinstance(element, Inductor):
                raise InputError(
                    f"coupling {self.name}: {name} is a {element.keyword}; a coupling joins inductors "
                    "(inductor or solenoid)", self.span_of("inductors"),
                    hint="for a transformer from turns ratio and leakage use the transformer kind",
                )
            out.append(element)
        return out

    def stamp(self, s):
        k = self.params["coefficient"]
        inductors = self.coupled(s)
        taken = s.__dict__.setdefault("_coupled_pairs", {})  # pair -> coupling name, per compile
        for m, first in enumerate(inductors):
            for second in inductors[m + 1:]:
                pair = frozenset((first.name, second.name))
                if pair in taken:
                    raise InputError(
                        f"coupling {self.name}: {first.name} and {second.name} are already coupled by "
                        f"{taken[pair]}; each pair takes one coupling", self.span_of("inductors"))
                taken[pair] = self.name
                mutual = k * math.sqrt(first.params["inductance"] * second.params["inductance"])
                i1, i2 = s.unknown_of(first.name, "i"), s.unknown_of(second.name, "i")
                s.c_entry(i1, i2, mutual)
                s.c_entry(i2, i1, mutual)
                s.initial_charge(i1, mutual * second.params["initial"])
                s.initial_charge(i2, mutual * first.params["initial"])


# --------------------------------------------------------------------------
# Transformer.


def transformer_inductances(ratio: float, magnetising: float, leakage: float) -> tuple[float, float, float]:
    """Self and mutual inductances (L1, L2, M) in H of the T-equivalent transformer.

    ``ratio`` is the turns ratio Np/Ns; ``magnetising`` the magnetising
    inductance and ``leakage`` the total leakage inductance, both referred
    to the primary, the leakage split equally between the windings:
    ``L1 = Lm + Ll/2``, ``L2 = L1/n^2``, ``M = Lm/n`` (so ``k = Lm/(Lm + Ll/2)``).
    """
    l1 = magnetising + leakage / 2.0
    return l1, l1 / ratio**2, magnetising / ratio


class Transformer(Element):
    """``transformer T1 a -> b, c -> d ratio=10 magnetising=2 mH leakage=20 uH``.

    Two coupled windings from the data a transformer is specified by: the
    turns ratio ``ratio`` = Np/Ns (primary ``a -> b``, secondary ``c -> d``;
    ``a`` and ``c`` carry the dots), the magnetising inductance seen from the
    primary and the total leakage inductance referred to the primary (what a
    primary measurement with the secondary shorted gives, for Lm >> Ll),
    split equally between the windings. See :func:`transformer_inductances`.
    Outputs: ``i1 i2`` (winding currents, into a and c), ``v1 v2`` (winding
    voltages), ``p`` (power absorbed by both windings).
    """

    keyword = "transformer"
    ports = (Port(("a", "b"), ELECTRICAL), Port(("c", "d"), ELECTRICAL))
    arguments = (
        Arg("ratio", DIMENSIONLESS, positive=True, doc="turns ratio Np/Ns"),
        Arg("magnetising", HENRY, positive=True, doc="magnetising inductance seen from the primary"),
        Arg("leakage", HENRY, positive=True, doc="total leakage inductance referred to the primary"),
        Arg("primary-resistance", OHM, default=0.0, nonnegative=True, doc="primary winding resistance"),
        Arg("secondary-resistance", OHM, default=0.0, nonnegative=True, doc="secondary winding resistance"),
    )
    outputs = {"i1": AMPERE, "i2": AMPERE, "v1": VOLT, "v2": VOLT, "p": WATT}
    summary = "two-winding transformer from turns ratio, magnetising and leakage inductance"

    def inductances(self) -> tuple[float, float, float]:
        p = self.params
        return transformer_inductances(p["ratio"], p["magnetising"], p["leakage"])

    def branches(self):
        p = self.params
        return [Branch(self.nodes["a"], self.nodes["b"], INDUCTOR, resistive=p["primary-resistance"] > 0),
                Branch(self.nodes["c"], self.nodes["d"], INDUCTOR, resistive=p["secondary-resistance"] > 0)]

    def unknowns(self):
        return (Unknown("i1", AMPERE, "primary current a -> b"), Unknown("i2", AMPERE, "secondary current c -> d"))

    def stamp(self, s):
        l1, l2, m = self.inductances()
        i1, i2 = s.own("i1"), s.own("i2")
        windings = ((self.nodes["a"], self.nodes["b"], i1, self.params["primary-resistance"]),
                    (self.nodes["c"], self.nodes["d"], i2, self.params["secondary-resistance"]))
        for a_name, b_name, i, r in windings:
            a, b = s.node(a_name), s.node(b_name)
            s.g_entry(a, i, 1.0)
            s.g_entry(b, i, -1.0)
            s.g_entry(i, a, -1.0)
            s.g_entry(i, b, 1.0)
            s.g_entry(i, i, r)
        s.c_entry(i1, i1, l1)
        s.c_entry(i2, i2, l2)
        s.c_entry(i1, i2, m)
        s.c_entry(i2, i1, m)

    def output(self, quantity, probe):
        v1 = probe.node(self.nodes["a"]) - probe.node(self.nodes["b"])
        v2 = probe.node(self.nodes["c"]) - probe.node(self.nodes["d"])
        i1, i2 = probe.unknown(self, "i1"), probe.unknown(self, "i2")
        values = {"v1": lambda: v1, "v2": lambda: v2, "i1": lambda: i1, "i2": lambda: i2,
                  "p": lambda: v1 * i1 + v2 * i2}
        if quantity in values:
            return values[quantity]()
        return super().output(quantity, probe)


# --------------------------------------------------------------------------
# Saturating choke.


def saturation_scale(inductance: float, saturation_current: float, saturated: float, drop: float) -> float:
    """The current scale I0 (A) of the tanh curve that puts the datasheet point on it.

    The incremental inductance is ``L(i) = Lsat + (L0 - Lsat)*sech(i/I0)^2``;
    at ``i = Isat`` it must equal ``L0*(1 - drop)``.
    """
    s = (inductance * (1.0 - drop) - saturated) / (inductance - saturated)
    return saturation_current / math.acosh(1.0 / math.sqrt(s))


def flux_linkage(i: np.ndarray, l0: np.ndarray, lsat: np.ndarray, scale: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Flux linkage (Wb) and incremental inductance dphi/di (H) at current ``i`` (A).

    ``phi(i) = Lsat*i + (L0 - Lsat)*I0*tanh(i/I0)``: slope L0 at zero
    current, flattening to Lsat deep in saturation; odd, smooth and strictly
    increasing, so every flux has exactly one current.
    """
    u = i / scale
    th = np.tanh(u)
    phi = lsat * i + (l0 - lsat) * scale * th
    return phi, lsat + (l0 - lsat) * (1.0 - th * th)


class Choke(TwoTerminal):
    """``choke L2 a -> b 100 uH saturation-current=5 A saturated-inductance=10 uH``.

    An inductor whose core saturates. Flux linkage against current follows
    :func:`flux_linkage`; ``saturation-current=`` is where the incremental
    inductance has fallen by ``saturation-drop=`` (30 % by default) from
    its initial value, as choke datasheets quote it (10 %, 20 % or 30 %,
    depending on the maker: check yours). ``saturated-inductance=`` is what
    is left deep in saturation (at least the air-core inductance of the
    winding).

    Solved with the flux linkage ``phi`` as the state: ``d phi/dt = v - R*i``
    and ``phi = phi(i)``, so the integration method conserves flux (and
    energy) exactly as it does a linear inductor's. Outputs: ``v i p``,
    ``flux`` (Wb) and ``inductance`` (H, incremental, dphi/di).
    """

    keyword = "choke"
    main = "inductance"
    arguments = (
        Arg("inductance", HENRY, positive=True, doc="initial (small-current) inductance L0"),
        Arg("saturation-current", AMPERE, positive=True, doc="current where L has dropped by saturation-drop"),
        Arg("saturated-inductance", HENRY, positive=True, doc="inductance left deep in saturation"),
        Arg("saturation-drop", DIMENSIONLESS, default=0.3, positive=True,
            doc="fractional fall of L at saturation-current (datasheet definition)"),
        Arg("resistance", OHM, default=0.0, nonnegative=True, doc="winding resistance in series"),
        Arg("initial", AMPERE, default=0.0, doc="current at t = 0 when the run starts at rest"),
    )
    outputs = {"v": VOLT, "i": AMPERE, "p": WATT, "flux": WEBER, "inductance": HENRY}
    summary = "saturating inductor (tanh flux curve), solved with flux as the state"

    def validate(self):
        p = self.params
        if not 0 < p["saturation-drop"] < 1:
            raise InputError(f"choke {self.name}: saturation-drop= must lie between 0 % and 100 %",
                             self.span_of("saturation-drop"))
        at_isat = p["inductance"] * (1.0 - p["saturation-drop"])
        if not p["saturated-inductance"] < at_isat:
            raise InputError(
                f"choke {self.name}: saturated-inductance= ({p['saturated-inductance']:g} H) must be below "
                f"the inductance at the saturation current, inductance*(1 - saturation-drop) = {at_isat:g} H",
                self.span_of("saturated-inductance"),
            )
        self.scale = saturation_scale(p["inductance"], p["saturation-current"], p["saturated-inductance"],
                                      p["saturation-drop"])

    def curve(self, i: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Flux linkage (Wb) and incremental inductance (H) at current ``i`` (A)."""
        p = self.params
        return flux_linkage(np.asarray(i, dtype=float), p["inductance"], p["saturated-inductance"], self.scale)

    def branches(self):
        return [Branch(self.nodes["a"], self.nodes["b"], INDUCTOR)]

    def unknowns(self):
        return (Unknown("flux", WEBER, "flux linkage"), Unknown("i", AMPERE, "branch current a -> b"))

    def stamp(self, s):
        a, b = s.node(self.nodes["a"]), s.node(self.nodes["b"])
        phi, i = s.own("flux"), s.own("i")
        s.g_entry(a, i, 1.0)
        s.g_entry(b, i, -1.0)
        # Flux row: d(phi)/dt - (v_a - v_b) + R*i = 0.
        s.c_entry(phi, phi, 1.0)
        s.g_entry(phi, a, -1.0)
        s.g_entry(phi, b, 1.0)
        s.g_entry(phi, i, self.params["resistance"])
        # Current row: phi - phi(i) = 0 (the nonlinear part is in ChokeBatch).
        s.g_entry(i, phi, 1.0)
        self._i = i
        s.initial_charge(phi, float(self.curve(self.params["initial"])[0]))

    def current(self, probe):
        return probe.unknown(self, "i")

    def output(self, quantity, probe):
        if quantity == "flux":
            return probe.unknown(self, "flux")
        if quantity == "inductance":
            return self.curve(probe.unknown(self, "i"))[1]
        return super().output(quantity, probe)


class ChokeBatch(NonlinearBatch):
    """All saturating chokes: ``f[i_row] = -phi(i)``, one numpy call."""

    def __init__(self, elements, stamper):
        super().__init__(elements, stamper)
        self.rows = np.array([e._i for e in elements], dtype=np.int64)
        self.l0 = np.array([e.params["inductance"] for e in elements])
        self.lsat = np.array([e.params["saturated-inductance"] for e in elements])
        self.scale = np.array([e.scale for e in elements])
        self.f_rows = self.rows
        self.jf_rows = self.rows
        self.jf_cols = self.rows

    def evaluate(self, x, t):
        phi, lt = flux_linkage(x[self.rows], self.l0, self.lsat, self.scale)
        return -phi, -lt, self.empty, self.empty


Choke.Batch = ChokeBatch

# --------------------------------------------------------------------------
# Solenoid: an inductor sized from its geometry.


class Solenoid(Inductor):
    """``solenoid L3 a -> b turns=120 diameter=16 mm length=40 mm permeability=1``.

    A linear inductor whose inductance comes from the coil's dimensions:
    the long-solenoid formula with Nagaoka's coefficient for finite length
    (:func:`mna.coil_geometry.solenoid_inductance`). ``diameter`` is the
    mean winding diameter, ``length`` the winding length; ``permeability``
    is the effective relative permeability of the core (1 for air). It can
    be coupled like any inductor; ``inductance(L3)`` reports the value used.
    """

    keyword = "solenoid"
    main = None
    arguments = (
        Arg("turns", DIMENSIONLESS, positive=True, doc="number of turns"),
        Arg("diameter", METRE, positive=True, doc="mean winding diameter"),
        Arg("length", METRE, positive=True, doc="winding length"),
        Arg("permeability", DIMENSIONLESS, default=1.0, positive=True,
            doc="effective relative permeability of the core (1 for air)"),
        Arg("resistance", OHM, default=0.0, nonnegative=True, doc="winding resistance in series"),
        Arg("initial", AMPERE, default=0.0, doc="current at t = 0 when the run starts at rest"),
    )
    outputs = {"v": VOLT, "i": AMPERE, "p": WATT, "inductance": HENRY}
    summary = "air- or rod-core coil sized from turns, diameter and length (Nagaoka)"

    def validate(self):
        p = self.params
        p["inductance"] = solenoid_inductance(p["turns"], p["diameter"], p["length"], p["permeability"])

    def output(self, quantity, probe):
        if quantity == "inductance":
            return np.full_like(probe.time, self.params["inductance"], dtype=float)
        return super().output(quantity, probe)
