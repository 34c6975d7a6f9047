"""Periodic steady state by shooting, against closed forms and a long transient run.

Closed forms: a first-order RC or RL network driven by a 50 % square wave
(0 and V) settles to exponential arcs between two levels. With
a = exp(-T/(2 tau)) the periodic solution has, at the end of the high half
period, x_max = X/(1 + a) and at the end of the low half x_min = a X/(1 + a),
X = V for the capacitor voltage (tau = RC) and X = V/R for the inductor
current (tau = L/R) (first-order step responses, Nilsson & Riedel,
*Electric Circuits*, ch. 7, joined half period by half period).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import mna
from mna.measure import run_and_check

F = 1e3  # Hz
V = 10.0


def _rc(r: float, c: float) -> mna.Circuit:
    return mna.parse(f"""
voltage-source V1 in -> gnd pwm(low=0 V, high={V} V, frequency={F} Hz, duty=50 %)
resistor R1 in -> out {r} ohm
capacitor C1 out -> gnd {c} F
record v(out)
""")


def _levels(tau: float, x: float) -> tuple[float, float]:
    a = math.exp(-1 / (2 * F * tau))
    return a * x / (1 + a), x / (1 + a)


def test_rc_under_a_square_wave_matches_the_closed_form():
    res = _rc(1e3, 1e-6).periodic(period="1 ms", step="1 us", method="trapezoidal", periods=2)
    low, high = _levels(1e-3, V)
    v = res["v(out)"]
    # Trapezoidal rule at T/1000 on a 1 ms time constant: error ~ (h/tau)^2/12
    # of the swing, below 1e-6; 1e-5 relative leaves room for the edges.
    assert v[0] == pytest.approx(low, rel=1e-5)
    assert v.max() == pytest.approx(high, rel=1e-5)
    assert v.min() == pytest.approx(low, rel=1e-5)
    assert res.time[-1] == pytest.approx(2e-3, rel=1e-12)
    assert res.analysis == "periodic"
    assert res.statistics["steady_state"] == "shooting"


def test_rl_under_a_square_wave_matches_the_closed_form():
    r, l = 10.0, 5e-3  # tau = 0.5 ms
    circuit = mna.parse(f"""
voltage-source V1 in -> gnd pwm(low=0 V, high={V} V, frequency={F} Hz, duty=50 %)
resistor R1 in -> x {r} ohm
inductor L1 x -> gnd {l} H
record i(L1)
""")
    res = circuit.periodic(period_of="V1", step="0.5 us", method="trapezoidal")
    low, high = _levels(l / r, V / r)
    i = res["i(L1)"]
    assert i.max() == pytest.approx(high, rel=1e-5)
    assert i.min() == pytest.approx(low, rel=1e-5)


def test_a_slow_mode_settles_in_a_few_newton_iterations():
    # tau = RC = 1 s against a 1 ms period: plain periods would need about
    # ln(1e6) * 1000 = 13,800 periods to settle to 1e-6. The circuit is linear,
    # so the period map is affine and one Newton step lands on the solution.
    res = _rc(1e3, 1e-3).periodic(period="1 ms", step="2 us", method="trapezoidal")
    assert res.statistics["newton_iterations_shooting"] <= 3
    assert res.statistics["periods_integrated"] <= 10
    low, high = _levels(1.0, V)
    v = res["v(out)"]
    # The ripple is 2.5 mV on 5 V: check both levels to 1e-5 of V.
    assert v.min() == pytest.approx(low, abs=1e-4)
    assert v.max() == pytest.approx(high, abs=1e-4)
    assert v.max() - v.min() == pytest.approx(high - low, rel=1e-3)


BUCK = """
voltage-source Vin in -> gnd 24 V
switch Q1 in -> sw on=20 mohm off=1 Mohm gate=pwm(frequency=20 kHz, duty=40 %)
diode D1 gnd -> sw
inductor L1 sw -> out 100 uH resistance=20 mohm
capacitor C1 out -> gnd 10 uF
resistor Rload out -> gnd 5 ohm
record v(out), i(L1)
"""


def test_a_buck_converter_matches_a_long_transient_run():
    # The LC filter rings at 5 kHz with a 100 us decay: after 5 ms (50 decay
    # times) the transient run is periodic to round-off. Same step and
    # method in both: the steady states must agree to the repeat tolerance.
    circuit = mna.parse(BUCK)
    settings = {"step": 0.5e-6, "method": "backward-euler"}
    pss = circuit.periodic(period_of="Q1", repeat_tolerance=1e-7, **settings)
    long = circuit.transient(until="5 ms", **settings)
    period = 50e-6
    last = long.time >= 5e-3 - period - 1e-12
    for label in ("v(out)", "i(L1)"):
        a = pss.spectrum(label, harmonics=3)
        b = mna.harmonics.spectrum(long.time[last], long[label][last], period, 3)
        assert a.dc == pytest.approx(b.dc, rel=1e-5)
        assert a.amplitude[1] == pytest.approx(b.amplitude[1], rel=1e-3)
        assert pss[label].max() == pytest.approx(long[label][last].max(), rel=1e-5)
    # Sanity against the ideal buck: V_out ~ D*Vin less the diode and losses.
    assert 8.0 < pss.spectrum("v(out)").dc < 9.6
    assert pss.statistics["periods_integrated"] < 40


def test_no_steady_state_falls_back_and_says_so():
    # A capacitor charged by a pulsed current with no way to discharge gains
    # the same charge every period: there is no periodic steady state.
    circuit = mna.parse("""
current-source I1 gnd -> x pwm(low=0 A, high=1 mA, frequency=1 kHz, duty=50 %)
capacitor C1 x -> gnd 1 uF
resistor R1 x -> y 1 kohm
capacitor C2 y -> gnd 1 uF
""")
    res = circuit.periodic(period="1 ms", step="5 us", newton_limit=3, period_limit=20)
    assert res.statistics["steady_state"] == "not settled"
    assert any("NOT SETTLED" in w for w in res.warnings)
    assert any("did not converge" in w for w in res.warnings)


def test_sources_that_do_not_repeat_are_refused():
    circuit = mna.parse("""
voltage-source V1 in -> gnd step(from=0 V, to=5 V, at=0.3 ms)
resistor R1 in -> out 1 kohm
capacitor C1 out -> gnd 1 uF
""")
    with pytest.raises(mna.InputError, match="do not repeat every 0.001 s"):
        circuit.periodic(period="1 ms")
    with pytest.raises(mna.InputError, match="period= .* or period-of="):
        circuit.periodic()
    with pytest.raises(mna.InputError, match="no pwm"):
        circuit.periodic(period_of="R1")


def test_simulate_periodic_line_with_harmonic_measurements(tmp_path):
    # RC low-pass (1 kohm, 1 uF) driven by a 0..10 V square wave at 1 kHz.
    # Fundamental of the input: (4/pi)*5 V; the RC divides it by
    # sqrt(1 + (w RC)^2) with w RC = 2 pi (first-order low-pass, Nilsson &
    # Riedel ch. 14): 6.3662 V / 6.3623 = 1.0006 V. DC: 5 V.
    text = """
voltage-source V1 in -> gnd pwm(low=0 V, high=10 V, frequency=1 kHz, duty=50 %)
resistor R1 in -> out 1 kohm
capacitor C1 out -> gnd 1 uF
record v(out)
simulate periodic period-of=V1 step=1 us method=trapezoidal
measure first = harmonic_peak(v(out), 1)
measure dc = harmonic_peak(v(out), 0)
measure thd = distortion(v(out))
measure cf = crest(v(out))
check first within 0.1 % of 20 V / pi / sqrt(1 + (2*pi)^2)
check dc within 0.01 % of 5 V
"""
    outcome = run_and_check(mna.parse(text))
    assert outcome.failure is None
    assert [c.status for c in outcome.report.checks] == ["pass", "pass"]
    values = {m.name: m.value for m in outcome.report.measurements}
    assert 0.05 < values["thd"] < 0.2 and 1.0 < values["cf"] < 1.5


def test_harmonic_measurements_need_a_period():
    text = """
voltage-source V1 in -> gnd sine(amplitude=1 V, frequency=50 Hz)
resistor R1 in -> gnd 1 ohm
simulate transient until=40 ms
measure bad = distortion(v(in))
"""
    with pytest.raises(mna.InputError, match="needs the period: give fundamental="):
        mna.parse(text)
    ok = mna.parse(text.replace("distortion(v(in))", "harmonic_rms(v(in), 1, fundamental=50 Hz)"))
    outcome = run_and_check(ok)
    # A 1 V peak sine: 0.7071 V RMS; error-controlled steps with straight
    # lines between them err by well under 0.5 %.
    assert outcome.report.measurements[0].value == pytest.approx(1 / math.sqrt(2), rel=5e-3)


def test_the_period_of_a_transistor_gate():
    circuit = mna.parse("""
voltage-source V1 s -> gnd 12 V
inductor L1 s -> d 1 mH resistance=4 ohm
mosfet Q1 d -> gnd gate=pwm(frequency=25 kHz, duty=30 %) on-resistance=10 mohm
diode D1 d -> s
""")
    res = circuit.periodic(period_of="Q1", step="0.4 us")
    assert res.statistics["period_s"] == pytest.approx(40e-6, rel=1e-12)
    assert res.statistics["steady_state"] == "shooting"
    # Average coil current: about D * 12 V / 4 ohm = 0.9 A (less the diode's
    # forward drop during the off time); the time constant L/R = 250 us is
    # 6 periods, so this is the settled value, not the first period's.
    assert 0.6 < res.spectrum("i(L1)").dc < 0.95
