"""Frequency response: mna's solves against plain per-frequency solves.

An N-section RLC ladder (series R + L, shunt C), its input impedance
z(n0 -> gnd) and its transfer v(out) / v(in) over a sweep. Baselines, in
the same process, on the same matrices ``G + jwC``:

- large circuits: ``scipy.sparse.linalg.splu`` with its default column
  ordering (COLAMD) at every frequency, and one ``solve`` of the same two
  right-hand sides; mna computes the ordering at the first frequency only
  and factors the rest in that order;
- small circuits: ``numpy.linalg.solve`` called once per frequency; mna
  solves stacks of frequencies in one call.

Both sides include assembling ``G + jwC``; mna's time also includes the DC
operating point, the linearisation and the outputs. Prints ratios and the
largest difference between the answers; asserts nothing.

    python benchmarks/bench_frequency.py [--points 300]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

import mna
from mna.analyses.common import prepare
from mna.analyses.frequency import _right_hand_sides, frequency_grid, linearise, stimuli


def ladder_text(sections: int) -> str:
    lines = ["circuit ladder", "voltage-source V1 in -> gnd 0 V stimulus=1 V", "resistor Rs in -> n0 0.5 ohm"]
    for k in range(sections):
        lines.append(f"resistor R{k} n{k} -> m{k} 0.1 ohm")
        lines.append(f"inductor L{k} m{k} -> n{k + 1} 1 uH")
        lines.append(f"capacitor C{k} n{k + 1} -> gnd 1 uF")
    lines.append(f"resistor Rload n{sections} -> gnd 10 ohm")
    lines.append(f"record z(n0 -> gnd), v(n{sections}) / v(in)")
    return "\n".join(lines)


def baseline(circuit, settings) -> tuple[float, np.ndarray]:
    """Seconds and z(n0 -> gnd) by plain solves, one factorization (or solve) per frequency."""
    system, _ = prepare(circuit)
    x0 = np.zeros(system.n)
    small = linearise(system, x0, None, stimuli(circuit))
    rhs, _ = _right_hand_sides(small, circuit.frequency_records)
    f = frequency_grid(settings)
    n0 = system.node_index["n0"]
    z = np.empty(f.size, dtype=complex)
    dense = system.n <= 80
    G = system.dense_array(small.G_data) if dense else None
    C = system.dense_array(small.C_data) if dense else None
    t0 = time.perf_counter()
    for k, fk in enumerate(f):
        w = 2 * np.pi * fk
        if dense:
            X = np.linalg.solve(G + 1j * w * C, rhs)
        else:
            A = sp.csc_matrix((small.matrix_data(w), system.indices, system.indptr), shape=(system.n, system.n))
            X = spla.splu(A).solve(rhs)
        z[k] = X[n0, 1]
    return time.perf_counter() - t0, z


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--points", type=int, default=300, help="frequencies per run")
    args = ap.parse_args()
    print(f"{'sections':>9} {'unknowns':>9} {'solver':>7} {'baseline s':>11} {'mna s':>8} {'ratio':>6} "
          f"{'max rel diff':>13}")
    for sections in (5, 20, 2000, 20000):
        circuit = mna.parse(ladder_text(sections))
        decades = 4.0
        settings = {"from": 100.0, "to": 1e6, "per-decade": (args.points - 1) / decades}
        best_base, best_mna = np.inf, np.inf
        for _ in range(3):
            t_base, z_ref = baseline(circuit, settings)
            t0 = time.perf_counter()
            res = circuit.frequency(100, 1e6, per_decade=settings["per-decade"])
            t_mna = time.perf_counter() - t0
            best_base, best_mna = min(best_base, t_base), min(best_mna, t_mna)
        z = res["z(n0 -> gnd)"]
        diff = float(np.max(np.abs(z - z_ref) / np.abs(z_ref)))
        print(f"{sections:>9} {res.statistics['unknowns']:>9} {res.statistics['solver']:>7} {best_base:>11.4f} "
              f"{best_mna:>8.4f} {best_base / best_mna:>6.2f} {diff:>13.2e}")


if __name__ == "__main__":
    main()
