"""The switch kind: gates, events, and a switch opening under an inductor current.

Sources:
- LC energy transfer and RC snubbers: Nilsson & Riedel, *Electric Circuits*, ch. 8. An inductor
  carrying I0 switched onto C: v = I0 Z0 sin(w0 t), Z0 = sqrt(L/C),
  w0 = 1/sqrt(LC), 1/2 L I0^2 = 1/2 C Vpk^2. With R in series with C it is a
  series RLC with i(0) = I0, vC(0) = 0 (Nilsson & Riedel, *Electric
  Circuits*, ch. 8; Alexander & Sadiku ch. 8): alpha = R/2L,
  wd = sqrt(w0^2 - alpha^2), i = e^(-alpha t)(I0 cos wd t - (alpha I0/wd) sin wd t),
  and the switch voltage is the inductor's, v = -L di/dt.
- RC charging and discharging through a Thevenin equivalent (Nilsson &
  Riedel ch. 7) for the comparator-gated relaxation oscillator.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import mna
from mna.cli import main as cli_main

L, C, I0 = 100e-6, 10e-9, 1.0
T_OPEN = 1e-6


def snubber_circuit(r_snub: float | None) -> mna.Circuit:
    """An inductor carrying 1 A through a closed switch that opens at 1 us.

    The snubber is C alone (r_snub None) or R in series with C, across the
    switch. The 1 mohm on-resistance lets I0 decay by only 1e-5 over 1 us.
    """
    snub = (f"resistor Rs x -> m {r_snub} ohm\ncapacitor Cs m -> gnd {C} F\n" if r_snub
            else f"capacitor Cs x -> gnd {C} F\n")
    return mna.parse(
        f"inductor L1 gnd -> x {L} H initial={I0} A\n"
        "switch Q1 x -> gnd on=1 mohm off=1 Gohm gate=schedule(closed, 1 us: open)\n" + snub
    )


def crossings(t: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Times where y changes sign, by linear interpolation."""
    k = np.flatnonzero(np.sign(y[:-1]) * np.sign(y[1:]) < 0)
    return t[k] - y[k] * (t[k + 1] - t[k]) / (y[k + 1] - y[k])


def test_switch_opening_into_a_capacitor_rings_as_lossless_lc():
    res = snubber_circuit(None).transient(until=T_OPEN + 10e-6, step=1e-9, method="trapezoidal",
                                          start="rest", record=["v(x)", "i(L1)"])
    z0, w0 = math.sqrt(L / C), 1 / math.sqrt(L * C)
    after = res.time > T_OPEN
    v = res["v(x)"][after]
    i_open = res.at("i(L1)", T_OPEN)  # I0 less the 1e-5 decay through 1 mohm
    # Peak I0 Z0 at a quarter period. Sampling a sine at h = 1 ns misses its
    # peak by at most (w0 h)^2/8 = 1.3e-5; the trapezoidal rule keeps the
    # amplitude of an undamped LC exactly (it is A-stable and energy-preserving
    # for linear oscillators): 1e-4 relative.
    assert v.max() == pytest.approx(i_open * z0, rel=1e-4)
    t_peak = res.time[after][np.argmax(v)] - T_OPEN
    assert t_peak == pytest.approx(math.pi / 2 / w0, abs=1.5e-9)
    # Ringing frequency: zero crossings half a period apart. Trapezoidal
    # phase error (w0 h)^2/12 ~ 1e-5 relative.
    zc = crossings(res.time[after], v)
    period = 2 * np.mean(np.diff(zc))
    assert period == pytest.approx(2 * math.pi / w0, rel=1e-4)


def rlc_switch_voltage(t: np.ndarray, r: float, i0: float) -> np.ndarray:
    """-L di/dt of the series RLC with i(0) = i0, vC(0) = 0 (underdamped)."""
    alpha, w0 = r / (2 * L), 1 / math.sqrt(L * C)
    wd = math.sqrt(w0 * w0 - alpha * alpha)
    b = -alpha * i0 / wd
    e = np.exp(-alpha * t)
    di = e * (-alpha * (i0 * np.cos(wd * t) + b * np.sin(wd * t)) + wd * (-i0 * np.sin(wd * t) + b * np.cos(wd * t)))
    return -L * di


def test_switch_opening_into_an_rc_snubber_matches_the_damped_rlc():
    r = 50.0
    res = snubber_circuit(r).transient(until=T_OPEN + 20e-6, step=1e-9, method="trapezoidal",
                                       start="rest", record=["v(x)", "i(L1)", "p(Rs)", "p(Q1)", "state(Q1)"])
    t, v = res.time, res["v(x)"]
    k_open = np.flatnonzero(t == T_OPEN)
    assert k_open.size == 2  # the sample before the opening and the one just after
    before, after = k_open
    assert res["state(Q1)"][before] == 1.0 and res["state(Q1)"][after] == 0.0
    i_open = res["i(L1)"][before]
    # The switch voltage jumps to I0 R at 0+ (Nilsson & Riedel, *Electric Circuits*, ch. 8). The
    # engine solves the instant after an event with a backward-Euler step a
    # billionth of the step long; the inductor's row then carries L/h0 =
    # 1e14 and the solution ~1e-16 * 1e14 V of round-off: 5e-4 relative.
    assert v[after] == pytest.approx(i_open * r, rel=5e-4)
    # Peak and its time against the closed form on a fine grid.
    fine = np.linspace(0, 3e-6, 300001)
    ref = rlc_switch_voltage(fine, r, i_open)
    tt = t[after:] - T_OPEN
    # Trapezoidal at h = 1 ns (w0 h = 0.01): phase and amplitude errors ~1e-5;
    # sampling the peak ~(w h)^2/8. 2e-4 relative.
    assert v[after:].max() == pytest.approx(ref.max(), rel=2e-4)
    assert tt[np.argmax(v[after:])] == pytest.approx(fine[np.argmax(ref)], abs=2e-9)
    # Whole waveform: within 0.05 % of the 81 V peak.
    assert np.allclose(v[after + 1:], rlc_switch_voltage(tt[1:], r, i_open), atol=5e-4 * ref.max())
    # Damped ringing: zeros of v are pi/wd apart.
    alpha, w0 = r / (2 * L), 1 / math.sqrt(L * C)
    wd = math.sqrt(w0 * w0 - alpha * alpha)
    zc = crossings(tt[1:], v[after + 1:])[:4]
    assert np.diff(zc) == pytest.approx(np.full(3, math.pi / wd), rel=2e-4)

    # Energy balance: 1/2 L I0^2 at the opening ends up in the snubber
    # resistor (and a trace in the 1 Gohm off-state switch). After 20 us the
    # remaining energy is e^(-2 alpha t) ~ 5e-5 of the start; trapezoidal
    # quadrature of sampled power differs from the method's own discrete
    # balance by O((w h)^2) ~ 1e-4: tolerance 5e-4.
    stored = 0.5 * L * i_open**2
    window = slice(after, None)
    dissipated = np.trapezoid(res["p(Rs)"][window] + res["p(Q1)"][window], t[window])
    assert dissipated == pytest.approx(stored, rel=5e-4)


def test_overdamped_snubber_jumps_to_i0_r():
    # R = 200 ohm = 2 Z0: the switch voltage is largest at 0+, I0 R = 200 V
    # (Nilsson & Riedel, *Electric Circuits*, ch. 8), and the capacitor peaks below it.
    res = snubber_circuit(200.0).transient(until=T_OPEN + 5e-6, step=2e-9, method="trapezoidal",
                                           start="rest", record=["v(x)", "v(m)"])
    assert res["v(x)"].max() == pytest.approx(200.0, rel=1e-4)
    # vC peak for zeta = 1 (critical damping) is I0 Z0 * 2/e... here zeta = 1:
    # vC = I0 t/C e^(-alpha t) peaks at t = 1/alpha with I0/(alpha C e).
    alpha = 200.0 / (2 * L)
    assert res["v(m)"].max() == pytest.approx(I0 / (alpha * C * math.e), rel=1e-3)


def test_schedule_gate_states_and_corners():
    c = mna.parse(
        "voltage-source V1 a -> gnd 10 V\n"
        "switch Q1 a -> b on=1 ohm off=1 Mohm gate=schedule(closed, 2 ms: open, 5 ms: on, 7 ms: off)\n"
        "resistor R1 b -> gnd 9 ohm\n"
        "record i(R1), state(Q1), i(Q1), p(Q1)\n"
    )
    res = c.transient(until=10e-3, step=1e-3)
    for t_edge in (2e-3, 5e-3, 7e-3):
        assert np.count_nonzero(res.time == t_edge) == 2  # landed on, with a sample each side
    closed = res["state(Q1)"]
    t = res.time
    expect = np.where(t < 2e-3, 1, np.where(t < 5e-3, 0, np.where(t < 7e-3, 1, 0)))
    # The first of two samples at an edge holds the state before it.
    dup_first = np.r_[t[1:] == t[:-1], False]
    expect = np.where(dup_first, np.r_[1, expect[:-1]], expect)
    assert np.array_equal(closed, expect)
    # Ohm's law in each state (Nilsson & Riedel ch. 2): 10 V over 1 + 9 ohm,
    # or over 1 Mohm + 9 ohm.
    i_expected = np.where(closed > 0, 10 / 10.0, 10 / (1e6 + 9))
    assert np.allclose(res["i(R1)"], i_expected, rtol=1e-9)
    assert np.allclose(res["i(Q1)"], i_expected, rtol=1e-9)
    assert np.allclose(res["p(Q1)"], i_expected**2 * np.where(closed > 0, 1.0, 1e6), rtol=1e-9)


def test_pwm_gate_duty_and_edges():
    f, duty, delay = 10e3, 0.3, 20e-6
    c = mna.parse(
        "voltage-source V1 a -> gnd 5 V\n"
        f"switch Q1 a -> b on=1 mohm off=100 Mohm gate=pwm(frequency={f} Hz, duty={duty * 100} %, "
        f"delay={delay} s)\n"
        "resistor R1 b -> gnd 1 kohm\n"
        "record i(R1), state(Q1)\n"
    )
    res = c.transient(until=delay + 10 / f, step=1e-6)
    t, state = res.time, res["state(Q1)"]
    rising = delay + np.arange(10) / f
    falling = rising + duty / f
    for edges, before, after in ((rising, 0.0, 1.0), (falling, 1.0, 0.0)):
        for t_edge in edges:
            # Landed on, with the state before and after the edge at one time.
            at = np.flatnonzero(np.isclose(t, t_edge, rtol=0, atol=1e-15))
            assert at.size == 2 and list(state[at]) == [before, after]
    # Between edges: closed for the duty part of each period after the delay.
    every_edge = np.r_[rising, falling, delay + 10 / f]  # the run ends on an 11th rising edge
    on_edge = np.isclose(t[:, None], every_edge[None, :], rtol=0, atol=1e-12).any(axis=1)
    tau = np.mod(t - delay, 1 / f)
    expect = (t >= delay) & (tau < duty / f)
    assert np.array_equal(state[~on_edge] > 0, expect[~on_edge])
    # Average current over whole periods: duty * V/R (the on resistance and
    # the 100 Mohm off state change it by 1e-6 and 1e-5 relative).
    window = t >= delay
    mean = np.trapezoid(res["i(R1)"][window], t[window]) / (10 / f)
    assert mean == pytest.approx(duty * 5.0 / 1e3, rel=1e-4)


def relaxation_oscillator(hysteresis: str) -> mna.Circuit:
    return mna.parse(
        "voltage-source V1 s -> gnd 10 V\n"
        "resistor R1 s -> c 10 kohm\n"
        "capacitor C1 c -> gnd 100 nF\n"
        f"switch Q1 c -> d on=1 mohm off=1 Gohm gate=v(c) > 4 V {hysteresis}\n"
        "resistor R2 d -> gnd 1 kohm\n"
        "record v(c), state(Q1)\n"
    )


def test_comparison_gate_with_hysteresis_oscillates_at_the_rc_period():
    res = relaxation_oscillator("hysteresis=1 V").transient(until=12e-3, step=2e-6, method="trapezoidal",
                                                            start="rest")
    r1, r2, cap, vs = 10e3, 1e3 + 1e-3, 100e-9, 10.0
    hi, lo = 4.5, 3.5  # 4 V +- 1 V / 2
    vth, rth = vs * r2 / (r1 + r2), r1 * r2 / (r1 + r2)
    # Charging toward 10 V from 3.5 to 4.5 V, discharging toward Vth from 4.5 to 3.5 V.
    t_charge = r1 * cap * math.log((vs - lo) / (vs - hi))
    t_discharge = rth * cap * math.log((hi - vth) / (lo - vth))
    state = res["state(Q1)"]
    t = res.time
    rises = t[1:][(state[1:] > state[:-1])]
    falls = t[1:][(state[1:] < state[:-1])]
    assert len(rises) >= 4
    # The gate closes where v(c) reaches 4.5 V: first from 0 V, RC charging.
    assert rises[0] == pytest.approx(-r1 * cap * math.log(1 - hi / vs), rel=1e-4)
    # Steady oscillation period (the crossings are landed on by interpolation
    # and the method is second order at h = 2 us << tau: 1e-4 relative).
    assert np.diff(rises)[1:] == pytest.approx(np.full(len(rises) - 2, t_charge + t_discharge), rel=1e-4)
    assert (falls[1] - rises[1]) == pytest.approx(t_discharge, rel=1e-4)
    # v(c) at each switching instant sits on the band's edges.
    v = res["v(c)"]
    at_rise = v[1:][(state[1:] > state[:-1])]
    at_fall = v[1:][(state[1:] < state[:-1])]
    assert np.allclose(at_rise, hi, atol=2e-3) and np.allclose(at_fall, lo, atol=2e-3)


def test_current_comparison_gate_regulates_a_coil_current():
    # A hysteretic current regulator: the switch feeds the coil while
    # i(L1) < 1 A, with a 0.2 A band; a diode freewheels the coil when open.
    c = mna.parse(
        "voltage-source V1 s -> gnd 24 V\n"
        "switch Q1 s -> x on=10 mohm off=10 Mohm gate=i(L1) < 1 A hysteresis=0.2 A\n"
        "diode D1 gnd -> x\n"
        "inductor L1 x -> gnd 1 mH resistance=2 ohm\n"
        "record i(L1), state(Q1)\n"
    )
    # A regulator has no DC operating point (closed, the current runs to
    # 12 A; open, to 0): the operating point says so; start at rest instead.
    with pytest.raises(mna.SimulationError, match="never settle"):
        c.dc()
    res = c.transient(until=2e-3, step=0.2e-6, start="rest")
    i = res["i(L1)"]
    state = res["state(Q1)"]
    steady = res.time > 0.3e-3
    # Ripple between the band edges 0.9 and 1.1 A: between landing points the
    # current moves by at most di/dt * h = 24 V/1 mH * 0.2 us = 5 mA.
    assert i[steady].max() == pytest.approx(1.1, abs=5e-3)
    assert i[steady].min() == pytest.approx(0.9, abs=5e-3)
    assert np.count_nonzero(np.diff(state[steady]) != 0) > 4


def test_gate_errors_are_explained():
    with pytest.raises(mna.InputError, match="schedule state is closed or open"):
        mna.parse("switch Q1 a -> gnd gate=schedule(shut, 1 ms: open)\n")
    with pytest.raises(mna.InputError, match="TIME: STATE"):
        mna.parse("switch Q1 a -> gnd gate=schedule(closed, open)\n")
    with pytest.raises(mna.InputError, match="unknown gate"):
        mna.parse("switch Q1 a -> gnd gate=pulse(frequency=1 kHz)\n")
    with pytest.raises(mna.InputError, match="has no argument 'high'"):
        mna.parse("switch Q1 a -> gnd gate=pwm(frequency=1 kHz, duty=50 %, high=5 V)\n")
    with pytest.raises(mna.InputError, match="needs duty="):
        mna.parse("switch Q1 a -> gnd gate=pwm(frequency=1 kHz)\n")
    with pytest.raises(mna.InputError, match="hysteresis= applies only to a comparison"):
        mna.parse("switch Q1 a -> gnd gate=schedule(closed) hysteresis=1 V\n")
    with pytest.raises(mna.InputError, match="on= .* must be below off="):
        mna.parse("switch Q1 a -> gnd on=1 Mohm off=1 ohm gate=schedule(closed)\n")
    base = "voltage-source V1 a -> gnd 1 V\nresistor R1 a -> b 1 ohm\n"
    # Numbers and units are resolved with the file (one stage, at load time)...
    at_load = [
        ("gate=schedule(closed, 2 ms: open, 1 ms: closed)", "times must be positive and increase"),
        ("gate=schedule(closed, 2 V: open)", "needs seconds"),
        ("gate=pwm(frequency=1 kHz, duty=150 %)", "duty= must lie between"),
        ("gate=v(a) > 1 A", "needs volts"),
        ("gate=i(V1) > 1 A hysteresis=1 V", "needs amperes"),
        ("gate=v(a, b) > 1 V", r"v\(a -> b\)"),
    ]
    for gate, message in at_load:
        with pytest.raises(mna.InputError, match=message):
            mna.parse(base + f"switch Q1 b -> gnd {gate}\n")
    # ...names when the circuit is compiled (a node may be named further down).
    at_compile = [
        ("gate=v(nowhere) > 1 V", "no electrical node 'nowhere'"),
        ("gate=i(R1) > 1 A", "R1 is a resistor"),
    ]
    for gate, message in at_compile:
        c = mna.parse(base + f"switch Q1 b -> gnd {gate}\n")
        with pytest.raises(mna.InputError, match=message):
            c.dc()


def test_schedule_times_may_be_parameters():
    c = mna.parse(
        "let t_off = 3 ms\n"
        "voltage-source V1 a -> gnd 1 V\n"
        "switch Q1 a -> b gate=schedule(on, t_off: off)\n"
        "resistor R1 b -> gnd 1 ohm\n"
    )
    res = c.transient(until=5e-3, step=1e-3)
    assert np.count_nonzero(res.time == 3e-3) == 2


def test_chattering_comparison_gate_fails_with_exit_status_3(tmp_path, capsys):
    # A switch that its own closing turns off again, with no hysteresis: there
    # is no consistent state. The operating point says so, naming the switch.
    text = ("voltage-source V1 s -> gnd 5 V\n"
            "resistor R1 s -> x 1 kohm\n"
            "switch Q1 x -> gnd on=1 ohm off=1 Mohm gate=v(x) > 2 V\n"
            "simulate transient until=1 ms step=1 us\n")
    with pytest.raises(mna.SimulationError, match="Q1 never settle"):
        mna.parse(text).dc()
    path = tmp_path / "chatter.mna"
    path.write_text(text)
    assert cli_main(["run", str(path), "--out", str(tmp_path / "out"), "--no-plot", "--quiet"]) == 3
    assert "Q1" in capsys.readouterr().err
    # Started at rest, it chatters from step to step instead: the run stops.
    with pytest.raises(mna.SimulationError, match="Q1 changes state at each") as info:
        mna.parse(text).transient(until=1e-3, step=1e-6, start="rest")
    assert info.value.partial is not None and info.value.partial.time.size > 50


def test_gates_from_python():
    # The embedding API takes a gate as text, like the netlist.
    c = mna.Circuit("api")
    c.add("voltage-source", "V1", "a", "gnd", 5)
    c.add("resistor", "R1", "a", "b", "1 kohm")
    c.add("switch", "Q1", "b", "gnd", gate="schedule(closed, 1 ms: open)", on="1 ohm")
    c.add("switch", "Q2", "a", "c", gate="v(b) > 2.5 V", hysteresis="0.1 V")
    c.add("resistor", "R2", "c", "gnd", "1 kohm")
    res = c.transient(until=2e-3, step=1e-4)
    # Q1 closed: v(b) = 5 V * 1/(1000 + 1) (divider); open: 5 V * 10M/(10M + 1k).
    assert res.at("v(b)", 0.5e-3) == pytest.approx(5 / 1001, rel=1e-6)
    assert res["v(b)"][-1] == pytest.approx(5 * 10e6 / (10e6 + 1e3), rel=1e-6)
    # Q2 follows v(b): open while Q1 holds b low, closed after.
    assert res.at("i(R2)", 0.5e-3) < 1e-6 and res["i(R2)"][-1] == pytest.approx(5 / (1e3 + 10e-3), rel=1e-6)
