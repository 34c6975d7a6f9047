"""The coil generator: a single coil turning in a uniform field.

Reference: Halliday, Resnick & Walker, *Fundamentals of Physics*, chapters
on magnetic force on a current loop and on induction (numbering varies by
edition):

    e = N B A w sin(w t)      tau = N I A B sin(theta)      e i = tau w

Values N = 100, B = 0.5 T, A = 0.01 m^2 are an invented example; every
expected number is computed from the formulas here.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import mna

N, BF, AREA = 100, 0.5, 0.01
NBA = N * BF * AREA
COIL = f"turns={N} field={BF} T area={AREA} m^2"


def test_open_circuit_emf_peak_and_frequency():
    # Driven at 50 Hz electrical (w = 2 pi 50 rad/s): peak N B A w, RMS peak/sqrt(2),
    # frequency w/(2 pi) (Halliday et al.). The coil is an ideal EMF (no R, no L).
    w = 2 * math.pi * 50
    text = (f"speed-source W1 rotor {w} rad/s\ncoil-generator G1 a -> gnd shaft=rotor {COIL}\n"
            "record v(a), emf(G1), angle(G1)\n")
    h = 1 / 50 / 500
    res = mna.parse(text).transient(until=0.04, step=h, method="trapezoidal", start="rest")
    v = res["v(a)"]
    peak = NBA * w
    # The angle integrates a constant speed exactly (trapezoidal rule), so v is
    # N B A w sin(w t) to rounding; the sampled peak is within 1 - cos(w h/2).
    np.testing.assert_allclose(v, peak * np.sin(w * res.time), atol=1e-9 * peak)
    assert v.max() == pytest.approx(peak, rel=(w * h) ** 2 / 8)
    # over whole periods the trapezoid rule of a sinusoid's square is exact
    # to rounding, so the RMS is peak/sqrt(2) to the sample accuracy above
    rms = math.sqrt(np.trapezoid(v**2, res.time) / res.time[-1])
    assert rms == pytest.approx(peak / math.sqrt(2), rel=1e-8)
    rising = np.flatnonzero((v[:-1] < 0) & (v[1:] >= 0))
    t_up = res.time[rising] - v[rising] * h / (v[rising + 1] - v[rising])  # linear interpolation
    assert np.mean(np.diff(t_up)) == pytest.approx(2 * math.pi / w, rel=1e-6)
    # (the start at rest moves the angle by w * 1e-9 h ~ 3e-12 rad)
    np.testing.assert_allclose(res["angle(G1)"], w * res.time, rtol=1e-12, atol=1e-10)


@pytest.mark.parametrize("degrees", [30, 90, 150])
def test_torque_on_the_loop(degrees):
    # tau = N I A B sin(theta) (Halliday et al.): a current source drives 2 A
    # through a coil held at theta by a shaft at standstill; the prime mover
    # holding it feels the reaction.
    current = 2.0
    text = (f"speed-source W1 rotor 0 rad/s\n"
            f"coil-generator G1 a -> gnd shaft=rotor {COIL} resistance=0.5 ohm initial-angle={degrees} deg\n"
            f"current-source I1 gnd -> a {current} A\nrecord torque(G1), torque(W1), i(G1), angle(G1)\n")
    op = mna.parse(text).dc()
    expected = N * current * AREA * BF * math.sin(math.radians(degrees))
    assert op["i(G1)"] == pytest.approx(current, rel=1e-12)
    assert op["angle(G1)"] == pytest.approx(math.radians(degrees), rel=1e-12)
    assert op["torque(G1)"] == pytest.approx(expected, rel=1e-12)
    assert op["torque(W1)"] == pytest.approx(-expected, rel=1e-12)
    res = mna.parse(text).transient(until=1e-3, step=1e-5, start="rest")
    np.testing.assert_allclose(res["torque(G1)"][1:], expected, rtol=1e-9)


W_DRIVE, R_COIL, L_COIL, R_LOAD = 100.0, 2.0, 20e-3, 8.0
H_DRIVE = 2.5e-5  # s


@pytest.fixture(scope="module")
def driven_run():
    """The coil with R and L driven at constant speed into a resistor, from rest."""
    text = (f"speed-source W1 rotor {W_DRIVE} rad/s\n"
            f"coil-generator G1 a -> gnd shaft=rotor {COIL} resistance={R_COIL} ohm inductance={L_COIL} H\n"
            f"resistor RL a -> gnd {R_LOAD} ohm\n"
            "record i(G1), torque(W1), torque(G1), pmech(W1), pmech(G1), p(RL)\n")
    return mna.parse(text).transient(until=0.1, step=H_DRIVE, method="trapezoidal", start="rest")


def test_generator_into_a_resistor_against_the_ode(driven_run):
    # L di/dt = -(R + R_L) i - N B A w sin(w t): the EMF drives the current
    # out of terminal a (passive i negative); the prime mover's torque is the
    # reaction, -N B A i sin(w t).
    res = driven_run
    w, tau = W_DRIVE, L_COIL / (R_COIL + R_LOAD)

    def ode(t, y):
        return [(-(R_COIL + R_LOAD) * y[0] - NBA * w * math.sin(w * t)) / L_COIL]

    ref = solve_ivp(ode, (0, 0.1), [0.0], method="Radau", rtol=1e-10, atol=1e-12, dense_output=True)
    i_ref = ref.sol(res.time)[0]
    # Trapezoidal rule, h = 25 us against tau = 2 ms: error ~ (h/tau)^2 = 1.6e-4
    # of the current's amplitude (as for the motor start, the first
    # backward-Euler step dominates); 2 (h/tau)^2 bounds it.
    amplitude = np.max(np.abs(i_ref))
    assert np.max(np.abs(res["i(G1)"] - i_ref)) < 2 * (H_DRIVE / tau) ** 2 * amplitude
    np.testing.assert_allclose(res["torque(W1)"], -NBA * res["i(G1)"] * np.sin(w * res.time),
                               atol=1e-9 * NBA * amplitude)
    np.testing.assert_allclose(res["torque(G1)"], -res["torque(W1)"], rtol=1e-12, atol=1e-15)


def test_power_balance_of_a_driven_coil(driven_run):
    # e i = tau w (Halliday et al.): over the run the prime mover's energy
    # equals the energy dissipated in the resistances plus the coil's final
    # magnetic energy L i^2/2. The trapezoidal rule keeps this balance to
    # O(h^2) per unit time ((h w)^2/12 ~ 5e-7 here, and (h/tau)^2/12 ~ 1.3e-5
    # for the current's fast start), and the trapezoid quadrature of the
    # sampled powers matches it: 1e-4 bounds both.
    res = driven_run
    t, i = res.time, res["i(G1)"]
    mechanical = np.trapezoid(res["pmech(W1)"], t)
    dissipated = np.trapezoid(res["p(RL)"] + R_COIL * i**2, t)
    assert mechanical == pytest.approx(dissipated + 0.5 * L_COIL * i[-1] ** 2, rel=1e-4)
    # the prime mover's power is what the coil converts: -pmech(G1)
    np.testing.assert_allclose(res["pmech(W1)"], -res["pmech(G1)"], rtol=1e-9, atol=1e-12)


def test_hand_crank_spin_down_converts_kinetic_energy():
    # A flywheel spun to w0 drives the coil into a resistor and slows down:
    # the kinetic energy lost, J (w0^2 - w^2)/2, is the energy dissipated
    # (conservation of energy; e i = tau w). Reference trajectory: the
    # two-state ODE [w, theta] with the algebraic current i = -e/(R + R_L).
    J, w0, r_total = 2e-3, 60.0, 10.0
    text = (f"inertia J1 rotor {J} kg*m^2 initial={w0} rad/s\n"
            f"coil-generator G1 a -> gnd shaft=rotor {COIL} resistance=2 ohm\n"
            f"resistor RL a -> gnd {r_total - 2} ohm\nrecord w(rotor), angle(G1), angle(rotor), i(G1)\n")
    res = mna.parse(text).transient(until=0.5, step=2.5e-4, method="trapezoidal", start="rest")

    def ode(t, y):
        w, theta = y
        i = -NBA * w * math.sin(theta) / r_total
        return [NBA * i * math.sin(theta) / J, w]

    ref = solve_ivp(ode, (0, 0.5), [w0, 0.0], method="Radau", rtol=1e-11, atol=1e-12, dense_output=True)
    w_ref, theta_ref = ref.sol(res.time)
    # Trapezoidal at h = 0.25 ms against an electrical period of ~0.1 s:
    # relative error ~ (2 pi h / 0.1 s)^2 / 12 ~ 2e-5 at worst, far less in w;
    # the two backward-Euler steps the run starts with add (h w)^2/2 each.
    np.testing.assert_allclose(res["w(rotor)"], w_ref, rtol=3e-5)
    np.testing.assert_allclose(res["angle(G1)"], theta_ref, rtol=3e-5, atol=1e-6)
    # The post-hoc angle of the shaft integrates the recorded speed over the
    # method's dense output (three points per step, not the chord between
    # steps): it meets the same reference, to the same tolerance.
    np.testing.assert_allclose(res["angle(rotor)"], theta_ref, rtol=3e-5, atol=1e-6)
    lost = 0.5 * J * (w0**2 - res["w(rotor)"][-1] ** 2)
    assert np.trapezoid(r_total * res["i(G1)"] ** 2, res.time) == pytest.approx(lost, rel=1e-4)


def test_dc_operating_point_holds_the_initial_angle():
    # Documented behaviour: at the operating point the angle keeps its
    # initial value (a turning coil has no steady state), so a coil at
    # 90 degrees on a shaft turning at w shows e = N B A w into R + R_L.
    w, r, r_load = 50.0, 1.0, 4.0
    text = (f"speed-source W1 rotor {w} rad/s\n"
            f"coil-generator G1 a -> gnd shaft=rotor {COIL} resistance={r} ohm inductance=1 mH "
            "initial-angle=90 deg\n"
            f"resistor RL a -> gnd {r_load} ohm\nrecord i(RL), angle(G1)\n")
    op = mna.parse(text).dc()
    assert op["angle(G1)"] == pytest.approx(math.pi / 2, rel=1e-12)
    assert op["i(RL)"] == pytest.approx(NBA * w / (r + r_load), rel=1e-12)
    # and a transient from that point starts there
    res = mna.parse(text).transient(until=1e-3, step=1e-5, start="dc")
    assert res["angle(G1)"][0] == pytest.approx(math.pi / 2, rel=1e-12)
