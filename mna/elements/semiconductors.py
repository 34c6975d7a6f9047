"""Semiconductor junctions: the ``diode`` kind (rectifier, freewheel, Zener, TVS).

Netlist::

    diode D1 a -> k  saturation-current=1e-14 A  ideality=1.0  resistance=10 mohm
    diode Z1 k -> a  breakdown=24 V  breakdown-current=5 mA      # a Zener or TVS clamp

``a -> k`` is anode -> cathode; ``i(D1)`` flows anode to cathode.

The junction current (the kernels below are plain functions on arrays)::

    I(v) = Isat*(exp(v/(n*Vt)) - 1)                             Shockley
         - Ibr*(exp(-(v + Vbr)/(nbr*Vt)) - exp(-Vbr/(nbr*Vt)))   reverse breakdown
         + JUNCTION_LEAK*v                                      leakage floor

with the symbols of a datasheet: ``Vbr`` the reverse breakdown voltage
(``breakdown=``), ``Ibr`` the reverse current at ``v = -Vbr``
(``breakdown-current=``), so ``breakdown=`` and ``breakdown-current=`` are a
Zener's Vz at its test current Izt; ``nbr`` the slope factor of the
breakdown knee (``breakdown-ideality=``); ``Isat`` the saturation current
of the Shockley equation (``saturation-current=``), ``n`` its ideality.
``Vt = k*T/q`` from the CODATA constants in ``scipy.constants`` (exact in
the 2019 SI); ``T`` is ``temperature=`` (default 298.15 K, 25 degC, the
reference temperature of datasheet tables, where Vt = 25.6926 mV). The
breakdown term is zero unless ``breakdown=`` is given. ``resistance=`` is in series with the junction (an internal
node, shown as ``junction(D1)`` in error messages); ``capacitance=`` is a
constant junction capacitance across the junction (no depletion law).
Above ``exp(EXP_LIMIT)`` the exponentials continue as straight lines so
no evaluation can overflow. The leakage floor is linear: it is stamped
once as a conductance across the junction, and the batch's kernel
evaluates the two exponentials only.

Newton safeguard: :meth:`DiodeBatch.limit` applies the logarithmic
junction-voltage limiting of L. W. Nagel, University of California,
Berkeley, Electronics Research Laboratory memorandum ERL-M520 (1975) (the
algorithm as described there, from memory; also Vlach & Singhal, *Computer
Methods for Circuit Analysis and Design*, ch. 8): above the critical
voltage ``Vcrit = n*Vt*ln(n*Vt/(sqrt(2)*Isat))`` a forward step is
shortened to ``n*Vt*ln(1 + dv/(n*Vt))``. The same rule guards the
breakdown knee. The whole Newton update is then scaled so no junction moves
further than its limit (the direction of the step is kept).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.constants import Boltzmann, elementary_charge

from ..errors import InputError
from ..units import AMPERE, COULOMB, DIMENSIONLESS, FARAD, JOULE, KELVIN, OHM, SECOND, VOLT, WATT
from .base import CONDUCTOR, Arg, Branch, NonlinearBatch, Unknown
from .batching import BranchPattern
from .passive import TwoTerminal
from .recovery import fit_recovery

#: The recovery model's figures may miss the datasheet's Qrr and trr by this much.
RECOVERY_FIT_TOLERANCE = 0.02
RECOVERY_ARGS = ("recovery-charge", "recovery-time", "recovery-current", "recovery-slope")

#: Conductance (S) across every junction: keeps a reverse-biased junction's
#: row from vanishing (common practice; 1e-12 S adds 12 pA of leakage at
#: 12 V reverse).
JUNCTION_LEAK = 1e-12

#: Exponent above which exp() continues as its tangent line (no overflow).
EXP_LIMIT = 80.0

#: Default junction temperature (K): 25 degC, the reference temperature of
#: datasheet tables.
DEFAULT_TEMPERATURE = 298.15


def thermal_voltage(temperature: float | np.ndarray) -> float | np.ndarray:
    """``k*T/q`` (V) at ``temperature`` (K), CODATA k and q."""
    return Boltzmann * temperature / elementary_charge


def safe_exp(a: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``exp(a)`` and its derivative, continued linearly above EXP_LIMIT."""
    capped = np.minimum(a, EXP_LIMIT)
    e = np.exp(capped)
    value = e * (1.0 + (a - capped))
    return value, e


def junction_current(v: np.ndarray, isat: np.ndarray, nvt: np.ndarray, vbr: np.ndarray,
                     ibr: np.ndarray, nbr_vt: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Junction current (A) and conductance dI/dv (S) at junction voltage ``v`` (V).

    ``vbr`` is the breakdown voltage (V, positive; any value where ``ibr`` is
    0 means no breakdown), ``ibr`` the reverse current at ``v = -vbr`` (A),
    ``nbr_vt`` the breakdown slope voltage ``nbr*Vt`` (V).
    """
    current, conductance = forward_current(v, isat, nvt)
    if np.any(ibr > 0):
        i_bd, g_bd = breakdown_current(v, vbr, ibr, nbr_vt)
        current = current + i_bd
        conductance = conductance + g_bd
    return current, conductance


def forward_current(v: np.ndarray, isat: np.ndarray, nvt: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Shockley current plus the JUNCTION_LEAK floor, and its conductance."""
    ef, dfwd = safe_exp(v / nvt)
    return isat * (ef - 1.0) + JUNCTION_LEAK * v, isat / nvt * dfwd + JUNCTION_LEAK


def breakdown_current(v: np.ndarray, vbr: np.ndarray, ibr: np.ndarray,
                      nbr_vt: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Reverse-breakdown current (negative, A) and its conductance (S); 0 at v = 0."""
    er, drev = safe_exp(-(v + vbr) / nbr_vt)
    er0 = np.exp(np.maximum(-vbr / nbr_vt, -10 * EXP_LIMIT))
    return -ibr * (er - er0), ibr / nbr_vt * drev


def critical_voltage(isat: np.ndarray, nvt: np.ndarray) -> np.ndarray:
    """``n*Vt*ln(n*Vt/(sqrt(2)*Isat))``: where the exponential's curvature is largest (V)."""
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
            doc="Isat of the Shockley equation"),
        Arg("ideality", DIMENSIONLESS, default=1.0, positive=True, doc="ideality factor n (1 to 2)"),
        Arg("resistance", OHM, default=0.0, nonnegative=True, doc="series resistance"),
        Arg("capacitance", FARAD, default=0.0, nonnegative=True, doc="constant junction capacitance"),
        Arg("breakdown", VOLT, default=None, positive=True,
            doc="reverse breakdown voltage Vbr (a Zener's Vz); none by default"),
        Arg("breakdown-current", AMPERE, default=1e-3, positive=True,
            doc="reverse current Ibr at v = -Vbr (a Zener's test current Izt)"),
        Arg("breakdown-ideality", DIMENSIONLESS, default=1.0, positive=True,
            doc="slope factor nbr of the breakdown exponential"),
        # The exponential law of the junction is not a model of a diode far
        # from room temperature; below about 1 K its thermal voltage also
        # leaves the range the solver resolves.
        Arg("temperature", KELVIN, default=DEFAULT_TEMPERATURE, positive=True, minimum=10.0, maximum=1000.0,
            absolute=True,
            doc="junction temperature (default 298.15 K, 25 degC)"),
        Arg("recovery-charge", COULOMB, default=None, positive=True,
            doc="reverse recovery charge Qrr of the datasheet (turns on the recovery model)"),
        Arg("recovery-time", SECOND, default=None, positive=True, doc="reverse recovery time trr of the datasheet"),
        Arg("recovery-current", AMPERE, default=None, positive=True,
            doc="forward current IF of the datasheet's recovery test"),
        Arg("recovery-slope", AMPERE / SECOND, default=None, positive=True,
            doc="-di/dt of the datasheet's recovery test (A/us)"),
    )
    outputs = {"v": VOLT, "i": AMPERE, "p": WATT, "pcond": WATT, "prec": WATT, "eloss": JOULE}

    @property
    def loss_parts(self) -> dict[str, tuple[str, str]]:
        """What the loss table reads (mna.losses): part -> (output, "power" in W)."""
        if self.recovers:
            return {"conduction": ("pcond", "power"), "recovery": ("prec", "power")}
        return {"conduction": ("pcond", "power")}
    summary = "junction diode (Shockley) with series resistance, capacitance and optional breakdown"

    def validate(self):
        n = self.params["ideality"]
        if not 0.5 <= n <= 10:
            raise InputError(
                f"diode {self.name}: ideality={n:g} is outside 0.5 to 10 (a silicon junction is 1 to 2)",
                self.span_of("ideality"),
            )
        self.lifetime = self.transit = None
        given = [k for k in RECOVERY_ARGS if self.params.get(k) is not None]
        if given:
            missing = [k for k in RECOVERY_ARGS if k not in given]
            if missing:
                raise InputError(f"diode {self.name}: reverse recovery needs the datasheet's Qrr and trr with "
                                 f"their test point; add {', '.join(m + '=' for m in missing)}",
                                 self.span_of(given[0]))
            p = self.params
            tau, tm, miss = fit_recovery(p["recovery-charge"], p["recovery-time"], p["recovery-current"],
                                         p["recovery-slope"])
            if miss > RECOVERY_FIT_TOLERANCE:
                raise InputError(
                    f"diode {self.name}: no charge-control recovery gives Qrr = {p['recovery-charge']:.3g} C "
                    f"together with trr = {p['recovery-time']:.3g} s at IF = {p['recovery-current']:.3g} A and "
                    f"-di/dt = {p['recovery-slope']:.3g} A/s (the closest misses by {100 * miss:.0f} %); check "
                    "the units and that the four values belong to one datasheet test", self.span_of(given[0]))
            self.lifetime, self.transit = tau, tm

    @property
    def recovers(self) -> bool:
        return self.lifetime is not None

    # -- derived values ----------------------------------------------------------
    @property
    def nvt(self) -> float:
        """``n*k*T/q`` (V)."""
        return self.params["ideality"] * thermal_voltage(self.params["temperature"])

    @property
    def has_breakdown(self) -> bool:
        return self.params["breakdown"] is not None

    def junction_law(self) -> tuple[float, float, float, float, float]:
        """(Isat, n*Vt, Vbr, Ibr, nbr*Vt) with Ibr = 0 when there is no breakdown."""
        vt = thermal_voltage(self.params["temperature"])
        if self.has_breakdown:
            vbr, ibr = self.params["breakdown"], self.params["breakdown-current"]
        else:
            vbr, ibr = 1.0, 0.0
        return self.params["saturation-current"], self.nvt, vbr, ibr, self.params["breakdown-ideality"] * vt

    # -- topology and compile --------------------------------------------------------
    def branches(self):
        return [Branch(self.nodes["a"], self.nodes["b"], CONDUCTOR)]

    def unknowns(self):
        out = ()
        if self.params["resistance"] > 0:
            out += (Unknown("junction", VOLT, "potential between the series resistance and the junction"),)
        if self.recovers:
            out += (Unknown("stored", COULOMB, "charge stored in the base (reverse recovery)"),)
        return out

    def stamp(self, s):
        a, b = s.node(self.nodes["a"]), s.node(self.nodes["b"])
        p = a
        if self.params["resistance"] > 0:
            p = s.own("junction")
            s.conductance(a, p, 1.0 / self.params["resistance"])
        self._p, self._k = p, b
        # The junction's leakage floor is linear: stamped once, not evaluated.
        s.conductance(p, b, JUNCTION_LEAK)
        self._cstate = None
        c = self.params["capacitance"]
        if c > 0:
            s.capacitance(p, b, c)
            self._cstate = s.state({p: c, b: -c})
        self._qm = -1
        if self.recovers:
            self._qm = s.own("stored")
            s.c_entry(self._qm, self._qm, 1.0)  # d qM/dt in its own row

    # -- results -------------------------------------------------------------------
    def current(self, probe):
        if self.params["resistance"] > 0:
            return (probe.node(self.nodes["a"]) - probe.unknown(self, "junction")) / self.params["resistance"]
        v = self.across(probe)
        i, _ = junction_current(v, *(np.float64(p) for p in self.junction_law()))
        if self.recovers:  # the charge-control current replaces the Shockley part
            isat, nvt = self.params["saturation-current"], self.nvt
            shockley, _ = forward_current(v, np.float64(isat), np.float64(nvt))
            q_e = (self.lifetime + self.transit) * (shockley - JUNCTION_LEAK * v)
            i = i - shockley + JUNCTION_LEAK * v + (q_e - probe.unknown(self, "stored")) / self.transit
        if self._cstate is not None:
            i = i + probe.rate(self._cstate)
        return i

    def output(self, quantity, probe):
        if quantity in ("pcond", "prec", "eloss"):
            p = self.across(probe) * self.current(probe)
            forward = self.current(probe) >= 0
            if quantity == "pcond":
                return np.where(forward, p, 0.0)
            if quantity == "prec":
                return np.where(forward, 0.0, p)
            t = np.asarray(probe.time, dtype=float)
            out = np.zeros_like(p)
            out[1:] = np.cumsum(0.5 * (p[1:] + p[:-1]) * np.diff(t))
            return out
        return super().output(quantity, probe)


class DiodeBatch(NonlinearBatch):
    """Every diode junction of a circuit, evaluated in one numpy call."""

    #: The leak conductance stamped across every junction (S): a change of a
    #: junction's conductance well below it does not change the circuit.
    jacobian_floor = JUNCTION_LEAK

    def __init__(self, elements, stamper):
        super().__init__(elements, stamper)
        self.pattern = BranchPattern(np.array([e._p for e in elements]), np.array([e._k for e in elements]),
                                     stamper.n)
        law = np.array([e.junction_law() for e in elements], dtype=float)
        self.isat, self.nvt, self.vbr, self.ibr, self.nbr_vt = law.T
        # Per-call constants of the kernel (evaluate), computed once.
        self.inv_nvt = 1.0 / self.nvt
        self.gsat = self.isat / self.nvt
        self.inv_nbr_vt = 1.0 / self.nbr_vt
        self.gbr = self.ibr / self.nbr_vt
        self.er0 = np.exp(np.maximum(-self.vbr / self.nbr_vt, -10 * EXP_LIMIT))
        self.vcrit = critical_voltage(self.isat, self.nvt)
        self.breakdown = self.ibr > 0
        self.any_breakdown = bool(np.any(self.breakdown))
        self.vcrit_br = np.where(self.breakdown, critical_voltage(np.where(self.breakdown, self.ibr, 1.0),
                                                                  self.nbr_vt), np.inf)
        # No update shorter than this (V) is ever limited (both rules below
        # act only on steps longer than 2 n*Vt).
        self.quiet = 2.0 * np.minimum(self.nvt, np.where(self.breakdown, self.nbr_vt, np.inf))
        # A junction voltage moves at most twice the largest entry of an update.
        self.limit_quiet = float(self.quiet.min()) / 2.0 if elements else 0.0
        self.f_rows = self.pattern.f_rows
        self.jf_rows, self.jf_cols = self.pattern.jf_rows, self.pattern.jf_cols
        self._recovery(elements)

    def _recovery(self, elements) -> None:
        """Rows and Jacobian entries of the recovering diodes' stored charges (Lauritzen & Ma)."""
        rec = [k for k, e in enumerate(elements) if e.recovers]
        self.rec = np.array(rec, dtype=np.int64)
        if not rec:
            return
        e = [elements[k] for k in rec]
        self.rec_scale = np.array([x.lifetime + x.transit for x in e])  # qE = Isat (tau + TM) (exp - 1)
        self.rec_tm = np.array([x.transit for x in e])
        self.rec_tau = np.array([x.lifetime for x in e])
        qm = np.array([x._qm for x in e], dtype=np.int64)
        p = np.array([x._p for x in e], dtype=np.int64)
        k = np.array([x._k for x in e], dtype=np.int64)
        self.rec_qm = qm
        self.rec_mask = np.zeros(len(elements), dtype=bool)
        self.rec_mask[rec] = True
        # extra residual rows (the stored charges) and Jacobian entries
        self.f_rows = np.concatenate([self.f_rows, qm])
        rows = np.concatenate([p, k, qm, qm, qm])
        cols = np.concatenate([qm, qm, p, k, qm])
        self._rec_keep = (rows >= 0) & (cols >= 0)
        self.jf_rows = np.concatenate([self.jf_rows, rows[self._rec_keep]])
        self.jf_cols = np.concatenate([self.jf_cols, cols[self._rec_keep]])

    def evaluate(self, x, t):
        """The junction law without its JUNCTION_LEAK floor (stamped as a linear conductance).

        The same law as :func:`junction_current`, with every per-junction
        constant computed once: about a dozen numpy calls for any number of
        junctions.
        """
        v = self.pattern.across(x)
        a = v * self.inv_nvt
        capped = np.minimum(a, EXP_LIMIT)
        e = np.exp(capped)
        i = self.isat * (e * (1.0 + (a - capped)) - 1.0)
        g = self.gsat * e
        if self.rec.size:
            # i = (qE - qM)/TM with qE = Isat (tau + TM) (exp(v/nVt) - 1)
            q_e, dq_e = self.rec_scale * i[self.rec], self.rec_scale * g[self.rec]
            q_m = x[self.rec_qm]
            i[self.rec] = (q_e - q_m) / self.rec_tm
            g[self.rec] = dq_e / self.rec_tm
        if self.any_breakdown:
            a = (v + self.vbr) * -self.inv_nbr_vt
            capped = np.minimum(a, EXP_LIMIT)
            e = np.exp(capped)
            i -= self.ibr * (e * (1.0 + (a - capped)) - self.er0)
            g += self.gbr * e
        f = self.pattern.f_values(i)
        jf = self.pattern.jf_values(g)
        if self.rec.size:
            inv_tm = 1.0 / self.rec_tm
            f = np.concatenate([f, -(q_e - q_m) * inv_tm + q_m / self.rec_tau])
            extra = np.concatenate([-inv_tm, inv_tm, -dq_e * inv_tm, dq_e * inv_tm, inv_tm + 1.0 / self.rec_tau])
            jf = np.concatenate([jf, extra[self._rec_keep]])
        return f, jf, self.empty, self.empty

    def junction_voltages(self, x: np.ndarray) -> np.ndarray:
        return self.pattern.across(x)

    def limit(self, x_new, x_old):
        if not (np.abs(self.pattern.across(x_new - x_old)) > self.quiet).any():
            return x_new  # the usual case near convergence: no junction moved 2 n*Vt
        v_new = self.pattern.across(x_new)
        if not self.any_breakdown and not np.any(v_new > self.vcrit):
            return x_new  # the usual case near convergence: nothing to limit
        v_old = self.pattern.across(x_old)
        v_lim = limit_junction(v_new, v_old, self.nvt, self.vcrit)
        if v_lim is v_new and not self.any_breakdown:
            return x_new  # every junction above vcrit moved less than 2 nVt
        if self.any_breakdown:
            # The same rule on the reverse voltage beyond the knee, u = -(v + Vbr).
            u_new, u_old = -(v_lim + self.vbr), -(v_old + self.vbr)
            u_lim = limit_junction(u_new, u_old, self.nbr_vt, self.vcrit_br)
            # (only where the limit acted: the round trip v -> u -> v is not exact)
            v_lim = np.where(self.breakdown & (u_lim != u_new), -u_lim - self.vbr, v_lim)
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
