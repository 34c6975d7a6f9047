"""Closed-form checks of capabilities that had none: error control, tolerance
floors, coupled-winding energy, a loaded transformer's input impedance, the
sparse path, a motor on a chopper.

Every test sets its method and tolerances explicitly, so a change of the
default method does not change what it checks.

Sources:
- RC step: Nilsson & Riedel, *Electric Circuits*, ch. 7.
- Coupled inductors: Alexander & Sadiku, *Fundamentals of Electric
  Circuits*, ch. 13: stored energy 1/2 L1 i1^2 + 1/2 L2 i2^2 + M i1 i2;
  phasor mesh equations of coupled windings; reflected impedance.
- R-2R ladder: each node is half the one before (Thevenin reduction from the
  far end; e.g. Horowitz & Hill, *The Art of Electronics*, ch. on converters,
  from memory).
- Permanent-magnet DC motor: Franklin, Powell & Emami-Naeini, *Feedback
  Control of Dynamic Systems*, ch. 2 (from memory): L di/dt = v - R i - k w,
  J dw/dt = k i - B w. A linear ODE between switching instants, solved exactly
  interval by interval with the matrix exponential (scipy.linalg.expm).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.linalg import expm

import mna
from mna.analyses.common import prepare
from mna.system import DENSE_LIMIT

RC = ("voltage-source V1 in -> gnd 10 V\n"
      "resistor R1 in -> out 1 kohm\n"
      "capacitor C1 out -> gnd 1 uF initial=0 V\n")
TAU = 1e-3  # s


def rc_error(res) -> float:
    exact = 10.0 * (1.0 - np.exp(-res.time / TAU))
    return float(np.max(np.abs(res["v(out)"] - exact)))


# --------------------------------------------------------------------------
# Error control


def test_backward_euler_under_error_control_follows_the_curved_closed_form():
    # RC charging from rest, v = 10 V (1 - exp(-t/tau)), every step curved.
    # Local error per step (h^2/2)|v''| is held at tolerance x 10 V (the
    # largest charge reached); on this decaying mode each local error is
    # damped afterwards, so the global error stays within the sum of the
    # local errors made in one time constant: tol x 10 V x (tau / h), with
    # h ~ sqrt(2 tol) tau on the tail, i.e. 10 V x sqrt(tol/2) = 2e-2 V here.
    tol = 1e-5
    res = mna.parse(RC).transient(until=5 * TAU, method="backward-euler", tolerance=tol,
                                  voltage_tolerance=1e-9, start="rest", record=["v(out)"])
    error = rc_error(res)
    assert error < 10.0 * math.sqrt(tol / 2)
    # A first-order method needs about 1/sqrt(tol) steps per time constant:
    # at 1e-5 a few hundred over five, not the handful of a loose run.
    assert 100 < res.statistics["accepted_steps"] < 5000
    # A tighter tolerance gives a smaller error, by about sqrt(10) per decade.
    tight = mna.parse(RC).transient(until=5 * TAU, method="backward-euler", tolerance=tol / 100,
                                    voltage_tolerance=1e-9, start="rest", record=["v(out)"])
    assert rc_error(tight) < error / 3


def test_voltage_tolerance_is_an_absolute_floor():
    # With a negligible relative tolerance (1e-10 of 10 V) the floor decides
    # the local error allowed per step. On a decaying mode the global error
    # is at most the local errors of about one time constant added up: the
    # floor times the steps per time constant. A second-order method's local
    # error goes as h^3, so a floor 100x smaller takes about 100^(1/3) = 4.6x
    # the steps and leaves an error about 20x smaller.
    coarse_floor, fine_floor = 1e-4, 1e-6
    runs = {floor: mna.parse(RC).transient(until=5 * TAU, method="trapezoidal", tolerance=1e-10,
                                           voltage_tolerance=floor, start="rest", record=["v(out)"])
            for floor in (coarse_floor, fine_floor)}
    for floor, res in runs.items():
        steps_per_tau = res.statistics["accepted_steps"] / 5
        assert rc_error(res) < floor * steps_per_tau
    assert rc_error(runs[fine_floor]) < rc_error(runs[coarse_floor]) / 10  # the floor sets the error
    assert runs[fine_floor].statistics["accepted_steps"] > 3 * runs[coarse_floor].statistics["accepted_steps"]


RL = ("voltage-source V1 in -> gnd 10 V\n"
      "resistor R1 in -> x 10 ohm\n"
      "inductor L1 x -> gnd 10 mH initial=0 A\n")


def test_current_tolerance_is_an_absolute_floor():
    # RL step, i = 1 A (1 - exp(-t R/L)) (Nilsson & Riedel ch. 7), tau = 1 ms;
    # the inductor's flux is the state, so current-tolerance= is its floor
    # (as above, with a negligible relative tolerance and a voltage floor that
    # never binds: no capacitor holds a voltage state here).
    def error(res):
        return float(np.max(np.abs(res["i(L1)"] - (1.0 - np.exp(-res.time / 1e-3)))))

    coarse_floor, fine_floor = 1e-5, 1e-7
    runs = {floor: mna.parse(RL).transient(until=5e-3, method="trapezoidal", tolerance=1e-10,
                                           current_tolerance=floor, voltage_tolerance=1.0,
                                           start="rest", record=["i(L1)"])
            for floor in (coarse_floor, fine_floor)}
    for floor, res in runs.items():
        assert error(res) < floor * res.statistics["accepted_steps"] / 5
    assert error(runs[fine_floor]) < error(runs[coarse_floor]) / 10
    assert runs[fine_floor].statistics["accepted_steps"] > 3 * runs[coarse_floor].statistics["accepted_steps"]


def test_a_step_below_min_step_stops_the_run_with_the_reason():
    # A 1 MHz sine through 1 ohm into 1 uF (tau = 1 us) needs steps of a few
    # ns for a 1e-9 local error; min-step=1 us cannot give them.
    text = ("voltage-source V1 a -> gnd sine(amplitude=1 V, frequency=1 MHz)\n"
            "resistor R1 a -> b 1 ohm\ncapacitor C1 b -> gnd 1 uF\n")
    with pytest.raises(mna.SimulationError, match="min-step") as info:
        mna.parse(text).transient(until=20e-6, method="backward-euler", tolerance=1e-9,
                                  voltage_tolerance=1e-12, min_step=1e-6)
    assert info.value.time is not None and 0 <= info.value.time < 20e-6


# --------------------------------------------------------------------------
# Coupled windings


def test_coupled_inductors_store_half_li_squared_plus_m_i1_i2():
    # The energy taken in by two coupled windings (the integral of v1 i1 + v2 i2)
    # is the stored energy 1/2 L1 i1^2 + 1/2 L2 i2^2 + M i1 i2 at every instant
    # (Alexander & Sadiku ch. 13). Two driven loops so that i1 i2 != 0 and the
    # M term matters (a flipped M changes it by 2 M i1 i2, here 30 % of the total).
    l1, l2, k = 10e-3, 40e-3, 0.8
    m = k * math.sqrt(l1 * l2)
    c = mna.parse(
        "voltage-source V1 in -> gnd 10 V\nresistor R1 in -> x 2 ohm\n"
        f"inductor L1 x -> gnd {l1} H\n"
        "voltage-source V2 in2 -> gnd 4 V\nresistor R2 in2 -> y 8 ohm\n"
        f"inductor L2 y -> gnd {l2} H\n"
        "coupling Core L1 L2 0.8\n"
    )
    res = c.transient(until=5e-3, step=1e-6, method="trapezoidal", start="rest",
                      record=["i(L1)", "i(L2)", "p(L1)", "p(L2)"])
    i1, i2 = res["i(L1)"], res["i(L2)"]
    stored = 0.5 * l1 * i1**2 + 0.5 * l2 * i2**2 + m * i1 * i2
    p = res["p(L1)"] + res["p(L2)"]
    taken = np.concatenate([[0.0], np.cumsum(0.5 * (p[1:] + p[:-1]) * np.diff(res.time))])
    # The trapezoidal rule conserves this quadratic energy exactly on its own
    # steps (v = L di/dt as a difference quotient, p averaged over the step);
    # the two backward-Euler start steps add (h/tau)^2-sized terms: 1e-9 J of 0.3 J.
    assert np.max(np.abs(taken - stored)) < 1e-6 * np.max(stored)
    assert np.max(np.abs(m * i1 * i2)) > 0.1 * np.max(stored)


def test_loaded_transformer_input_impedance_is_the_reflected_load():
    # A transformer with a 2 ohm load, driven by 10 V at 5 kHz: the input
    # current is V / Zin with Zin = Rp + jw L1 + (w M)^2 / (Rs + RL + jw L2)
    # (reflected impedance, Alexander & Sadiku ch. 13). The ideal-transformer
    # value n^2 RL = 50 ohm is 1.6 % off; the check is tighter.
    from mna.elements.magnetics import transformer_inductances

    n, lm, ll, rp, rs, rl, f = 5.0, 20e-3, 100e-6, 0.3, 0.02, 2.0, 5e3
    l1, l2, m = transformer_inductances(n, lm, ll)
    # The drive starts at its peak (phase 90 degrees), so the magnetising
    # flux, the integral of v, starts at its steady value (zero) and leaves
    # no slowly decaying offset (L1/Rp = 67 ms) in the current.
    c = mna.parse(
        "voltage-source V1 in -> gnd sine(amplitude=10 V, frequency=5 kHz, phase=90 deg)\n"
        f"transformer T1 in -> gnd, s -> gnd ratio={n} magnetising={lm} H leakage={ll} H "
        f"primary-resistance={rp} ohm secondary-resistance={rs} ohm\n"
        f"resistor RL s -> gnd {rl} ohm\n"
    )
    period = 1 / f
    res = c.transient(until=20 * period, step=period / 1000, method="trapezoidal", start="rest",
                      record=["i(V1)"])
    w = 2 * math.pi * f
    zin = rp + 1j * w * l1 + (w * m) ** 2 / (rs + rl + 1j * w * l2)
    window = res.time >= res.time[-1] - period
    i = res["i(V1)"][window]
    amplitude = float(np.max(i) - np.min(i)) / 2  # peak to peak: any offset left cancels
    # 1000 samples a period miss the peak by (2 pi/1000)^2/8 = 5e-6; the
    # trapezoidal amplitude error at w h = 6e-3 is below 1e-5; what is left of
    # the start-up offset changes by 0.3 % of itself over the last period.
    assert 10.0 / amplitude == pytest.approx(abs(zin), rel=1e-3)


# --------------------------------------------------------------------------
# The sparse path


def test_circuit_above_the_dense_limit_is_solved_on_the_sparse_path():
    # An R-2R ladder of 100 sections: with 2R at both ends, every node is half
    # the one before (Thevenin reduction from the far end).
    sections = 100
    lines = ["voltage-source V1 n0 -> gnd 1 V"]
    for k in range(sections):
        lines.append(f"resistor Rs{k} n{k} -> n{k + 1} 1 kohm")
        lines.append(f"resistor Rp{k} n{k + 1} -> gnd 2 kohm")
    lines[-1] = f"resistor Rp{sections - 1} n{sections} -> gnd 1 kohm"  # 2R || 2R at the far end
    # Parallel RC branches from the ladder's input: v = 1 V (1 - exp(-t/RC)).
    for k in range(20):
        lines.append(f"resistor Rc{k} n0 -> c{k} {100 * (k + 1)} ohm")
        lines.append(f"capacitor Cc{k} c{k} -> gnd 1 uF initial=0 V")
    c = mna.parse("\n".join(lines) + "\n")
    system, _ = prepare(c)
    assert system.n > DENSE_LIMIT and not system.dense
    op = c.dc()
    # Exact in the algebra; 1e-9 relative allows the LU round-off over 100 levels.
    for k in (1, 10, 50, 99):
        assert op[f"v(n{k})"] == pytest.approx(2.0**-k, rel=1e-9)
    res = c.transient(until=2e-3, step=1e-6, method="trapezoidal", start="rest",
                      record=[f"v(c{k})" for k in range(20)])
    for k in (0, 9, 19):
        tau = 100 * (k + 1) * 1e-6
        exact = 1.0 - np.exp(-res.time / tau)
        # Trapezoidal at h/tau <= 0.01: (h/tau)^2/12 ~ 1e-5 relative per unit
        # of change, plus the two backward-Euler start steps (h/tau)^2/2 = 5e-5.
        assert np.max(np.abs(res[f"v(c{k})"] - exact)) < 1e-4


# --------------------------------------------------------------------------
# A motor on a chopper


def test_motor_on_a_chopper_against_the_exact_piecewise_solution():
    # A synchronous chopper: the high switch closes for the duty D of each
    # 20 kHz period, the low switch for the rest, so the armature sees
    # V or 0 through R_on. Between edges the motor is a linear ODE x' = A x + b
    # (Franklin/Nise ch. 2), propagated exactly with the matrix exponential.
    v, r, l, k, j, b, ron, d, f = 24.0, 0.5, 0.4e-3, 0.05, 2e-5, 1e-5, 10e-3, 0.6, 20e3
    roff = 10e6
    c = mna.parse(
        f"voltage-source V1 sup -> gnd {v} V\n"
        f"switch Qh sup -> sw on={ron} ohm off={roff} ohm gate=pwm(frequency={f} Hz, duty={d})\n"
        f"switch Ql sw -> gnd on={ron} ohm off={roff} ohm "
        f"gate=pwm(frequency={f} Hz, duty={1 - d}, delay={d / f} s)\n"
        f"dc-machine M1 sw -> gnd shaft=rotor resistance={r} ohm inductance={l} H constant={k} V*s/rad\n"
        f"inertia J1 rotor {j} kg*m^2\nfriction B1 rotor -> frame {b} N*m*s/rad\n"
    )
    periods = 400  # 20 ms: through the current peak and well into the speed rise
    h = 1 / f / 50
    res = c.transient(until=periods / f, step=h, method="trapezoidal", start="rest",
                      record=["i(M1)", "w(rotor)"])

    def propagator(vs, r_path, dt):
        # State [i, w, 1]: the constant source as a third state keeps it one expm.
        a = np.array([[-(r + r_path) / l, -k / l, vs / l], [k / j, -b / j, 0.0], [0.0, 0.0, 0.0]])
        return expm(a * dt)

    # High switch on: the low one's off resistance is a 10 Mohm leak across
    # the armature, negligible (2.4 uA); likewise during the off part.
    on, off = propagator(v, ron, d / f), propagator(0.0, ron, (1 - d) / f)
    x = np.array([0.0, 0.0, 1.0])
    ends = []
    for _ in range(periods):
        x = off @ (on @ x)
        ends.append(x[:2].copy())
    i_ref, w_ref = np.array(ends).T
    t_ends = np.arange(1, periods + 1) / f
    idx = np.searchsorted(res.time, t_ends - 1e-12 / f)
    # Trapezoidal at h = 1 us against tau_e = L/(R + Ron) = 784 us:
    # (h/tau)^2/12 = 1.4e-7 per unit change, accumulated over 8,000 steps and
    # the restarts at each of 800 edges (two backward-Euler steps each,
    # (h/tau)^2/2 = 8e-7): well under 1e-3 of the peak current and speed.
    assert np.max(np.abs(res["i(M1)"][idx] - i_ref)) < 1e-3 * np.max(np.abs(i_ref))
    assert np.max(np.abs(res["w(rotor)"][idx] - w_ref)) < 1e-3 * np.max(w_ref)
    # A halved torque constant on the shaft side would halve the early speed rise.
    assert w_ref[-1] > 0.1 * v / k
