"""The engine: companion models, order of accuracy, stability, LU reuse, corners."""

import math

import numpy as np
import pytest

import mna
from mna.analyses.common import prepare
from mna.methods import BackwardEuler, Trapezoidal

RLC = """
voltage-source V1 in -> gnd step(from=0 V, to=1 V, at=0 s)
resistor R1 in -> a 10 ohm
inductor L1 a -> b 1 mH
capacitor C1 b -> gnd 1 uF
"""


def rlc_vc(t, R=10.0, L=1e-3, C=1e-6):
    # Series RLC step, underdamped: Nilsson & Riedel ch. 8.
    a, w0 = R / (2 * L), 1 / math.sqrt(L * C)
    wd = math.sqrt(w0 ** 2 - a ** 2)
    return 1 - math.exp(-a * t) * (math.cos(wd * t) + a / wd * math.sin(wd * t))


def test_backward_euler_inductor_is_resistance_L_over_h_in_series_with_a_source():
    # Companion model (Chua & Lin, *Computer-Aided Analysis of Electronic
    # Circuits*, ch. on numerical integration, from memory): under backward
    # Euler an inductor is a resistance L/h in series with a voltage source
    # (L/h)*i_n. One real step of the engine from initial= i_n must give the
    # current of that companion circuit: V drives R + L/h aided by (L/h) i_n.
    L, R, h, i_n, V = 10e-3, 2.0, 1e-4, 0.3, 5.0
    # The method's own formula (mna/methods/backward_euler.py): qdot = (q - q_n)/h,
    # i.e. alpha = 1/h and history = -q_n/h, so L di/dt -> (L/h) i - (L/h) i_n.
    assert BackwardEuler.coefficients(h, None) == (1.0 / h, -1.0 / h, 0.0, 0.0)
    c = mna.parse(f"voltage-source V1 in -> gnd {V} V\n"
                  f"inductor L1 in -> gnd {L} H resistance={R} ohm initial={i_n} A\n")
    res = c.transient(until=h, step=h, method="backward-euler", start="rest", record=["i(L1)"])
    assert res.time[-1] == pytest.approx(h, rel=1e-12)
    # The flux holds at t = 0 (start=rest solves a very short step from the
    # initial= values; 1e-9 is its Newton tolerance).
    assert res["i(L1)"][0] == pytest.approx(i_n, rel=1e-9)
    expected = (V + L / h * i_n) / (R + L / h)
    # One linear solve from the start values (which hold to 1e-9): exact to
    # 1e-9. A flipped sign of the history term gives (V - (L/h) i_n)/(R + L/h),
    # 26 % lower here.
    assert res["i(L1)"][-1] == pytest.approx(expected, rel=1e-9)
    # The exact solution differs by the method's local error (h^2/2) i'',
    # i'' = -(R/L) i'(0): 0.6 % of the step's change, a bound that holds too.
    exact = V / R + (i_n - V / R) * math.exp(-R * h / L)
    assert abs(res["i(L1)"][-1] - exact) <= (h * R / L) ** 2 / 2 * abs(V / R - i_n) * 1.01


def test_trapezoidal_capacitor_companion():
    # Hairer & Wanner, *Solving Ordinary Differential Equations II*, from memory: trapezoidal capacitor G = 2C/h, I_eq = -(2C/h) v_n - i_n.
    alpha, b0, b1, g0 = Trapezoidal.coefficients(1e-6, 1e-6)
    C, v_n, i_n = 1e-6, 2.0, 0.5
    # i_{n+1} = alpha*C*v_{n+1} + b0*C*v_n + g0*i_n
    assert alpha * C == pytest.approx(2 * C / 1e-6)
    assert b0 * C * v_n + g0 * i_n == pytest.approx(-(2 * C / 1e-6) * v_n - i_n)


@pytest.mark.parametrize("method, ratio", [("backward-euler", 2.0), ("trapezoidal", 4.0), ("bdf2", 4.0)])
def test_order_of_accuracy_on_series_rlc(method, ratio):
    # Halving a fixed step halves the error of a first-order method and
    # quarters it for second-order ones (standard theory of linear multistep methods; Hairer & Wanner, from memory).
    t_check = 50e-6
    errors = []
    for h in (0.2e-6, 0.1e-6):
        res = mna.parse(RLC).transient(until=t_check, step=h, method=method)
        errors.append(abs(res["v(b)"][-1] - rlc_vc(t_check)))
    assert errors[0] / errors[1] == pytest.approx(ratio, rel=0.1)


def test_scalar_decay_reference_values():
    # Hairer & Wanner, *Solving Ordinary Differential Equations II*, from memory: x' = -x to t = 1 with h = 0.1: BE 0.3855432894, TR 0.3675725424.
    # As an RC circuit with RC = 1 s, v(0) = 1 V, start at rest with initial=1 V.
    text = "resistor R1 a -> gnd 1 ohm\ncapacitor C1 a -> gnd 1 F initial=1 V\n"
    be = mna.parse(text).transient(until=1.0, step=0.1, start="rest", method="backward-euler")
    assert be["v(a)"][-1] == pytest.approx(0.3855432894, rel=1e-6)
    # The trapezoidal run restarts with two backward-Euler steps at t = 0, so
    # compare with (1/1.1)^2 * ((1 - 0.05)/(1 + 0.05))^8 rather than the pure TR value.
    tr = mna.parse(text).transient(until=1.0, step=0.1, start="rest", method="trapezoidal")
    assert tr["v(a)"][-1] == pytest.approx((1 / 1.1) ** 2 * (0.95 / 1.05) ** 8, rel=1e-9)


LC_TANK = "inductor L1 a -> gnd 1 mH initial=1 A\ncapacitor C1 a -> gnd 1 uF\n"


def tank_energy(res):
    return 0.5 * 1e-3 * res["i(L1)"] ** 2 + 0.5 * 1e-6 * res["v(a)"] ** 2


def test_trapezoidal_keeps_lc_tank_energy():
    # The trapezoidal rule is A-stable with |R(jw h)| = 1: no numerical damping
    # (Hairer & Wanner, *Solving Ordinary Differential Equations II*, from memory).
    res = mna.parse(LC_TANK).transient(until=2e-3, step=2e-6, start="rest", method="trapezoidal")
    e = tank_energy(res)
    # (the first two steps are backward-Euler restart steps)
    assert np.max(np.abs(e[2:] - e[2])) / e[2] < 1e-9


def test_backward_euler_damps_tank_at_the_known_rate():
    # Backward Euler on x' = j w x: |R| = 1/sqrt(1 + (w h)^2), so energy falls
    # by 1/(1 + (w h)^2) per step (the stability function R(z) = 1/(1 - z); Hairer & Wanner, *Solving Ordinary Differential Equations II*, from memory).
    w = 1 / math.sqrt(1e-3 * 1e-6)
    h, n = 2e-6, 500
    res = mna.parse(LC_TANK).transient(until=n * h, step=h, start="rest", method="backward-euler")
    e = tank_energy(res)
    assert e[-1] / e[1] == pytest.approx((1 / (1 + (w * h) ** 2)) ** (n - 1), rel=1e-6)


def test_bdf2_damps_less_than_backward_euler():
    h = 2e-6
    runs = {m: mna.parse(LC_TANK).transient(until=1e-3, step=h, start="rest", method=m)
            for m in ("backward-euler", "bdf2")}
    lost = {m: 1 - tank_energy(r)[-1] / tank_energy(r)[1] for m, r in runs.items()}
    # At w h = 0.063 backward Euler loses (w h)^2 = 4e-3 of the energy a step;
    # BDF2's numerical damping is of order (w h)^4, about a hundred times less
    # (Hairer & Wanner, from memory): 0.1 leaves a factor of ten.
    assert 0 < lost["bdf2"] < 0.1 * lost["backward-euler"]


def test_linear_fixed_step_factors_once():
    res = mna.parse(RLC).transient(until=1e-3, step=0.1e-6, method="backward-euler")
    # one factorization for the operating point, one for the whole run
    assert res.statistics["accepted_steps"] == 10000
    assert res.statistics["factorizations"] == 2


def test_piecewise_corners_are_in_the_time_axis_exactly():
    corners = [0.3e-3, 1.07e-3, 2.5e-3, 2.9e-3]
    pts = ", ".join(f"{t!r} s: {v} V" for t, v in zip(corners, [0, 5, 5, 1]))
    text = f"voltage-source V1 a -> gnd piecewise(0 s: 0 V, {pts})\nresistor R1 a -> b 1 ohm\ncapacitor C1 b -> gnd 100 uF\n"
    for step in (0.1e-3, None):
        res = mna.parse(text).transient(until=4e-3, step=step)
        for t in corners:
            assert np.any(res.time == t), (step, t)
        # the source is exact at its corners
        assert res.at("v(a)", 1.07e-3) == pytest.approx(5.0, abs=1e-12)


STIFF_RL = ("voltage-source V1 in -> gnd step(from=0 V, to=1 V, at=35 us)\n"
            "resistor R1 in -> x 1 ohm\ninductor L1 x -> gnd 1 uH\n")


def test_no_trapezoidal_ringing_after_an_edge():
    # An RL circuit (tau = 1 us) stepped at 35 us, error-controlled trapezoidal
    # run: after the edge the inductor voltage decays, v = exp(-(t - t0)/tau),
    # without the alternating-sign artefact of the trapezoidal rule on modes
    # faster than the step (|R(z)| -> 1 as z -> -inf, Hairer & Wanner, *Solving Ordinary Differential Equations II*, from memory). The
    # solver restarts at the edge with small backward-Euler steps.
    res = mna.parse(STIFF_RL).transient(until=300e-6, method="trapezoidal")
    after = res.time > 35e-6
    v = res["v(x)"][after]
    assert np.min(v) > -1e-5  # any sign flip stays 100x below the 0.1 % tolerance
    t = res.time[after]
    assert np.max(np.abs(v - np.exp(-(t - 35e-6) / 1e-6))) < 5e-3


def test_fixed_step_trapezoidal_rings_on_stiff_modes_bdf2_damps_them():
    # Stability facts (Hairer & Wanner, *Solving Ordinary Differential Equations II*, from memory): at a fixed step ten times the time
    # constant, the trapezoidal rule's R(-10) = -2/3 leaves the decaying
    # inductor voltage alternating in sign, shrinking only by 2/3 a step; BDF2's
    # roots at z = -10 have modulus sqrt(0.5/11.5) = 0.21, so its artefact dies fast.
    tr = mna.parse(STIFF_RL).transient(until=300e-6, step=10e-6, method="trapezoidal")
    bdf = mna.parse(STIFF_RL).transient(until=300e-6, step=10e-6, method="bdf2")
    v_tr = tr["v(x)"][tr.time > 35e-6]
    v_tr = v_tr[np.abs(v_tr) > 1e-12]
    assert int(np.sum(np.diff(np.sign(v_tr)) != 0)) >= 5
    late = lambda res: np.max(np.abs(res["v(x)"][res.time > 135e-6]))  # noqa: E731
    assert late(bdf) < 1e-2 * late(tr)


def test_error_controlled_run_meets_tolerance_with_far_fewer_steps():
    # Series RLC step, error-controlled: the global error stays within a small
    # multiple of the tolerance, with many fewer steps than a fixed step of
    # equal accuracy.
    until = 400e-6
    adaptive = mna.parse(RLC).transient(until=until, method="trapezoidal", tolerance=1e-5)
    err_a = max(abs(v - rlc_vc(t)) for t, v in zip(adaptive.time, adaptive["v(b)"]))
    assert err_a < 1e-3
    # Find a fixed step with no smaller error, halving from the adaptive mean step.
    h = until / adaptive.statistics["accepted_steps"]
    while True:
        fixed = mna.parse(RLC).transient(until=until, step=h, method="trapezoidal")
        err_f = max(abs(v - rlc_vc(t)) for t, v in zip(fixed.time, fixed["v(b)"]))
        if err_f <= err_a:
            break
        h /= 2
    print(f"adaptive: {adaptive.statistics['accepted_steps']} steps, error {err_a:.2e}; "
          f"fixed: {fixed.statistics['accepted_steps']} steps, error {err_f:.2e}")
    assert adaptive.statistics["accepted_steps"] < fixed.statistics["accepted_steps"]


def test_error_controlled_fast_edge_and_slow_tail():
    # A 1 us edge into an RC with tau = 10 ms: small steps at the edge, large
    # ones on the tail. RC step, Nilsson & Riedel ch. 7 (delayed by the ramp:
    # compare after the edge with the exact ramp response).
    text = ("voltage-source V1 in -> gnd step(from=0 V, to=10 V, at=1 ms, rise=1 us)\n"
            "resistor R1 in -> x 10 kohm\ncapacitor C1 x -> gnd 1 uF\n")
    res = mna.parse(text).transient(until=60e-3, tolerance=1e-4, method="bdf2")
    tau, t0, tr = 10e-3, 1e-3, 1e-6
    t = res.time
    # Exact response to a ramp of duration tr followed by a constant (superposition of two ramps).
    def ramp_resp(s):
        s = np.maximum(s, 0)
        return (s - tau * (1 - np.exp(-s / tau))) / tr
    exact = 10 * (ramp_resp(t - t0) - ramp_resp(t - t0 - tr))
    # tolerance=1e-4 of the 10 V reached is 1 mV of local error a step; on this
    # decaying mode the errors of about one time constant's steps add up (a
    # dozen or so here, from the step counts below): 2e-3 of 10 V is 20 mV.
    assert np.max(np.abs(res["v(x)"] - exact)) / 10 < 2e-3
    st = res.statistics
    assert st["smallest_step_s"] < 1e-6 < 1e-4 < st["largest_step_s"]
    assert st["accepted_steps"] < 400


def test_sample_grid_output():
    res = mna.parse(RLC).transient(until=200e-6, method="trapezoidal", tolerance=1e-5, sample=1e-6)
    assert res.time.size == 201 and res.time[1] == pytest.approx(1e-6)
    exact = np.array([rlc_vc(t) for t in res.time])
    # The run's own error is below 1e-3 at tolerance=1e-5 (as in the
    # error-controlled RLC test above); the quadratic resampling adds at most
    # h^3 |v^(3)| / 16 with h the solver's step (a few us, w0 = 31.6 krad/s):
    # below 1e-4. 2e-3 is twice their sum.
    assert np.max(np.abs(res["v(b)"] - exact)) < 2e-3


def test_switch_edge_at_the_same_instant_as_a_source_edge():
    # A gate edge that coincides with an ideal source edge still switches:
    # after 1 ms the closed 1 ohm switch and the 1 ohm load halve 10 V (Ohm's law).
    res = mna.parse("""
voltage-source V1 a -> gnd step(from=0 V, to=10 V, at=1 ms)
switch Q1 a -> b on=1 ohm off=1 Mohm gate=schedule(open, 1 ms: closed)
resistor R1 b -> gnd 1 ohm
""").transient(until=2e-3, step=0.1e-3)
    assert res.at("v(b)", 1.5e-3) == pytest.approx(5.0, rel=1e-9)
    at_edge = np.flatnonzero(res.time == 1e-3)
    assert res["v(b)"][at_edge].tolist() == pytest.approx([0.0, 5.0], abs=1e-4)
