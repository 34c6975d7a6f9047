"""Semiconductor junctions: the ``diode`` kind (rectifier, freewheel, Zener, TVS).

Netlist::

    diode D1 a -> k  saturation-current=1e-14 A  ideality=1.0  resistance=10 mohm
    diode Z1 k -> a  breakdown=24 V  breakdown-current=5 mA      # a Zener or TVS clamp

``a -> k`` is anode -> cathode; ``i(D1)`` flows anode to cathode.

The junction current (the kernels below are plain functions on arrays)::

    I(v) = Is*(exp(v/(n*Vt)) - 1)                           Shockley
         - Ibv*(exp(-(v + BV)/(nbv*Vt)) - exp(-BV/(nbv*Vt))) reverse breakdown
         + GMIN_JUNCTION*v                                   leakage floor

``Vt = k*T/q`` from the CODATA constants in ``scipy.constants`` (exact in
the 2019 SI); ``T`` is ``temperature=`` (default 300.15 K, 27 degC, where
Vt = 25.8649 mV). The breakdown term is zero unless ``breakdown=`` is given;
it makes the reverse current reach ``breakdown-current=`` at ``v = -BV``,
so ``breakdown=`` and ``breakdown-current=`` are a Zener's Vz at its test
current Izt. ``resistance=`` is in series with the junction (an internal
node, shown as ``junction(D1)`` in error messages); ``capacitance=`` is a
constant junction capacitance across the junction (no depletion law).
Above ``exp(EXP_LIMIT)`` the exponentials continue as straight lines so
no evaluation can overflow.

Newton safeguard: :meth:`DiodeBatch.limit` applies the logarithmic
junction-voltage limiting of L. W. Nagel, "SPICE2: A computer program to
simulate semiconductor circuits", UCB ERL-M520 (1975) (the algorithm as
described there, from memory; also Vlach & Singhal ch. 8): above the
critical voltage ``Vcrit = n*Vt*ln(n*Vt/(sqrt(2)*Is))`` a forward step is
shortened to ``n*Vt*ln(1 + dv/(n*Vt))``. The same rule guards the
breakdown knee. The whole Newton update is then scaled so no junction moves
further than its limit (the direction of the step is kept).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.constants import Boltzmann, elementary_charge

from ..errors import InputError
from ..units import AMPERE, DIMENSIONLESS, FARAD, KELVIN, OHM, VOLT
from .base import CONDUCTOR, Arg, Branch, NonlinearBatch, Unknown
from .batching import BranchPattern
from .passive import TwoTerminal

#: Conductance (S) across every junction: keeps a reverse-biased junction's
#: row from vanishing (common practice in circuit simulators; 1e-12 S adds
#: 12 pA of leakage at 12 V reverse).
GMIN_JUNCTION = 1e-12

#: Exponent above which exp() continues as its tangent line (no overflow).
EXP_LIMIT = 80.0

#: Default junction temperature (K): 27 degC.
DEFAULT_TEMPERATURE = 300.15


def thermal_voltage(temperature: float | np.ndarray) -> float | np.ndarray:
    """``k*T/q`` (V) at ``temperature`` (K), CODATA k and q."""
    return Boltzmann * temperature / elementary_charge


def safe_exp(a: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``exp(a)`` and its derivative, continued linearly above EXP_LIMIT."""
    capped = np.minimum(a, EXP_LIMIT)
    e = np.exp(capped)
    value = e * (1.0 + (a - capped))
    return value, e


def junction_current(v: np.ndarray, isat: np.ndarray, nvt: np.ndarray, bv: np.ndarray,
                     ibv: np.ndarray, nbvt: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Junction current (A) and conductance dI/dv (S) at junction voltage ``v`` (V).

    ``bv`` is the breakdown voltage (V, positive; any value where ``ibv`` is
    0 means no breakdown), ``ibv`` the reverse current at ``v = -bv`` (A),
    ``nbvt`` the breakdown slope voltage ``nbv*Vt`` (V).
    """
    current, conductance = forward_current(v, isat, nvt)
    if np.any(ibv > 0):
        i_bd, g_bd = breakdown_current(v, bv, ibv, nbvt)
        current = current + i_bd
        conductance = conductance + g_bd
    return current, conductance


def forward_current(v: np.ndarray, isat: np.ndarray, nvt: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Shockley current plus the GMIN_JUNCTION floor, and its conductance."""
    ef, dfwd = safe_exp(v / nvt)
    return isat * (ef - 1.0) + GMIN_JUNCTION * v, isat / nvt * dfwd + GMIN_JUNCTION


def breakdown_current(v: np.ndarray, bv: np.ndarray, ibv: np.ndarray,
                      nbvt: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Reverse-breakdown current (negative, A) and its conductance (S); 0 at v = 0."""
    er, drev = safe_exp(-(v + bv) / nbvt)
    er0 = np.exp(np.maximum(-bv / nbvt, -10 * EXP_LIMIT))
    return -ibv * (er - er0), ibv / nbvt * drev


def critical_voltage(isat: np.ndarray, nvt: np.ndarray) -> np.ndarray:
    """``n*Vt*ln(n*Vt/(sqrt(2)*Is))``: where the exponential's curvature is largest (V)."""
    return nvt * np.log(nvt / (math.sqrt(2.0) * isat))


def limit_junction(v_new: np.ndarray, v_old: np.ndarray, nvt: np.ndarray, vcrit: np.ndarray) -> np.ndarray:
    """Logarithmic limiting of a junction-voltage Newton step (Nagel 1975).

    A step that ends above ``vcrit`` and is longer than ``2*n*Vt`` is
    shortened: from a forward-biased start to ``v_old + nVt*ln(1 + dv/nVt)``,
    from a reverse or unbiased start to ``nVt*ln(v_new/nVt)``.
    """
    dv = v_new - v_old
    active = (v_new > vcrit) & (np.abs(dv) > 2.0 * nvt)
    if not np.any(active):
        return v_new
    with np.errstate(invalid="ignore", divide="ignore"):
        arg = 1.0 + dv / nvt
        from_forward = np.where(arg > 0, v_old + nvt * np.log(np.maximum(arg, 1e-300)), vcrit)
        from_reverse = nvt * np.log(np.maximum(v_new / nvt, 1e-300))
    limited = np.where(v_old > 0, from_forward, from_reverse)
    return np.where(active, limited, v_new)


class Diode(TwoTerminal):
    """``diode D1 a -> k saturation-current=1e-14 A ideality=1 resistance=10 mohm``.

    Shockley junction with optional series resistance, constant junction
    capacitance and reverse breakdown (Zener/TVS). See the module docstring
    for the equations.
    """

    keyword = "diode"
    arguments = (
        Arg("saturation-current", AMPERE, default=1e-14, positive=True,
            doc="Is of the Shockley equation"),
        Arg("ideality", DIMENSIONLESS, default=1.0, positive=True, doc="ideality factor n (1 to 2)"),
        Arg("resistance", OHM, default=0.0, nonnegative=True, doc="series resistance"),
        Arg("capacitance", FARAD, default=0.0, nonnegative=True, doc="constant junction capacitance"),
        Arg("breakdown", VOLT, default=None, positive=True,
            doc="reverse breakdown voltage (Zener voltage Vz); none by default"),
        Arg("breakdown-current", AMPERE, default=1e-3, positive=True,
            doc="reverse current at v = -breakdown (the Zener test current)"),
        Arg("breakdown-ideality", DIMENSIONLESS, default=1.0, positive=True,
            doc="slope factor of the breakdown exponential"),
        Arg("temperature", KELVIN, default=DEFAULT_TEMPERATURE, positive=True,
            doc="junction temperature (default 300.15 K)"),
    )
    summary = "junction diode (Shockley) with series resistance, capacitance and optional breakdown"

    def validate(self):
        n = self.params["ideality"]
        if not 0.5 <= n <= 10:
            raise InputError(
                f"diode {self.name}: ideality={n:g} is outside 0.5 to 10 (a silicon junction is 1 to 2)",
                self.span_of("ideality"),
            )

    # -- derived values ----------------------------------------------------------
    @property
    def nvt(self) -> float:
        """``n*k*T/q`` (V)."""
        return self.params["ideality"] * thermal_voltage(self.params["temperature"])

    @property
    def has_breakdown(self) -> bool:
        return self.params["breakdown"] is not None

    def junction_law(self) -> tuple[float, float, float, float, float]:
        """(Is, nVt, BV, Ibv, nbv*Vt) with Ibv = 0 when there is no breakdown."""
        vt = thermal_voltage(self.params["temperature"])
        if self.has_breakdown:
            bv, ibv = self.params["breakdown"], self.params["breakdown-current"]
        else:
            bv, ibv = 1.0, 0.0
        return self.params["saturation-current"], self.nvt, bv, ibv, self.params["breakdown-ideality"] * vt

    # -- topology and compile --------------------------------------------------------
    def branches(self):
        return [Branch(self.nodes["a"], self.nodes["b"], CONDUCTOR)]

    def unknowns(self):
        if self.params["resistance"] > 0:
            return (Unknown("junction", VOLT, "potential between the series resistance and the junction"),)
        return ()

    def stamp(self, s):
        a, b = s.node(self.nodes["a"]), s.node(self.nodes["b"])
        p = a
        if self.params["resistance"] > 0:
            p = s.own("junction")
            s.conductance(a, p, 1.0 / self.params["resistance"])
        self._p, self._k = p, b
        self._cstate = None
        c = self.params["capacitance"]
        if c > 0:
            s.capacitance(p, b, c)
            self._cstate = s.state({p: c, b: -c})

    # -- results -------------------------------------------------------------------
    def current(self, probe):
        if self.params["resistance"] > 0:
            return (probe.node(self.nodes["a"]) - probe.unknown(self, "junction")) / self.params["resistance"]
        v = self.across(probe)
        i, _ = junction_current(v, *(np.float64(p) for p in self.junction_law()))
        if self._cstate is not None:
            i = i + probe.rate(self._cstate)
        return i


class DiodeBatch(NonlinearBatch):
    """Every diode junction of a circuit, evaluated in one numpy call."""

    def __init__(self, elements, stamper):
        super().__init__(elements, stamper)
        self.pattern = BranchPattern(np.array([e._p for e in elements]), np.array([e._k for e in elements]))
        law = np.array([e.junction_law() for e in elements], dtype=float)
        self.isat, self.nvt, self.bv, self.ibv, self.nbvt = law.T
        self.vcrit = critical_voltage(self.isat, self.nvt)
        self.breakdown = self.ibv > 0
        self.any_breakdown = bool(np.any(self.breakdown))
        self.vcrit_bv = np.where(self.breakdown, critical_voltage(np.where(self.breakdown, self.ibv, 1.0),
                                                                  self.nbvt), np.inf)
        self.f_rows = self.pattern.f_rows
        self.jf_rows, self.jf_cols = self.pattern.jf_rows, self.pattern.jf_cols

    def evaluate(self, x, t):
        v = self.pattern.across(x)
        i, g = forward_current(v, self.isat, self.nvt)
        if self.any_breakdown:
            i_bd, g_bd = breakdown_current(v, self.bv, self.ibv, self.nbvt)
            i, g = i + i_bd, g + g_bd
        return self.pattern.f_values(i), self.pattern.jf_values(g), self.empty, self.empty

    def junction_voltages(self, x: np.ndarray) -> np.ndarray:
        return self.pattern.across(x)

    def limit(self, x_new, x_old):
        v_new = self.pattern.across(x_new)
        if not self.any_breakdown and not np.any(v_new > self.vcrit):
            return x_new  # the usual case near convergence: nothing to limit
        v_old = self.pattern.across(x_old)
        v_lim = limit_junction(v_new, v_old, self.nvt, self.vcrit)
        if v_lim is v_new and not self.any_breakdown:
            return x_new  # every junction above vcrit moved less than 2 nVt
        if self.any_breakdown:
            # The same rule on the reverse voltage beyond the knee, u = -(v + BV).
            u_new, u_old = -(v_lim + self.bv), -(v_old + self.bv)
            u_lim = limit_junction(u_new, u_old, self.nbvt, self.vcrit_bv)
            # (only where the limit acted: the round trip v -> u -> v is not exact)
            v_lim = np.where(self.breakdown & (u_lim != u_new), -u_lim - self.bv, v_lim)
        return scale_step(x_new, x_old, v_new, v_old, v_lim)


def scale_step(x_new: np.ndarray, x_old: np.ndarray, v_new: np.ndarray, v_old: np.ndarray,
               v_lim: np.ndarray) -> np.ndarray:
    """Shorten the update ``x_new - x_old`` so no junction passes its limited voltage.

    The whole step is scaled by the smallest ratio ``(v_lim - v_old) /
    (v_new - v_old)`` over the junctions, which keeps its direction.
    """
    dv = v_new - v_old
    moved = np.abs(v_lim - v_new) > 0
    if not np.any(moved):
        return x_new
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(moved & (dv != 0), (v_lim - v_old) / dv, 1.0)
    # Only a limit that shortens the step in its own direction counts.
    ratio = np.where((ratio > 0) & (ratio < 1), ratio, 1.0)
    scale = float(np.min(ratio))
    if scale >= 1.0:
        return x_new
    return x_old + scale * (x_new - x_old)


Diode.Batch = DiodeBatch

__all__ = ["Diode", "DiodeBatch", "junction_current", "limit_junction", "thermal_voltage"]
