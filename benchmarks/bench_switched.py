"""Switched converters: mna against solve_ivp Radau and SUNDIALS IDA at matched error.

Cases (all start at rest):

1. a coil driven by a 100 kHz PWM switch with a freewheeling diode, 1 ms
   (200 switching edges);
2. a 24 V to 5 V buck at 200 kHz, 1 ms;
3. a 12 V to 24 V boost at 100 kHz with RC snubbers across the switch
   and the diode, 1 ms;
4. the same boost with a 20 nH stray in the diode path ringing with the
   diode's 100 pF (a Q of several hundred), 0.5 ms;

each with the piecewise-linear ``ideal-diode`` (mna's exact intervals) and,
for cases 1 and 2, the exponential ``diode`` (mna's integrator at its
default method).

The references see the same equations: the circuit's descriptor system
``C x' + G x + f0(state) = S u(t)`` taken from mna's compiled system, one
switch state at a time. SUNDIALS IDA integrates the descriptor form as it
is; solve_ivp Radau integrates the ordinary system left after eliminating
the algebraic unknowns (which needs the piecewise-linear model). Both are
restarted at every PWM edge and at every diode event (located by their
own event functions, terminal, on the diode margin ``v - drop``), as a
user of either library would do. With the exponential diode IDA
integrates the nonlinear residual from mna's batches (Radau would need the
algebraic node voltages solved inside its right-hand side and is left
out).

Errors are measured on a grid of 2,001 points as a fraction of the range
of the inductor current, against a reference from Radau at rtol 1e-11
(its agreement with mna's exact intervals is printed). For the targets 1e-3
and 1e-5, each solver's tolerance is swept from loose to tight and the
loosest setting that meets the target is timed (best of three runs).
Prints ratios; asserts nothing.

    python benchmarks/bench_switched.py            (all cases)
    python benchmarks/bench_switched.py buck       (cases whose name holds 'buck')
"""

from __future__ import annotations

import sys
import time

import numpy as np
from scipy.integrate import solve_ivp

import mna
from mna.analyses.exact import LinearModes, SourceEntries, state_matrices
from mna.runstate import DiscreteStates
from mna.system import compile_circuit

TARGETS = (1e-3, 1e-5)
POINTS = 2001
REPEAT = 3


def best_of(fn, repeat: int = REPEAT):
    best, out = float("inf"), None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def pwm_coil(diode: str) -> str:
    return f"""
voltage-source V1 sup -> gnd 12 V
inductor       Lc sup -> d   1 mH  resistance=10 ohm
switch         Q1 d -> gnd   on=50 mohm  off=10 Mohm  gate=pwm(frequency=100 kHz, duty=50 %)
{diode} D1 d -> sup
record i(Lc)
"""


def buck(diode: str) -> str:
    return f"""
voltage-source Vin in -> gnd 24 V
switch Q1 in -> sw on=30 mohm gate=pwm(frequency=200 kHz, duty=22 %)
{diode} D1 gnd -> sw
inductor L1 sw -> out 22 uH
capacitor Co out -> gnd 47 uF
resistor Rload out -> gnd 1 ohm
record i(L1)
"""


def boost(stray: bool) -> str:
    path = ("inductor Ls a -> k 20 nH\ncapacitor Cj a -> k 100 pF\nresistor Rdamp a -> k 1 Mohm\n"
            if stray else "resistor Rpath a -> k 1 mohm\n")
    return f"""
voltage-source Vin in -> gnd 12 V
inductor L1 in -> sw 100 uH resistance=20 mohm
switch Q1 sw -> gnd on=20 mohm gate=pwm(frequency=100 kHz, duty=50 %)
resistor Rs1 sw -> s1 10 ohm
capacitor Cs1 s1 -> gnd 1 nF
ideal-diode D1 sw -> a drop=0.6 V on=20 mohm
{path}resistor Rs2 sw -> s2 10 ohm
capacitor Cs2 s2 -> k 470 pF
capacitor Co k -> gnd 100 uF
resistor Rload k -> gnd 24 ohm
record i(L1)
"""


PWL = "ideal-diode"
EXP = "diode saturation-current=5 nA ideality=1.8 resistance=40 mohm"

CASES = [
    ("pwm-coil, ideal-diode", pwm_coil(PWL), 1e-3, "i(Lc)", True),
    ("buck, ideal-diode", buck(PWL), 1e-3, "i(L1)", True),
    ("boost + RC snubbers", boost(False), 1e-3, "i(L1)", True),
    ("boost + high-Q stray ring", boost(True), 0.5e-3, "i(L1)", True),
    ("pwm-coil, exponential diode", pwm_coil(EXP), 1e-3, "i(Lc)", False),
    ("buck, exponential diode", buck(EXP), 1e-3, "i(L1)", False),
]


# -- the references: one switch state at a time -----------------------------------


class Intervals:
    """Drives a reference solver across the corners and diode events of one circuit."""

    def __init__(self, text: str, until: float):
        self.circuit = mna.parse(text)
        self.system = compile_circuit(self.circuit)
        self.until = until
        corners = self.system.corners(0.0, until)
        self.corners = np.unique(np.append(corners[(corners > 0) & (corners < until)], until))
        self.sources = SourceEntries(self.system)
        self.diode_batches = [s.batch for s in self.system.batches if hasattr(s.batch, "drop")]

    def watch_signs(self, states) -> np.ndarray:
        """+1 for a blocking diode (watch its margin rise through 0), -1 for a conducting one."""
        signs = []
        for k, slot in enumerate(self.system.batches):
            if hasattr(slot.batch, "drop"):
                signs.append(np.where(states[k].on, -1.0, 1.0))
        return np.concatenate(signs) if signs else np.empty(0)

    def margins(self, x):
        return np.concatenate([b.pattern.across(x) - b.drop for b in self.diode_batches]) \
            if self.diode_batches else np.empty(0)

    def run(self, solve_interval, grid: np.ndarray, label_index: int) -> np.ndarray:
        """Values of unknown ``label_index`` on ``grid`` from a chain of restarted solves."""
        states = DiscreteStates(self.system, 0.0)
        x = np.zeros(self.system.n)
        out = np.full(grid.size, np.nan)
        t, k = 0.0, 0
        states.update(0.0, x)
        while t < self.until * (1 - 1e-12):
            while self.corners[k] <= t * (1 + 1e-13):
                k += 1
            t_end = self.corners[k]
            t_stop, x_new, ts, xs = solve_interval(states, t, x, t_end)
            inside = (grid >= t) & (grid <= t_stop)
            if ts.size and inside.any():
                out[inside] = np.interp(grid[inside], ts, xs[:, label_index]) if ts.size > 1 else xs[0, label_index]
            t, x = t_stop, x_new
            for _ in range(8):
                if not states.update(t, x):
                    break
                x = self.consistent(states, t, x)
        return out

    def consistent(self, states, t, x):
        """The algebraic unknowns after a state change, with the charges and fluxes kept."""
        C, G, f0 = state_matrices(self.system, states, t)
        modes = LinearModes(C, G, f0, self.sources.S)
        y = modes.y_from_charges(C @ x)
        u = self.system.source_values(t + 1e-15 * self.until)
        return modes.x_of(y[None, :], u[None, :])[0]


def radau_interval(drv: Intervals, rtol: float, grid: np.ndarray):
    def solve(states, t0, x0, t1):
        C, G, f0 = state_matrices(drv.system, states, t0)
        m = LinearModes(C, G, f0, drv.sources.S)
        y0 = m.y_from_charges(C @ x0)
        src = drv.system.source_values

        def rhs(t, y):
            return m.M @ y + m.NS @ src(t) - m.Nf0

        def x_of(t, y):
            return m.P @ y + m.QS @ src(t) - m.Qf0

        sign = drv.watch_signs(states)
        events = []
        for j in range(sign.size):
            def ev(t, y, j=j):
                return sign[j] * drv.margins(x_of(t, y))[j]
            ev.terminal = True
            ev.direction = 1
            events.append(ev)
        sol = solve_ivp(rhs, (t0, t1), y0, method="Radau", jac=m.M, rtol=rtol, atol=rtol * 1e-6,
                        dense_output=True, events=events or None)
        if sol.status == 1:  # a diode event stopped it
            j = next(i for i, e in enumerate(sol.t_events) if e.size)
            t_end, y_end = float(sol.t_events[j][0]), sol.y_events[j][0]
        else:
            t_end, y_end = t1, sol.y[:, -1]
        # the solver's output at the grid points inside the interval (its dense output)
        ts = np.concatenate([[t0], grid[(grid > t0) & (grid < t_end)], [t_end]])
        xs = np.array([x_of(t, sol.sol(t)) for t in ts])
        return t_end, x_of(t_end, y_end), ts, xs
    return solve


def ida_interval(drv: Intervals, rtol: float, grid: np.ndarray, nonlinear: bool):
    from sksundae.ida import IDA

    system = drv.system

    def solve(states, t0, x0, t1):
        C, G, f0 = state_matrices(system, states, t0) if not nonlinear else (system.C.toarray(), None, None)
        src = system.source_values
        S = drv.sources.S

        if nonlinear:
            def resfn(t, y, yp, res):
                f, q, _, _ = system.evaluate_batches(y, t, states)
                res[:] = system.C @ yp + system.G @ y + f - S @ src(t)
        else:
            def resfn(t, y, yp, res):
                res[:] = C @ yp + G @ y + f0 - S @ src(t)

        # consistent yp0: -f from the descriptor rows that hold a charge
        algebraic = np.flatnonzero(~np.any(np.abs(C) > 0, axis=0))  # unknowns never differentiated
        opts = dict(rtol=rtol, atol=rtol * 1e-6, calc_initcond="yp0", calc_init_dt=(t1 - t0) * 1e-3,
                    algebraic_idx=algebraic if algebraic.size else None, max_num_steps=100000)
        if drv.diode_batches and not nonlinear:
            sign = drv.watch_signs(states)
            m0 = sign

            def eventsfn(t, y, yp, events):
                events[:] = sign * drv.margins(y)
            eventsfn.terminal = [True] * m0.size
            eventsfn.direction = [1] * m0.size
            opts.update(eventsfn=eventsfn, num_events=int(m0.size))
        ts = np.concatenate([[t0], grid[(grid > t0) & (grid < t1)], [t1]])
        sol = IDA(resfn, **opts).solve(ts, x0, np.zeros_like(x0))
        t_end = float(sol.t[-1])  # t1, or the diode event that stopped it (terminal)
        return t_end, sol.y[-1], sol.t, sol.y
    return solve


# -- measurement --------------------------------------------------------------------


def sweep(name, make_solve, reference, scale, targets, tols):
    """For each target: (wall time of the loosest tolerance that meets it, its error), or None."""
    found = {}
    for tol in tols:
        try:
            values = make_solve(tol)()
        except Exception as exc:  # a reference solver that fails at a loose setting
            print(f"    {name} rtol={tol:g} failed: {type(exc).__name__}: {str(exc)[:80]}")
            continue
        err = float(np.nanmax(np.abs(values - reference)) / scale)
        for target in targets:
            if target not in found and err <= target:
                wall, _ = best_of(make_solve(tol))
                found[target] = (wall, err, tol)
        if len(found) == len(targets):
            break
    return found


def run_case(name, text, until, label, pwl):
    grid = np.linspace(0.0, until, POINTS)
    circuit = mna.parse(text)
    drv = Intervals(text, until)
    index = drv.system.names.index(label)
    print(f"\n{name} ({drv.system.n} unknowns, {until * 1e3:g} ms):")
    tight = drv.run(radau_interval(drv, 1e-11, grid), grid, index) if pwl else None
    if pwl:
        wall, w = best_of(lambda: circuit.transient(until=until, start="rest", sample=until / (POINTS - 1)))
        values = w[label]
        scale = float(np.ptp(values))
        err = float(np.max(np.abs(values - tight)) / scale)
        s = w.statistics
        print(f"  mna exact intervals: {wall * 1e3:8.1f} ms, {s['accepted_steps']} intervals, "
              f"{s.get('propagators_built', 0)} propagators built, {s.get('propagators_reused', 0)} reused; "
              f"differs from Radau at rtol 1e-11 by {err:.1e} of the range")
        mna_found = {target: (wall, err, None) for target in TARGETS}
        reference = tight
    else:
        ref = circuit.transient(until=until, start="rest", sample=until / (POINTS - 1), tolerance=1e-10,
                                method="radau")
        reference = ref[label]
        scale = float(np.ptp(reference))

        def mna_solve(tol):
            return lambda: circuit.transient(until=until, start="rest", tolerance=tol,
                                             sample=until / (POINTS - 1))[label]
        mna_found = sweep("mna", mna_solve, reference, scale, TARGETS,
                          (1e-2, 3e-3, 1e-3, 3e-4, 1e-4, 3e-5, 1e-5, 3e-6, 1e-6, 1e-7))
    solvers = [("IDA", lambda tol: (lambda: drv.run(ida_interval(drv, tol, grid, not pwl), grid, index)))]
    if pwl:
        solvers.insert(0, ("Radau", lambda tol: (lambda: drv.run(radau_interval(drv, tol, grid), grid, index))))
    tols = (1e-3, 1e-4, 1e-5, 1e-6, 1e-7, 1e-8, 1e-9)
    for target in TARGETS:
        mine = mna_found.get(target)
        line = f"  target {target:g}: mna " + (f"{mine[0] * 1e3:8.1f} ms" if mine else "   not met")
        for sname, make in solvers:
            found = sweep(sname, make, reference, scale, [target], tols)
            theirs = found.get(target)
            if theirs and mine:
                line += f" | {sname} {theirs[0] * 1e3:8.1f} ms (rtol {theirs[2]:g}) -> mna {theirs[0] / mine[0]:5.1f}x"
            else:
                line += f" | {sname} not met"
        print(line)


def main(argv):
    wanted = argv[1:]
    for case in CASES:
        if not wanted or any(w in case[0] for w in wanted):
            run_case(*case)
    # The high-Q ring over 3 ms: how many intervals.
    w = mna.parse(boost(True)).transient(until=3e-3, start="rest")
    print(f"\nboost + high-Q stray ring over 3 ms: {w.statistics['accepted_steps']} intervals "
          f"({w.statistics['path']})")


if __name__ == "__main__":
    main(sys.argv)
