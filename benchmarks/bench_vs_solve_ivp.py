"""mna's error-controlled transient against scipy.integrate.solve_ivp at matched error.

Each case is written twice: as an mna netlist, and by hand as an ODE
x' = f(t, x) for solve_ivp (BDF with a sparse Jacobian, and Radau). The
error of each run is measured against a tight reference, and solve_ivp's
tolerance is tightened until its error is no worse than mna's; then the wall
times are compared (each the shortest of three runs, since a shared machine
is noisy). Neither solver has a step cap: solve_ivp's ``max_step`` defaults
to infinity, so mna's runs lift their default cap (``until/50``, kept for
plot resolution) with ``max-step=until``. Prints a table; asserts nothing.

Cases: an RLC ladder of 100 and 1,000 sections driven by a step; a DC motor
started across the line against a fan load; a coil driven by a 100 kHz PWM
switch with a freewheeling diode (solve_ivp restarted at every edge).

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
REPEAT = 3


def best_of(fn, repeat: int = REPEAT):
    """(shortest wall time of ``repeat`` calls in s, the last call's result)."""
    best, out = float("inf"), None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


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
    t_mna, res = best_of(lambda: circuit.transient(until=until, method="trapezoidal", tolerance=1e-3,
                                                   start="rest", sample=times[1], **{"max-step": until}))
    err_mna = np.max(np.abs(res[f"v(n{n})"] - ref)) / scale

    print(f"\nRLC ladder, {n} sections ({2 * n} states), 0..{until * 1e6:.0f} us:")
    print(f"  mna trapezoidal error {err_mna:.2e}  {t_mna:7.3f} s  ({res.statistics['accepted_steps']} steps, "
          f"{res.statistics['factorizations']} factorizations)")

    def solve(method, rtol):
        sol = solve_ivp(lambda t, x: A @ x + b, (0, until), np.zeros(2 * n), method=method,
                        jac=A, rtol=rtol, atol=rtol * 1e-3, t_eval=times)
        return sol.y[-1], sol.nfev

    match_solve_ivp(solve, ref, scale, err_mna, t_mna)


def match_solve_ivp(solve, ref, scale, err_mna: float, t_mna: float) -> None:
    """Tighten solve_ivp's rtol until its error is no worse than mna's; print the times.

    ``solve(method, rtol)`` returns (values at the comparison times, f evals).
    """
    for method in ("BDF", "Radau"):
        best = None
        for rtol in (1e-2, 3e-3, 1e-3, 3e-4, 1e-4, 3e-5, 1e-5, 1e-6, 1e-7):
            y, nfev = solve(method, rtol)
            err = np.max(np.abs(y - ref)) / scale
            best = (rtol, err, nfev)
            if err <= err_mna:
                break
        rtol, err, nfev = best
        wall, _ = best_of(lambda: solve(method, rtol))
        flag = "" if err <= err_mna else "  (never reached mna's error)"
        print(f"  solve_ivp {method:<5} error {err:.2e}  {wall:7.3f} s  (rtol {rtol:g}, {nfev} f evals)"
              f"  -> mna is {wall / t_mna:.1f}x faster{flag}")


# --- A coil driven by a 100 kHz PWM switch with a freewheeling diode ----------------

SWITCHED = """
voltage-source V1 sup -> gnd 12 V
inductor       Lc sup -> d   1 mH  resistance=10 ohm
switch         Q1 d -> gnd   on=50 mohm  off=10 Mohm  gate=pwm(frequency=100 kHz, duty=50 %)
diode          D1 d -> sup   saturation-current=5 nA  ideality=1.8  resistance=40 mohm
record i(Lc)
"""


def switched_rhs(on: bool):
    """The coil current's ODE in one switch state, as a user would write it.

    On: L di/dt = V - (R + Ron) i. Off: the current freewheels through the
    diode, L di/dt = -R i - vD(i), vD = n Vt ln(1 + i/Is) + Rs i (Shockley,
    inverted; the switch's 10 Mohm and the diode's reverse current are left
    out: microamperes against amperes).
    """
    from scipy.constants import Boltzmann, elementary_charge

    V, Lc, R, Ron = 12.0, 1e-3, 10.0, 50e-3
    Is, n, Rs = 5e-9, 1.8, 40e-3
    nvt = n * Boltzmann * 298.15 / elementary_charge
    if on:
        return lambda t, y: [(V - (R + Ron) * y[0]) / Lc]
    return lambda t, y: [(-R * y[0] - nvt * np.log1p(max(y[0], 0.0) / Is) - Rs * y[0]) / Lc]


def solve_switched(periods: int, method: str, rtol: float, times: np.ndarray):
    """solve_ivp restarted at every gate edge; returns (i at times, f evals)."""
    T = 1e-5
    y = [0.0]
    out = np.empty_like(times)
    nfev = 0
    for k in range(2 * periods):
        t0, t1 = k * T / 2, (k + 1) * T / 2
        sel = (times >= t0) & (times <= t1)
        sol = solve_ivp(switched_rhs(k % 2 == 0), (t0, t1), y, method=method, rtol=rtol, atol=rtol * 1e-3,
                        dense_output=True)
        nfev += sol.nfev
        out[sel] = sol.sol(times[sel])[0]
        y = [sol.y[0, -1]]
    return out, nfev


def run_switched(periods: int = 100) -> None:
    until = periods * 1e-5
    times = np.linspace(0, until, 20 * periods + 1)
    ref, _ = solve_switched(periods, "Radau", 1e-12, times)
    scale = np.max(np.abs(ref))
    circuit = mna.parse(SWITCHED)
    circuit.transient(until=1e-6)
    t_mna, res = best_of(lambda: circuit.transient(until=until, start="rest", method="trapezoidal",
                                                   sample=times[1], **{"max-step": until}))
    err_mna = np.max(np.abs(res["i(Lc)"] - ref)) / scale
    st = res.statistics
    print(f"\nCoil with freewheeling diode, 100 kHz PWM switch, {periods} periods "
          f"(solve_ivp restarted at all {2 * periods} edges):")
    print(f"  mna trapezoidal error {err_mna:.2e}  {t_mna:7.3f} s  ({st['accepted_steps']} steps, "
          f"{st['factorizations']} factorizations, {st['events']} events)")
    match_solve_ivp(lambda method, rtol: solve_switched(periods, method, rtol, times), ref, scale,
                    err_mna, t_mna)


# --- A DC motor started across the line against a fan ------------------------------

# Permanent-magnet DC motor (Franklin, Powell & Emami-Naeini, *Feedback Control of Dynamic Systems*, ch. 2, from memory: L di/dt = V - R i - k w,
# J dw/dt = k i - B w - T_load) with a fan load T = c w|w|. Example values.
MV, MR, ML, MK, MJ, MB, MFAN = 12.0, 1.0, 0.5e-3, 0.05, 1e-4, 1e-5, 2e-6

MOTOR = f"""
voltage-source V1 sup -> gnd {MV} V
dc-machine M1 sup -> gnd shaft=rotor resistance={MR} ohm inductance={ML} H constant={MK} V*s/rad
inertia J1 rotor {MJ} kg*m^2
friction B1 rotor -> frame {MB} N*m*s/rad
load F1 rotor fan={MFAN} N*m*s^2
record i(M1), w(rotor)
"""


def motor_rhs(t, y):
    i, w = y
    return [(MV - MR * i - MK * w) / ML, (MK * i - MB * w - MFAN * w * abs(w)) / MJ]


def motor_jac(t, y):
    i, w = y
    return [[-MR / ML, -MK / ML], [MK / MJ, (-MB - 2 * MFAN * abs(w)) / MJ]]


def run_motor(until: float = 0.3) -> None:
    times = np.linspace(0, until, 301)
    ref = solve_ivp(motor_rhs, (0, until), [0.0, 0.0], method="Radau", jac=motor_jac, rtol=1e-12,
                    atol=1e-12, t_eval=times).y
    scale = np.max(np.abs(ref), axis=1)
    circuit = mna.parse(MOTOR)
    circuit.transient(until=until / 100)
    t_mna, res = best_of(lambda: circuit.transient(until=until, start="rest", method="trapezoidal",
                                                   sample=times[1], **{"max-step": until}))
    got = np.vstack([res["i(M1)"], res["w(rotor)"]])
    err_mna = float(np.max(np.abs(got - ref) / scale[:, None]))
    st = res.statistics
    print(f"\nDC motor started across the line against a fan, 0..{until * 1e3:.0f} ms "
          f"(current and speed, each relative to its peak):")
    print(f"  mna trapezoidal error {err_mna:.2e}  {t_mna:7.3f} s  ({st['accepted_steps']} steps, "
          f"{st['newton_iterations']} Newton iterations)")

    def solve(method, rtol):
        sol = solve_ivp(motor_rhs, (0, until), [0.0, 0.0], method=method, jac=motor_jac, rtol=rtol,
                        atol=rtol * 1e-3, t_eval=times)
        return sol.y / scale[:, None], sol.nfev

    match_solve_ivp(solve, ref / scale[:, None], 1.0, err_mna, t_mna)


def main() -> None:
    # Long enough for the step to cross the ladder and settle: the delay is
    # about n*sqrt(LC) (1 us a section).
    run_case(100, 300e-6)
    run_case(1000, 2.5e-3)
    run_motor()
    run_switched(100)


if __name__ == "__main__":
    main()
