"""What the ``mna`` command prints: tables of measurements and checks, progress lines.

Plain functions returning lines of text, plus :class:`RunProgress` for the
one line a long transient run rewrites in place. Colour and in-place
updates (``\\r``) are for terminals only: the caller says whether the
stream is one (:func:`is_terminal`), and text for a file or a CI log holds
no control characters at all.
"""

from __future__ import annotations

import os
import time
from typing import IO, Callable

from .measure import CheckReport

# Our own colour choice: green pass, bold red fail, yellow error.
_COLOURS = {"pass": "32", "fail": "1;31", "error": "33"}
_WORDS = {"pass": "pass", "fail": "FAIL", "error": "ERROR"}
# A line is cleared by rewriting it from column 1 and erasing to its end.
CLEAR_LINE = "\r\x1b[K"


def is_terminal(stream: IO[str]) -> bool:
    """True if ``stream`` is an interactive terminal (progress and colour allowed)."""
    try:
        return stream.isatty()
    except (AttributeError, ValueError):
        return False


def wants_colour(stream: IO[str]) -> bool:
    """Colour only on a terminal, and never when NO_COLOR is set or TERM=dumb."""
    return is_terminal(stream) and not os.environ.get("NO_COLOR") and os.environ.get("TERM") != "dumb"


def status_word(status: str, colour: bool) -> str:
    """``pass``, ``FAIL`` or ``ERROR``, padded to one width, coloured on request."""
    word = f"{_WORDS[status]:<5}"
    return f"\x1b[{_COLOURS[status]}m{word}\x1b[0m" if colour else word


def _columns(rows: list[list[str]], indent: str = "  ") -> list[str]:
    """Rows of cells as left-aligned columns (the last column is not padded)."""
    widths = [max(len(row[k]) for row in rows) for k in range(len(rows[0]) - 1)]
    return [indent + "  ".join(cell.ljust(w) for cell, w in zip(row, widths)) + "  " + row[-1]
            for row in rows]


def measurement_lines(report: CheckReport) -> list[str]:
    """``measurements:`` then one aligned row per measurement: name, value, expression."""
    if not report.measurements:
        return []
    rows = []
    for m in report.measurements:
        expression = m.text.split("=", 1)[1].strip() if "=" in m.text else m.text
        value = m.shown if m.status == "ok" else ("none" if m.status == "none" else "error")
        rows.append([m.name, value, expression])
    lines = ["measurements:"] + [line.rstrip() for line in _columns(rows)]
    for m in report.measurements:
        if m.status != "ok":
            lines.extend(_detail(f"{m.name}: {m.message}"))
    return lines


def _detail(message: str) -> list[str]:
    return ["      " + line for line in message.splitlines()]


def check_lines(report: CheckReport, *, colour: bool = False, failures_only: bool = False) -> list[str]:
    """``checks: N passed, N failed`` then one aligned row per check.

    Rows: result word, the check as written, measured value, limit, margin
    (> 0 on the passing side). A failed or broken check is followed by its
    reason when it has one. ``failures_only`` leaves out passing checks.
    """
    if not report.checks:
        return []
    shown = [c for c in report.checks if not (failures_only and c.status == "pass")]
    head = f"checks: {report.count('pass')} passed, {report.count('fail')} failed"
    if report.count("error"):
        head += f", {report.count('error')} could not be evaluated"
    if not shown:
        return [] if failures_only else [head]
    rows = [["", "check", "measured", "limit", "margin"]]
    rows += [[status_word(c.status, False), c.text, c.shown_value, c.shown_limit, c.shown_margin]
             for c in shown]
    table = _columns(rows)
    lines = [head, table[0].rstrip()]
    for check, line in zip(shown, table[1:]):
        # The word is swapped for its coloured twin after alignment (escapes have no width).
        lines.append("  " + status_word(check.status, colour) + line[2 + 5:].rstrip())
        if check.message:
            lines.extend(_detail(check.message))
    return lines


def duration(seconds: float) -> str:
    """A wall-clock duration for people: ``0.4 s``, ``12 s``, ``3 min 5 s``."""
    if seconds < 10:
        return f"{seconds:.1f} s"
    if seconds < 60:
        return f"{seconds:.0f} s"
    minutes, rest = divmod(int(round(seconds)), 60)
    return f"{minutes} min {rest} s"


class RunProgress:
    """The progress line of a transient run on a terminal.

    Called as ``progress(t, until)`` (simulated seconds) by the transient
    solver; rewrites one line: ``t = 3.2 ms of 20 ms (16 %), about 4 s left``.
    The estimate assumes simulated time keeps advancing at the rate so far.
    :meth:`clear` erases the line before anything else is printed.
    """

    def __init__(self, stream: IO[str], clock: Callable[[], float] = time.perf_counter):
        self.stream = stream
        self.clock = clock
        self.started = clock()
        self.shown = False

    def __call__(self, t: float, until: float) -> None:
        self.stream.write(CLEAR_LINE + "  " + progress_text(t, until, self.clock() - self.started))
        self.stream.flush()
        self.shown = True

    def clear(self) -> None:
        if self.shown:
            self.stream.write(CLEAR_LINE)
            self.stream.flush()
            self.shown = False


def progress_text(t: float, until: float, elapsed: float) -> str:
    """``t = 3.2 ms of 20 ms (16 %), about 4 s left`` from simulated and wall time (s)."""
    from .units import format_si

    fraction = min(max(t / until, 0.0), 1.0) if until > 0 else 0.0
    text = f"t = {format_si(t, 's', 3)} of {format_si(until, 's', 3)} ({fraction * 100:.0f} %)"
    if fraction > 0 and elapsed > 0:
        text += f", about {duration(elapsed * (1 - fraction) / fraction)} left"
    return text


# --------------------------------------------------------------------------
# mna check: one line per file, a progress line, the closing summary.

_FILE_WORDS = {"ok": "pass", "failed": "fail", "input": "error", "simulation": "error", "internal": "error",
               "plugin": "error"}


def file_line(result, path_width: int, *, colour: bool = False) -> str:
    """``pass   circuits/rc.mna   4 checks passed   0.3 s`` for one checked file."""
    from .batch import STATUS_TEXT

    n = len(result.checks)
    if result.status == "ok":
        what = f"{n} check{'s' if n != 1 else ''} passed" if n else "ran, no checks"
    elif result.status == "failed":
        what = f"{result.count('fail')} of {n} check{'s' if n != 1 else ''} failed"
    else:
        what = STATUS_TEXT[result.status]
    word = status_word(_FILE_WORDS[result.status], colour)
    return f"  {word}  {result.path:<{path_width}}  {what:<24}  {duration(result.seconds)}"


def file_details(result, *, colour: bool = False) -> list[str]:
    """What went wrong in one file: its failed or broken checks, or the file's error."""
    from .batch import STATUS_TEXT
    from .measure import CheckReport

    lines = [f"{result.path}: {STATUS_TEXT[result.status]}"]
    if result.message:
        lines.extend("    " + line for line in result.message.splitlines())
    if result.status != "simulation":  # there every check says the same as the message
        report = CheckReport(result.measurements, result.checks)
        lines.extend(check_lines(report, colour=colour, failures_only=True)[1:])
    return lines


def batch_summary(results, seconds: float, jobs: int) -> list[str]:
    """The closing lines: counts of checks and files, then ``N passed, N failed[, N files with errors]`` alone."""
    passed = sum(r.count("pass") for r in results)
    failed = sum(r.count("fail") for r in results)
    broken = sum(r.count("error") for r in results)
    files = {status: sum(r.status == status for r in results) for status in _FILE_WORDS}
    checks = f"checks: {passed} passed, {failed} failed" + (f", {broken} not evaluated" if broken else "")
    parts = [f"{files['ok']} ok"]
    for status, words in (("failed", "with a failed check"), ("input", "with an input error"),
                          ("simulation", "with a failed simulation"), ("internal", "with an internal error"),
                          ("plugin", "with a plugin error")):
        if files[status]:
            parts.append(f"{files[status]} {words}")
    workers = f"{jobs} worker{'s' if jobs != 1 else ''}"
    # The last line stands alone for scripts and CI logs; files that could
    # not be run at all (input, simulation, plugin or internal errors) are
    # counted there too, so a run where every file failed to load does not
    # end in "0 passed, 0 failed".
    errors = sum(files[status] for status in ("input", "simulation", "internal", "plugin"))
    last = f"{passed} passed, {failed} failed" + (f", {errors} file{'s' if errors != 1 else ''} with errors"
                                                  if errors else "")
    return [f"{checks}; files: {', '.join(parts)} ({len(results)} in {duration(seconds)}, {workers})", last]


class BatchProgress:
    """Reports files as they finish: a line each, and on a terminal a live status line.

    ``quiet`` leaves out the lines of files whose checks all passed.
    """

    def __init__(self, stream: IO[str], total: int, path_width: int, *, live: bool, colour: bool,
                 quiet: bool = False, clock: Callable[[], float] = time.perf_counter):
        self.stream = stream
        self.total = total
        self.path_width = path_width
        self.live = live
        self.colour = colour
        self.quiet = quiet
        self.clock = clock
        self.started = clock()
        self.done = 0
        self.bad = 0

    def file_done(self, result) -> None:
        self.done += 1
        self.bad += result.status != "ok"
        if self.live:
            self.stream.write(CLEAR_LINE)
        if not (self.quiet and result.status == "ok"):
            self.stream.write(file_line(result, self.path_width, colour=self.colour) + "\n")
        self.tick()

    def tick(self) -> None:
        if self.live and self.done < self.total:
            text = (f"  checking: {self.done} of {self.total} files done"
                    + (f", {self.bad} not ok" if self.bad else "")
                    + f", {duration(self.clock() - self.started)}")
            self.stream.write(CLEAR_LINE + text)
        self.stream.flush()

    def finish(self) -> None:
        if self.live:
            self.stream.write(CLEAR_LINE)
            self.stream.flush()
