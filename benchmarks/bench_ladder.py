"""RLC ladder at a fixed step: engine time per step against a bare splu loop.

An N-section ladder (series R + L, shunt C) driven by a voltage step, run
with backward Euler at a fixed step. The baseline, in the same process,
factors the same matrix once with scipy.sparse.linalg.splu and does one
mat-vec and one triangular solve per step: the least work any fixed-step
implicit solver can do. Prints ratios; asserts nothing.

    python benchmarks/bench_ladder.py [--steps 2000]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import scipy.sparse.linalg as spla

import mna
from mna.analyses.common import prepare


def ladder_text(sections: int) -> str:
    lines = ["circuit ladder", "voltage-source V1 n0 -> gnd step(from=0 V, to=1 V, at=0 s)"]
    for k in range(sections):
        lines.append(f"resistor R{k} n{k} -> m{k} 0.1 ohm")
        lines.append(f"inductor L{k} m{k} -> n{k + 1} 1 uH")
        lines.append(f"capacitor C{k} n{k + 1} -> gnd 1 uF")
    lines.append(f"resistor Rload n{sections} -> gnd 10 ohm")
    lines.append(f"record v(n{sections}), i(L0), v(n{sections // 2})")
    return "\n".join(lines)


def bare_loop(circuit, h: float, steps: int) -> float:
    system, _ = prepare(circuit)
    A = system.matrix(system.matrix_data(1.0 / h))
    C = system.C
    s = system.s(h)
    x = np.zeros(system.n)
    t0 = time.perf_counter()
    lu = spla.splu(A.tocsc())
    for _ in range(steps):
        x = lu.solve(s + (C @ x) / h)
    return time.perf_counter() - t0


def engine(circuit, h: float, steps: int) -> tuple[float, dict]:
    t0 = time.perf_counter()
    res = circuit.transient(until=h * steps, step=h, start="rest")
    return time.perf_counter() - t0, res.statistics


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--steps", type=int, default=2000)
    args = ap.parse_args()
    h = 1e-7
    print(f"{'sections':>9} {'unknowns':>9} {'parse s':>8} {'bare us/step':>13} {'engine us/step':>15} {'ratio':>6}")
    for n in (10, 1000, 10000):
        steps = args.steps if n < 10000 else max(200, args.steps // 5)
        t0 = time.perf_counter()
        circuit = mna.parse(ladder_text(n))
        parse_s = time.perf_counter() - t0
        prepare(circuit)  # compile once, outside both timings
        bare = min(bare_loop(circuit, h, steps) for _ in range(3))
        eng, stats = min((engine(circuit, h, steps) for _ in range(3)), key=lambda r: r[0])
        print(f"{n:>9} {stats['unknowns']:>9} {parse_s:>8.3f} {bare / steps * 1e6:>13.2f} "
              f"{eng / steps * 1e6:>15.2f} {eng / bare:>6.2f}")


if __name__ == "__main__":
    main()
