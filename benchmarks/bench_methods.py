"""mna's methods against scipy's solve_ivp (BDF, Radau) and SUNDIALS IDA at matched accuracy.

For two accuracy targets (1e-3 and 1e-5 of the signal's range) each solver's
tolerance is swept from loose to tight; the loosest setting whose error
meets the target is timed (shortest of three runs: a shared machine is
noisy). Errors are measured at each solver's own output points (mna's step
points, solve_ivp's steps, IDA's internal steps) against an exact or a tight
reference. Nobody gets a step cap. Prints a table of wall times and the
ratio of each reference solver's time to that of the first mna method named
with ``--methods`` (radau unless told; above 1: mna is faster); asserts
nothing.

Cases:

- series RLC step (10 V, 10 ohm, 1 mH, 1 uF), 2 ms: closed form;
- DC motor started across the line from rest, 0.1 s: solve_ivp Radau at rtol 1e-12;
- a coil (10 mH, 10 ohm) with a 1 ns RC snubber (100 ohm, 10 pF), fed through
  1 ohm by a 1 kHz sine, 10 ms: solve_ivp Radau at rtol 1e-12 (the snubber mode
  is 1e7 times faster than the run: stiff);
- RLC ladder of 100 sections, the last node; 200 us: matrix exponential;
- RLC ladder of 1,000 sections, every node voltage compared (the last node
  alone carries microvolts); 200 us: matrix exponential.

IDA (scikit-sundae, a benchmark-only dependency: ``pip install .[bench]``)
solves the same ODEs in residual form ``y' - f(t, y) = 0``, dense linear
algebra for the small cases, banded (states interleaved) for the ladders.

    python benchmarks/bench_methods.py [--quick] [--methods radau,trapezoidal]
"""

from __future__ import annotations

import argparse
import math
import time
from dataclasses import dataclass
from typing import Callable

import numpy as np
import scipy.sparse as sp
from scipy.integrate import solve_ivp
from scipy.sparse.linalg import expm_multiply

import mna

REPEAT = 3
TARGETS = (1e-3, 1e-5)
#: Tolerances tried, loosest first (a factor of about 3 apart).
SWEEP = (1e-2, 3e-3, 1e-3, 3e-4, 1e-4, 3e-5, 1e-5, 3e-6, 1e-6, 3e-7, 1e-7, 3e-8, 1e-8, 1e-9, 1e-10)


def best_of(fn, repeat: int = REPEAT):
    """(shortest wall time of ``repeat`` calls in s, the last call's result)."""
    best, out = float("inf"), None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


@dataclass
class Case:
    """One benchmark circuit, as a netlist and as the ODE x' = A x + b(t) (or f)."""

    name: str
    netlist: str
    until: float
    labels: list[str]  # mna signals compared, in the order of ``columns``
    columns: list[int]  # their state indices in the ODE
    rhs: Callable
    jac: object  # a matrix (linear) or a callable
    x0: np.ndarray
    reference: Callable  # times -> states (n_states, len(times))
    band: int | None = None  # half bandwidth of the interleaved ordering (ladders)
    order: np.ndarray | None = None  # interleaving permutation for IDA's band solver

    def error(self, times: np.ndarray, values: np.ndarray) -> float:
        """Largest error over the compared signals in units of their common range."""
        ref = self.reference(times)[self.columns]
        span = float(np.max(np.ptp(ref, axis=1)))
        return float(np.max(np.abs(values - ref)) / span)


# -- the cases ------------------------------------------------------------------------


def rlc_case() -> Case:
    V, R, L, C = 10.0, 10.0, 1e-3, 1e-6
    A = np.array([[-R / L, -1 / L], [1 / C, 0.0]])  # x = [i, v]
    b = np.array([V / L, 0.0])
    a, w0 = R / (2 * L), 1 / math.sqrt(L * C)
    wd = math.sqrt(w0 ** 2 - a ** 2)

    def exact(t):
        e = np.exp(-a * t)
        v = V * (1 - e * (np.cos(wd * t) + a / wd * np.sin(wd * t)))
        i = C * V * e * (w0 ** 2 / wd) * np.sin(wd * t)
        return np.vstack([i, v])

    net = ("voltage-source V1 in -> gnd step(from=0 V, to=10 V, at=0 s)\nresistor R1 in -> a 10 ohm\n"
           "inductor L1 a -> b 1 mH\ncapacitor C1 b -> gnd 1 uF\nrecord v(b)\n")
    return Case("series RLC step", net, 2e-3, ["v(b)"], [1], lambda t, x: A @ x + b, A, np.zeros(2), exact)


def motor_case() -> Case:
    V, R, L, K, J, B = 12.0, 1.0, 0.5e-3, 0.05, 1e-4, 1e-5
    A = np.array([[-R / L, -K / L], [K / J, -B / J]])  # x = [i, w]
    b = np.array([V / L, 0.0])
    until = 0.1
    ref = solve_ivp(lambda t, x: A @ x + b, (0, until), np.zeros(2), method="Radau", jac=A, rtol=1e-12,
                    atol=1e-14, dense_output=True)
    net = (f"voltage-source V1 sup -> gnd {V} V\n"
           f"dc-machine M1 sup -> gnd shaft=rotor resistance={R} ohm inductance={L} H constant={K} V*s/rad\n"
           f"inertia J1 rotor {J} kg*m^2\nfriction B1 rotor -> frame {B} N*m*s/rad\nrecord i(M1), w(rotor)\n")
    case = Case("DC motor start", net, until, ["i(M1)", "w(rotor)"], [0, 1], lambda t, x: A @ x + b, A,
                np.zeros(2), ref.sol)

    def error(times, values):  # current and speed each against their own range
        r = ref.sol(times)
        return float(max(np.max(np.abs(values[k] - r[k])) / np.ptp(r[k]) for k in range(2)))

    case.error = error
    return case


def snubber_case() -> Case:
    Vp, f, Rs, L, RL, Rsn, Csn = 10.0, 1e3, 1.0, 10e-3, 10.0, 100.0, 10e-12
    # x = [iL, vC]; node a between the 1 ohm feed and the coil/snubber:
    # (Vs - va)/Rs = iL + (va - vC)/Rsn  ->  va = (Vs/Rs - iL + vC/Rsn) / (1/Rs + 1/Rsn)
    g = 1 / Rs + 1 / Rsn
    A = np.array([[(-1 / g - RL) / L, (1 / (Rsn * g)) / L],
                  [(-1 / g) / (Rsn * Csn), (1 / (Rsn * g) - 1) / (Rsn * Csn)]])
    bcoef = np.array([1 / (Rs * g) / L, 1 / (Rs * g) / (Rsn * Csn)])

    def rhs(t, x):
        return A @ x + bcoef * Vp * math.sin(2 * math.pi * f * t)

    until = 10e-3
    ref = solve_ivp(rhs, (0, until), np.zeros(2), method="Radau", jac=A, rtol=1e-12, atol=1e-15,
                    dense_output=True)
    net = (f"voltage-source V1 s -> gnd sine(amplitude={Vp} V, frequency={f} Hz)\n"
           f"resistor Rfeed s -> a {Rs} ohm\ninductor L1 a -> gnd {L} H resistance={RL} ohm\n"
           f"resistor Rsn a -> m {Rsn} ohm\ncapacitor Csn m -> gnd {Csn} F\nrecord i(L1)\n")
    return Case("coil + 1 ns snubber, 1 kHz sine", net, until, ["i(L1)"], [0], rhs, A, np.zeros(2), ref.sol)


def ladder_case(n: int, all_nodes: bool) -> Case:
    R, L, C, RLOAD, V = 0.1, 1e-6, 1e-6, 10.0, 1.0
    rows, cols, vals = [], [], []
    for k in range(n):  # x = [i_1..i_n, v_1..v_n]
        rows += [k, k]
        cols += [k, n + k]
        vals += [-R / L, -1 / L]
        if k > 0:
            rows.append(k), cols.append(n + k - 1), vals.append(1 / L)
        rows.append(n + k), cols.append(k), vals.append(1 / C)
        if k + 1 < n:
            rows.append(n + k), cols.append(k + 1), vals.append(-1 / C)
    rows.append(2 * n - 1), cols.append(2 * n - 1), vals.append(-1 / (RLOAD * C))
    A = sp.csr_matrix((vals, (rows, cols)), shape=(2 * n, 2 * n))
    b = np.zeros(2 * n)
    b[0] = V / L
    x_ss = sp.linalg.spsolve(A.tocsc(), -b)

    def exact(times):
        times = np.asarray(times, dtype=float)
        order = np.argsort(times)
        ts = times[order]
        out = np.empty((2 * n, ts.size))
        # e^{At} (0 - x_ss) on a uniform grid fine enough, then each time from its grid point.
        grid = np.unique(ts)
        vals = np.empty((2 * n, grid.size))
        prev_t, prev_x = 0.0, -x_ss
        for j, t in enumerate(grid):
            prev_x = expm_multiply(A * (t - prev_t), prev_x) if t > prev_t else prev_x
            prev_t = t
            vals[:, j] = prev_x
        idx = np.searchsorted(grid, ts)
        out[:, order] = vals[:, idx] + x_ss[:, None]
        return out

    lines = ["voltage-source V1 n0 -> gnd step(from=0 V, to=1 V, at=0 s)"]
    for k in range(n):
        lines += [f"resistor R{k} n{k} -> m{k} {R} ohm", f"inductor L{k} m{k} -> n{k + 1} {L} H",
                  f"capacitor C{k} n{k + 1} -> gnd {C} F"]
    lines.append(f"resistor Rload n{n} -> gnd {RLOAD} ohm")
    nodes = range(1, n + 1) if all_nodes else [n]
    lines.append("record " + ", ".join(f"v(n{k})" for k in nodes))
    interleave = np.ravel(np.column_stack([np.arange(n), n + np.arange(n)]))
    name = f"RLC ladder, {n} sections" + (", all nodes" if all_nodes else "")
    return Case(name, "\n".join(lines) + "\n", 200e-6, [f"v(n{k})" for k in nodes], [n + k - 1 for k in nodes],
                lambda t, x: A @ x + b, A, np.zeros(2 * n), exact, band=2, order=interleave)


# -- the solvers -----------------------------------------------------------------------


def run_mna(case: Case, method: str, tol: float):
    circuit = mna.parse(case.netlist)
    circuit.transient(until=case.until / 1000, method=method)  # compile outside the timing

    def go():
        res = circuit.transient(until=case.until, method=method, tolerance=tol, start="rest",
                                voltage_tolerance=tol * 1e-3, current_tolerance=tol * 1e-6)
        return res.time, np.vstack([res[label] for label in case.labels])

    return go


def run_solve_ivp(case: Case, method: str, tol: float):
    scale = np.maximum(np.max(np.abs(case.reference(np.linspace(0, case.until, 50))), axis=1), 1e-12)

    def go():
        sol = solve_ivp(case.rhs, (0, case.until), case.x0, method=method, jac=case.jac, rtol=tol,
                        atol=tol * 1e-3 * scale)
        return sol.t, sol.y[case.columns]

    return go


def run_ida(case: Case, tol: float):
    from sksundae.ida import IDA

    scale = np.maximum(np.max(np.abs(case.reference(np.linspace(0, case.until, 50))), axis=1), 1e-12)
    n = case.x0.size
    if case.order is not None:  # interleave the ladder's states: banded Jacobian
        perm = case.order
        inv = np.argsort(perm)

        def resfn(t, y, yp, res):
            res[:] = yp - case.rhs(t, y[inv])[perm]

        opts = dict(linsolver="band", lband=case.band, uband=case.band)
        atol = tol * 1e-3 * scale[perm]
        cols = [int(inv[c]) for c in case.columns]
    else:
        J = np.asarray(case.jac)

        def resfn(t, y, yp, res):
            res[:] = yp - case.rhs(t, y)

        def jacfn(t, y, yp, res, cj, JJ):
            JJ[:, :] = cj * np.eye(n) - J

        opts = dict(linsolver="dense", jacfn=jacfn)
        atol = tol * 1e-3 * scale
        cols = case.columns
    solver = IDA(resfn, rtol=tol, atol=atol, max_num_steps=500000, **opts)
    y0 = np.zeros(n)
    yp0 = case.rhs(0.0, np.zeros(n))
    if case.order is not None:
        yp0 = yp0[case.order]

    def go():
        sol = solver.solve(np.array([0.0, case.until]), y0, yp0)
        return sol.t, sol.y.T[cols]

    return go


def loosest(make: Callable[[float], Callable], case: Case, target: float):
    """(time s, tolerance, error) of the loosest tolerance that meets ``target``, or None."""
    for tol in SWEEP:
        try:
            go = make(tol)
            times, values = go()
        except Exception as exc:  # a solver that gives up at this tolerance
            print(f"      ({exc.__class__.__name__} at tolerance {tol:g}: {str(exc)[:60]})")
            continue
        err = case.error(times, values)
        if err <= target:
            wall, _ = best_of(go)
            return wall, tol, err
    return None


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="skip the 1,000-section ladder")
    parser.add_argument("--methods", default="radau", help="mna methods to time (the first is the default)")
    args = parser.parse_args()
    cases = [rlc_case(), motor_case(), snubber_case(), ladder_case(100, False)]
    if not args.quick:
        cases.append(ladder_case(1000, True))
    methods = args.methods.split(",")
    table = []
    for case in cases:
        for target in TARGETS:
            print(f"\n{case.name}, target {target:g} of the range:")
            row = {}
            solvers = [(f"mna {m}", lambda tol, m=m: run_mna(case, m, tol)) for m in methods]
            solvers += [(f"solve_ivp {m}", lambda tol, m=m: run_solve_ivp(case, m, tol)) for m in ("BDF", "Radau")]
            solvers.append(("IDA", lambda tol: run_ida(case, tol)))
            for label, make in solvers:
                found = loosest(make, case, target)
                row[label] = found
                if found is None:
                    print(f"  {label:<18} never met the target")
                else:
                    wall, tol, err = found
                    print(f"  {label:<18} {wall * 1e3:9.2f} ms  tolerance {tol:<7g} error {err:.2e}")
            table.append((case.name, target, row))
    default = f"mna {methods[0]}"  # the method the ratios are about
    print(f"\nRatios: reference solver's time / {default}'s time (above 1: mna is faster)")
    print(f"{'case':<38} {'target':>7} {'BDF':>7} {'Radau':>7} {'IDA':>7}")
    for name, target, row in table:
        base = row.get(default)
        cells = []
        for label in ("solve_ivp BDF", "solve_ivp Radau", "IDA"):
            other = row.get(label)
            cells.append("  -   " if base is None or other is None else f"{other[0] / base[0]:7.2f}")
        print(f"{name:<38} {target:>7g} {' '.join(cells)}")


if __name__ == "__main__":
    main()
