"""Motor start-up benchmark: steps per second of the transient engine.

Cases (the DC machine of Franklin, Powell & Emami-Naeini, *Feedback Control of Dynamic Systems*, ch. 2, from memory; an example machine, "case A", started from rest on 12 V):

1. linear: motor + inertia + friction, 0.5 s at a 10 us step (50,000 steps)
   -- no brush drop, so the run takes the engine's linear path (one
   factorization for the whole run);
2. nonlinear: the same with 1.5 V of brush drop and a constant load torque
   that opposes rotation (both smoothed signs, Newton's method per step);
3. coil generator: a single coil driven at 50 Hz into a resistor, 10,000 steps
   (a Jacobian that changes every iteration).

Baselines, run in the same process on the same circuit:

- a bare loop of ``scipy.sparse.linalg.splu(...).solve`` over the same
  backward-Euler steps, with nothing else per step (the floor for case 1);
- ``scipy.integrate.solve_ivp`` (Radau, rtol 1e-6) on the motor's two-state
  ODE over the same 0.5 s.

Prints figures; asserts nothing about time. Run: ``python benchmarks/bench_motor.py``.
"""

from __future__ import annotations

import time

import numpy as np
import scipy.sparse.linalg as spla
from scipy.integrate import solve_ivp

import mna
from mna.analyses.common import prepare

V, R, L, K, J, B = 12.0, 1.0, 0.5e-3, 0.05, 1e-4, 1e-5
UNTIL, STEP = 0.5, 10e-6

MOTOR = f"""
voltage-source V1 sup -> gnd {V} V
dc-machine M1 sup -> gnd shaft=rotor resistance={R} ohm inductance={L} H constant={K} V*s/rad {{extra}}
inertia J1 rotor {J} kg*m^2
friction B1 rotor -> frame {B} N*m*s/rad
{{load}}
record i(M1), w(rotor)
"""

COIL = """
speed-source W1 rotor 314.159 rad/s
coil-generator G1 a -> gnd shaft=rotor turns=100 field=0.5 T area=0.01 m^2 resistance=1 ohm inductance=5 mH
resistor RL a -> gnd 10 ohm
record i(G1), torque(W1)
"""


def best_of(fn, repeat: int = 3) -> float:
    """Shortest wall time (s) of ``repeat`` calls."""
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def engine(text: str, until: float, method: str = "backward-euler"):
    circuit = mna.parse(text)
    prepare(circuit)  # compile outside the timing, as a sweep would
    result = {}

    def run():
        result["res"] = circuit.transient(until=until, step=STEP, method=method, start="rest")

    seconds = best_of(run)
    return seconds, result["res"].statistics


def bare_splu_loop(text: str, steps: int) -> float:
    """Backward Euler on the compiled system with nothing but a triangular solve per step."""
    system, _ = prepare(mna.parse(text))
    alpha = 1.0 / STEP
    lu = spla.splu(system.matrix(system.matrix_data(alpha)).tocsc())
    s = system.s(0.0)
    C = system.C

    def run():
        x = np.zeros(system.n)
        for _ in range(steps):
            x = lu.solve(s + alpha * (C @ x))

    return best_of(run)


def ode_reference() -> float:
    def f(t, y):
        i, w = y
        return [(V - R * i - K * w) / L, (K * i - B * w) / J]

    return best_of(lambda: solve_ivp(f, (0.0, UNTIL), [0.0, 0.0], method="Radau", rtol=1e-6, atol=1e-9))


def main() -> None:
    steps = int(round(UNTIL / STEP))
    linear = MOTOR.format(extra="", load="")
    nonlinear = MOTOR.format(extra="brush-drop=1.5 V", load="load T1 rotor torque=0.05 N*m")
    print(f"motor start-up, {UNTIL:g} s at {STEP * 1e6:g} us ({steps} steps), best of 3")

    t_lin, st_lin = engine(linear, UNTIL)
    t_bare = bare_splu_loop(linear, steps)
    print(f"  linear motor     {t_lin:7.3f} s  {st_lin['steps'] / t_lin:9.0f} steps/s  "
          f"factorizations {st_lin['factorizations']}  "
          f"({t_lin / t_bare:.1f}x a bare splu loop: {t_bare:.3f} s, {steps / t_bare:.0f} steps/s)")

    t_nl, st_nl = engine(nonlinear, UNTIL)
    print(f"  nonlinear motor  {t_nl:7.3f} s  {st_nl['steps'] / t_nl:9.0f} steps/s  "
          f"Newton iterations/step {st_nl['newton_iterations'] / st_nl['steps']:.2f}  "
          f"factorizations {st_nl['factorizations']}")

    coil_until = 10_000 * STEP
    t_coil, st_coil = engine(COIL, coil_until)
    print(f"  coil generator   {t_coil:7.3f} s  {st_coil['steps'] / t_coil:9.0f} steps/s  "
          f"({st_coil['steps']} steps; Newton iterations/step "
          f"{st_coil['newton_iterations'] / st_coil['steps']:.2f}, factorizations {st_coil['factorizations']})")

    t_ode = ode_reference()
    print(f"  solve_ivp Radau (rtol 1e-6) on the two-state ODE: {t_ode:.3f} s "
          f"(the linear engine run is {t_lin / t_ode:.1f}x that, at {steps} fixed steps)")


if __name__ == "__main__":
    main()
