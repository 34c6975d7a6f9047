"""The DC machine as motor and generator, checked against its textbook model.

Model: the permanent-magnet DC machine of Franklin,
Powell & Emami-Naeini, *Feedback Control of Dynamic Systems*, ch. 2, and
Nise, *Control Systems Engineering*, ch. 2 (chapters from memory):

    V = R i + L di/dt + k w            J dw/dt = k i - B w - T_L

Reference solutions are that two-state ODE solved by
``scipy.integrate.solve_ivp`` at rtol 1e-10, or the closed forms that follow
from it (steady state, stall, the mechanical time constant). Machine values
are an invented example, "case A" (12 V, 1 ohm, 0.5 mH, 0.05 V*s/rad,
1e-4 kg*m^2, 1e-5 N*m*s/rad); every expected number is computed here.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.optimize import minimize_scalar

import mna
from mna.analyses.common import prepare

V, R, L, K, J, B = 12.0, 1.0, 0.5e-3, 0.05, 1e-4, 1e-5


def motor_text(*, load: str = "", inductance: float = L, friction: float = B, extra: str = "",
               machine_extra: str = "") -> str:
    lines = [
        f"voltage-source V1 sup -> gnd {V} V",
        f"dc-machine M1 sup -> gnd shaft=rotor resistance={R} ohm inductance={inductance} H "
        f"constant={K} V*s/rad {machine_extra}",
        f"inertia J1 rotor {J} kg*m^2",
    ]
    if friction:
        lines.append(f"friction B1 rotor -> frame {friction} N*m*s/rad")
    if load:
        lines.append(f"load T1 rotor {load}")
    if extra:
        lines.append(extra)
    return "\n".join(lines) + "\n"


def motor_ode(t, y, load_torque=0.0):
    """The two-state DC motor model (Franklin/Nise ch. 2): y = [i, w]."""
    i, w = y
    return [(V - R * i - K * w) / L, (K * i - B * w - load_torque) / J]


H_START = 4e-6  # s; tau_e = L/R = 500 us
TAU_E = L / R


@pytest.fixture(scope="module")
def start_run():
    """A start from rest, trapezoidal rule at h = 4 us."""
    circuit = mna.parse(motor_text())
    res = circuit.transient(until=0.1, step=H_START, method="trapezoidal", start="rest",
                            record=["i(M1)", "w(rotor)", "p(M1)", "pmech(M1)", "torque(M1)", "emf(M1)"])
    ref = solve_ivp(motor_ode, (0.0, 0.1), [0.0, 0.0], method="Radau", rtol=1e-10, atol=1e-12,
                    dense_output=True)
    return res, ref


def test_initial_current_slope_is_supply_over_inductance():
    # At t = 0+ the rotor is still (no back-EMF) and i = 0, so L di/dt = V
    # (Franklin/Nise model). Over a step h the exact current is
    # (V/L) h (1 - R h/(2L) + ...), so i(h)/h = V/L within R h/(2L) = 1e-5.
    h = 1e-8
    res = mna.parse(motor_text()).transient(until=10 * h, step=h, start="rest", record=["i(M1)"])
    slope = res["i(M1)"][1] / res.time[1]
    assert slope == pytest.approx(V / L, rel=5e-5)


def test_start_speed_and_current_follow_the_two_state_ode(start_run):
    res, ref = start_run
    i_ref, w_ref = ref.sol(res.time)
    # Error budget: the run's first step is backward Euler, local error
    # (h^2/2) |di2/dt2| = (h^2/2)(V/L)(R/L) = (V/R)(h/tau_e)^2/2, which then
    # decays with tau_e; the trapezoidal steps add only ~(h/tau_e)^2/12 of
    # the scale. So the current is within 2 (h/tau_e)^2 of its peak (here
    # 1.3e-4). The speed integrates that error over ~tau_e << tau_m: it is
    # far smaller, and (h/tau_e)^2 (6.4e-5) of the top speed bounds it.
    scale = (H_START / TAU_E) ** 2
    assert np.max(np.abs(res["i(M1)"] - i_ref)) < 2 * scale * np.max(np.abs(i_ref))
    assert np.max(np.abs(res["w(rotor)"] - w_ref)) < scale * np.max(np.abs(w_ref))


def test_backward_euler_start_converges_at_first_order():
    # Backward Euler's global error on a stable mode of time constant tau is
    # ~ (h/(2 tau)) of the signal (Hairer & Wanner; standard numerical
    # analysis); the fastest mode here is tau_e. So the error is below
    # h/(2 tau_e) of the peak, and halving h halves it (order 1).
    ref = solve_ivp(motor_ode, (0.0, 0.02), [0.0, 0.0], method="Radau", rtol=1e-10, atol=1e-12,
                    dense_output=True)
    errors = []
    for h in (4e-6, 2e-6):
        res = mna.parse(motor_text()).transient(until=0.02, step=h, start="rest", record=["i(M1)", "w(rotor)"],
                                                method="backward-euler")
        i_ref, w_ref = ref.sol(res.time)
        err_i = np.max(np.abs(res["i(M1)"] - i_ref)) / np.max(i_ref)
        err_w = np.max(np.abs(res["w(rotor)"] - w_ref)) / np.max(w_ref)
        assert err_i < h / (2 * TAU_E) and err_w < h / (2 * TAU_E)
        errors.append(err_i)
    assert errors[0] / errors[1] == pytest.approx(2.0, rel=0.1)


def test_peak_inrush_current_and_its_time(start_run):
    res, ref = start_run
    best = minimize_scalar(lambda t: -ref.sol(t)[0], bounds=(1e-4, 1e-2), method="bounded",
                           options={"xatol": 1e-9})
    k = np.argmax(res["i(M1)"])
    # The peak is flat, so its value is as accurate as the curve (above);
    # the sampled maximum is within a step or two of the true peak time.
    assert res["i(M1)"][k] == pytest.approx(-best.fun, rel=2 * (H_START / TAU_E) ** 2)
    assert abs(res.time[k] - best.x) < 2 * H_START


def test_torque_emf_and_powers_obey_the_machine_laws(start_run):
    res, _ = start_run
    i, w = res["i(M1)"], res["w(rotor)"]
    # T = k i and e = k w (Franklin/Nise ch. 2); pmech = T w.
    np.testing.assert_allclose(res["torque(M1)"], K * i, rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(res["emf(M1)"], K * w, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(res["pmech(M1)"], K * i * w, rtol=1e-12, atol=1e-12)
    # Electrical power in = V * i for a machine straight across the supply.
    np.testing.assert_allclose(res["p(M1)"], V * i, rtol=1e-12, atol=1e-12)


def test_the_shaft_receives_the_reported_torque(start_run):
    # The shaft side of the same model (Franklin/Nise ch. 2): J dw/dt + B w = T.
    # The trapezoidal rule makes it hold exactly on every step between the
    # samples: J (w1 - w0)/h = (T1 + T0)/2 - B (w1 + w0)/2. The first steps of
    # the run may be backward-Euler restart steps; from the fifth sample on it
    # holds to round-off (1e-9 of the largest torque; the residual of Newton's
    # method is 1e-12 of the terms). A torque constant halved on the shaft side
    # only (the reported torque still k i) breaks it by half the torque.
    res, _ = start_run
    w, torque, t = res["w(rotor)"], res["torque(M1)"], res.time
    h = np.diff(t)
    lhs = J * np.diff(w) / h + B * 0.5 * (w[1:] + w[:-1])
    rhs = 0.5 * (torque[1:] + torque[:-1])
    np.testing.assert_allclose(lhs[4:], rhs[4:], rtol=0, atol=1e-9 * np.max(np.abs(torque)))


def test_no_load_speed_and_current():
    # Steady state with T_L = 0 (Franklin, Powell & Emami-Naeini, *Feedback Control of Dynamic Systems*, ch. 2, from memory): w = V k / (k^2 + R B),
    # i = B V / (k^2 + R B).
    op = mna.parse(motor_text() + "record i(M1)\n").dc()
    assert op["w(rotor)"] == pytest.approx(V * K / (K**2 + R * B), rel=1e-9)
    assert op["i(M1)"] == pytest.approx(B * V / (K**2 + R * B), rel=1e-9)


@pytest.mark.parametrize("direction", ["opposing", "fixed"])
def test_running_speed_and_current_under_a_constant_load_torque(direction):
    # Steady state (Franklin, Powell & Emami-Naeini, *Feedback Control of Dynamic Systems*, ch. 2, from memory): w = (k V - R T_L)/(k^2 + R B),
    # i = (B V + k T_L)/(k^2 + R B). An opposing load is exactly T_L once
    # the speed is beyond its smoothing band, so both models agree.
    TL = 0.1
    op = mna.parse(motor_text(load=f"torque={TL} N*m direction={direction}") + "record i(M1), torque(T1)\n").dc()
    assert op["w(rotor)"] == pytest.approx((K * V - R * TL) / (K**2 + R * B), rel=1e-9)
    assert op["i(M1)"] == pytest.approx((B * V + K * TL) / (K**2 + R * B), rel=1e-9)
    assert op["torque(T1)"] == pytest.approx(TL, rel=1e-12)


def test_load_step_follows_the_two_state_ode():
    # From the no-load steady state, a 0.1 N*m load steps on at 20 ms
    # (torque=step(...)); reference: the two-state ODE with T_L switched on
    # at 20 ms, solved in two pieces by solve_ivp. Trapezoidal rule at
    # h = 20 us against tau_e = 0.5 ms: error ~ (h/tau_e)^2/12 ~ 1.3e-4 of
    # the signal; 1e-3 of the speed dip and of the current is a safe bound.
    TL, t_on, until = 0.1, 0.02, 0.1
    text = motor_text(load=f"torque=step(from=0 N*m, to={TL} N*m, at={t_on} s)")
    res = mna.parse(text).transient(until=until, step=2e-5, method="trapezoidal", start="dc",
                                    record=["w(rotor)", "i(M1)"])
    w0, i0 = V * K / (K**2 + R * B), B * V / (K**2 + R * B)
    after = solve_ivp(motor_ode, (t_on, until), [i0, w0], args=(TL,), method="Radau", rtol=1e-10,
                      atol=1e-12, dense_output=True)
    late = res.time >= t_on
    i_ref, w_ref = after.sol(res.time[late])
    np.testing.assert_allclose(res["w(rotor)"][~late], w0, rtol=1e-9)
    dip = w0 - w_ref.min()
    assert np.max(np.abs(res["w(rotor)"][late] - w_ref)) < 1e-3 * dip
    assert np.max(np.abs(res["i(M1)"][late] - i_ref)) < 1e-3 * np.max(np.abs(i_ref))


def test_mechanical_time_constant_without_inductance():
    # With L = 0 the motor is first order: w(t) = w_ss (1 - exp(-t/tau)) with
    # tau = R J/(k^2 + R B), which is R J / k^2 for B = 0 (Franklin, Powell & Emami-Naeini, *Feedback Control of Dynamic Systems*, ch. 2, from memory;
    # Nise ch. 2). Trapezoidal at h = tau/1000: error ~ (h/tau)^2/12 ~ 1e-7.
    tau = R * J / K**2
    res = mna.parse(motor_text(inductance=0.0, friction=0.0)).transient(
        until=5 * tau, step=tau / 1000, method="trapezoidal", start="rest", record=["w(rotor)", "i(M1)"])
    w_ss = V / K
    np.testing.assert_allclose(res["w(rotor)"], w_ss * (1 - np.exp(-res.time / tau)), rtol=0, atol=1e-6 * w_ss)
    # The current is algebraic: (V - k w)/R, a jump to V/R at t = 0+.
    np.testing.assert_allclose(res["i(M1)"][1:], (V - K * res["w(rotor)"][1:]) / R, rtol=1e-9, atol=1e-9)


def test_mechanical_time_constant_with_small_inductance():
    # For tau_e = L/R << tau_m the two-pole response is the first-order one
    # delayed by about tau_e (Franklin/Nise: poles near -1/tau_m and -1/tau_e),
    # so the time to 1 - 1/e of the final speed is tau_m within ~2 tau_e.
    tau_m = R * J / K**2
    inductance = tau_m / 1000 * R
    res = mna.parse(motor_text(inductance=inductance, friction=0.0)).transient(
        until=3 * tau_m, step=tau_m / 2000, method="trapezoidal", start="rest", record=["w(rotor)"])
    w = res["w(rotor)"]
    t63 = np.interp((1 - math.exp(-1)) * V / K, w, res.time)
    assert t63 == pytest.approx(tau_m, abs=2 * inductance / R)


def test_generator_into_a_resistor():
    # Driven at a set speed into R_load: E = k w drives i = k w/(R + R_load)
    # through the load, and the machine brakes the shaft with k i
    # (Franklin, Powell & Emami-Naeini, *Feedback Control of Dynamic Systems*, ch. 2, from memory; Chapman, Electric Machinery Fundamentals,
    # DC generators -- chapter from memory). Passive sign convention: the
    # current through the machine a -> b is negative.
    w, r_load = 3000 * 2 * math.pi / 60, 4.0
    text = (f"speed-source W1 rotor 3000 rpm\n"
            f"dc-machine M1 out -> gnd shaft=rotor resistance={R} ohm inductance={L} H constant={K} N*m/A\n"
            f"resistor RL out -> gnd {r_load} ohm\n"
            "record i(M1), i(RL), torque(M1), torque(W1), p(M1), pmech(M1), pmech(W1), p(RL)\n")
    current = K * w / (R + r_load)
    res = mna.parse(text).transient(until=20 * L / (R + r_load), step=1e-6, start="rest")
    last = {k: v[-1] for k, v in res.signals.items()}
    assert last["i(RL)"] == pytest.approx(current, rel=1e-6)
    assert last["i(M1)"] == pytest.approx(-current, rel=1e-6)
    assert last["torque(M1)"] == pytest.approx(-K * current, rel=1e-6)  # braking
    assert last["torque(W1)"] == pytest.approx(K * current, rel=1e-6)  # the prime mover supplies it
    assert last["pmech(W1)"] == pytest.approx(K * current * w, rel=1e-6)
    # Electrical power delivered = load power; the rest of k w i is copper loss.
    assert -last["p(M1)"] == pytest.approx(last["p(RL)"], rel=1e-6)
    assert last["pmech(W1)"] - last["p(RL)"] == pytest.approx(R * current**2, rel=1e-6)


def test_motor_overdriven_becomes_a_generator():
    # Same element, same supply: above the no-load speed V/k the back-EMF
    # exceeds V and the current reverses: i = (V - k w)/R < 0 (model above).
    w = 1.5 * V / K
    text = (f"voltage-source V1 sup -> gnd {V} V\n"
            f"dc-machine M1 sup -> gnd shaft=rotor resistance={R} ohm inductance={L} H constant={K} V*s/rad\n"
            f"speed-source W1 rotor {w} rad/s\nrecord i(M1), p(M1), p(V1), torque(M1)\n")
    op = mna.parse(text).dc()
    i = (V - K * w) / R
    assert i < 0
    assert op["i(M1)"] == pytest.approx(i, rel=1e-12)
    assert op["p(M1)"] == pytest.approx(V * i, rel=1e-12)
    assert op["p(V1)"] == pytest.approx(-V * i, rel=1e-12)  # the supply absorbs power
    assert op["torque(M1)"] == pytest.approx(K * i, rel=1e-12)


def test_locked_rotor_draws_stall_current():
    # shaft=frame locks the rotor: the stall current V/R and stall torque
    # k V/R (Franklin, Powell & Emami-Naeini, *Feedback Control of Dynamic Systems*, ch. 2, from memory), reached through i(t) = V/R (1 - exp(-t R/L)).
    text = (f"voltage-source V1 sup -> gnd {V} V\n"
            f"dc-machine M1 sup -> gnd shaft=frame resistance={R} ohm inductance={L} H constant={K} V*s/rad\n"
            "record i(M1), torque(M1)\n")
    circuit = mna.parse(text)
    assert circuit.dc()["i(M1)"] == pytest.approx(V / R, rel=1e-12)
    tau = L / R
    res = circuit.transient(until=5 * tau, step=tau / 500, method="trapezoidal", start="rest")
    np.testing.assert_allclose(res["i(M1)"], V / R * (1 - np.exp(-res.time / tau)), atol=1e-5 * V / R)
    assert res["torque(M1)"][-1] == pytest.approx(K * V / R * (1 - math.exp(-5)), rel=1e-5)


def test_torque_constant_and_back_emf_constant_are_one_si_number():
    # SI: 1 V = 1 W/A = 1 N*m/(A*s) and 1 rad = 1, so 1 V*s/rad = 1 N*m/A
    # (BIPM SI Brochure, derived units; power balance e*i = T*w).
    a = mna.units.parse_quantity("0.05 V*s/rad")
    b = mna.units.parse_quantity("0.05 N*m/A")
    assert a.dim == b.dim and a.value == pytest.approx(b.value, rel=1e-15)
    ops = [mna.parse(motor_text().replace("V*s/rad", unit)).dc() for unit in ("V*s/rad", "N*m/A")]
    assert ops[0]["w(rotor)"] == ops[1]["w(rotor)"]


def test_brush_drop_lowers_the_running_speed_and_opposes_the_current():
    # The brush drop is a constant Vb against the current once |i| exceeds
    # its band, so the steady state is the model's with V -> V - Vb:
    # w = (k (V - Vb) - R T_L)/(k^2 + R B) (Franklin, Powell & Emami-Naeini, *Feedback Control of Dynamic Systems*, ch. 2, from memory).
    vb, TL = 2.0, 0.1
    text = motor_text(load=f"torque={TL} N*m", machine_extra=f"brush-drop={vb} V") + "record i(M1)\n"
    op = mna.parse(text).dc()
    assert op["w(rotor)"] == pytest.approx((K * (V - vb) - R * TL) / (K**2 + R * B), rel=1e-9)
    # As a generator the drop still opposes the current: i = -(k w - Vb)/(R + R_load).
    w, r_load = 400.0, 3.0
    gen = (f"speed-source W1 rotor {w} rad/s\n"
           f"dc-machine M1 out -> gnd shaft=rotor resistance={R} ohm constant={K} V*s/rad brush-drop={vb} V\n"
           f"resistor RL out -> gnd {r_load} ohm\nrecord i(M1)\n")
    assert mna.parse(gen).dc()["i(M1)"] == pytest.approx(-(K * w - vb) / (R + r_load), rel=1e-9)


def test_a_machine_without_brush_drop_keeps_the_linear_fast_path():
    # Design property (DESIGN.md, performance): a linear circuit factors once
    # per step length; the brush drop makes the machine nonlinear.
    linear, _ = prepare(mna.parse(motor_text()))
    nonlinear, _ = prepare(mna.parse(motor_text(machine_extra="brush-drop=2 V")))
    assert linear.is_linear and not nonlinear.is_linear
    res = mna.parse(motor_text()).transient(until=0.01, step=1e-5, method="trapezoidal", start="rest")
    # rest start (one), first backward-Euler step (one), trapezoidal steps (one)
    assert res.statistics["factorizations"] <= 3
    # one solve a step, plus the solve of the instant after the start at rest
    assert res.statistics["newton_iterations"] == res.statistics["steps"] + 1


def test_initial_current_at_rest_start():
    # initial= sets the armature current at t = 0 for a run from rest; with
    # the rotor locked, i(t) = V/R + (I0 - V/R) exp(-t R/L) (first-order RL).
    i0 = 3.0
    text = (f"voltage-source V1 sup -> gnd {V} V\n"
            f"dc-machine M1 sup -> gnd shaft=frame resistance={R} ohm inductance={L} H constant={K} V*s/rad "
            f"initial={i0} A\n")
    res = mna.parse(text).transient(until=5 * L / R, step=L / R / 1000, method="trapezoidal", start="rest",
                                    record=["i(M1)"])
    expected = V / R + (i0 - V / R) * np.exp(-res.time * R / L)
    np.testing.assert_allclose(res["i(M1)"], expected, atol=1e-5)


@pytest.mark.parametrize("nonlinear", [False, True], ids=["fixed-load", "opposing-load-and-brush-drop"])
def test_energy_balance_over_a_start_and_a_load_step(nonlinear):
    # Conservation of energy over a start from rest and a load step:
    #   electrical energy in = copper loss + brush loss + friction loss
    #                          + load work + L i^2/2 + J w^2/2 (at the end).
    # Each power is integrated with the trapezoid rule over the run's own
    # samples. The trapezoidal method keeps this balance to O(h^2): about
    # (h/tau_e)^2/12 = 3.3e-5 of the energy at h = 10 us, tau_e = 0.5 ms (the
    # fastest time scale); the same order bounds the quadrature error.
    vb, band, h = 1.5, 0.01, 1e-5
    load = "torque=step(from=0 N*m, to=0.1 N*m, at=15 ms)" + ("" if nonlinear else " direction=fixed")
    extra = f"brush-drop={vb} V brush-band={band} A" if nonlinear else ""
    res = mna.parse(motor_text(load=load, machine_extra=extra)).transient(
        until=0.04, step=h, method="trapezoidal", start="rest",
        record=["p(M1)", "i(M1)", "w(rotor)", "p(B1)", "p(T1)"])
    t, i, w = res.time, res["i(M1)"], res["w(rotor)"]
    energy_in = np.trapezoid(res["p(M1)"], t)
    # the brush drop's documented model: Vb * s(i/band), s the cubic smooth sign
    c = np.clip(i / band, -1.0, 1.0)
    brush = vb * c * (1.5 - 0.5 * c * c) * i if nonlinear else np.zeros_like(i)
    losses = np.trapezoid(R * i**2 + brush + res["p(B1)"] + res["p(T1)"], t)
    stored = 0.5 * L * i[-1] ** 2 + 0.5 * J * w[-1] ** 2
    assert energy_in == pytest.approx(losses + stored, rel=(h / TAU_E) ** 2 / 12)
    assert np.trapezoid(res["p(T1)"], t) > 0.01 * energy_in  # the load did real work
