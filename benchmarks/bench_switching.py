"""Switching benchmark: 100 periods of a 100 kHz PWM drive of a coil with a freewheeling diode.

A 12 V supply drives a 1 mH / 10 ohm coil through a low-side switch gated
by pwm(100 kHz, 50 %); a diode across the coil carries its current while
the switch is open. Every period has two gate edges (events) and a diode
that turns on and off, so each step needs Newton iterations.

Printed: steps per second, Newton iterations per step, factorizations per
step, and the ratio of the engine's time per step to a bare loop in the
same process that does the least a nonlinear step can cost: one sparse LU
(scipy.sparse.linalg.splu) and one triangular solve of the same matrix.
Asserts nothing; never a pass/fail on time.

    python benchmarks/bench_switching.py [--periods 100]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import scipy.sparse.linalg as spla

import mna
from mna.analyses.common import prepare
from mna.runstate import DiscreteStates

F_PWM = 100e3

CIRCUIT = """
circuit pwm_coil_freewheel
voltage-source V1 sup -> gnd 12 V
inductor       Lc sup -> d   1 mH  resistance=10 ohm
switch         Q1 d -> gnd   on=50 mohm  off=10 Mohm  gate=pwm(frequency=100 kHz, duty=50 %)
diode          D1 d -> sup   saturation-current=5 nA  ideality=1.8  resistance=40 mohm
record v(d), i(Lc), i(D1)
"""


def bare_loop(circuit, h: float, steps: int) -> float:
    """Seconds for ``steps`` rounds of one splu and one solve of the circuit's matrix."""
    system, _ = prepare(circuit)
    states = DiscreteStates(system, 0.0)
    f_nl, q_nl, jf, jq = system.evaluate_batches(np.zeros(system.n), 0.0, states)
    A = system.matrix(system.matrix_data(1.0 / h, jf, jq)).tocsc()
    b = system.s(0.0)
    t0 = time.perf_counter()
    for _ in range(steps):
        lu = spla.splu(A)
        b = lu.solve(b) * 1e-3 + 1.0
    return time.perf_counter() - t0


def run(periods: int, **kw) -> tuple[float, dict]:
    circuit = mna.parse(CIRCUIT)
    prepare(circuit)  # compile outside the timing
    t0 = time.perf_counter()
    res = circuit.transient(until=periods / F_PWM, **kw)
    return time.perf_counter() - t0, res.statistics


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--periods", type=int, default=100)
    args = ap.parse_args()
    cases = [
        ("fixed step 50 ns, backward Euler", dict(step=50e-9)),
        ("fixed step 50 ns, trapezoidal", dict(step=50e-9, method="trapezoidal")),
        ("error-controlled steps", dict()),
    ]
    print(f"{args.periods} periods of 100 kHz PWM, coil + freewheeling diode")
    print(f"{'case':34} {'steps':>7} {'steps/s':>9} {'newton/step':>12} {'LU/step':>8} {'events':>7} "
          f"{'us/step':>8} {'bare us/step':>13} {'ratio':>6}")
    for name, kw in cases:
        wall, st = min((run(args.periods, **kw) for _ in range(2)), key=lambda r: r[0])
        steps = st["accepted_steps"]
        bare = bare_loop(mna.parse(CIRCUIT), 50e-9, steps) / steps
        per = wall / steps
        print(f"{name:34} {steps:>7} {steps / wall:>9.0f} {st['newton_iterations'] / steps:>12.2f} "
              f"{st['factorizations'] / steps:>8.2f} {st['events']:>7} {per * 1e6:>8.1f} {bare * 1e6:>13.1f} "
              f"{per / bare:>6.1f}")


if __name__ == "__main__":
    main()
