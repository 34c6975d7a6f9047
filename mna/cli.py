"""The ``mna`` command.

    mna run FILE [--out DIR] [--no-plot] [--quiet]   run the file's analyses, write CSV, PNG, JSON
            [--set NAME=VALUE ...]         one run with parameters (or varied values) set
            [--jobs N] [--cluster ADDRESS] where a file's many runs go (sweep, spread lines)
    mna check FILE|DIR ... [--junit REPORT.xml] [--jobs N] [--quiet]
                                           CI mode: run every circuit file, summarise its checks
    mna kinds                              list the element kinds and their arguments
    mna kinds FILE                         list the blocks a netlist file defines and brings

Exit status: 0 all went well (every check passed), 1 a check failed,
2 the input is wrong (syntax, units, names, topology), 3 the simulation
failed (singular matrix, no convergence), 4 an internal error of mna,
5 an element kind from a plugin failed (it does not load, or its code raised).
``mna check`` exits with the highest status over its files.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import Sequence

EXIT_OK = 0
EXIT_CHECK_FAILED = 1
EXIT_INPUT = 2
EXIT_SIMULATION = 3
EXIT_INTERNAL = 4
EXIT_PLUGIN = 5


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="mna",
        description="Circuit solver for inductive power circuits: netlist in; waveforms, "
        "measurements and checks out.",
        epilog="exit status: 0 ok, 1 a check failed, 2 input error, 3 simulation failed, "
        "4 internal error, 5 a plugin failed",
    )
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    run = sub.add_parser("run", help="run a circuit file's analyses and write results")
    run.add_argument("file", help="netlist file (.mna)")
    run.add_argument("--out", metavar="DIR", help="output folder (default: results/<file name>)")
    run.add_argument("--no-plot", action="store_true", help="skip the PNG plot")
    run.add_argument("--quiet", "-q", action="store_true",
                     help="no progress, no tables: print only errors and failed checks")
    run.add_argument("--set", action="append", default=[], metavar="NAME=VALUE",
                     help="run once with a parameter (or a swept or spread value) set, unit-checked: "
                     "--set Rs=22ohm --set 'C1=4.7 nF'; spreads stay at nominal and sweeps are not run")
    run.add_argument("--jobs", "-j", type=int, metavar="N",
                     help="worker processes for a file's many runs (default: one per CPU core)")
    run.add_argument("--cluster", metavar="ADDRESS",
                     help="send a file's many runs to a running dask.distributed scheduler "
                     "(tcp://host:8786); needs pip install 'mna[cluster]'")
    check = sub.add_parser(
        "check", help="run every circuit file given (folders: every *.mna inside) and summarise the checks",
        description="Run circuit files in parallel and report their checks. Exit status: 0 every check "
        "passed, 1 a check failed, 2 an input error, 3 a simulation failed (the highest over all files).")
    check.add_argument("paths", nargs="+", metavar="FILE|DIR", help="circuit files or folders")
    check.add_argument("--junit", metavar="REPORT.xml", help="also write a JUnit XML report")
    check.add_argument("--jobs", "-j", type=int, metavar="N",
                       help="worker processes (default: one per CPU core; 1 runs in this process)")
    check.add_argument("--quiet", "-q", action="store_true",
                       help="no progress and no line per passing file")
    check.add_argument("--time-limit", type=float, metavar="SECONDS", default=None,
                       help="stop a file that runs longer and report it as a failed simulation "
                            "(default: 600; 0 turns the limit off)")
    kinds = sub.add_parser("kinds", help="list element kinds and their arguments (with FILE: the blocks it defines)")
    kinds.add_argument("file", nargs="?", help="netlist file: list the blocks it defines and brings")
    return p


def main(argv: Sequence[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    if args.command is None:
        _parser().print_help()
        return EXIT_OK
    try:
        if args.command == "run":
            return cmd_run(args)
        if args.command == "check":
            return cmd_check(args)
        if args.command == "kinds":
            return cmd_blocks(args.file) if args.file else cmd_kinds()
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    return EXIT_OK


def _error_exit(exc: BaseException) -> int:
    from .errors import InputError, PluginError, SimulationError, plugin_fault, printable_lines
    from .units import format_si

    if not isinstance(exc, PluginError) and not isinstance(exc, InputError):
        exc = plugin_fault(exc) or exc
    if isinstance(exc, PluginError):
        print(printable_lines(f"error in a plugin: {exc}"), file=sys.stderr)
        return EXIT_PLUGIN
    if isinstance(exc, InputError):
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_INPUT
    if isinstance(exc, SimulationError):
        where = f" (t = {format_si(exc.time, 's', 6)})" if exc.time is not None else ""
        print(printable_lines(f"simulation failed{where}: {exc.message}"), file=sys.stderr)
        return EXIT_SIMULATION
    print(printable_lines(f"internal error in mna (please report it with the netlist): "
                          f"{type(exc).__name__}: {exc}"), file=sys.stderr)
    return EXIT_INTERNAL


def cmd_run(args) -> int:
    from . import load
    from .console import RunProgress, check_lines, is_terminal, measurement_lines, wants_colour
    from .errors import InputError, MnaError, printable, printable_lines
    from .measure import run_and_check
    from .report import summary, write_json

    from .outputs import OutputFolder, folder_name

    path = Path(args.file)
    out_dir = Path(args.out) if args.out else Path("results") / folder_name(path.stem)
    say = (lambda *a: None) if args.quiet else print
    progress = RunProgress(sys.stdout) if is_terminal(sys.stdout) and not args.quiet else None
    try:
        study_code = _study_or_settings(path, out_dir, args)
        if isinstance(study_code, int):
            return study_code
        circuit = study_code if study_code is not None else load(path)
        if not circuit.analyses:
            raise InputError(f"{path}: no 'simulate' line: nothing to run",
                             hint="add 'simulate dc' or 'simulate transient until=10 ms'")
        try:
            outcome = run_and_check(circuit, progress)
        finally:
            if progress is not None:
                progress.clear()
    except InputError as exc:
        _mark_failed(out_dir, path, exc)
        return _error_exit(exc)
    except MnaError as exc:
        return _error_exit(exc)
    except Exception as exc:  # noqa: BLE001 - last line of defence: no traceback for users
        return _error_exit(exc)

    say(printable(f"circuit {circuit.name}" + (f": {circuit.title}" if circuit.title else "")))
    for w in circuit.warnings:
        print(printable_lines(f"warning: {w}"), file=sys.stderr)
    try:
        # Written into a staging folder and put in place at once (mna.outputs).
        with OutputFolder(out_dir) as out:
            staged = _write_results(circuit, outcome.results, out.stage, args, say)
            outputs = {key: str(out.final_path(p)) for key, p in staged.items()}
            extra = outcome.report.to_json()
            loss_lines = _losses(circuit, outcome, extra)
            if outcome.failure is not None:
                failure = outcome.failure
                extra.update({"status": "failed", "failure": {"message": failure.message, "time_s": failure.time,
                                                              "unknowns": list(failure.unknowns)}})
            data = summary(circuit, outcome.results, outputs, extra=extra)
            write_json(out.stage / "summary.json", data)
            outputs["json"] = str(out_dir / "summary.json")
            out.commit()
    except OSError as exc:
        print(f"error: cannot write results to {out_dir}: {exc}", file=sys.stderr)
        return EXIT_INPUT
    if outcome.failure is None:
        for line in loss_lines:
            say(line)
        for line in measurement_lines(outcome.report):
            say(line)
        for line in check_lines(outcome.report, colour=wants_colour(sys.stdout), failures_only=args.quiet):
            print(line)
    say(f"  results in {out_dir}/: " + ", ".join(Path(p).name for p in outputs.values()))
    if outcome.failure is not None:
        return _error_exit(outcome.failure)
    return outcome.exit_code


def _mark_failed(out_dir: Path, path: Path, exc: BaseException) -> None:
    """After an input error the output folder says so, rather than keep the last results as if current."""
    import json

    from .outputs import mark_failed

    text = json.dumps({"file": str(path), "status": "input error", "error": str(exc)}, indent=2) + "\n"
    try:
        mark_failed(out_dir, text)
    except OSError as exc2:
        print(f"warning: cannot mark the results in {out_dir} as out of date: {exc2}", file=sys.stderr)


def _study_or_settings(path: Path, out_dir: Path, args):
    """A file with many runs: run them (returns the exit status). With ``--set``: the
    circuit of that one run. Otherwise None (an ordinary run)."""
    from .analyses.sweep import has_study
    from .errors import InputError
    from .netlist import parse_file
    from .study_report import circuit_with_settings, parse_settings, run_command

    settings = parse_settings(args.set)
    if not path.is_file():
        return None  # load() reports it
    netlist = parse_file(path)
    if settings:
        return circuit_with_settings(netlist, settings)
    if not has_study(netlist):
        if args.cluster:
            raise InputError(f"--cluster: {path} has no sweep, spread, monte-carlo or corners line; "
                             "a single run goes nowhere else")
        return None
    if args.jobs is not None and args.jobs < 1:
        raise InputError(f"--jobs needs at least 1 worker process, got {args.jobs}")
    return run_command(netlist, out_dir, jobs=args.jobs, cluster=args.cluster, plots=not args.no_plot,
                       quiet=args.quiet, stream=sys.stdout)


def _losses(circuit, outcome, extra: dict) -> list[str]:
    """The loss table of a file with a ``losses`` line: console lines, and its part of summary.json."""
    from .losses import loss_report, table_lines
    from .results import Waveforms

    if circuit.loss_request is None or outcome.failure is not None:
        return []
    waves = next((r for r in reversed(outcome.results) if isinstance(r, Waveforms)), None)
    if waves is None:
        return ["  losses: no transient run to read them from"]
    report = loss_report(circuit, waves)
    extra["losses"] = report.to_json()
    return table_lines(report)


def _write_results(circuit, results: list, out_dir: Path, args, say) -> dict[str, str]:
    """CSV and PNG of each transient run (the record list only), and the console lines."""
    from .report import plot_waveforms
    from .results import OperatingPoint, Waveforms

    outputs: dict[str, str] = {}
    transient_count = sum(isinstance(r, Waveforms) for r in results)
    k = 0
    _write_frequency_results(circuit, results, out_dir, args, say, outputs)
    for result in results:
        if isinstance(result, OperatingPoint):
            say("  dc operating point:")
            for label, value in list(result.values.items())[:12]:
                say(f"    {label:<16} {_fmt(value, result.units.get(label, ''))}")
            if len(result.values) > 12:
                say(f"    ... {len(result.values) - 12} more in summary.json")
        elif isinstance(result, Waveforms):
            k += 1
            suffix = "" if transient_count == 1 else f"-{k}"
            recorded = _recorded(circuit, result)
            csv_path = recorded.to_csv(out_dir / f"waveforms{suffix}.csv")
            outputs[f"csv{suffix}"] = str(csv_path)
            if not args.no_plot and result.time.size > 1:
                png = plot_waveforms(out_dir / f"waveforms{suffix}.png", recorded, circuit.title or circuit.name)
                outputs[f"png{suffix}"] = str(png)
            st = result.statistics
            if result.analysis == "periodic":
                how = {"shooting": f"by shooting, {st['newton_iterations_shooting']} Newton iterations",
                       "plain periods": "by plain periods after shooting failed",
                       "not settled": "NOT SETTLED"}.get(st["steady_state"], st["steady_state"])
                say(f"  periodic steady state, period {_fmt(st['period_s'], 's')}: {how}, "
                    f"{st['periods_integrated']} periods integrated, {st['wall_time_s']:.3g} s")
                for note in result.warnings:
                    if note.startswith("simulate periodic"):
                        say(f"  warning: {note}")
                if not args.no_plot and result.time.size > 1:
                    from .harmonics import plot_spectra

                    png = plot_spectra(out_dir / f"spectrum{suffix}.png", recorded, st["period_s"],
                                       circuit.title or circuit.name)
                    if png is not None:
                        outputs[f"spectrum{suffix}"] = str(png)
                continue
            reached = float(result.time[-1]) if result.time.size else 0.0  # a run may fail at t = 0
            say(f"  transient to {_fmt(reached, 's')}: {st['steps']} steps, "
                f"{st['factorizations']} factorization{'s' if st['factorizations'] != 1 else ''}, "
                f"{st['wall_time_s']:.3g} s")
    return outputs


def _write_frequency_results(circuit, results: list, out_dir: Path, args, say, outputs: dict[str, str]) -> None:
    """CSV (magnitude, dB, phase) and Bode PNG of each frequency analysis."""
    from .results import FrequencyResponse

    from dataclasses import replace

    from .analyses.common import default_signals

    responses = [r for r in results if isinstance(r, FrequencyResponse)]
    shown = [r.label for r in (circuit.frequency_records or default_signals(circuit))]
    for k, res in enumerate(responses, start=1):
        # What record names (or the default set), not the extra quantities kept for measurements.
        keep = [label for label in shown if label in res.signals]
        res = replace(res, signals={x: res.signals[x] for x in keep}, units={x: res.units[x] for x in keep})
        suffix = "" if len(responses) == 1 else f"-{k}"
        outputs[f"frequency-csv{suffix}"] = str(res.to_csv(out_dir / f"frequency{suffix}.csv"))
        if not args.no_plot and res.frequency.size > 1 and res.labels():
            from .bode import plot_bode

            png = plot_bode(out_dir / f"bode{suffix}.png", res, circuit.title or circuit.name)
            outputs[f"bode{suffix}"] = str(png)
        st = res.statistics
        say(f"  frequency response at {st['frequencies']} frequencies, {_fmt(float(res.frequency[0]), 'Hz')} "
            f"to {_fmt(float(res.frequency[-1]), 'Hz')}: {st['unknowns']} unknowns, {st['solver']} solves, "
            f"{st['wall_time_s']:.3g} s")


def _recorded(circuit, waves):
    """The waveforms the CSV and plot show: what ``record`` names (or the default set),
    without the extra signals kept only for measurements."""
    from dataclasses import replace

    from .analyses.common import default_signals

    keep = [r.label for r in (circuit.records or default_signals(circuit)) if r.label in waves]
    return replace(waves, signals={k: waves.signals[k] for k in keep},
                   units={k: waves.units[k] for k in keep})


def cmd_check(args) -> int:
    import time

    from .batch import check_files, default_jobs, exit_code, find_circuits, junit_xml
    from .limits import DEFAULT_FILE_SECONDS
    from .console import BatchProgress, batch_summary, file_details, is_terminal, wants_colour
    from .errors import InputError
    from .results import write_atomic

    started = time.perf_counter()
    try:
        paths = find_circuits(args.paths)
        jobs = min(args.jobs if args.jobs is not None else default_jobs(), len(paths))
        if jobs < 1:
            raise InputError(f"--jobs needs at least 1 worker process, got {args.jobs}")
        if args.time_limit is not None and not args.time_limit >= 0:
            raise InputError(f"--time-limit needs a number of seconds (0 for none), got {args.time_limit}")
    except InputError as exc:
        return _error_exit(exc)
    colour = wants_colour(sys.stdout)
    display = BatchProgress(sys.stdout, len(paths), max(len(str(p)) for p in paths),
                            live=is_terminal(sys.stdout) and not args.quiet, colour=colour, quiet=args.quiet)
    try:
        results = check_files(paths, jobs, on_result=display.file_done, on_wait=display.tick,
                              time_limit=DEFAULT_FILE_SECONDS if args.time_limit is None else args.time_limit)
    finally:
        display.finish()
    seconds = time.perf_counter() - started
    troubled = [r for r in results if r.status != "ok"]
    if troubled:
        print()
    for result in troubled:
        for line in file_details(result, colour=colour):
            print(line)
    for line in batch_summary(results, seconds, jobs):
        print(line)
    code = exit_code(results)
    if args.junit:
        try:
            write_atomic(args.junit, junit_xml(results, seconds))
        except OSError as exc:
            print(f"error: cannot write the JUnit report {args.junit}: {exc}", file=sys.stderr)
            code = max(code, EXIT_INPUT)
    return code


def _fmt(value: float, unit: str) -> str:
    from .units import format_si

    try:
        return format_si(value, unit)
    except Exception:  # noqa: BLE001 - formatting must never stop a report
        return f"{value:.6g} {unit}".strip()


def cmd_kinds() -> int:
    from .circuit import ANGULAR_TEXT
    from .elements.registry import element_kinds
    from .units import describe

    for keyword, cls in sorted(element_kinds().items()):
        ports = []
        for port in cls.ports:
            if port.keyword:
                ports.append(f"[{port.names[0]}=NODE]" if port.minimum == 0 else f"{port.names[0]}=NODE")
            elif port.variadic:
                ports.append(f"{port.names[0].upper()}...")
            else:
                ports.append(" -> ".join(port.names))
        print(f"{keyword} NAME {' '.join(ports)}" + (f" [{cls.main}]" if cls.main else ""))
        if cls.summary:
            print(f"    {cls.summary}")
        for arg in cls.arguments:
            unit = describe(arg.dimension) if arg.dimension is not None else ", ".join(arg.choices) or "see docs"
            if arg.angular:
                unit = ANGULAR_TEXT
            if getattr(arg, "unit", ""):
                unit = arg.unit
            default = ("required" if arg.required else "optional" if arg.default is None
                       else f"default {arg.default!r}")
            print(f"    {arg.name}=  {unit}; {default}" + (f" -- {arg.doc}" if arg.doc else ""))
    return EXIT_OK


def cmd_blocks(file: str) -> int:
    """List the blocks a netlist file defines and brings, with their parameters."""
    from .blocks import describe_block, gather_definitions
    from .errors import InputError
    from .netlist import parse_file

    try:
        blocks = gather_definitions(parse_file(file))
    except (InputError, OSError) as exc:
        if isinstance(exc, OSError):
            exc = InputError(f"{file}: {exc.strerror or exc}")
        return _error_exit(exc)
    if not blocks:
        print(f"{file} defines no blocks (run 'mna kinds' for the built-in element kinds)")
    for block in blocks.values():
        for line in describe_block(block):
            print(line)
    return EXIT_OK


def entry() -> None:
    """Console-script entry point."""
    sys.exit(main())


if __name__ == "__main__":  # pragma: no cover
    entry()
