"""Linear circuits against closed forms, every integration method on every problem.

Reference problems are defined once (closed forms of Nilsson & Riedel, *Electric Circuits*, ch. 7-8, evaluated for invented values)
and each is run with each method at a fixed step. Tolerances: the global
error of a p-th order method is about C*(h/tau)^p times the signal scale
with C of order 1 (standard numerical analysis of linear multistep methods,
e.g. Hairer & Wanner II, from memory); each assertion allows a factor of
several above that estimate and would still catch a wrong stamp or sign,
which produces errors of order 1.
"""

import math

import numpy as np
import pytest

import mna

from helpers import rel_err

METHODS = {
    # method: (order, error constant used in the bound)
    "backward-euler": 1,
    "trapezoidal": 2,
    "bdf2": 2,
}


def bound(order, h_over_tau):
    """Error bound for a run: 5 * (h/tau)^p, plus (h/tau)^2 for the backward-Euler
    steps every method takes right after the start; floor 1e-9 (roundoff)."""
    return max(5.0 * h_over_tau ** order + h_over_tau ** 2, 1e-9)


# --- RL step -----------------------------------------------------------------
# Nilsson & Riedel ch. 7; Alexander & Sadiku ch. 7: i = (V/R)(1 - exp(-t/tau)),
# tau = L/R, vL = V exp(-t/tau). V = 10 V, R = 5 ohm, L = 10 mH.

RL = """
voltage-source V1 in -> gnd step(from=0 V, to=10 V, at=0 s)
resistor R1 in -> x 5 ohm
inductor L1 x -> gnd 10 mH
"""


@pytest.mark.parametrize("method", METHODS)
def test_rl_step(method):
    V, R, L = 10.0, 5.0, 10e-3
    tau, h = L / R, 2e-6
    res = mna.parse(RL).transient(until=3 * tau, step=h, method=method)
    t = res.time
    assert rel_err(res["i(L1)"], V / R * (1 - np.exp(-t / tau))) < bound(METHODS[method], h / tau)
    assert rel_err(res["v(x)"][1:], V * np.exp(-t[1:] / tau)) < bound(METHODS[method], h / tau)
    # The RL closed form (Nilsson & Riedel, *Electric Circuits*, ch. 7) evaluated: i(1 ms) = 0.786939 A, i(2 ms) = 1.264241 A.
    assert res.at("i(L1)", 1e-3) == pytest.approx(V / R * (1 - math.exp(-1e-3 / tau)), rel=1e-2)


# --- RC step -------------------------------------------------------------------
# Nilsson & Riedel ch. 7: vC = V(1 - exp(-t/RC)). 5 V, 1 kohm, 1 uF.

RC = """
voltage-source V1 in -> gnd step(from=0 V, to=5 V, at=0 s)
resistor R1 in -> x 1 kohm
capacitor C1 x -> gnd 1 uF
"""


@pytest.mark.parametrize("method", METHODS)
def test_rc_step(method):
    V, tau, h = 5.0, 1e-3, 2e-6
    res = mna.parse(RC).transient(until=5 * tau, step=h, method=method)
    t = res.time
    assert rel_err(res["v(x)"], V * (1 - np.exp(-t / tau))) < bound(METHODS[method], h / tau)
    # Capacitor current C dv/dt = (V/R) exp(-t/tau), from the integration formula.
    assert rel_err(res["i(C1)"][2:], V / 1e3 * np.exp(-t[2:] / tau), scale=V / 1e3) < bound(
        METHODS[method], h / tau) * 2


# --- Series RLC step ---------------------------------------------------------------
# Nilsson & Riedel ch. 8; Alexander & Sadiku ch. 8. V = 1 V, L = 1 mH, C = 1 uF.
# alpha = R/2L, w0 = 1/sqrt(LC); vC(0) = 0, i(0) = 0.

def rlc_exact(R, t, V=1.0, L=1e-3, C=1e-6):
    a, w0 = R / (2 * L), 1 / math.sqrt(L * C)
    if abs(a - w0) < 1e-9 * w0:  # critically damped
        vc = V * (1 - (1 + a * t) * np.exp(-a * t))
        i = V / L * t * np.exp(-a * t)
    elif a < w0:  # underdamped
        wd = math.sqrt(w0 ** 2 - a ** 2)
        vc = V * (1 - np.exp(-a * t) * (np.cos(wd * t) + a / wd * np.sin(wd * t)))
        i = V / (wd * L) * np.exp(-a * t) * np.sin(wd * t)
    else:  # overdamped
        r = math.sqrt(a ** 2 - w0 ** 2)
        s1, s2 = -a + r, -a - r
        vc = V * (1 + (s2 * np.exp(s1 * t) - s1 * np.exp(s2 * t)) / (s1 - s2))
        i = V * (np.exp(s1 * t) - np.exp(s2 * t)) / (L * (s1 - s2))
    return vc, i


CRITICAL_R = 2 * math.sqrt(1e-3 / 1e-6)  # 63.245553 ohm


@pytest.mark.parametrize("R", [10.0, CRITICAL_R, 200.0], ids=["underdamped", "critical", "overdamped"])
@pytest.mark.parametrize("method", METHODS)
def test_series_rlc_step(method, R):
    h = 0.05e-6
    c = mna.parse(f"""
        voltage-source V1 in -> gnd step(from=0 V, to=1 V, at=0 s)
        resistor R1 in -> a {R!r} ohm
        inductor L1 a -> b 1 mH
        capacitor C1 b -> gnd 1 uF
        """.replace("\n        ", "\n"))
    res = c.transient(until=400e-6, step=h, method=method)
    vc, i = rlc_exact(R, res.time)
    # The fastest natural frequency sets the error: w0, or the fast real pole
    # a + sqrt(a^2 - w0^2) when overdamped.
    a, w0 = R / 2e-3, 1 / math.sqrt(1e-3 * 1e-6)
    fastest = a + math.sqrt(a * a - w0 * w0) if a > w0 else w0
    tol = bound(METHODS[method], fastest * h)
    assert rel_err(res["v(b)"], vc, scale=1.0) < tol
    assert rel_err(res["i(L1)"], i) < tol


def test_rlc_reference_values():
    # The series RLC closed form (Nilsson & Riedel, *Electric Circuits*, ch. 8) evaluated: R = 10 ohm, vC(50 us) = 0.86786279 V, i(50 us) = 24.94044971 mA.
    vc, i = rlc_exact(10.0, np.array([50e-6]))
    assert vc[0] == pytest.approx(0.86786279, abs=1e-8)
    assert i[0] == pytest.approx(24.94044971e-3, abs=1e-10)
    res = mna.parse("""
voltage-source V1 in -> gnd step(from=0 V, to=1 V, at=0 s)
resistor R1 in -> a 10 ohm
inductor L1 a -> b 1 mH
capacitor C1 b -> gnd 1 uF
""").transient(until=100e-6, step=0.01e-6, method="trapezoidal")
    assert res.at("v(b)", 50e-6) == pytest.approx(0.86786279, abs=2e-5)
    assert res.at("i(L1)", 50e-6) == pytest.approx(24.94044971e-3, abs=2e-6)


# --- RL driven by a sine from t = 0 ---------------------------------------------------
# Alexander & Sadiku ch. 9/10 (phasors) with the transient term:
# i = Im[sin(wt - phi) + sin(phi) exp(-t/tau)], Im = Vm/sqrt(R^2 + w^2 L^2), phi = atan(wL/R).

@pytest.mark.parametrize("method", ["trapezoidal", "bdf2"])
def test_rl_sine_amplitude_and_phase(method):
    Vm, f, R, L = 10.0, 50.0, 10.0, 50e-3
    w = 2 * math.pi * f
    Im = Vm / math.sqrt(R ** 2 + (w * L) ** 2)
    phi = math.atan(w * L / R)
    res = mna.parse(f"""
voltage-source V1 in -> gnd sine(amplitude={Vm} V, frequency={f} Hz)
resistor R1 in -> x {R} ohm
inductor L1 x -> gnd {L} H
""").transient(until=0.1, step=10e-6, method=method, start="rest")
    t = res.time
    exact = Im * (np.sin(w * t - phi) + math.sin(phi) * np.exp(-t * R / L))
    assert rel_err(res["i(L1)"], exact) < 1e-4  # 5*(w*h)^2 = 2e-5
    # Steady state over the last period: amplitude Im = 0.537029 A, lag 57.5184 deg.
    last = t > 0.08
    assert np.max(res["i(L1)"][last]) == pytest.approx(Im, rel=1e-4)
    t_peak = t[last][np.argmax(res["i(L1)"][last])]
    lag = (w * t_peak - math.pi / 2) % (2 * math.pi)
    assert lag == pytest.approx(phi, abs=w * 10e-6)  # within one step of phase


# --- A charged inductor dumping into a capacitor --------------------------------------
# Nilsson & Riedel, *Electric Circuits*, ch. 8: vC = I0*Z0*sin(t/sqrt(LC)), Z0 = sqrt(L/C); the peak I0*Z0 at
# (pi/2)*sqrt(LC); energy balance 1/2 L I0^2 = 1/2 C Vpk^2. I0 = 1 A, 100 uH, 10 nF.

def test_inductor_dumps_into_capacitor():
    I0, L, C = 1.0, 100e-6, 10e-9
    Z0, T = math.sqrt(L / C), math.sqrt(L * C)
    res = mna.parse("""
inductor L1 a -> gnd 100 uH initial=1 A
capacitor C1 a -> gnd 10 nF
""").transient(until=3 * T, step=T / 2000, method="trapezoidal", start="rest")
    v = -res["v(a)"]  # the inductor current leaves node a, so v(a) swings negative
    assert np.max(v) == pytest.approx(I0 * Z0, rel=1e-5)
    assert res.time[np.argmax(v)] == pytest.approx(math.pi / 2 * T, abs=T / 2000)
    assert 0.5 * C * np.max(v) ** 2 == pytest.approx(0.5 * L * I0 ** 2, rel=2e-5)


# --- DC operating points ----------------------------------------------------------------

def test_dc_divider_with_inductor_shorted_and_capacitor_open():
    # Ohm's and Kirchhoff's laws: the inductor is a short (its winding
    # resistance remains), the capacitor open. 12 V over 1 k + (2 k || 3 k via L).
    op = mna.parse("""
voltage-source V1 in -> gnd 12 V
resistor R1 in -> mid 1 kohm
inductor L1 mid -> x 10 mH resistance=500 ohm
resistor R2 x -> gnd 2 kohm
resistor R3 mid -> gnd 3 kohm
capacitor C1 mid -> gnd 1 uF
capacitor C2 x -> gnd 1 uF
simulate dc
""").dc()
    r_branch = 500 + 2000
    r_par = r_branch * 3000 / (r_branch + 3000)
    v_mid = 12 * r_par / (1000 + r_par)
    assert op["v(mid)"] == pytest.approx(v_mid, rel=1e-12)
    assert op["i(L1)"] == pytest.approx(v_mid / r_branch, rel=1e-12)
    assert op["i(C1)"] == 0.0
    assert op["i(V1)"] == pytest.approx(-(12 - v_mid) / 1000, rel=1e-12)


def test_dc_bridge_against_nodal_analysis():
    # A Wheatstone bridge with a current source and an inductor branch,
    # against nodal equations G v = I solved with numpy (independent of mna).
    op = mna.parse("""
current-source I1 gnd -> a 2 A
resistor R1 a -> b 10 ohm
resistor R2 a -> c 20 ohm
resistor R3 b -> gnd 30 ohm
inductor L1 c -> gnd 1 mH resistance=40 ohm
resistor R5 b -> c 50 ohm
""").dc()
    g = lambda r: 1.0 / r  # noqa: E731
    G = np.array([
        [g(10) + g(20), -g(10), -g(20)],
        [-g(10), g(10) + g(30) + g(50), -g(50)],
        [-g(20), -g(50), g(20) + g(40) + g(50)],
    ])
    v = np.linalg.solve(G, np.array([2.0, 0.0, 0.0]))
    assert [op["v(a)"], op["v(b)"], op["v(c)"]] == pytest.approx(v.tolist(), rel=1e-12)
    assert op["i(L1)"] == pytest.approx(v[2] / 40, rel=1e-12)


def test_node_reached_only_through_capacitors_gets_a_leak_and_a_warning():
    c = mna.parse("""
voltage-source V1 in -> gnd 5 V
capacitor C1 in -> mid 1 uF
capacitor C2 mid -> gnd 1 uF
""")
    op = c.dc()
    assert op["v(mid)"] == pytest.approx(0.0, abs=1e-9)
    assert any("mid" in w for w in op.warnings)
