"""The results of a study: one table row per run, its statistics, yields and worst runs.

:class:`StudyTable` holds the columns as numpy arrays (``table["Rs"]``,
``table["t63"]``) with their SI units, and writes them as CSV (always)
and Parquet (when pyarrow is installed); :meth:`StudyTable.to_pandas`
gives a pandas frame when pandas is installed. :func:`summarise` computes
per measurement the mean, standard deviation, extremes and percentiles;
per check the yield (the share of runs that pass it) and the worst run,
with the ``--set`` options that run it again alone.

Columns, in order: ``run`` (index), ``status`` (``ok``, ``failed``,
``input``, ``simulation``, ``internal``), each varied value by its label,
each measurement by its name (NaN when it has no value), then per check
``pass: TEXT`` (1 pass, 0 fail, NaN not evaluated) and ``margin: TEXT``
(SI, > 0 on the passing side).
"""

from __future__ import annotations

import math
import shlex
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from .runner import RunRecord

PERCENTILES = (1, 5, 50, 95, 99)


@dataclass(frozen=True)
class CheckColumn:
    """A check line of the file: its text, line and the comparison's parts."""

    text: str
    line: int
    op: str
    unit: str = ""
    left_name: str | None = None  # the measurement its left side is, if it is one alone


@dataclass
class StudyTable:
    """One row per run. ``columns`` maps a column name to a numpy array (``status``
    holds strings); ``units`` gives each numeric column's SI unit symbol."""

    columns: dict[str, np.ndarray]
    units: dict[str, str]
    variables: list[str]
    measures: list[str]
    checks: list[CheckColumn]
    messages: list[str] = field(default_factory=list)
    limits: dict[str, list[float]] = field(default_factory=dict)  # check text -> limit lines (SI)

    def __getitem__(self, name: str) -> np.ndarray:
        return self.columns[name]

    def __len__(self) -> int:
        return len(self.columns["run"])

    @property
    def names(self) -> list[str]:
        return list(self.columns)

    def passed(self) -> np.ndarray:
        """Per run: True when the run finished and every check passed."""
        return self.columns["status"] == "ok"

    def to_pandas(self):
        """The table as a ``pandas.DataFrame`` (needs pandas)."""
        try:
            import pandas as pd
        except ImportError:
            raise ImportError("StudyTable.to_pandas needs pandas: pip install pandas") from None
        return pd.DataFrame(self.columns)

    def to_csv(self, path: str | Path) -> Path:
        """Write the table as CSV (a heading row of column names, then one row per run)."""
        import csv
        import io

        from .results import write_atomic

        buffer = io.StringIO()
        writer = csv.writer(buffer, lineterminator="\n")
        names = list(self.columns)
        writer.writerow(names)
        for k in range(len(self)):
            row = []
            for name in names:
                value = self.columns[name][k]
                if isinstance(value, (str, np.str_)):
                    row.append(str(value))
                elif name == "run":
                    row.append(str(int(value)))
                else:
                    row.append("" if not math.isfinite(float(value)) else repr(float(value)))
            writer.writerow(row)
        path = Path(path)
        write_atomic(path, buffer.getvalue().encode("utf-8"))
        return path

    def to_parquet(self, path: str | Path) -> Path | None:
        """Write the table as Parquet with the units as column metadata; None without pyarrow."""
        try:
            import pyarrow as pa
            import pyarrow.parquet as pq
        except ImportError:
            return None
        fields = []
        for name, values in self.columns.items():
            meta = {b"unit": self.units.get(name, "").encode()}
            fields.append(pa.field(name, pa.array(values).type, metadata=meta))
        table = pa.table({k: pa.array(v) for k, v in self.columns.items()}, schema=pa.schema(fields))
        path = Path(path)
        path.parent.mkdir(parents=True, exist_ok=True)
        pq.write_table(table, path)
        return path


def build_table(study, records: Sequence[RunRecord], base_circuit) -> StudyTable:
    """The run table of ``records`` (in run order) for ``study``; ``base_circuit`` names the
    measurements and checks."""
    from . import netlist as nl

    n = len(records)
    columns: dict[str, np.ndarray] = {
        "run": np.array([r.index for r in records], dtype=int),
        "status": np.array([r.status for r in records], dtype=object).astype(str),
    }
    units: dict[str, str] = {"run": "", "status": ""}
    for var in study.variables:
        columns[var.label] = np.array([r.values.get(var.label, np.nan) for r in records], dtype=float)
        units[var.label] = var.unit
    measure_names = [st.name for st in base_circuit.measures]
    measure_units = _first_units(records, len(measure_names), "measure_units")
    for k, name in enumerate(measure_names):
        columns[name] = np.array([_at(r.measures, k) for r in records], dtype=float)
        units[name] = measure_units[k]
    checks: list[CheckColumn] = []
    check_units = _first_units(records, len(base_circuit.checks), "check_units")
    for k, st in enumerate(base_circuit.checks):
        left = st.left.name if isinstance(st.left, nl.Name) and st.left.name in measure_names else None
        check = CheckColumn(st.text, st.span.line, st.op, check_units[k], left)
        checks.append(check)
        status = [r.checks[k][0] if k < len(r.checks) else "error" for r in records]
        columns[f"pass: {st.text}"] = np.array([1.0 if s == "pass" else 0.0 if s == "fail" else np.nan
                                                for s in status])
        units[f"pass: {st.text}"] = ""
        columns[f"margin: {st.text}"] = np.array([_none_nan(r.checks[k][2]) if k < len(r.checks) else np.nan
                                                  for r in records], dtype=float)
        units[f"margin: {st.text}"] = check.unit
        columns[f"value: {st.text}"] = np.array([_none_nan(r.checks[k][1]) if k < len(r.checks) else np.nan
                                                 for r in records], dtype=float)
        units[f"value: {st.text}"] = check.unit
    table = StudyTable(columns, units, [v.label for v in study.variables], measure_names, checks,
                       [r.message for r in records])
    table.limits = _limits(records, base_circuit.checks)
    assert all(len(v) == n for v in columns.values())
    return table


def _first_units(records: Sequence[RunRecord], count: int, attribute: str) -> list[str]:
    for r in records:
        got = getattr(r, attribute, None)
        if got and len(got) == count:
            return list(got)
    return [""] * count


def _limits(records: Sequence[RunRecord], statements) -> dict[str, list[float]]:
    """The limit lines of each check (SI), from the first run that evaluated it."""
    out: dict[str, list[float]] = {}
    for k, st in enumerate(statements):
        for r in records:
            limits = getattr(r, "check_limits", None)
            if limits and k < len(limits) and limits[k]:
                out[st.text] = list(limits[k])
                break
    return out


def _at(values: Sequence[float | None], k: int) -> float:
    return _none_nan(values[k]) if k < len(values) else np.nan


def _none_nan(value: float | None) -> float:
    return np.nan if value is None else float(value)


# --------------------------------------------------------------------------
# Statistics.


@dataclass
class MeasureStatistics:
    name: str
    unit: str
    count: int  # runs with a value
    mean: float
    std: float  # sample standard deviation (n - 1)
    minimum: float
    maximum: float
    percentiles: dict[int, float]


@dataclass
class CheckStatistics:
    text: str
    line: int
    passed: int
    runs: int
    worst_run: int | None  # index of the run with the smallest margin (a failed run if any)
    worst_margin: float | None
    worst_values: dict[str, float] = field(default_factory=dict)
    not_evaluated: int = 0

    @property
    def yield_(self) -> float:
        return self.passed / self.runs if self.runs else 0.0


@dataclass
class Summary:
    runs: int
    passed: int  # runs that finished with every check passing
    by_status: dict[str, int]
    required_yield: float
    measures: list[MeasureStatistics]
    checks: list[CheckStatistics]
    failures: list[tuple[int, str, str, dict[str, float]]]  # (run, status, message, values) of broken runs

    @property
    def yield_(self) -> float:
        return self.passed / self.runs if self.runs else 0.0

    @property
    def accepted(self) -> bool:
        """Whether the study passes: the share of runs passing every check reaches the required yield."""
        return self.runs > 0 and self.passed >= math.ceil(self.required_yield * self.runs - 1e-9)


def summarise(table: StudyTable, required_yield: float = 1.0) -> Summary:
    """Statistics of every measurement, yield and worst run of every check."""
    status = table["status"]
    measures = []
    for name in table.measures:
        values = table[name][np.isfinite(table[name])]
        if values.size:
            pct = {p: float(np.percentile(values, p)) for p in PERCENTILES}
            std = float(np.std(values, ddof=1)) if values.size > 1 else 0.0
            measures.append(MeasureStatistics(name, table.units[name], int(values.size), float(values.mean()), std,
                                              float(values.min()), float(values.max()), pct))
        else:
            measures.append(MeasureStatistics(name, table.units[name], 0, np.nan, np.nan, np.nan, np.nan, {}))
    checks = []
    for check in table.checks:
        passes = table[f"pass: {check.text}"]
        margins = table[f"margin: {check.text}"]
        finite = np.isfinite(margins)
        worst = int(np.argmin(np.where(finite, margins, np.inf))) if finite.any() else None
        stats = CheckStatistics(check.text, check.line, int(np.nansum(passes == 1.0)), len(table),
                                None if worst is None else int(table["run"][worst]),
                                None if worst is None else float(margins[worst]),
                                not_evaluated=int(np.isnan(passes).sum()))
        if worst is not None:
            stats.worst_values = {v: float(table[v][worst]) for v in table.variables}
        checks.append(stats)
    by_status: dict[str, int] = {}
    for s in status:
        by_status[str(s)] = by_status.get(str(s), 0) + 1
    failures = [(int(table["run"][k]), str(status[k]), table.messages[k] if k < len(table.messages) else "",
                 {v: float(table[v][k]) for v in table.variables})
                for k in range(len(table)) if status[k] not in ("ok", "failed")]
    return Summary(len(table), int((status == "ok").sum()), by_status, required_yield, measures, checks, failures)


def set_options(values: dict[str, float], units: dict[str, str], file: str | None = None) -> str:
    """``mna run FILE --set Rs=22 ohm ...`` text that runs one row again alone."""
    parts = ["mna", "run", file or "FILE"]
    for label, value in values.items():
        unit = units.get(label, "")
        parts += ["--set", f"{label}={value:.10g}{(' ' + unit) if unit else ''}"]
    return " ".join(shlex.quote(p) for p in parts)


def summary_json(table: StudyTable, summary: Summary, file: str | None, study) -> dict[str, Any]:
    """The study's summary as plain data for ``summary.json``."""
    def num(x: float | None) -> float | None:
        return None if x is None or not math.isfinite(x) else x

    return {
        "study": {"mode": study.mode, "runs": summary.runs, "seed": study.seed,
                  "required_yield": summary.required_yield, "yield": summary.yield_,
                  "accepted": summary.accepted, "by_status": summary.by_status,
                  "varied": {v.label: {"unit": v.unit, "role": v.role} for v in study.variables}},
        "measurements": [{"name": m.name, "unit": m.unit, "runs_with_value": m.count, "mean": num(m.mean),
                          "std": num(m.std), "min": num(m.minimum), "max": num(m.maximum),
                          "percentiles": {str(p): v for p, v in m.percentiles.items()}} for m in summary.measures],
        "checks": [{"check": c.text, "line": c.line, "passed": c.passed, "runs": c.runs, "yield": c.yield_,
                    "not_evaluated": c.not_evaluated, "worst_run": c.worst_run, "worst_margin": num(c.worst_margin),
                    "worst_values": c.worst_values,
                    "rerun": set_options(c.worst_values, table.units, file) if c.worst_run is not None else None}
                   for c in summary.checks],
        "failed_runs": [{"run": run, "status": status, "message": message, "values": values}
                        for run, status, message, values in summary.failures],
    }
