"""Newton's Jacobian reuse: kept while the iteration contracts, refreshed when it does not.

Sources:
- Simplified Newton with a convergence-rate test (the ratio of successive
  update norms, and the remaining error ``theta/(1 - theta)*|dx|``):
  Hairer & Wanner, *Solving Ordinary Differential Equations II*, section
  IV.8 (from memory).
- The reference for the avalanche case is scipy's ``solve_ivp`` (Radau) on
  the two state equations of the circuit written out here by hand: KVL
  around the coil, KCL at the drain (capacitor, open switch, junction).
- The junction law (Shockley with a reverse-breakdown exponential, datasheet
  symbols) as documented in ``mna/elements/semiconductors.py``; written
  out again below independently of the engine's kernel.

The regression this guards: an earlier attempt at Jacobian reuse trusted a
first update on the rate of an earlier step, and when the MOSFET's body
diode went into avalanche it returned a drain power off by 1e24 W.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import mna
from mna.analyses.common import prepare
from mna.runstate import DiscreteStates
from mna.solver import Factorizer, newton

CIRCUITS = Path(__file__).resolve().parent.parent / "circuits"

K_BOLTZMANN = 1.380649e-23  # J/K, exact (SI 2019)
Q_ELECTRON = 1.602176634e-19  # C, exact (SI 2019)
VT = K_BOLTZMANN * 298.15 / Q_ELECTRON

# circuits/valve_no_protection.mna: 60 mH / 24 ohm coil on 12 V, low-side
# switch (50 mohm on, 10 Mohm off) opened at 1 ms, body diode with 200 pF
# and a 70 V / 10 mA avalanche knee (saturation current 1e-14 A, n = 1).
L, R, V, RON, GOFF, C = 60e-3, 24.0, 12.0, 0.05, 1e-7, 200e-12
IS, VBR, IBR = 1e-14, 70.0, 10e-3
T_OPEN, T_END = 1e-3, 1.45e-3  # the coil current reaches zero near 1.47 ms


def junction(v: float) -> tuple[float, float]:
    """Junction current (A, anode to cathode) and conductance (S) at v (V)."""
    e_fwd = math.exp(min(v / VT, 80.0))
    e_rev = math.exp(min(-(v + VBR) / VT, 80.0))
    i = IS * (e_fwd - 1.0) - IBR * (e_rev - math.exp(-VBR / VT)) + 1e-12 * v
    return i, IS / VT * e_fwd + IBR / VT * e_rev + 1e-12


@pytest.fixture(scope="module")
def reference():
    """Coil current and drain voltage after the switch opens, by solve_ivp."""

    def rhs(t, y):
        i, v = y  # coil current (A), drain potential (V); the diode is gnd -> drain
        return [(V - R * i - v) / L, (i - GOFF * v + junction(-v)[0]) / C]

    def jac(t, y):
        return [[-R / L, -1.0 / L], [1.0 / C, (-GOFF - junction(-y[1])[1]) / C]]

    i0 = V / (R + RON)
    sol = solve_ivp(rhs, (T_OPEN, T_END), [i0, RON * i0], method="Radau", rtol=1e-9,
                    atol=[1e-12, 1e-9], jac=jac, dense_output=True)
    assert sol.success
    t = np.linspace(T_OPEN, T_END, 45001)
    i, v = sol.sol(t)
    power = np.array([-vk * junction(-vk)[0] for vk in v])  # into the diode, W
    return sol, float(v.max()), float(power.max()), float(np.trapezoid(power, t))


@pytest.mark.parametrize("method, current_tol", [
    # Backward Euler is first order: at a local tolerance of 1e-4 its global
    # error over the ~500 steps of the ramp stays below 2 mA (0.4 % of the
    # 0.5 A start); a factor-2 or sign error is 100 mA or more.
    ("backward-euler", 2e-3),
    # Trapezoidal is second order: ten times tighter.
    ("trapezoidal", 2e-4),
])
def test_coil_switched_off_into_avalanche_against_solve_ivp(reference, method, current_tol):
    sol, v_peak, p_peak, energy = reference
    c = mna.parse((CIRCUITS / "valve_no_protection.mna").read_text())
    res = c.transient(until=T_END, method=method, max_step=20e-6, tolerance=1e-4)
    t = res.time
    for when in (1.1e-3, 1.2e-3, 1.3e-3, 1.4e-3):
        assert np.interp(when, t, res["i(Lvalve)"]) == pytest.approx(sol.sol(when)[0], abs=current_tol)
    # The clamp: 70 V plus Vt*ln(0.5 A / 10 mA) = 70.10 V; the knee's slope is
    # 26 mV per factor e of current, so 0.05 V is a 7 % error in the current.
    assert res["v(drain)"].max() == pytest.approx(v_peak, abs=0.05)
    power = res["p(Dbody)"]
    # The peak power is 70.1 V * 0.5 A, once: 2 % covers the sampling of the
    # 28 ns edge; the regression was 1e24 W.
    assert np.max(np.abs(power)) == pytest.approx(p_peak, rel=0.02)
    after = t >= T_OPEN
    # Avalanche energy (about 8 mJ): 2 % covers the first-order method's
    # current error above; a missed clamp or doubled power is far outside.
    assert np.trapezoid(power[after], t[after]) == pytest.approx(energy, rel=0.02)


def _valve_after_opening():
    system, _ = prepare(mna.parse((CIRCUITS / "valve_no_protection.mna").read_text()))
    x = np.zeros(system.n)
    i0 = V / (R + RON)
    x[system.node_index["bus"]] = V
    x[system.node_index["drain"]] = RON * i0
    x[system.own_index[("Lvalve", "i")]] = i0
    x[system.own_index[("Vsupply", "i")]] = -i0
    return system, x


def test_kept_jacobian_through_the_avalanche_onset_matches_fresh_newton():
    # Backward-Euler steps of 2 ns after the switch opens: the drain rises at
    # i/C = 2.5 V/ns, reaches the 70 V knee after about 14 steps, and the
    # diode's conductance jumps from 1e-12 S to 20 S. Newton with a kept
    # Jacobian must give, at every step, the point Newton with a fresh
    # Jacobian at every iterate gives (both to the Newton tolerance: 1e-6
    # relative plus 1 uV / 1 pA; 1e-4 V and 1e-7 A leave room for both).
    system, x_kept = _valve_after_opening()
    x_fresh = x_kept.copy()
    h, t = 2e-9, T_OPEN
    states = DiscreteStates(system, T_OPEN * 1.001)  # the switch open
    kept = Factorizer(system)
    drain = system.node_index["drain"]
    steps = 40
    for _ in range(steps):
        t += h
        r1 = newton(system, kept, x_kept, t, 1 / h, -system.charges(x_kept) / h, states=states)
        r2 = newton(system, Factorizer(system), x_fresh, t, 1 / h, -system.charges(x_fresh) / h,
                    states=states)
        assert r1.converged and r2.converged
        x_kept, x_fresh = r1.x, r2.x
        np.testing.assert_allclose(x_kept[drain], x_fresh[drain], atol=1e-4)
        np.testing.assert_allclose(x_kept, x_fresh, atol=1e-4)
    assert x_kept[drain] == pytest.approx(70.1, abs=0.1)  # clamped in avalanche
    assert kept.factorizations < steps  # the Jacobian was kept on some steps


def test_a_kept_jacobian_costs_no_factorization_on_the_next_alike_step():
    # The coil of circuits/valve_no_protection.mna conducting through the
    # closed switch, two backward-Euler steps of 1 us from the steady state:
    # the second reuses the first's LU (same step, same switch states).
    system, x = _valve_after_opening()
    states = DiscreteStates(system, 0.0)  # the switch closed
    fz = Factorizer(system)
    h = 1e-6
    first = newton(system, fz, x, 1e-6, 1 / h, -system.charges(x) / h, states=states)
    assert first.converged
    made = fz.factorizations
    second = newton(system, fz, first.x, 2e-6, 1 / h, -system.charges(first.x) / h, states=states)
    assert second.converged and fz.factorizations == made
    # Steady state: the coil current stays V / (R + Ron) to the tolerance.
    assert second.x[system.own_index[("Lvalve", "i")]] == pytest.approx(V / (R + RON), rel=1e-6)
