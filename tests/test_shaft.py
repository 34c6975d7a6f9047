"""The shaft domain: inertia, friction, load, speed-source, gear.

References: rotational mechanics J dw/dt = sum of torques (Nise, *Control
Systems Engineering*, ch. 2, rotational systems and gear trains, chapter
from memory; Franklin, Powell & Emami-Naeini, *Feedback Control of Dynamic Systems*, ch. 2, from memory, for the motor equations). Expected values are
the closed-form solutions of those first-order equations, computed here.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import mna
from mna.analyses.common import prepare
from mna.elements.mechanical import smooth_sign

RPM = 2 * math.pi / 60


def test_coast_down_with_viscous_friction_is_exponential():
    # J dw/dt = -B w  =>  w = w0 exp(-B t/J) (first-order rotational system,
    # Nise ch. 2). Also checks inertia initial= and the rest start.
    J, B, w0 = 2e-4, 1e-5, 3000 * RPM
    text = f"inertia J1 rotor {J} kg*m^2 initial=3000 rpm\nfriction B1 rotor -> frame {B} N*m*s/rad\n"
    tau = J / B
    res = mna.parse(text).transient(until=tau, step=tau / 2000, method="trapezoidal", start="rest",
                                    record=["w(rotor)", "rpm(rotor)", "torque(J1)", "torque(B1)", "p(B1)", "p(J1)"])
    # Trapezoidal rule at h = tau/2000: relative error ~ (h/tau)^2/12 per
    # unit time, after a first backward-Euler step whose error (h/tau)^2/2
    # is carried along: (h/tau)^2 bounds both.
    np.testing.assert_allclose(res["w(rotor)"], w0 * np.exp(-res.time / tau), rtol=(1 / 2000) ** 2)
    np.testing.assert_allclose(res["rpm(rotor)"], res["w(rotor)"] / RPM, rtol=1e-12)
    # The friction takes B w from the shaft; the inertia's torque J dw/dt is the negative of it.
    np.testing.assert_allclose(res["torque(B1)"], B * res["w(rotor)"], rtol=1e-12)
    np.testing.assert_allclose(res["torque(J1)"][1:], -res["torque(B1)"][1:], rtol=1e-6)
    np.testing.assert_allclose(res["p(B1)"], B * res["w(rotor)"] ** 2, rtol=1e-12)
    # Kinetic energy lost = energy dissipated in friction.
    lost = 0.5 * J * (w0**2 - res["w(rotor)"][-1] ** 2)
    assert np.trapezoid(res["p(B1)"], res.time) == pytest.approx(lost, rel=1e-6)


def test_coast_down_against_a_constant_load_stops_at_j_w0_over_t():
    # J dw/dt = -T while turning: w = w0 - T t / J, stopping at t = J w0 / T
    # (constant deceleration). Then the shaft stays still: the opposing load
    # does not drive it backwards. The smooth sign makes the load taper off
    # within its band (0.1 rad/s), so the stop is blurred by ~ J band / T.
    J, T, w0 = 2e-4, 0.05, 300.0
    text = f"inertia J1 rotor {J} kg*m^2 initial={w0} rad/s\nload T1 rotor torque={T} N*m\n"
    t_stop = J * w0 / T
    h = t_stop / 4000
    res = mna.parse(text).transient(until=1.5 * t_stop, step=h, method="trapezoidal", start="rest",
                                    record=["w(rotor)", "torque(T1)"])
    w = res["w(rotor)"]
    turning = res.time < 0.95 * t_stop
    np.testing.assert_allclose(w[turning], w0 - T * res.time[turning] / J, rtol=0, atol=1e-6 * w0)
    np.testing.assert_allclose(res["torque(T1)"][turning], T, rtol=1e-12)
    crossing = np.interp(0.05, w[::-1], res.time[::-1])  # first time below 0.05 rad/s
    assert abs(crossing - t_stop) < J * 0.1 / T + 2 * h
    assert np.all(np.abs(w[res.time > 1.1 * t_stop]) < 0.1)  # still, within the band


def test_a_fixed_load_drives_the_shaft_backwards():
    # direction=fixed: the torque acts against positive rotation at every
    # speed (a hoist's weight): w = w0 - T t / J, through zero and below.
    J, T, w0 = 1e-3, 0.1, 50.0
    text = f"inertia J1 rotor {J} kg*m^2 initial={w0} rad/s\nload T1 rotor torque={T} N*m direction=fixed\n"
    res = mna.parse(text).transient(until=1.0, step=1e-3, method="trapezoidal", start="rest",
                                    record=["w(rotor)"])
    np.testing.assert_allclose(res["w(rotor)"], w0 - T * res.time / J, rtol=0, atol=1e-9 * w0)
    assert prepare(mna.parse(text))[0].is_linear  # a fixed torque stays on the linear path


def test_smooth_sign_is_a_c1_sign_with_a_flat_outside():
    # The documented model: 1.5u - 0.5u^3 inside |u| < 1, sign(u) outside.
    u = np.linspace(-3, 3, 6001)
    s, ds = smooth_sign(u)
    inside = np.abs(u) < 1
    np.testing.assert_allclose(s[inside], 1.5 * u[inside] - 0.5 * u[inside] ** 3, rtol=1e-15, atol=1e-15)
    np.testing.assert_array_equal(s[~inside], np.sign(u[~inside]))
    np.testing.assert_array_equal(ds[~inside], 0.0)
    # the slope is the derivative: central differences, error du^2/6 times
    # the third derivative (3) = 5e-7 wherever s is smooth (not across |u| = 1)
    du = u[1] - u[0]
    smooth = np.abs(np.abs(u[1:-1]) - 1) > 1.5 * du
    central = (s[2:] - s[:-2]) / (2 * du)
    np.testing.assert_allclose(ds[1:-1][smooth], central[smooth], atol=1e-6)


def test_fan_load_steady_state():
    # Motor into a fan: k i = c w^2 and V = R i + k w give
    # c R w^2 + k^2 w - k V = 0, so w = (-k^2 + sqrt(k^4 + 4 c R k V)) / (2 c R).
    V, R, k, J = 24.0, 1.2, 0.07, 5e-4
    T_fan, w_fan = 0.3, 2500 * RPM
    c = T_fan / w_fan**2
    text = (f"voltage-source V1 s -> gnd {V} V\n"
            f"dc-machine M1 s -> gnd shaft=rotor resistance={R} ohm inductance=1 mH constant={k} V*s/rad\n"
            f"inertia J1 rotor {J} kg*m^2\n"
            "load F1 rotor fan-torque=0.3 N*m fan-speed=2500 rpm\nrecord torque(F1), i(M1)\n")
    op = mna.parse(text).dc()
    w = (-k**2 + math.sqrt(k**4 + 4 * c * R * k * V)) / (2 * c * R)
    assert op["w(rotor)"] == pytest.approx(w, rel=1e-9)
    assert op["torque(F1)"] == pytest.approx(c * w**2, rel=1e-9)
    # The coefficient form gives the same load.
    op2 = mna.parse(text.replace("fan-torque=0.3 N*m fan-speed=2500 rpm", f"fan={c} N*m*s^2")).dc()
    assert op2["w(rotor)"] == pytest.approx(w, rel=1e-9)


def test_fan_run_down_matches_its_closed_form():
    # J dw/dt = -c w^2  =>  w = w0 / (1 + c w0 t / J).
    J, c, w0 = 1e-3, 2e-6, 400.0
    text = f"inertia J1 rotor {J} kg*m^2 initial={w0} rad/s\nload F1 rotor fan={c} N*m*s^2\n"
    res = mna.parse(text).transient(until=3.0, step=2e-3, method="trapezoidal", start="rest",
                                    record=["w(rotor)"])
    # time scale J/(c w0) = 1.25 s; h = 2 ms: error ~ (h/1.25 s)^2 ~ 2.6e-6
    np.testing.assert_allclose(res["w(rotor)"], w0 / (1 + c * w0 * res.time / J), rtol=1e-5)


def test_speed_source_ramp_torque_is_j_times_acceleration():
    # A prime mover ramping 0 -> W over `rise` into an inertia applies
    # T = J W / rise during the ramp and nothing after (Newton's second law
    # for rotation).
    J, W, rise = 2e-3, 100.0, 0.2
    text = (f"speed-source W1 rotor step(from=0 rad/s, to={W} rad/s, at=0.1 s, rise={rise} s)\n"
            f"inertia J1 rotor {J} kg*m^2\nrecord w(rotor), torque(W1), pmech(W1), torque(J1)\n")
    res = mna.parse(text).transient(until=0.5, step=1e-3, start="rest")
    t = res.time
    ramp = (t > 0.1 + 1e-9) & (t < 0.1 + rise - 1e-9)
    np.testing.assert_allclose(res["torque(W1)"][ramp], J * W / rise, rtol=1e-9)
    np.testing.assert_allclose(res["torque(J1)"][ramp], J * W / rise, rtol=1e-9)
    still = (t > 0.1 + rise + 2e-3)
    np.testing.assert_allclose(res["torque(W1)"][still], 0.0, atol=1e-9)
    np.testing.assert_allclose(res["pmech(W1)"], res["torque(W1)"] * res["w(rotor)"], rtol=1e-12)


def test_gear_scales_speed_and_torque():
    # An ideal gear of ratio n: w_out = w_in / n, torque_out = n torque_in
    # (Nise ch. 2, gear trains). Driven at 3000 rpm into viscous friction B
    # on the output: torque_out = B w_out, input torque = B w_out / n.
    n, B = 5.0, 2e-3
    text = (f"speed-source W1 motor 3000 rpm\ngear G1 motor -> drum {n}\n"
            f"friction B1 drum -> frame {B} N*m*s/rad\nrecord w(drum), torque(G1), torque_out(G1), torque(W1)\n")
    op = mna.parse(text).dc()
    w_out = 3000 * RPM / n
    assert op["w(drum)"] == pytest.approx(w_out, rel=1e-12)
    assert op["torque_out(G1)"] == pytest.approx(B * w_out, rel=1e-12)
    assert op["torque(G1)"] == pytest.approx(B * w_out / n, rel=1e-12)
    assert op["torque(W1)"] == pytest.approx(B * w_out / n, rel=1e-12)  # power in = power out
    reversed_op = mna.parse(text.replace(f"drum {n}", f"drum {-n}")).dc()
    assert reversed_op["w(drum)"] == pytest.approx(-w_out, rel=1e-12)


def test_motor_through_a_gear_sees_the_reflected_inertia():
    # Load inertia reflected through a gear of ratio n is J_L / n^2 (Nise
    # ch. 2, gear trains), so with L = 0 and no friction the motor speed is
    # w = (V/k)(1 - exp(-t/tau)) with tau = R (J_m + J_L/n^2) / k^2.
    V, R, k, Jm, JL, n = 24.0, 2.0, 0.06, 2e-5, 4e-3, 10.0
    text = (f"voltage-source V1 s -> gnd {V} V\n"
            f"dc-machine M1 s -> gnd shaft=motor resistance={R} ohm constant={k} V*s/rad\n"
            f"inertia Jm motor {Jm} kg*m^2\ngear G1 motor -> drum {n}\ninertia JL drum {JL} kg*m^2\n")
    tau = R * (Jm + JL / n**2) / k**2
    res = mna.parse(text).transient(until=4 * tau, step=tau / 1000, method="trapezoidal", start="rest",
                                    record=["w(motor)", "w(drum)"])
    # trapezoidal at h = tau/1000: relative error ~ 1e-7
    expected = V / k * (1 - np.exp(-res.time / tau))
    np.testing.assert_allclose(res["w(motor)"], expected, atol=1e-6 * V / k)
    np.testing.assert_allclose(res["w(drum)"], res["w(motor)"] / n, rtol=1e-12, atol=1e-12)


def test_viscous_coupling_between_two_shafts():
    # friction a -> b couples two shafts with torque B (w_a - w_b): a driven
    # shaft at W into an inertia J: w_b = W (1 - exp(-B t / J)).
    B, J, W = 1e-3, 1e-3, 100.0
    text = (f"speed-source W1 a {W} rad/s\nfriction C1 a -> b {B} N*m*s/rad\ninertia J1 b {J} kg*m^2\n"
            "record w(b), torque(C1)\n")
    res = mna.parse(text).transient(until=3.0, step=1e-3, method="trapezoidal", start="rest")
    np.testing.assert_allclose(res["w(b)"][1:], W * (1 - np.exp(-B * res.time[1:] / J)), atol=1e-5 * W)
    np.testing.assert_allclose(res["torque(C1)"], B * (W - res["w(b)"]), rtol=1e-9, atol=1e-12)


def test_angle_of_a_shaft_is_the_integral_of_its_speed():
    # angle(shaft) = integral of w dt; at constant speed W it is W t.
    res = mna.parse("speed-source W1 rotor 600 rpm\nrecord angle(rotor)\n").transient(
        until=0.5, step=1e-3, start="rest")
    np.testing.assert_allclose(res["angle(rotor)"][1:], 600 * RPM * res.time[1:], rtol=1e-9)
    assert res.units["angle(rotor)"] == "rad"
