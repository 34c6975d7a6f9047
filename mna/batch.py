"""Checking many circuit files at once (``mna check``): find, run in parallel, report.

- :func:`find_circuits` turns files and folders into a sorted list of
  ``*.mna`` files (folders are searched recursively; hidden folders such
  as ``.git`` or ``.venv`` are skipped).
- :func:`check_file` runs one file's analyses, measurements and checks
  and returns a :class:`FileResult` of plain data. It never raises: an
  input error, a failed simulation or a bug in mna becomes the result's
  status, so one broken file cannot stop the others.
- :func:`check_files` runs many files, each in a worker process that is
  stopped at a time limit per file, and reports each as it finishes.
- :func:`junit_xml` writes the results as a JUnit XML report: one
  ``testsuite`` per file, one ``testcase`` per check; a failed check is a
  ``failure``, a check that could not be evaluated (input error, failed
  simulation) an ``error``.
"""

from __future__ import annotations

import multiprocessing
import os
import time
import traceback
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Iterable, Sequence
from xml.etree import ElementTree as ET

from .errors import InputError, PluginError, plugin_fault, printable, printable_lines
from .limits import DEFAULT_FILE_SECONDS
from .measure import CheckResult, MeasureResult

#: File status -> exit status of ``mna check`` (the highest over all files wins).
EXIT_CODES = {"ok": 0, "failed": 1, "input": 2, "simulation": 3, "internal": 4, "plugin": 5}

#: File status -> how the report names it.
STATUS_TEXT = {
    "ok": "ok",
    "failed": "check failed",
    "input": "input error",
    "simulation": "simulation failed",
    "internal": "internal error",
    "plugin": "plugin error",
}


@dataclass
class FileResult:
    """What checking one circuit file gave; plain data, so it crosses process boundaries.

    ``status`` is ``ok`` (every check passed), ``failed`` (a check failed),
    ``input`` (the file is wrong, or a check could not be evaluated on the
    results), ``simulation`` (the solver failed) or ``internal`` (a bug in
    mna). ``message`` says why for the last three.
    """

    path: str
    status: str
    seconds: float = 0.0
    checks: list[CheckResult] = field(default_factory=list)
    measurements: list[MeasureResult] = field(default_factory=list)
    message: str = ""
    warnings: list[str] = field(default_factory=list)

    @property
    def exit_code(self) -> int:
        return EXIT_CODES[self.status]

    def count(self, status: str) -> int:
        """How many of the file's checks have ``status`` (pass, fail, error)."""
        return sum(c.status == status for c in self.checks)


# --------------------------------------------------------------------------
# Finding files.


def find_circuits(paths: Iterable[str | Path]) -> list[Path]:
    """Circuit files named by ``paths``: files as given, folders searched for ``*.mna``.

    Sorted, without repeats. Raises :class:`~mna.errors.InputError` for a
    path that does not exist and when no circuit file is found at all.
    """
    found: dict[Path, None] = {}
    for raw in paths:
        path = Path(raw)
        if path.is_dir():
            for file in sorted(path.rglob("*.mna")):
                if not any(part.startswith(".") for part in file.relative_to(path).parts[:-1]):
                    found.setdefault(file, None)
        elif path.is_file():
            found.setdefault(path, None)
        else:
            raise InputError(f"{path}: no such file or folder")
    if not found:
        raise InputError("no circuit files (*.mna) found in " + ", ".join(str(p) for p in paths))
    return sorted(found)


# --------------------------------------------------------------------------
# Checking one file.


def check_file(path: str | Path) -> FileResult:
    """Load, simulate and check one circuit file; never raises (see :class:`FileResult`)."""
    from . import load
    from .errors import MnaError
    from .measure import run_and_check

    started = time.perf_counter()
    result = FileResult(str(path), "ok")
    try:
        circuit = load(path)
        if not circuit.analyses:
            raise InputError(f"{path}: no 'simulate' line: nothing to run",
                             hint="add 'simulate dc' or 'simulate transient until=10 ms'")
        result.warnings = list(circuit.warnings)
        if _has_study(path):
            from .netlist import parse_file
            from .study_report import check_study

            result.status, result.checks, result.measurements, result.message = check_study(parse_file(path))
            result.seconds = time.perf_counter() - started
            return result
        outcome = run_and_check(circuit)
        result.checks = outcome.report.checks
        result.measurements = outcome.report.measurements
        result.warnings = list(circuit.warnings)
        if outcome.failure is not None:
            result.status, result.message = "simulation", _simulation_message(outcome.failure)
        else:
            result.status = {0: "ok", 1: "failed", 2: "input"}[outcome.report.exit_code]
    except PluginError as exc:
        result.status, result.message = "plugin", str(exc)
    except InputError as exc:
        result.status, result.message = "input", str(exc)
    except MnaError as exc:
        result.status, result.message = "simulation", _simulation_message(exc)
    except Exception as exc:  # noqa: BLE001 - reported as an internal error, the other files go on
        fault = plugin_fault(exc)
        if fault is not None:
            result.status, result.message = "plugin", str(fault)
            result.seconds = time.perf_counter() - started
            return result
        result.status = "internal"
        result.message = (f"internal error in mna (please report it with the netlist): "
                          f"{type(exc).__name__}: {exc}\n{traceback.format_exc(limit=8)}")
    result.seconds = time.perf_counter() - started
    return result


def _has_study(path: str | Path) -> bool:
    """Whether a file asks for many runs (its checks then hold over every run)."""
    from .analyses.sweep import has_study
    from .netlist import parse_file

    return has_study(parse_file(path))


def _simulation_message(exc: BaseException) -> str:
    where = getattr(exc, "time", None)
    from .units import format_si

    at = f" at t = {format_si(where, 's', 6)}" if where is not None else ""
    return f"simulation failed{at}: {exc}"


# --------------------------------------------------------------------------
# Checking many files.


def default_jobs() -> int:
    """Worker processes by default: one per CPU core."""
    return os.cpu_count() or 1





def check_files(paths: Sequence[Path], jobs: int | None = None,
                on_result: Callable[[FileResult], None] | None = None,
                on_wait: Callable[[], None] | None = None, wait_seconds: float = 0.2,
                time_limit: float | None = DEFAULT_FILE_SECONDS) -> list[FileResult]:
    """Check every file; results in the order of ``paths``.

    ``jobs`` worker processes at a time (default: one per CPU core).
    ``time_limit`` (s) bounds each file: a file still running then is
    stopped (its process killed, so even a hang inside a compiled library
    ends) and reported as a failed simulation; None (or 0) turns the limit
    off, and with ``jobs=1`` the files then run in this process.
    ``on_result(result)`` is called as each file finishes, in the order
    they finish; ``on_wait()`` every ``wait_seconds`` while waiting (to
    refresh a progress display).
    """
    jobs = default_jobs() if jobs is None else jobs
    if jobs < 1:
        raise InputError(f"--jobs needs at least 1 worker, got {jobs}")
    if time_limit is not None and not time_limit > 0:
        time_limit = None
    done: dict[Path, FileResult] = {}

    def finished(path: Path, result: FileResult) -> None:
        done[path] = result
        if on_result is not None:
            on_result(result)

    if time_limit is None and (jobs == 1 or len(paths) == 1):
        for path in paths:
            finished(path, check_file(path))
    else:
        _in_processes(paths, min(jobs, len(paths)), time_limit, finished, on_wait, wait_seconds)
    return [done[p] for p in paths]


def _child(path: Path, conn) -> None:
    """Body of a worker process: check one file, send the result back."""
    try:
        conn.send(check_file(path))
    finally:
        conn.close()


def _context():
    # Fork where there is one: a worker inherits the imported solver (and
    # scipy) instead of importing it again for every file.
    methods = multiprocessing.get_all_start_methods()
    return multiprocessing.get_context("fork" if "fork" in methods else methods[0])


def _in_processes(paths: Sequence[Path], workers: int, time_limit: float | None,
                  finished: Callable[[Path, FileResult], None], on_wait: Callable[[], None] | None,
                  wait_seconds: float) -> None:
    """One process per file, ``workers`` at a time, each killed at ``time_limit`` (s)."""
    from multiprocessing.connection import wait as wait_for

    from .analyses import transient  # noqa: F401 - imported once, before the workers fork

    ctx = _context()
    queue = list(paths)
    running: dict = {}  # connection -> (process, path, start time)
    try:
        while queue or running:
            while queue and len(running) < workers:
                path = queue.pop(0)
                receive, send = ctx.Pipe(duplex=False)
                process = ctx.Process(target=_child, args=(path, send), daemon=True)
                process.start()
                send.close()
                running[receive] = (process, path, time.monotonic())
            for conn in wait_for(list(running), timeout=wait_seconds):
                process, path, started = running.pop(conn)
                finished(path, _receive(conn, process, path, time.monotonic() - started))
            now = time.monotonic()
            for conn, (process, path, started) in list(running.items()):
                if time_limit is not None and now - started > time_limit:
                    del running[conn]
                    process.kill()
                    process.join()
                    conn.close()
                    finished(path, FileResult(
                        str(path), "simulation", seconds=now - started,
                        message=f"stopped after {time_limit:g} s, the time limit per file "
                                "(raise it with mna check --time-limit SECONDS)"))
            if on_wait is not None and running:
                on_wait()
    finally:
        for process, _, _ in running.values():
            process.kill()
        for conn, (process, _, _) in running.items():
            process.join()
            conn.close()


def _receive(conn, process, path: Path, seconds: float) -> FileResult:
    try:
        result = conn.recv()
    except (EOFError, OSError):
        process.join()
        result = FileResult(str(path), "internal", seconds=seconds,
                            message=f"the worker process checking this file died (exit status {process.exitcode})")
    conn.close()
    process.join()
    return result


def exit_code(results: Iterable[FileResult]) -> int:
    """The highest exit status over the files (0 when every check passed)."""
    return max((r.exit_code for r in results), default=0)


# --------------------------------------------------------------------------
# JUnit XML.


def _classname(path: str) -> str:
    """``circuits/relay_snubber.mna`` -> ``circuits.relay_snubber``."""
    stem = Path(path).with_suffix("")
    return ".".join(part for part in stem.parts if part not in ("/", "..", "."))


def _check_case(result: FileResult, check: CheckResult) -> ET.Element:
    case = ET.Element("testcase", classname=_classname(result.path), name=check.text,
                      file=result.path, line=str(check.line))
    if check.status == "fail":
        if check.shown_value == "none":
            message = f"no value: {check.message}"
        else:
            message = f"measured {check.shown_value}, limit {check.shown_limit}"
        failure = ET.SubElement(case, "failure", message=message, type="check failed")
        failure.text = "\n".join(line for line in (
            f"check {check.text}  ({result.path}:{check.line})",
            f"measured: {check.shown_value}",
            f"limit:    {check.shown_limit}",
            f"margin:   {check.shown_margin}" if check.shown_margin else "",
            check.message,
        ) if line)
    elif check.status == "error":
        kind = "simulation failed" if result.status == "simulation" else "input error"
        error = ET.SubElement(case, "error", message=check.message.splitlines()[0] if check.message else kind,
                              type=kind)
        error.text = check.message
    return case


def _file_case(result: FileResult) -> ET.Element:
    """The one testcase of a file that failed before its checks could be listed."""
    case = ET.Element("testcase", classname=_classname(result.path), name="load and run", file=result.path)
    error = ET.SubElement(case, "error", message=result.message.splitlines()[0] if result.message else "",
                          type=STATUS_TEXT[result.status])
    error.text = result.message
    return case


def _suite(result: FileResult) -> ET.Element:
    cases = [_check_case(result, c) for c in result.checks]
    if result.status in ("input", "simulation", "internal") and not any(c.status == "error" for c in result.checks):
        cases.append(_file_case(result))
    failures = sum(case.find("failure") is not None for case in cases)
    errors = sum(case.find("error") is not None for case in cases)
    suite = ET.Element("testsuite", name=result.path, tests=str(len(cases)), failures=str(failures),
                       errors=str(errors), skipped="0", time=f"{result.seconds:.3f}")
    if result.measurements:
        properties = ET.SubElement(suite, "properties")
        for m in result.measurements:
            value = m.shown if m.status == "ok" else f"{m.status}: {m.message.splitlines()[0] if m.message else ''}"
            ET.SubElement(properties, "property", name=f"measure {m.name}", value=value)
    suite.extend(cases)
    if result.warnings:
        ET.SubElement(suite, "system-out").text = "\n".join(f"warning: {w}" for w in result.warnings)
    return suite


def _printable_tree(root: ET.Element) -> None:
    """Escape control characters in every attribute and text (XML 1.0 cannot hold them,
    and a CI page would show them raw)."""
    for node in root.iter():
        for key, value in node.attrib.items():
            node.set(key, printable(value))
        if node.text:
            node.text = printable_lines(node.text)


def junit_xml(results: Sequence[FileResult], seconds: float, name: str = "mna check") -> bytes:
    """A JUnit XML report (UTF-8 bytes) of the files' checks."""
    root = ET.Element("testsuites", name=name)
    suites = [_suite(r) for r in results]
    for key in ("tests", "failures", "errors"):
        root.set(key, str(sum(int(s.get(key)) for s in suites)))
    root.set("time", f"{seconds:.3f}")
    root.extend(suites)
    _printable_tree(root)
    ET.indent(root)
    return ET.tostring(root, encoding="utf-8", xml_declaration=True) + b"\n"
