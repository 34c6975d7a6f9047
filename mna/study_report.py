"""What ``mna run`` prints and writes for a file with many runs.

:class:`StudyProgress` shows progress across runs: on a terminal one line
rewritten in place (``runs: 37 of 200 done, 2 failed, about 40 s left``),
in a log a plain line at every tenth of the runs. :func:`summary_lines`
gives the closing report; :func:`write_outputs` the files: ``runs.csv``
(and ``runs.parquet`` with pyarrow), ``summary.json`` and the pictures.
"""

from __future__ import annotations

import math
import time
from pathlib import Path
from typing import IO, Callable

from .console import CLEAR_LINE, duration, status_word
from .runner import RUN_STATUS, RunRecord
from .study import StudyTable, Summary, set_options, summary_json
from .units import format_si


class StudyProgress:
    """Progress across the runs of a study: done, failed, estimated time left.

    ``live`` (a terminal) rewrites one line; otherwise a plain line is
    written each time another tenth of the runs is done (and at the end).
    """

    def __init__(self, stream: IO[str], total: int, *, live: bool,
                 clock: Callable[[], float] = time.perf_counter):
        self.stream = stream
        self.total = total
        self.live = live
        self.clock = clock
        self.started = clock()
        self.done = 0
        self.failed = 0
        self._next_line = 1
        self._last_line = self.started

    def text(self) -> str:
        elapsed = self.clock() - self.started
        text = f"runs: {self.done} of {self.total} done"
        if self.failed:
            text += f", {self.failed} not passed"
        text += f", {duration(elapsed)}"
        if 0 < self.done < self.total:
            text += f", about {duration(elapsed * (self.total - self.done) / self.done)} left"
        return text

    def run_done(self, record: RunRecord) -> None:
        self.done += 1
        self.failed += record.status != "ok"
        if self.live:
            self.tick()
        elif self.done == self.total or (self.done >= self._next_line * self.total / 10
                                         and self.clock() - self._last_line >= 2.0):
            while self._next_line * self.total / 10 <= self.done:
                self._next_line += 1
            self._last_line = self.clock()
            self.stream.write("  " + self.text() + "\n")
            self.stream.flush()

    def tick(self) -> None:
        if self.live and self.done < self.total:
            self.stream.write(CLEAR_LINE + "  " + self.text())
            self.stream.flush()

    def finish(self) -> None:
        if self.live:
            self.stream.write(CLEAR_LINE)
            self.stream.flush()


def _fmt(value: float | None, unit: str) -> str:
    if value is None or not math.isfinite(value):
        return "-"
    return format_si(value, unit)


def _percent(x: float) -> str:
    return f"{100 * x:.4g} %"


def _values_text(values: dict[str, float], units: dict[str, str]) -> str:
    return ", ".join(f"{k} = {_fmt(v, units.get(k, ''))}" for k, v in values.items())


def describe_study(study, workers: str) -> list[str]:
    """The head lines: what is varied and how many runs."""
    what = {"sweep": "sweep", "monte-carlo": "Monte Carlo", "corners": "corner runs"}[study.mode]
    head = f"study: {what}, {len(study.runs)} run{'s' if len(study.runs) != 1 else ''}"
    if study.seed is not None:
        head += f" (seed {study.seed})"
    lines = [head + f", on {workers}"]
    if study.sweep_shape:
        axes = [" and ".join(labels) + f" ({n} values)" for labels, n in zip(study.sweep_labels, study.sweep_shape)]
        lines.append("  swept: " + " x ".join(axes))
    for sp in study.spreads:
        unit = study.variable(sp.label).unit
        amount = _percent(sp.amount) if sp.relative else format_si(sp.amount, unit)
        text = f"+-{amount}" if sp.distribution == "uniform" else f"standard deviation {amount}"
        if sp.clip is not None:
            text += f", clipped at +-{_percent(sp.clip) if sp.relative else format_si(sp.clip, unit)}"
        lines.append(f"  spread: {sp.label} {sp.distribution}, {text}")
    return lines


def summary_lines(table: StudyTable, summary: Summary, file: str | None, *, colour: bool = False) -> list[str]:
    """The closing report: statistics per measurement, yield and worst run per check, failed runs."""
    lines: list[str] = []
    if summary.measures:
        lines.append("measurements over the runs:")
        rows = [["", "mean", "std", "min", "p5", "p50", "p95", "max"]]
        for m in summary.measures:
            rows.append([m.name, _fmt(m.mean, m.unit), _fmt(m.std, m.unit), _fmt(m.minimum, m.unit),
                         _fmt(m.percentiles.get(5), m.unit), _fmt(m.percentiles.get(50), m.unit),
                         _fmt(m.percentiles.get(95), m.unit), _fmt(m.maximum, m.unit)])
        lines += _table(rows)
    if summary.checks:
        lines.append("checks:")
        for c in summary.checks:
            enough = c.passed >= math.ceil(summary.required_yield * c.runs - 1e-9)
            word = status_word("pass" if enough else "fail", colour)
            lines.append(f"  {word}  {c.text}   yield {c.passed}/{c.runs} ({_percent(c.yield_)})"
                         + (f", {c.not_evaluated} not evaluated" if c.not_evaluated else ""))
            if c.worst_run is not None:
                unit = table.units.get(f"margin: {c.text}", "")
                lines.append(f"         worst: run {c.worst_run}, margin {_fmt(c.worst_margin, unit)}"
                             + (f" ({_values_text(c.worst_values, table.units)})" if c.worst_values else ""))
                if c.worst_values:
                    lines.append(f"         again: {set_options(c.worst_values, table.units, file)}")
    if summary.failures:
        lines.append(f"runs that did not finish: {len(summary.failures)}")
        for run, status, message, values in summary.failures[:10]:
            first = message.strip().splitlines()[0] if message.strip() else ""
            lines.append(f"  run {run}: {RUN_STATUS[status]} ({_values_text(values, table.units)})")
            if first:
                lines.append(f"      {first}")
        if len(summary.failures) > 10:
            lines.append(f"  ... {len(summary.failures) - 10} more in summary.json")
    verdict = "pass" if summary.accepted else "fail"
    lines.append(f"yield: {summary.passed} of {summary.runs} runs pass every check ({_percent(summary.yield_)}); "
                 f"required {_percent(summary.required_yield)}: {status_word(verdict, colour).strip()}")
    return lines


def run_rows(table: StudyTable, *, colour: bool = False) -> list[str]:
    """One aligned row per run: its varied values, measurements and verdict (for small sweeps)."""
    rows = [["run"] + table.variables + table.measures + ["result"]]
    for k in range(len(table)):
        status = str(table["status"][k])
        verdict = "pass" if status == "ok" else "FAIL" if status == "failed" else RUN_STATUS[status]
        rows.append([str(int(table["run"][k]))]
                    + [_fmt(float(table[v][k]), table.units[v]) for v in table.variables]
                    + [_fmt(float(table[m][k]), table.units[m]) for m in table.measures] + [verdict])
    lines = ["runs:"] + _table(rows)
    if colour:
        lines = [line.replace("  FAIL", "  " + status_word("fail", True).strip()) for line in lines]
    return lines


def _table(rows: list[list[str]]) -> list[str]:
    widths = [max(len(r[k]) for r in rows) for k in range(len(rows[0]))]
    return ["  " + "  ".join(cell.ljust(w) if k == 0 else cell.rjust(w) for k, (cell, w) in
                             enumerate(zip(row, widths))).rstrip() for row in rows]


def write_outputs(out_dir: Path, table: StudyTable, summary: Summary, study, file: str | None, title: str,
                  *, plots: bool = True, extra: dict | None = None) -> dict[str, str]:
    """``runs.csv`` (+ ``runs.parquet``), the pictures and ``summary.json``, staged and put in
    place at once (:class:`mna.outputs.OutputFolder`); name -> final path."""
    from .outputs import OutputFolder
    from .report import _clean, write_json

    with OutputFolder(out_dir) as out:
        staged = {"csv": table.to_csv(out.stage / "runs.csv")}
        parquet = table.to_parquet(out.stage / "runs.parquet")
        if parquet is not None:
            staged["parquet"] = parquet
        if plots and len(table):
            from .study_plots import study_pictures

            staged.update(study_pictures(out.stage, table, study, title))
        outputs = {key: str(out.final_path(p)) for key, p in staged.items()}
        data = summary_json(table, summary, file, study)
        data["outputs"] = dict(outputs)
        if extra:
            data.update(extra)
        write_json(out.stage / "summary.json", _clean(data))
        outputs["json"] = str(out_dir / "summary.json")
        out.commit()
    return outputs


# --------------------------------------------------------------------------
# The command: ``mna run FILE`` on a file with many runs.


def parse_settings(items) -> dict[str, str]:
    """``["Rs=22 ohm", "C1=4.7nF"]`` -> ``{"Rs": "22 ohm", "C1": "4.7nF"}`` (``--set`` options)."""
    from .errors import InputError

    out: dict[str, str] = {}
    for item in items or ():
        name, sep, value = item.partition("=")
        name, value = name.strip(), value.strip()
        if not sep or not name or not value:
            raise InputError(f"--set {item}: expected NAME=VALUE, like --set Rs=22ohm or --set 'C1=4.7 nF'")
        if name in out:
            raise InputError(f"--set {name} is given twice")
        out[name] = value
    return out


def circuit_with_settings(netlist, settings: dict[str, str]):
    """The file's circuit with ``--set`` values: one run, every spread at nominal, no sweep."""
    from .analyses.sweep import build_study, checked_value, has_study
    from .circuit import elaborate
    from .errors import UnknownNameError

    if has_study(netlist):
        study = build_study(netlist)
        return study.circuit_for(study.settings_for(settings))
    circuit = elaborate(netlist)
    known = {**circuit.params, **circuit.block_parameters}
    values = {}
    for name, value in settings.items():
        if name not in known:
            import difflib

            close = difflib.get_close_matches(name, list(known), n=1)
            raise UnknownNameError(f"--set {name}: the file has no parameter named {name!r}",
                                   hint=f"did you mean {close[0]!r}?" if close else
                                   ("parameters: " + ", ".join(known)) if known else
                                   "add 'let NAME = VALUE' to the file and use the name")
        values[name] = checked_value(value, known[name].dim, f"--set {name}")
    return circuit.with_parameters(values)


def run_command(netlist, out_dir: Path, *, jobs: int | None, cluster: str | None, plots: bool, quiet: bool,
                stream) -> int:
    """``mna run`` on a file with sweep, spread, monte-carlo or corners lines; the exit status."""
    from .analyses.sweep import build_study
    from .console import is_terminal, wants_colour
    from .runner import default_jobs, run_study
    from .studies import finish

    study = build_study(netlist)
    if cluster:
        workers = f"the dask cluster at {cluster}"
    else:
        jobs = min(jobs if jobs is not None else default_jobs(), max(len(study.runs), 1))
        workers = f"{jobs} worker process{'es' if jobs != 1 else ''}" if jobs > 1 else "this process"
    say = (lambda *a: None) if quiet else (lambda line: print(line, file=stream))
    base_title = netlist.file or "circuit"
    for line in describe_study(study, workers):
        say(line)
    progress = StudyProgress(stream, len(study.runs), live=is_terminal(stream)) if not quiet else None
    started = time.perf_counter()
    try:
        records = run_study(study, jobs=jobs, cluster=cluster,
                            on_result=progress.run_done if progress else None,
                            on_wait=progress.tick if progress else None)
    finally:
        if progress is not None:
            progress.finish()
    seconds = time.perf_counter() - started
    result = finish(study, records)
    colour = wants_colour(stream)
    lines = summary_lines(result.table, result.summary, netlist.file, colour=colour)
    if study.mode == "sweep" and len(study.runs) <= 30:
        lines = run_rows(result.table, colour=colour) + lines
    for line in lines if not quiet else lines[-1:]:
        print(line, file=stream)
    title = f"{Path(base_title).stem}: {len(study.runs)} runs"
    try:
        outputs = write_outputs(out_dir, result.table, result.summary, study, netlist.file, title, plots=plots,
                                extra={"wall_time_s": seconds})
    except OSError as exc:
        import sys

        print(f"error: cannot write results to {out_dir}: {exc}", file=sys.stderr)
        return 2
    say(f"  {len(study.runs)} runs in {duration(seconds)}; results in {out_dir}/: "
        + ", ".join(Path(p).name for p in list(outputs.values())[:6])
        + (f" and {len(outputs) - 6} more" if len(outputs) > 6 else ""))
    return study_exit_code(result.summary)


def study_exit_code(summary: Summary) -> int:
    """0 when the study reaches its required yield; 3 when no run finished at all; else 1."""
    if summary.accepted:
        return 0
    finished = summary.by_status.get("ok", 0) + summary.by_status.get("failed", 0)
    if finished == 0 and summary.by_status.get("simulation", 0):
        return 3
    if finished == 0 and summary.by_status.get("input", 0):
        return 2
    return 1


# --------------------------------------------------------------------------
# ``mna check`` on a file with many runs.


def check_study(netlist, jobs: int | None = 1):
    """Run a file's study for ``mna check``: ``(status, checks, measurements, message)``.

    Each check line becomes one result: it passes when its yield (the share
    of runs that pass it) reaches the file's ``required-yield`` (every run
    by default); the value shown is that yield, the message the worst run
    and the ``mna run --set`` line that repeats it. With more than one
    check, a last result ``every check in the same run`` holds the file's
    own yield, which decides the file's status.
    """
    from .analyses.sweep import build_study
    from .measure import CheckResult, MeasureResult
    from .runner import run_study
    from .studies import finish

    study = build_study(netlist)
    result = finish(study, run_study(study, jobs=jobs))
    table, summary = result.table, result.summary
    need = summary.required_yield
    limit = "every run" if need >= 1.0 else f">= {_percent(need)} of runs"
    checks = []
    for c in summary.checks:
        ok = c.passed >= math.ceil(need * c.runs - 1e-9)
        message = ""
        if c.worst_run is not None and not ok:
            unit = table.units.get(f"margin: {c.text}", "")
            message = (f"worst: run {c.worst_run}, margin {_fmt(c.worst_margin, unit)}; again: "
                       f"{set_options(c.worst_values, table.units, netlist.file)}")
        checks.append(CheckResult(c.text, c.line, "yield", "pass" if ok else "fail", value=c.yield_,
                                  limit=need, shown_value=f"{c.passed}/{c.runs} runs ({_percent(c.yield_)})",
                                  shown_limit=limit, message=message))
    if len(summary.checks) != 1:
        checks.append(CheckResult("every check in the same run", 0, "yield",
                                  "pass" if summary.accepted else "fail", value=summary.yield_, limit=need,
                                  shown_value=f"{summary.passed}/{summary.runs} runs ({_percent(summary.yield_)})",
                                  shown_limit=limit))
    measurements = [MeasureResult(m.name, f"{m.name} over {m.count} runs", 0, "ok" if m.count else "none",
                                  value=m.mean, unit=m.unit,
                                  shown=f"mean {_fmt(m.mean, m.unit)}, std {_fmt(m.std, m.unit)}, "
                                        f"{_fmt(m.minimum, m.unit)} to {_fmt(m.maximum, m.unit)}")
                    for m in summary.measures]
    message = ""
    if summary.failures:
        run, status, text, values = summary.failures[0]
        first = text.strip().splitlines()[0] if text.strip() else ""
        message = (f"{len(summary.failures)} of {summary.runs} runs did not finish; the first, run {run} "
                   f"({_values_text(values, table.units)}): {RUN_STATUS[status]}: {first}")
    status = {0: "ok", 1: "failed", 2: "input", 3: "simulation"}[study_exit_code(summary)]
    return status, checks, measurements, message
