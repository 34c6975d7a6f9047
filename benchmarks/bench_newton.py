"""The cost of one Newton iteration on a small switched circuit, before and after.

The circuit is the PWM-driven coil with an exponential freewheel diode of
``bench_vs_solve_ivp.py`` (5 unknowns: two node potentials, the source and
coil currents, the diode's junction behind its series resistance). The
script runs it with the companion methods (which solve every step with
:func:`mna.solver.newton`), times every Newton call, and prints

- microseconds per Newton iteration (time inside ``newton`` / iterations),
- Newton iterations and LU factorizations per accepted step,

each the best of several repeats, in CPU time of this process
(``time.process_time``: on a shared, loaded machine wall-clock time counts
the waits for a core too; CPU time does not, though a loaded machine's
caches still make it slower than on an idle one). ``--before DIR`` runs the same measurement on
another checkout of the project (for instance ``git worktree add /tmp/old
main``), the two checkouts in turns in processes of their own, and prints
both with the ratio. Asserts nothing.

    python benchmarks/bench_newton.py [--before DIR] [--periods N] [--repeats N] [--rounds N]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

SWITCHED = """
voltage-source V1 sup -> gnd 12 V
inductor       Lc sup -> d   1 mH  resistance=10 ohm
switch         Q1 d -> gnd   on=50 mohm  off=10 Mohm  gate=pwm(frequency=100 kHz, duty=50 %)
diode          D1 d -> sup   saturation-current=5 nA  ideality=1.8  resistance=40 mohm
record i(Lc)
"""

METHODS = ("backward-euler", "trapezoidal", "bdf2")


def _patch_newton(counter: dict) -> None:
    """Time every call of ``mna.solver.newton``, wherever the engine imported it from."""
    import mna.solver

    original = mna.solver.newton

    def timed(*args, **kwargs):
        start = time.process_time()
        result = original(*args, **kwargs)
        counter["seconds"] += time.process_time() - start
        counter["iterations"] += result.iterations
        counter["calls"] += 1
        return result

    for name, module in list(sys.modules.items()):
        if name.startswith("mna") and getattr(module, "newton", None) is original:
            module.newton = timed


def measure_run(circuit, periods: int, repeats: int) -> dict:
    """Newton figures inside whole runs, per method (best of ``repeats``)."""
    counter = {"seconds": 0.0, "iterations": 0, "calls": 0}
    _patch_newton(counter)
    until = periods * 1e-5
    out = {}
    for method in METHODS:
        best = None
        for _ in range(repeats):
            counter.update(seconds=0.0, iterations=0, calls=0)
            res = circuit.transient(until=until, start="rest", method=method, max_step=until)
            st = res.statistics
            steps = st["accepted_steps"]
            row = {
                "us_per_iteration": counter["seconds"] / max(counter["iterations"], 1) * 1e6,
                "iterations_per_step": counter["iterations"] / steps,
                "factorizations_per_step": st["factorizations"] / steps,
            }
            if best is None or row["us_per_iteration"] < best["us_per_iteration"]:
                best = row
        out[method] = best
    return out


def measure_step(circuit, repeats: int) -> dict:
    """One backward-Euler step of 0.2 us in the freewheel phase, repeated.

    ``kept``: every call after the first starts from the Jacobian the
    previous call kept (as on a run's steady stretches); ``fresh``: the
    factorizer forgets it before each call. Microseconds per iteration are
    the best of ``repeats`` batches of calls.
    """
    import timeit

    from mna.analyses.common import prepare
    from mna.runstate import DiscreteStates
    from mna.solver import Factorizer, newton

    t = 27.5e-6  # the switch is open: the coil current freewheels through the diode
    state = circuit.transient(until=t, start="rest", method="backward-euler").final_state
    system, _ = prepare(circuit)
    states = DiscreteStates(system, t, state.switches)
    x = np.array(state.x)
    h = 0.2e-6
    history = -system.charges(x, t, states) / h
    out = {}
    for case in ("kept", "fresh"):
        fz = Factorizer(system)

        def call():
            if case == "fresh":
                fz.forget()
            return newton(system, fz, x, t + h, 1.0 / h, history, states=states)

        call()
        before = fz.factorizations
        result = call()
        assert result.converged
        number = 200
        best = min(timeit.repeat(call, number=number, repeat=repeats, timer=time.process_time)) / number
        out[case] = {"us_per_iteration": best / result.iterations * 1e6, "iterations": result.iterations,
                     "factorizations": fz.factorizations - before}
    return out


def measure(periods: int, repeats: int) -> dict:
    """Both measurements on the code importable as ``mna``."""
    import mna
    import mna.analyses.transient  # noqa: F401  (imports the solver's users before patching)

    try:
        import mna.methods  # noqa: F401  (the stepper protocol, where it exists)
    except ImportError:
        pass
    circuit = mna.parse(SWITCHED)
    step = measure_step(circuit, repeats)
    return {"step": step, "run": measure_run(circuit, periods, repeats)}


def _measure_elsewhere(directory: str, periods: int, repeats: int) -> dict:
    env = dict(os.environ, PYTHONPATH=str(Path(directory).resolve()))
    cmd = [sys.executable, str(Path(__file__).resolve()), "--json", "--periods", str(periods),
           "--repeats", str(repeats)]
    done = subprocess.run(cmd, cwd=directory, env=env, capture_output=True, text=True, check=True)
    return json.loads(done.stdout)


def _best(old: dict | None, new: dict) -> dict:
    """The faster of two measurements, row by row."""
    if old is None:
        return new
    out = {"step": {}, "run": {}}
    for part in ("step", "run"):
        for key, row in new[part].items():
            other = old[part][key]
            out[part][key] = row if row["us_per_iteration"] < other["us_per_iteration"] else other
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--before", help="another checkout of the project to compare with")
    parser.add_argument("--periods", type=int, default=40, help="PWM periods of 10 us (default 40)")
    parser.add_argument("--repeats", type=int, default=7, help="repeats; the best is kept (default 7)")
    parser.add_argument("--rounds", type=int, default=3,
                        help="with --before: turns of the two checkouts (default 3)")
    parser.add_argument("--json", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.json:
        print(json.dumps(measure(args.periods, args.repeats)))
        return
    here = str(Path(__file__).resolve().parent.parent)
    if args.before:
        # Both checkouts in turns, each in its own process, so a change in the
        # machine's load between them cannot favour either; the best of all.
        after = before = None
        for _ in range(args.rounds):
            after = _best(after, _measure_elsewhere(here, args.periods, args.repeats))
            before = _best(before, _measure_elsewhere(args.before, args.periods, args.repeats))
    else:
        sys.path.insert(0, here)
        after, before = measure(args.periods, args.repeats), None
    print(f"PWM coil with exponential freewheel diode, 5 unknowns; CPU time, best of {args.repeats} "
          "(compare the two columns of one run)")
    print("\nOne backward-Euler step of 0.2 us while the diode conducts (the same call repeated):")
    print(f"{'Jacobian':<10} {'us/iteration':>13} {'iterations':>11}" + (
        f" {'us/it before':>13} {'its before':>11} {'time ratio':>11}" if before else ""))
    for case in ("kept", "fresh"):
        a = after["step"][case]
        line = f"{case:<10} {a['us_per_iteration']:13.1f} {a['iterations']:11d}"
        if before:
            b = before["step"]["fresh"]  # the earlier code has no kept Jacobian
            line += (f" {b['us_per_iteration']:13.1f} {b['iterations']:11d} "
                     f"{(b['us_per_iteration'] * b['iterations']) / (a['us_per_iteration'] * a['iterations']):10.2f}x")
        print(line)
    print(f"\nWhole runs, {args.periods} PWM periods (Newton time / iterations inside the run):")
    head = f"{'method':<15} {'us/iteration':>13} {'its/step':>9} {'LU/step':>8}"
    if before:
        head += f" {'us/it before':>13} {'its/step before':>16} {'LU/step before':>15} {'time ratio':>11}"
    print(head)
    for method in METHODS:
        a = after["run"][method]
        line = (f"{method:<15} {a['us_per_iteration']:13.1f} {a['iterations_per_step']:9.2f} "
                f"{a['factorizations_per_step']:8.2f}")
        if before:
            b = before["run"][method]
            line += (f" {b['us_per_iteration']:13.1f} {b['iterations_per_step']:16.2f} "
                     f"{b['factorizations_per_step']:15.2f} "
                     f"{(b['us_per_iteration'] * b['iterations_per_step']) / (a['us_per_iteration'] * a['iterations_per_step']):10.2f}x")
        print(line)
    if before:
        print("time ratio: Newton time per step (or per solve), before / after")


if __name__ == "__main__":
    main()
