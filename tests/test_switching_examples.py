"""The example circuits in circuits/ behave as circuit theory says (and as README.md quotes).

Sources:
- A diode or Zener clamp: the clamp voltage at current I follows from the
  Shockley equation (Sedra & Smith, from memory) and the breakdown law of
  mna's diode (grammar/README.md), I = Ibr exp((V - Vbr)/Vt).
- An RL coil discharging into a constant clamp voltage Vc from a supply Vs:
  L di/dt = Vs - Vc - R i, first-order circuit theory (Nilsson & Riedel,
  *Electric Circuits*, ch. 7); the clamp absorbs Vc * integral(i dt).
- A series RLC with a DC source and initial current: second-order circuit
  theory (Nilsson & Riedel ch. 8; Alexander & Sadiku ch. 8).
- Buck converter choke ripple from volt-seconds: delta_I = V_L D / (f L)
  (Erickson & Maksimovic, *Fundamentals of Power Electronics*, ch. 2).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import mna

CIRCUITS = Path(__file__).resolve().parent.parent / "circuits"
VT = 1.380649e-23 * 298.15 / 1.602176634e-19  # thermal voltage at the default 298.15 K
VS, LC, RC = 12.0, 60e-3, 24.0  # the valve: supply, coil inductance and resistance
T_OPEN = 1e-3


@pytest.fixture(scope="module")
def valve_runs():
    runs = {}
    for name in ("no_protection", "freewheel_diode", "diode_zener", "rc_snubber"):
        (res,) = mna.load(CIRCUITS / f"valve_{name}.mna").run()
        runs[name] = res
    return runs


def on_current(res) -> float:
    return float(np.interp(T_OPEN * 0.999, res.time, res["i(Lvalve)"]))


def release_time(res, level: float = 0.1) -> float:
    """From the opening until |i| falls below level*I0 for good."""
    t, i = res.time, np.abs(res["i(Lvalve)"])
    above = np.flatnonzero((t >= T_OPEN) & (i >= level * on_current(res)))
    return float(t[above[-1]] - T_OPEN)


def clamp_energy(i0: float, vc: float) -> float:
    """Energy (J) a clamp at vc takes from the valve coil until its current is zero."""
    tau, a = LC / RC, (vc - VS) / RC
    t_end = tau * math.log(1 + i0 / a)
    charge = (i0 + a) * tau * (1 - math.exp(-t_end / tau)) - a * t_end
    return vc * charge


def test_unprotected_valve_avalanches_the_mosfet(valve_runs):
    res = valve_runs["no_protection"]
    i0 = on_current(res)
    # Breakdown law at the coil current: Vbr + Vt ln(I0/Ibr), Vbr = 70 V, Ibr = 10 mA.
    vc = 70.0 + VT * math.log(i0 / 10e-3)
    # The example runs at tolerance=0.01 %: a local error of 1e-4 of the 70 V
    # reached, 7 mV a step; 20 mV is about three of them (a Vt ln term off by a
    # factor of two moves the clamp by 0.1 V).
    assert res["v(drain)"].max() == pytest.approx(vc, abs=0.02)
    # Energy into the avalanche against the RL discharge into a constant
    # clamp (the clamp voltage moves by Vt ln(...) ~ 0.1 V as the current
    # falls: 0.2 % of Vc, so 1 %).
    after = res.time >= T_OPEN
    energy = np.trapezoid(res["p(Dbody)"][after] + res["p(Q1)"][after], res.time[after])
    assert energy == pytest.approx(clamp_energy(i0, vc), rel=0.01)
    # ...which is more than the coil held: the supply feeds the clamp too.
    assert energy > 0.5 * LC * i0**2


def test_freewheeling_diode_clamp_and_release(valve_runs):
    res = valve_runs["freewheel_diode"]
    i0 = on_current(res)
    nvt, isat, rs = 1.8 * VT, 5e-9, 40e-3

    def drop(i):
        return nvt * math.log1p(i / isat) + rs * i

    # tolerance=0.01 % of the 24.7 V reached is 2.5 mV a step: 5 mV is two
    # local errors (the diode drop itself is 0.7 V; a wrong ideality moves it
    # by tens of mV).
    assert res["v(drain)"].max() == pytest.approx(VS + drop(i0), abs=5e-3)
    # L di/dt = -(R i + Vd(i)) solved by scipy, until i = 0.1 I0.
    stop = lambda t, y: y[0] - 0.1 * i0  # noqa: E731
    stop.terminal = True
    ref = solve_ivp(lambda t, y: [-(RC * y[0] + drop(y[0])) / LC], (0, 0.02), [i0], events=stop,
                    rtol=1e-10, atol=1e-12)
    # Error-controlled steps at the example's tolerance=0.01 %, and the
    # crossing read by linear interpolation between samples at most
    # max-step=20 us apart on a release of several ms (0.4 %): 1 %.
    assert release_time(res) == pytest.approx(ref.t_events[0][0], rel=0.01)


def test_diode_zener_clamp_and_release(valve_runs):
    res = valve_runs["diode_zener"]
    i0 = on_current(res)

    def clamp(i):
        blocking = 1.8 * VT * math.log1p(i / 5e-9) + 40e-3 * i
        zener = 24.0 + VT * math.log(i / 5e-3) + 1.0 * i
        return VS + blocking + zener

    # The 200 pF drain capacitance charges in ~10 ns, so the peak is the
    # clamp at the full coil current. tolerance=0.01 % of the 49 V reached is
    # 5 mV a step; 20 mV is four local errors (the Zener's 1 ohm at the coil
    # current alone is 0.3 V, so a lost series resistance shows).
    assert res["v(drain)"].max() == pytest.approx(clamp(i0), abs=0.02)
    assert release_time(res) < release_time(valve_runs["freewheel_diode"]) / 4


def test_rc_snubber_against_the_series_rlc(valve_runs):
    res = valve_runs["rc_snubber"]
    i0 = on_current(res)
    r, c = 47.0, 10e-6
    rt = RC + r
    alpha, w0 = rt / (2 * LC), 1 / math.sqrt(LC * c)
    wd = math.sqrt(w0 * w0 - alpha * alpha)
    # vC'' + (Rt/L) vC' + vC/(LC) = Vs/(LC), vC(0) = 0, C vC'(0) = I0.
    a = -VS
    b = (i0 / c + alpha * a) / wd
    t = res.time[res.time > T_OPEN + 1e-6] - T_OPEN
    e = np.exp(-alpha * t)
    vc = VS + e * (a * np.cos(wd * t) + b * np.sin(wd * t))
    i = c * e * ((-alpha * a + wd * b) * np.cos(wd * t) + (-alpha * b - wd * a) * np.sin(wd * t))
    v_drain = vc + r * i
    sim = res["v(drain)"][res.time > T_OPEN + 1e-6]
    # Error-controlled steps at the example's tolerance=0.01 % (a local error
    # of 1e-4 of the peak per step, a few of them accumulated over the ring's
    # first swing); the 200 pF body diode capacitance is 2e-5 of the
    # snubber's and the diode's own current is below 1e-4 of the coil's:
    # 0.5 % of the peak is ten times that, while a 10 % error in the snubber
    # resistor moves the peak by several per cent.
    assert np.allclose(sim, v_drain, atol=0.005 * v_drain.max())
    assert res["v(drain)"].max() == pytest.approx(v_drain.max(), rel=0.005)


def test_protection_ranking_quoted_in_the_readme(valve_runs):
    peak = {k: r["v(drain)"].max() for k, r in valve_runs.items()}
    release = {k: release_time(r) for k, r in valve_runs.items()}
    assert peak["no_protection"] > peak["diode_zener"] > peak["rc_snubber"] > peak["freewheel_diode"]
    assert release["freewheel_diode"] > release["rc_snubber"] > release["diode_zener"] > release["no_protection"]


def buck(name: str, until: float = 100e-6):
    c = mna.load(CIRCUITS / name)
    return c.transient(until=until, start="rest", record=["i(L1)", "v(out)", "flux(L1)"]
                       if "saturating" in name else ["i(L1)", "v(out)"], **{"max-step": 50e-9})


def last_period(res, label: str, f: float = 200e3) -> np.ndarray:
    return res[label][res.time >= res.time[-1] - 1 / f]


def test_buck_choke_ripple_from_volt_seconds():
    res = buck("buck_choke.mna")
    i = last_period(res, "i(L1)")
    vout = float(np.mean(last_period(res, "v(out)")))
    i_mean = float(np.mean(i))
    d, f, l0 = 0.225, 200e3, 22e-6
    # During the on time the choke sees Vin - Vout less the switch's and the
    # winding's drops.
    v_on = 24.0 - vout - i_mean * (20e-3 + 12e-3)
    # The output is still settling (its LC ringing changes Vout by a few mV
    # over a period): 1 %.
    assert np.ptp(i) == pytest.approx(v_on * d / (f * l0), rel=0.01)


def test_saturating_choke_swings_the_same_flux_with_more_current():
    lin = buck("buck_choke.mna")
    sat = buck("buck_choke_saturating.mna")
    d, f = 0.225, 200e3
    i_sat = last_period(sat, "i(L1)")
    vout = float(np.mean(last_period(sat, "v(out)")))
    v_on = 24.0 - vout - float(np.mean(i_sat)) * (20e-3 + 12e-3)
    # Volt-seconds set the flux swing whatever the core does (Faraday's law,
    # v = d(phi)/dt; Erickson & Maksimovic, *Fundamentals of Power
    # Electronics*, ch. 2: inductor volt-second balance; 1 %, as above).
    assert np.ptp(last_period(sat, "flux(L1)")) == pytest.approx(v_on * d / f, rel=0.01)
    # The top of the ripple is past the 4.5 A saturation current, where the
    # inductance is below 70 % of 22 uH: the current ripple grows.
    assert i_sat.max() > 4.5
    assert np.ptp(i_sat) > 1.2 * np.ptp(last_period(lin, "i(L1)"))


def test_flyback_primary_ramps_at_vbus_over_l1():
    # During the first on time (1 us to 4 us) the secondary diode blocks, so
    # the primary is an inductance L1 = Lm + Ll/2 across the bus and its
    # current rises at Vbus / L1. (Before 1 us the windings ring with the
    # drain capacitances as they charge from rest, and at 1 us the secondary
    # hands its current over to the primary: start the count at 1.5 us.)
    c = mna.load(CIRCUITS / "lowside_snubber_leakage.mna")
    res = c.transient(until=3.9e-6, start="rest", record=["i1(T1)"], **{"max-step": 100e-9})
    l1 = 200e-6 + 5e-6 / 2
    # The 80 mohm switch and 50 mohm winding drop 0.1 V at most: 0.5 %.
    rise = res["i1(T1)"][-1] - res.at("i1(T1)", 1.5e-6)
    assert rise == pytest.approx(48.0 * (3.9e-6 - 1.5e-6) / l1, rel=0.005)


@pytest.mark.parametrize("name", ["valve_no_protection", "valve_freewheel_diode", "valve_diode_zener",
                                  "valve_rc_snubber", "lowside_snubber_leakage", "buck_choke",
                                  "buck_choke_saturating"])
def test_example_files_parse_and_compile(name):
    circuit = mna.load(CIRCUITS / f"{name}.mna")
    assert circuit.analyses and circuit.records
    from mna.analyses.common import prepare

    prepare(circuit)  # topology checks and compilation
