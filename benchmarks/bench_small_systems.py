"""Dense LAPACK against SuperLU on the engine's own matrices, by circuit size.

The engine keeps systems of up to ``mna.system.DENSE_LIMIT`` unknowns dense
(LAPACK getrf/getrs) and factors larger ones with SuperLU. This script
compiles RLC ladders of growing size, builds the backward-Euler matrix of
each, and prints the time of a factorization, a solve and a matrix-vector
product both ways, with the ratio sparse/dense (above 1: dense is faster).
Each time is the best of several repeats. Asserts nothing.

    python benchmarks/bench_small_systems.py
"""

from __future__ import annotations

import timeit

import numpy as np
import scipy.sparse.linalg as spla
from scipy.linalg.lapack import dgetrf, dgetrs

import mna
from mna.analyses.common import prepare
from mna.system import DENSE_LIMIT


def ladder(sections: int) -> str:
    lines = ["voltage-source V1 n0 -> gnd 1 V"]
    for k in range(sections):
        lines += [f"resistor R{k} n{k} -> m{k} 0.1 ohm", f"inductor L{k} m{k} -> n{k + 1} 1 uH",
                  f"capacitor C{k} n{k + 1} -> gnd 1 uF"]
    lines.append(f"resistor Rload n{sections} -> gnd 10 ohm")
    return "\n".join(lines)


def best(fn, number: int) -> float:
    """Shortest time per call (us) over five repeats of ``number`` calls."""
    return min(timeit.repeat(fn, number=number, repeat=5)) / number * 1e6


def main() -> None:
    print(f"dense below {DENSE_LIMIT} unknowns; times in us, ratio = SuperLU / LAPACK")
    print(f"{'unknowns':>9} | {'factor':>22} | {'solve':>22} | {'mat-vec':>22}")
    for sections in (1, 3, 10, 30, 42, 60, 100):
        system, _ = prepare(mna.parse(ladder(sections)))
        data = system.matrix_data(1e6)  # backward Euler at a 1 us step
        A = system.matrix(data)
        D = system.dense_array(data)
        b = np.ones(system.n)
        n = max(50, 20000 // system.n)
        f_sp = best(lambda: spla.splu(A, permc_spec="COLAMD", options={"SymmetricMode": False}), n)
        f_de = best(lambda: dgetrf(D), n)
        lu = spla.splu(A, permc_spec="COLAMD", options={"SymmetricMode": False})
        lu_d, piv, _ = dgetrf(D)
        s_sp = best(lambda: lu.solve(b), 5 * n)
        s_de = best(lambda: dgetrs(lu_d, piv, b), 5 * n)
        m_sp = best(lambda: A @ b, 5 * n)
        m_de = best(lambda: D @ b, 5 * n)
        print(f"{system.n:>9} | {f_sp:7.1f} {f_de:7.1f} {f_sp / f_de:5.1f}x | {s_sp:7.1f} {s_de:7.1f} "
              f"{s_sp / s_de:5.1f}x | {m_sp:7.1f} {m_de:7.1f} {m_sp / m_de:5.1f}x")


if __name__ == "__main__":
    main()
