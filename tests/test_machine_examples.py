"""The example studies in circuits/ for motors and generators, against references.

Each example is run for a short stretch with its own method and step (the
full runs belong to ``mna run`` and ``mna check circuits/``) and compared
with a reference computed here from the machine's equations:

- DC machine (Franklin, Powell & Emami-Naeini, *Feedback Control of Dynamic
  Systems*, ch. 2, from memory): L di/dt = v - R i - k w - Vb s(i),
  J dw/dt = k i - B w - T_load, solved with ``scipy.integrate.solve_ivp``
  (Radau, rtol 1e-10). Gears are ideal: speeds scale by the ratio, inertia,
  friction and torque are referred by it (Franklin et al. ch. 2).
- Single coil in a uniform field (Halliday, Resnick & Walker, *Fundamentals
  of Physics*, induction chapter): e = N B A w sin(wt); driving an R-L load
  in the steady state, P = E^2 R_lamp / (2 |Z|^2) (phasors, Alexander &
  Sadiku ch. 11).

The smooth sign s(u) of the brush drop and the belt torque is the model's
documented one (grammar/README.md, ``load``): 1.5 u - 0.5 u^3 inside the
band, the sign outside; it matters only in the first milliamps or rad/s.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import mna

CIRCUITS = Path(__file__).resolve().parents[1] / "circuits"
RPM = 2 * math.pi / 60


def s(u: float) -> float:
    u = min(max(u, -1.0), 1.0)
    return 1.5 * u - 0.5 * u**3


def run(name: str, until: float, record: list[str]):
    circuit = mna.load(CIRCUITS / f"{name}.mna")
    settings = circuit.analyses[0].settings
    res = circuit.transient(until=until, step=settings["step"], method=settings["method"],
                            start=settings["start"], record=record)
    return circuit, res


def reference(ode, until: float, y0: list[float], edges: list[float] = ()):
    """solve_ivp across the source edges (each a new start), dense in between."""
    bounds = [0.0, *[e for e in edges if 0 < e < until], until]
    pieces, y = [], y0
    for a, b in zip(bounds[:-1], bounds[1:]):
        sol = solve_ivp(ode, (a, b), y, method="Radau", rtol=1e-10, atol=1e-12, dense_output=True)
        pieces.append((a, b, sol))
        y = sol.y[:, -1]

    def at(t):
        t = np.atleast_1d(t)
        out = np.empty((len(y0), t.size))
        for a, b, sol in pieces:
            mask = (t >= a) & (t <= b)
            out[:, mask] = sol.sol(t[mask])
        return out

    return at


def test_conveyor_start_against_the_machine_ode():
    # Drive A, across the line: 24 V steps on at 10 ms through the 40 mohm cable.
    circuit, res = run("conveyor_motor_start", 0.06, ["i(MA)", "w(motorA)"])
    m = circuit.elements["MA"]
    # The rating data give R = V/I_stall = 0.6 ohm and k = V/w_nl (no
    # no-load current): check the derivation, then use it.
    r, k = 24 / 40, 24 / (3000 * RPM)
    assert m.resistance == pytest.approx(r, rel=1e-12)
    assert m.constant == pytest.approx(k, rel=1e-12)
    n, jm, jd, bd, tbelt, band = 15.0, 1.5e-4, 0.08, 0.02, 2.5, 0.1
    j_eq, b_eq = jm + jd / n**2, bd / n**2

    def ode(t, y):
        i, w = y
        v = 24.0 if t > 10e-3 else 0.0
        return [(v - (r + 0.04) * i - k * w) / 1.5e-3,
                (k * i - b_eq * w - tbelt / n * s(w / n / band)) / j_eq]

    ref = reference(ode, 0.06, [0.0, 0.0], edges=[10e-3])
    i_ref, w_ref = ref(res.time)
    # Trapezoidal at 50 us against tau_e = L/R = 2.3 ms: (h/tau)^2/12 = 4e-5 of
    # each change, plus the backward-Euler restart at the edge, (h/tau)^2/2 =
    # 2.4e-4 of the inrush: 0.5 % of the peak covers both; a torque constant
    # off by 10 % moves the peak by more than 3 %.
    peak = np.max(i_ref)
    assert np.max(np.abs(res["i(MA)"] - i_ref)) < 5e-3 * peak
    assert np.max(np.abs(res["w(motorA)"] - w_ref)) < 5e-3 * np.max(w_ref)
    assert np.max(res["i(MA)"]) == pytest.approx(peak, rel=5e-3)


def test_fan_gearbox_start_against_the_machine_ode():
    circuit, res = run("fan_gearbox", 0.05, ["i(M1)", "w(motor)", "w(fan)"])
    r, l, k, vb = 0.4 + 0.03, 0.8e-3, 0.028, 1.5
    ratio = 0.5  # w_motor / w_fan: the fan turns twice as fast
    c_fan = 0.065 / (6000 * RPM) ** 2  # N*m*s^2: fan-torque / fan-speed^2
    j_eq = 4e-5 + 6e-5 / ratio**2  # fan inertia referred to the motor

    def ode(t, y):
        i, w = y
        wf = w / ratio
        v = 12.0 if t > 5e-3 else 0.0
        load = (c_fan * wf * abs(wf) + 2e-6 * wf) / ratio  # referred torque
        return [(v - r * i - vb * s(i / 0.01) - k * w) / l, (k * i - load) / j_eq]

    ref = reference(ode, 0.05, [0.0, 0.0], edges=[5e-3])
    i_ref, w_ref = ref(res.time)
    # Trapezoidal at 100 us against tau_e = L/R = 1.9 ms: (h/tau)^2/12 =
    # 2.3e-4, the restart at the edge (h/tau)^2/2 = 1.4e-3 of the inrush.
    assert np.max(np.abs(res["i(M1)"] - i_ref)) < 5e-3 * np.max(i_ref)
    assert np.max(np.abs(res["w(motor)"] - w_ref)) < 5e-3 * np.max(w_ref)
    # The gear: the fan turns at twice the motor speed at every instant.
    np.testing.assert_allclose(res["w(fan)"], 2 * res["w(motor)"], rtol=1e-9, atol=1e-9)


def test_hand_crank_charge_against_the_generator_ode():
    circuit, res = run("hand_crank_generator", 20.0, ["v(bank)", "i(Rcharge)"])
    k, r, l, vb, c = 0.04, 2.4 + 2.2, 1e-3, 1.0, 10.0

    def speed(t):  # the rotor, 20x the crank's ramp to 90 rpm in 0.5 s
        return 20 * 90 * RPM * min(t / 0.5, 1.0)

    def ode(t, y):
        i, v = y
        return [(k * speed(t) - r * i - vb * s(i / 0.01) - v) / l, i / c]

    ref = reference(ode, 20.0, [0.0, 0.0], edges=[0.5])
    v_ref = ref(res.time)[1]
    # BDF2 at 10 ms on the charging mode RC = 46 s: (2/9)(h/RC)^3 per step is
    # negligible; the fast electrical mode (L/R = 0.2 ms, far below the step)
    # is followed quasi-statically by the L-stable method, up to h*L/R^2 times
    # the current's rate: 1e-3 of the bank voltage covers it. A brush drop
    # left out would add 1 V x (1 - exp(-20/46)) = 0.35 V, 30 %.
    assert np.max(np.abs(res["v(bank)"] - v_ref)) < 1e-3 * np.max(v_ref)


def test_alternator_lamp_power_against_the_phasor_steady_state():
    circuit, res = run("coil_alternator_lamp", 0.2, ["p(Lamp)", "emf(G1)"])
    n, b, area, w = 100, 0.5, 40e-4, 1500 * RPM
    e = n * b * area * w  # peak EMF (Halliday et al.), 31.4 V
    z = complex(1.5 + 12.0, w * 5e-3)  # coil resistance + lamp, coil inductance
    p_lamp = e**2 * 12.0 / (2 * abs(z) ** 2)
    # Mean over the last three whole periods (period 40 ms: 80-200 ms; the
    # electrical transient, L/R = 0.37 ms, is long gone).
    period = 2 * math.pi / w
    window = res.time >= 0.2 - 3 * period - 1e-12
    t, p = res.time[window], res["p(Lamp)"][window]
    mean = np.trapezoid(p, t) / (t[-1] - t[0])
    # Trapezoidal at 100 us, w h = 0.016: amplitude error (w h)^2/12 = 2e-5;
    # the trapezoid mean of sin^2 on 400 samples a period is exact to 1e-6.
    # Half the flux (a factor-of-two bug) moves it 75 %.
    assert mean == pytest.approx(p_lamp, rel=1e-3)
    assert np.max(res["emf(G1)"]) == pytest.approx(e, rel=1e-3)
