"""mna's error-controlled transient against scipy.integrate.solve_ivp at matched error.

Each case is written twice: as an mna netlist, and by hand as an ODE
x' = f(t, x) for solve_ivp (BDF with a sparse Jacobian, and Radau). The
error of each run is measured against a tight reference, and solve_ivp's
tolerance is tightened until its error is no worse than mna's; then the wall
times are compared. Prints a table; asserts nothing.

    python benchmarks/bench_vs_solve_ivp.py
"""

from __future__ import annotations

import time

import numpy as np
import scipy.sparse as sp
from scipy.integrate import solve_ivp
from scipy.sparse.linalg import expm_multiply

import mna

R, L, C, RLOAD, V = 0.1, 1e-6, 1e-6, 10.0, 1.0


def ladder_netlist(n: int) -> str:
    lines = ["voltage-source V1 n0 -> gnd step(from=0 V, to=1 V, at=0 s)"]
    for k in range(n):
        lines.append(f"resistor R{k} n{k} -> m{k} {R} ohm")
        lines.append(f"inductor L{k} m{k} -> n{k + 1} {L} H")
        lines.append(f"capacitor C{k} n{k + 1} -> gnd {C} F")
    lines.append(f"resistor Rload n{n} -> gnd {RLOAD} ohm")
    lines.append(f"record v(n{n})")
    return "\n".join(lines)


def ladder_ode(n: int):
    """x = [i_1..i_n, v_1..v_n]; L i_k' = v_{k-1} - R i_k - v_k; C v_k' = i_k - i_{k+1}."""
    rows, cols, vals = [], [], []

    def add(r, c, v):
        rows.append(r)
        cols.append(c)
        vals.append(v)

    for k in range(n):
        add(k, k, -R / L)
        if k > 0:
            add(k, n + k - 1, 1 / L)
        add(k, n + k, -1 / L)
        add(n + k, k, 1 / C)
        if k + 1 < n:
            add(n + k, k + 1, -1 / C)
    add(2 * n - 1, 2 * n - 1, -1 / (RLOAD * C))
    A = sp.csr_matrix((vals, (rows, cols)), shape=(2 * n, 2 * n))
    b = np.zeros(2 * n)
    b[0] = V / L
    return A, b


def reference(A, b, times):
    """Exact solution of x' = A x + b, x(0) = 0: x = x_ss + e^{At}(0 - x_ss)."""
    x_ss = sp.linalg.spsolve(A.tocsc(), -b)
    out = expm_multiply(A, -x_ss[:, None] * np.ones((1, 1)), start=0, stop=times[-1], num=len(times),
                        endpoint=True)[:, :, 0]
    return x_ss[None, :] + out


def run_case(n: int, until: float) -> None:
    times = np.linspace(0, until, 201)
    A, b = ladder_ode(n)
    ref = reference(A, b, times)[:, -1]
    scale = np.max(np.abs(ref))

    circuit = mna.parse(ladder_netlist(n))
    circuit.transient(until=until / 100)  # compile outside the timing
    t0 = time.perf_counter()
    res = circuit.transient(until=until, method="trapezoidal", tolerance=1e-3, start="rest",
                            sample=times[1])
    t_mna = time.perf_counter() - t0
    err_mna = np.max(np.abs(res[f"v(n{n})"] - ref)) / scale

    print(f"\nRLC ladder, {n} sections ({2 * n} states), 0..{until * 1e6:.0f} us:")
    print(f"  mna trapezoidal error {err_mna:.2e}  {t_mna:7.3f} s  ({res.statistics['accepted_steps']} steps, "
          f"{res.statistics['factorizations']} factorisations)")
    jac = A
    for method in ("BDF", "Radau"):
        best = None
        for rtol in (1e-2, 3e-3, 1e-3, 3e-4, 1e-4, 3e-5, 1e-5, 1e-6, 1e-7):
            t0 = time.perf_counter()
            sol = solve_ivp(lambda t, x: A @ x + b, (0, until), np.zeros(2 * n), method=method,
                            jac=jac, rtol=rtol, atol=rtol * 1e-3, t_eval=times)
            wall = time.perf_counter() - t0
            err = np.max(np.abs(sol.y[-1] - ref)) / scale
            best = (rtol, err, wall, sol.nfev)
            if err <= err_mna:
                break
        rtol, err, wall, nfev = best
        flag = "" if err <= err_mna else "  (never reached mna's error)"
        print(f"  solve_ivp {method:<5} error {err:.2e}  {wall:7.3f} s  (rtol {rtol:g}, {nfev} f evals)"
              f"  -> mna is {wall / t_mna:.1f}x faster{flag}")


def main() -> None:
    # Long enough for the step to cross the ladder and settle: the delay is
    # about n*sqrt(LC) (1 us a section).
    run_case(100, 300e-6)
    run_case(1000, 2.5e-3)


if __name__ == "__main__":
    main()
