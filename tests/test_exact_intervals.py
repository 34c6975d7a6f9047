"""Exact intervals of piecewise-linear circuits against closed forms.

Sources of the closed forms:
- first- and second-order step responses: Nilsson & Riedel, *Electric
  Circuits*, ch. 7 (RL, RC natural and step response) and ch. 8 (series
  RLC step response);
- the LC tank's energy ½CV² + ½LI² is conserved (no loss element): any
  circuit-theory text, e.g. Nilsson & Riedel ch. 6;
- the exponential of the reduced state matrix against scipy's ``expm``
  (Al-Mohy & Higham's scaling and squaring, scipy.linalg).

Tolerances: the exact path has no truncation error, so the remaining
error is round-off in the reduction and the eigen-decomposition, about
1e-12 relative on these small, well-conditioned circuits; the bounds
below are 1e-9 relative unless a comment says otherwise, loose enough for
round-off on any platform and a million times tighter than the error of
an integrator at the default tolerance.
"""

import math

import numpy as np
import pytest
import scipy.linalg as la

import mna
from mna.analyses.exact import LinearModes, SourceEntries, state_matrices
from mna.errors import InputError
from mna.system import compile_circuit


def run(text, **settings):
    return mna.parse(text).transient(**settings)


def test_series_rlc_step_is_exact_at_every_point():
    # Series RLC step, 10 V, 10 ohm, 1 mH, 1 uF from rest: underdamped,
    # alpha = R/2L, w0 = 1/sqrt(LC) (Nilsson & Riedel ch. 8).
    w = run("""
voltage-source V1 a -> gnd step(from=0 V, to=10 V, at=0 s)
resistor R1 a -> b 10 ohm
inductor L1 b -> c 1 mH
capacitor C1 c -> gnd 1 uF
""", until=2e-3)
    assert w.statistics["path"] == "exact intervals"
    R, L, C = 10.0, 1e-3, 1e-6
    a = R / (2 * L)
    wd = math.sqrt(1 / (L * C) - a * a)
    t = w.time
    ref = 10 * (1 - np.exp(-a * t) * (np.cos(wd * t) + a / wd * np.sin(wd * t)))
    late = t > 0  # at t = 0 itself the step has not happened yet (both sides recorded)
    assert np.max(np.abs(w["v(c)"][late] - ref[late])) < 1e-9 * 16
    # Output on a requested grid is exact too: every sample ends a step.
    w = run("""
voltage-source V1 a -> gnd step(from=0 V, to=10 V, at=0 s)
resistor R1 a -> b 10 ohm
inductor L1 b -> c 1 mH
capacitor C1 c -> gnd 1 uF
""", until=2e-3, sample=2e-6)
    grid = w.time[1:]
    assert np.allclose(np.diff(w.time), 2e-6)
    ref = 10 * (1 - np.exp(-a * grid) * (np.cos(wd * grid) + a / wd * np.sin(wd * grid)))
    assert np.max(np.abs(w["v(c)"][1:] - ref)) < 1e-9 * 16


def test_rl_across_switch_states():
    # A 10 V source drives 1 H through 10 ohm; a switch in parallel with a
    # second 10 ohm resistor closes at 50 ms and opens at 150 ms. Each
    # interval is a first-order RL response (Nilsson & Riedel ch. 7) with
    # tau = L/R(state) and a final value V/R(state); the switch's on and
    # off resistances (1 mohm and 1 Gohm here) enter R(state) exactly.
    w = run("""
voltage-source V1 a -> gnd 10 V
resistor R1 a -> b 10 ohm
resistor R2 b -> c 10 ohm
switch S1 b -> c on=1 mohm off=1 Gohm gate=schedule(open, 50 ms: closed, 150 ms: open)
inductor L1 c -> gnd 1 H
""", until=0.3, start="rest")
    assert w.statistics["path"] == "exact intervals"

    def r_total(closed):
        r2 = 10.0 * (1e-3 if closed else 1e9) / (10.0 + (1e-3 if closed else 1e9))
        return 10.0 + r2

    t = w.time
    i = np.empty_like(t)
    edges = [(0.0, False), (0.05, True), (0.15, False)]
    i0 = 0.0
    for k, (start, closed) in enumerate(edges):
        stop = edges[k + 1][0] if k + 1 < len(edges) else 1.0
        R = r_total(closed)
        inside = (t > start) & (t <= stop)
        i[inside] = 10 / R + (i0 - 10 / R) * np.exp(-(t[inside] - start) * R / 1.0)
        i0 = 10 / R + (i0 - 10 / R) * math.exp(-(stop - start) * R / 1.0)
    i[t == 0] = 0.0
    assert np.max(np.abs(w["i(L1)"] - i)) < 1e-9


def test_lc_tank_keeps_its_energy_over_1000_periods():
    # A lossless LC tank started with 1 V on 1 uF, 1 mH: f0 = 1/(2 pi
    # sqrt(LC)) ~ 5.03 kHz; 1000 periods take about 0.2 s. With no loss
    # element the energy 1/2 C v^2 + 1/2 L i^2 must stay 0.5 uJ; an
    # integrator loses or gains it step by step, the exact path only by
    # round-off (bound: 1e-9 relative).
    w = run("""
capacitor C1 a -> gnd 1 uF initial=1 V
inductor L1 a -> gnd 1 mH
""", until=0.2, start="rest")
    assert w.statistics["path"] == "exact intervals"
    e = 0.5 * 1e-6 * w["v(a)"] ** 2 + 0.5 * 1e-3 * w["i(L1)"] ** 2
    assert np.max(np.abs(e - 0.5e-6)) < 1e-9 * 0.5e-6


def test_reduced_propagation_matches_expm():
    # A coupled pair with a loaded secondary: y(h) from the eigen path
    # equals expm of the reduced matrix applied by hand (scipy.linalg.expm).
    system = compile_circuit(mna.parse("""
voltage-source V1 a -> gnd 5 V
resistor R1 a -> b 2 ohm
inductor Lp b -> gnd 10 mH
inductor Ls c -> gnd 40 mH
coupling Core Lp Ls 0.95
resistor Rl c -> gnd 100 ohm
capacitor Cl c -> gnd 100 nF
"""))
    C, G, f0 = state_matrices(system)
    src = SourceEntries(system)
    modes = LinearModes(C, G, f0, src.S)
    inputs = src.inputs(0.0, 1e-3)
    y0 = np.linspace(-1, 1, modes.r) * 1e-3
    h = 3e-4
    forcing = modes.NS @ inputs.a - modes.Nf0
    Z = np.zeros((modes.r + 1, modes.r + 1))
    Z[:modes.r, :modes.r] = modes.M
    Z[:modes.r, modes.r] = forcing
    ref = (la.expm(Z * h) @ np.append(y0, 1.0))[:modes.r]
    got = modes.y_at(y0, inputs, [h])[0]
    assert np.allclose(got, ref, rtol=1e-9, atol=1e-12 * np.max(np.abs(ref)))


def test_diode_turns_off_when_the_rl_current_reaches_zero():
    # An ideal diode (drop 0.7 V, on 10 mohm) feeds 1 ohm + 1 mH from a
    # source that reverses from +10 V to -10 V at 5 ms. The current rises
    # to I0 = (10 - 0.7)/R' (R' = 1.01 ohm, after 5 time constants of
    # 0.99 ms it is within e^-5 of it: computed exactly below) and then
    # decays toward (-10 - 0.7)/R'; it reaches zero after
    # dt = tau * ln(1 + I0 R' / 10.7) (Nilsson & Riedel ch. 7, step
    # response with a non-zero initial current), where the diode turns off.
    w = run("""
voltage-source V1 a -> gnd step(from=10 V, to=-10 V, at=5 ms)
ideal-diode D1 a -> b drop=0.7 V on=10 mohm
resistor R1 b -> c 1 ohm
inductor L1 c -> gnd 1 mH
""", until=8e-3, start="rest", record=["state(D1)", "i(L1)"])
    assert w.statistics["path"] == "exact intervals"
    Rp = 1.01
    tau = 1e-3 / Rp
    I0 = 9.3 / Rp * (1 - math.exp(-5e-3 / tau))
    t_off = 5e-3 + tau * math.log(1 + I0 * Rp / 10.7)
    state = w["state(D1)"]
    t = w.time
    # The last time the diode conducts is the turn-off instant.
    last_on = t[np.flatnonzero(state > 0.5)[-1]]
    # The closed form idealises the start (the model's diode turns on after
    # about 7 ps, once the 10 Mohm off-path has let the coil's voltage
    # build) and the leakage (1 uA): together they shift the turn-off by
    # about 0.1 ns; 1 ns is 1.6e-6 of the 0.6 ms decay.
    assert abs(last_on - t_off) < 1e-9
    assert np.max(np.abs(w["i(L1)"][t > t_off + 1e-9])) < 1e-6  # blocked: leakage only


def test_comparison_gate_crossing_of_an_rc_charge():
    # 10 V charges 1 uF through 1 kohm (tau = 1 ms); a switch gated by
    # v(c) > 5 V closes when the charge reaches half the supply, at
    # t = tau ln 2 (Nilsson & Riedel ch. 7, RC step response).
    w = run("""
voltage-source V1 a -> gnd 10 V
resistor R1 a -> c 1 kohm
capacitor C1 c -> gnd 1 uF
switch S1 c -> d gate=v(c) > 5 V
resistor R2 d -> gnd 1 kohm
""", until=3e-3, start="rest", record=["state(S1)", "v(c)"])
    assert w.statistics["path"] == "exact intervals"
    t = w.time
    closes = t[np.flatnonzero(w["state(S1)"] > 0.5)[0]]
    # While open the switch (off = 10 Mohm) and R2 load the capacitor: the
    # Thevenin source is v_inf = 10 V * Rl/(R1 + Rl) behind R1 || Rl.
    Rl = 1e3 + 10e6
    v_inf = 10 * Rl / (1e3 + Rl)
    tau = 1e3 * Rl / (1e3 + Rl) * 1e-6
    expected = tau * math.log(v_inf / (v_inf - 5))
    assert abs(expected - 1e-3 * math.log(2)) > 1e-8  # (the load is visible at this precision)
    assert abs(closes - expected) < 1e-12


BUCK = """
let f = 100 kHz
voltage-source Vin in -> gnd 24 V
switch Q1 in -> sw on=20 mohm gate=pwm(frequency=f, duty=25 %)
ideal-diode D1 gnd -> sw drop=0.5 V on=20 mohm
inductor L1 sw -> out 47 uH
capacitor Co out -> gnd 22 uF
resistor Rload out -> gnd 2.5 ohm
"""


def test_exact_path_agrees_with_the_integrator_at_a_tight_tolerance():
    # The same buck on both paths: the integrator at tolerance 1e-8 is the
    # reference; 1e-4 of the 2.4 A range allows for its own error.
    exact = run(BUCK, until=0.3e-3, start="rest")
    assert exact.statistics["path"] == "exact intervals"
    ref = run(BUCK, until=0.3e-3, start="rest", method="radau", tolerance=1e-8)
    assert ref.statistics["path"] == "integrator"
    inside = (exact.time > 0) & (exact.time < 0.3e-3)
    t = exact.time[inside]
    err = np.max(np.abs(exact["i(L1)"][inside] - ref.interpolate("i(L1)", t)))
    assert err < 1e-4 * 2.4


def test_pwm_periods_reuse_their_propagators():
    w = run(BUCK, until=1e-3, start="rest")
    s = w.statistics
    assert s["path"] == "exact intervals"
    # 100 periods: the on and off intervals of every period after the
    # first few reuse the propagators of the earlier ones (steps shortened
    # while the start-up transient rings build a few more).
    assert s["propagators_reused"] > 5 * s["propagators_built"]


def test_method_exact_explains_a_refusal():
    with pytest.raises(InputError, match="nonlinear"):
        run("""
voltage-source V1 a -> gnd 5 V
resistor R1 a -> b 1 kohm
diode D1 b -> gnd
""", until=1e-3, method="exact")


def test_nonlinear_circuit_takes_the_integrator_by_itself():
    w = run("""
voltage-source V1 a -> gnd 5 V
resistor R1 a -> b 1 kohm
diode D1 b -> gnd
capacitor C1 b -> gnd 1 nF
""", until=1e-5)
    assert w.statistics["path"] == "integrator"
