"""Power transistors (mosfet, igbt), complementary gates with dead time, loss energies.

References:
- Electrothermal fixed point of a conduction loss with a temperature-
  dependent on-resistance: P = I^2 R0 (1 + a (Tj - Tref)), Tj = Ta + Rth P,
  solved for Tj (the usual thermal-runaway analysis; e.g. Lutz et al.,
  "Semiconductor Power Devices", Springer 2011, ch. 13, from memory).
- Linear scaling of datasheet switching energies with voltage and current:
  common practice (e.g. Wintrich, Nicolai, Tursky, Reimann, "Application
  Manual Power Semiconductors", SEMIKRON 2015, ch. 3, from memory).
- Dead-time voltage error of a half-bridge: the output loses or gains the
  dead time's share of the bus voltage depending on the sign of the load
  current, dV = td * fs * Vdc per edge pair around the mid-dead-time edge
  (common practice; e.g. Holmes and Lipo, "Pulse Width Modulation for
  Power Converters", Wiley 2003, ch. 10, from memory).
- Power balance: the sum of the powers of all branches is zero at every
  instant (Tellegen's theorem, B. D. H. Tellegen, Philips Res. Rep. 7, 1952).
"""

from __future__ import annotations

import numpy as np
import pytest

import mna
from mna.elements.switches import PwmGate, ScheduleGate, complement_pwm, complement_schedule, pwm_states
from mna.errors import InputError


def test_conduction_loss_with_temperature_feedback_reaches_the_closed_form_fixed_point():
    # I = 20 A through R0 = 25 mohm at 25 °C, +0.7 %/K, Rth = 4 K/W to a 40 °C ambient.
    # Tj = Ta + Rth I^2 R0 (1 + a (Tj - Tref))
    #  => Tj = (Ta + k (1 - a Tref)) / (1 - k a), k = Rth I^2 R0
    I, R0, a, Rth, Ta, Tref = 20.0, 0.025, 0.007, 4.0, 313.15, 298.15
    k = Rth * I**2 * R0
    tj = (Ta + k * (1 - a * Tref)) / (1 - k * a)
    text = (f"ambient-temperature TA 40 °C\n"
            f"current-source I1 gnd -> d {I} A\n"
            f"mosfet Q1 d -> gnd gate=schedule(closed) on-resistance={R0} ohm tempco={a * 100} %/K junction=j\n"
            f"thermal-resistance Rth j -> ambient {Rth} K/W\n")
    c = mna.parse(text)
    c.record("Tj(Q1)", "pcond(Q1)", "v(d)")
    op = c.dc()
    # Newton converges to 1e-6 K; the fixed point is ~ 92 °C, so a missing
    # feedback (Tj with R0 only: 80 °C) or a doubled tempco is far outside.
    assert op["Tj(Q1)"] == pytest.approx(tj, abs=1e-4)
    assert op["pcond(Q1)"] == pytest.approx(I**2 * R0 * (1 + a * (tj - Tref)), rel=1e-6)
    # The same fixed point at the end of a transient through a heat capacity
    text2 = text + "thermal-capacitance Cj j -> ambient 0.02 J/K\n"
    w = mna.parse(text2).transient(until=1.2, start="rest", record=["Tj(Q1)"])
    assert w["Tj(Q1)"][0] == pytest.approx(Ta, abs=1e-6)
    # loop gain k*a = 0.28 stretches Rth*C = 80 ms to 111 ms: 1.2 s leaves e^-10.8 of 61 K
    assert w["Tj(Q1)"][-1] == pytest.approx(tj, abs=0.05)


def switching_energies(vdc: float, r_load: float) -> tuple[float, float]:
    text = (f"voltage-source V1 p -> gnd {vdc} V\nresistor R1 p -> d {r_load} ohm\n"
            "mosfet Q1 d -> gnd gate=schedule(open, 10 us: closed, 30 us: open) on-resistance=20 mohm\n"
            "    turn-on-energy=120 uJ turn-off-energy=80 uJ test-voltage=400 V test-current=25 A\n")
    # (a circuit without a capacitor or inductor: a fixed step; the edges are corners, landed on exactly)
    w = mna.parse(text).transient(until=50e-6, step=1e-6, record=["esw(Q1)"])
    esw, t = w["esw(Q1)"], w.time
    e_on = esw[np.searchsorted(t, 20e-6)]
    return e_on, esw[-1] - e_on


@pytest.mark.parametrize("vdc, r_load", [(200.0, 20.0), (400.0, 10.0)])
def test_switching_energy_scales_linearly_with_voltage_and_current(vdc, r_load):
    # E = E_test * (V / V_test) * (I / I_test) (common practice, SEMIKRON
    # manual ch. 3). Turn-on: V = the blocked bus voltage, I = the current
    # after turning on; turn-off: I before, V after (here both ~ vdc and vdc / R).
    i = vdc / (r_load + 0.02)
    v_off = vdc  # the 10 Mohm off-state leaves vdc across the device to 1e-6
    e_on, e_off = switching_energies(vdc, r_load)
    assert e_on == pytest.approx(120e-6 * (vdc / 400) * (i / 25), rel=1e-5)
    assert e_off == pytest.approx(80e-6 * (v_off / 400) * (i / 25), rel=1e-5)


def test_switching_energy_at_two_operating_points_has_the_ratio_of_their_vi_products():
    e1 = sum(switching_energies(200.0, 20.0))
    e2 = sum(switching_energies(400.0, 20.0))
    # V doubles and I doubles: four times the energy (a square law in either would give 8)
    assert e2 / e1 == pytest.approx(4.0, rel=1e-5)


def half_bridge(current: float, dead: float = 1e-6, f: float = 20e3, duty: float = 0.4, vdc: float = 100.0):
    text = (f"voltage-source Vdc bus -> gnd {vdc} V\n"
            f"mosfet Qh bus -> mid gate=pwm(frequency={f} Hz, duty={duty}) on-resistance=10 mohm "
            "diode-drop=0.8 V diode-current=10 A\n"
            f"mosfet Ql mid -> gnd gate=complement(Qh, dead={dead} s) on-resistance=10 mohm "
            "diode-drop=0.8 V diode-current=10 A\n"
            f"current-source Iload mid -> gnd {current} A\n")
    periods = 10
    # no capacitor or inductor: a fixed step; every gate edge is a corner the solver lands on
    w = mna.parse(text).transient(until=periods / f, step=1e-6, record=["v(mid)", "state(Ql)", "state(Qh)"])
    t, v = w.time, w["v(mid)"]
    return float(np.trapezoid(v, t) / t[-1])


def test_dead_time_voltage_error_follows_the_sign_of_the_load_current():
    # The ideal complementary edge sits in the middle of each dead interval,
    # so the commanded mean is Vdc (D + td f); the dead time then takes
    # td f Vdc off when the current leaves the leg (the low diode conducts)
    # and adds it when the current enters (the high diode conducts)
    # (Holmes & Lipo ch. 10). td f Vdc = 2 V here; diode drops and the
    # 10 mohm channel move the mean by < 0.15 V, so 0.25 V catches a wrong
    # sign (4 V) or a factor of two (2 V).
    vdc, d, td, f = 100.0, 0.4, 1e-6, 20e3
    centre = vdc * (d + td * f)
    out = half_bridge(+10.0, td, f, d, vdc)  # current leaves the mid node into the load
    into = half_bridge(-10.0, td, f, d, vdc)
    assert out == pytest.approx(centre - td * f * vdc, abs=0.25)
    assert into == pytest.approx(centre + td * f * vdc, abs=0.25)


def test_complement_of_a_pwm_keeps_the_dead_time_on_both_edges():
    ref = PwmGate(10e3, 0.3, 0.0)
    comp = complement_pwm(ref, 2e-6, "test", None)
    t = np.linspace(0, 3e-4, 30001)
    r = pwm_states(t, ref.period, ref.duty, ref.delay)
    c = pwm_states(t, comp.period, comp.duty, comp.delay)
    assert not np.any(r & c)  # never both on
    both_off = ~(r | c)
    # two dead intervals of 2 us per 100 us period
    assert both_off.mean() == pytest.approx(2 * 2e-6 * 10e3, abs=2e-3)


def test_complement_of_a_schedule():
    ref = ScheduleGate(np.array([0.0, 1e-3, 2e-3]), np.array([False, True, False]))
    comp = complement_schedule(ref, 1e-5, "test", None)
    assert comp.state_at(0.5e-3) and not comp.state_at(0.9995e-3) and not comp.state_at(1.5e-3)
    assert not comp.state_at(2.005e-3) and comp.state_at(2.02e-3)


def test_igbt_on_state_is_knee_plus_slope():
    # V_CE = V_CE0 + r_CE I (the datasheet's V_CE(sat) as a knee and a slope)
    text = ("current-source I1 gnd -> c 50 A\n"
            "igbt Q1 c -> gnd gate=schedule(closed) knee-voltage=0.8 V on-resistance=15 mohm\n")
    op = mna.parse(text).dc()
    assert op["v(c)"] == pytest.approx(0.8 + 50 * 0.015, abs=1e-3)  # knee smoothing: 20 mV * e^-77


def test_body_diode_drop_follows_junction_temperature():
    # V_SD(Tj) = V_SD(25 °C) + k (Tj - 25 °C) at the datasheet current
    text = ("current-source I1 d -> gnd 20 A\n"
            "mosfet Q1 d -> gnd gate=schedule(open) diode-drop=0.9 V diode-current=20 A diode-tempco=-2 mV/K "
            "temperature=125 °C\n")
    op = mna.parse(text).dc()
    assert op["v(d)"] == pytest.approx(-(0.9 - 0.2), abs=1e-4)


def test_a_comparison_gate_is_refused_on_a_transistor():
    with pytest.raises(InputError, match="switch kind"):
        mna.parse("mosfet Q1 d -> gnd gate=v(g) > 2 V\nresistor R1 d -> gnd 1 ohm\nresistor R2 g -> gnd 1 ohm\n")


def test_switching_energies_need_the_test_point():
    with pytest.raises(InputError, match="test-voltage"):
        mna.parse("mosfet Q1 d -> gnd gate=schedule(closed) turn-on-energy=10 uJ\nresistor R1 d -> gnd 1 ohm\n")


def test_output_capacitance_charge_is_the_integral_of_the_datasheet_curve():
    # Q_oss(V) = integral of C_oss(v) dv from 0 to V (the charge a C(v)
    # curve stores; trapezoids are exact for a C linear between points):
    # 0 -> 50 V at 1 nF -> 0.4 nF is 35 nC, 50 -> 100 V at 0.4 -> 0.2 nF
    # 15 nC more. Charged by 1 mA from rest, the device reaches 50 V at 35 us
    # and 100 V at 50 us. A capacitance taken at 0 V (100 us) or at the end
    # point (20 us) is far outside the 0.5 % allowed for the integration.
    text = ("current-source I1 gnd -> d 1 mA\n"
            "mosfet Q1 d -> gnd gate=schedule(open) off=1e15 ohm "
            "output-capacitance=points(0 V: 1 nF, 50 V: 0.4 nF, 100 V: 0.2 nF)\n")
    w = mna.parse(text).transient(until=60e-6, start="rest", tolerance=1e-6, record=["v(d)", "i(Q1)"])
    t, v = w.time, w["v(d)"]
    assert np.interp(50.0, v, t) == pytest.approx(35e-6, rel=5e-3)
    assert np.interp(100.0, v, t) == pytest.approx(50e-6, rel=5e-3)
    np.testing.assert_allclose(w["i(Q1)"][2:], 1e-3, rtol=1e-3)  # the charging current is the device's current
