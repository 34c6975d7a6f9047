"""The ``mna`` command.

    mna run FILE [--out DIR] [--no-plot]   run the file's analyses, write CSV, PNG, JSON
    mna kinds                              list the element kinds and their arguments

Exit status: 0 all went well (every check passed), 1 a check failed,
2 the input is wrong (syntax, units, names, topology), 3 the simulation
failed (singular matrix, no convergence), 4 an internal error of mna.
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


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="mna",
        description="Circuit solver for inductive power circuits: netlist in; waveforms, "
        "measurements and checks out.",
        epilog="exit status: 0 ok, 1 a check failed, 2 input error, 3 simulation failed",
    )
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    run = sub.add_parser("run", help="run a circuit file's analyses and write results")
    run.add_argument("file", help="netlist file (.mna)")
    run.add_argument("--out", metavar="DIR", help="output folder (default: results/<file name>)")
    run.add_argument("--no-plot", action="store_true", help="skip the PNG plot")
    run.add_argument("--quiet", "-q", action="store_true", help="print only errors and failed checks")
    sub.add_parser("kinds", help="list element kinds and their arguments")
    return p


def main(argv: Sequence[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    if args.command is None:
        _parser().print_help()
        return EXIT_OK
    try:
        if args.command == "run":
            return cmd_run(args)
        if args.command == "kinds":
            return cmd_kinds()
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    return EXIT_OK


def _error_exit(exc: BaseException) -> int:
    from .errors import InputError, SimulationError

    if isinstance(exc, InputError):
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_INPUT
    if isinstance(exc, SimulationError):
        where = f" (t = {exc.time:.6g} s)" if exc.time is not None else ""
        print(f"simulation failed{where}: {exc.message}", file=sys.stderr)
        return EXIT_SIMULATION
    print(f"internal error in mna (please report it with the netlist): {type(exc).__name__}: {exc}",
          file=sys.stderr)
    return EXIT_INTERNAL


def cmd_run(args) -> int:
    from . import load
    from .errors import MnaError, SimulationError
    from .report import plot_waveforms, summary, write_json
    from .results import OperatingPoint, Waveforms

    path = Path(args.file)
    out_dir = Path(args.out) if args.out else Path("results") / path.stem
    say = (lambda *a: None) if args.quiet else print
    try:
        circuit = load(path)
        if not circuit.analyses:
            from .errors import InputError

            raise InputError(f"{path}: no 'simulate' line: nothing to run",
                             hint="add 'simulate dc' or 'simulate transient until=10 ms'")
        results = []
        failure: SimulationError | None = None
        for request in circuit.analyses:
            try:
                results.extend(_run_one(circuit, request))
            except SimulationError as exc:
                failure = exc
                if isinstance(exc.partial, Waveforms):
                    results.append(exc.partial)
                break
    except MnaError as exc:
        return _error_exit(exc)
    except Exception as exc:  # noqa: BLE001 - last line of defence: no traceback for users
        return _error_exit(exc)

    title = circuit.title or circuit.name
    say(f"circuit {circuit.name}" + (f": {circuit.title}" if circuit.title else ""))
    for w in circuit.warnings:
        print(f"warning: {w}", file=sys.stderr)
    outputs: dict[str, str] = {}
    transient_count = sum(isinstance(r, Waveforms) for r in results)
    k = 0
    try:
        for request, result in zip(circuit.analyses, results):
            if isinstance(result, OperatingPoint):
                say("  dc operating point:")
                for label, value in list(result.values.items())[:12]:
                    say(f"    {label:<16} {_fmt(value, result.units.get(label, ''))}")
                if len(result.values) > 12:
                    say(f"    ... {len(result.values) - 12} more in summary.json")
            elif isinstance(result, Waveforms):
                k += 1
                suffix = "" if transient_count == 1 else f"-{k}"
                csv_path = result.to_csv(out_dir / f"waveforms{suffix}.csv")
                outputs[f"csv{suffix}"] = str(csv_path)
                if not args.no_plot and result.time.size > 1:
                    png = plot_waveforms(out_dir / f"waveforms{suffix}.png", result, title)
                    outputs[f"png{suffix}"] = str(png)
                st = result.statistics
                say(f"  transient to {_fmt(float(result.time[-1]), 's')}: {st['steps']} steps, "
                    f"{st['factorizations']} factorisation{'s' if st['factorizations'] != 1 else ''}, "
                    f"{st['wall_time_s']:.3g} s")
        data = summary(circuit, results, outputs)
        write_json(out_dir / "summary.json", data)
        outputs["json"] = str(out_dir / "summary.json")
    except OSError as exc:
        print(f"error: cannot write results to {out_dir}: {exc}", file=sys.stderr)
        return EXIT_INPUT
    say(f"  results in {out_dir}/: " + ", ".join(Path(p).name for p in outputs.values()))
    if failure is not None:
        return _error_exit(failure)
    return EXIT_OK


def _run_one(circuit, request):
    from .analyses.transient import transient

    if request.analysis == "dc":
        return [circuit.dc()]
    return [transient(circuit, dict(request.settings), None)]


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
                ports.append(f"{port.names[0]}=NODE")
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
            default = ("required" if arg.required else "optional" if arg.default is None
                       else f"default {arg.default!r}")
            print(f"    {arg.name}=  {unit}; {default}")
    return EXIT_OK


def entry() -> None:
    """Console-script entry point."""
    sys.exit(main())


if __name__ == "__main__":  # pragma: no cover
    entry()
