"""Many runs from Python: sweeps, Monte Carlo and corner runs of a circuit file.

    import mna
    result = mna.sweep("circuits/valve_rc_snubber.mna",
                       {"Rs": ["22 ohm", "47 ohm", "100 ohm"], "Cs": ["22 nF", "47 nF"]})
    result.table["peak_v"]          # numpy array, one value per run
    result.table.to_pandas()        # with pandas installed
    result.summary.yield_

    mc = mna.monte_carlo("circuits/rc_reset_delay.mna", {"C1": "uniform 10 %", "R1": "normal 2 % clip=6 %"},
                         runs=500, seed=7, jobs=4)

Each function takes a file path or netlist text. The study lines given here
replace the file's own ``sweep``, ``spread``, ``monte-carlo`` and ``corners``
lines; :func:`run_study` runs the file's own. Runs go to a local process
pool (``jobs``) or a dask cluster (``cluster``: an address or a
``dask.distributed.Client``); see :mod:`mna.runner`.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping, Sequence

from . import netlist as nl
from .analyses.sweep import STUDY_STATEMENTS, Study, _parameter_values, build_study
from .runner import RunRecord, run_study as _run
from .study import StudyTable, Summary, build_table, summarise
from .units import Quantity, unit_symbol


@dataclass
class StudyResult:
    """A finished study: the plan, one record per run, the table and its summary."""

    study: Study
    records: list[RunRecord]
    table: StudyTable
    summary: Summary

    def arrays(self) -> dict[str, Any]:
        """The table as a dict of numpy arrays (column name -> array)."""
        return dict(self.table.columns)


def _netlist(source: str | Path) -> nl.Netlist:
    text_given = isinstance(source, str) and ("\n" in source or not Path(source).is_file())
    if text_given:
        return nl.parse_netlist(str(source), None)
    return nl.parse_file(source)


def finish(study: Study, records: list[RunRecord]) -> StudyResult:
    """The table and summary of a study's records."""
    from .circuit import elaborate

    base = elaborate(nl.Netlist([st for st in study.netlist.statements if not isinstance(st, STUDY_STATEMENTS)],
                                study.netlist.file, study.netlist.text))
    table = build_table(study, records, base)
    return StudyResult(study, records, table, summarise(table, study.required_yield))


def run_study(source: str | Path | Study, *, jobs: int | None = None, cluster: Any = None,
              on_result=None) -> StudyResult:
    """Run a file's own study lines (or a built :class:`Study`)."""
    study = source if isinstance(source, Study) else build_study(_netlist(source))
    return finish(study, _run(study, jobs=jobs, cluster=cluster, on_result=on_result))


def _value_text(value: str | float | Quantity, dim) -> str:
    if isinstance(value, str):
        return value
    if isinstance(value, Quantity):
        value, dim = value.value, value.dim
    unit = unit_symbol(dim)
    return f"{float(value)!r}" + (f" {unit}" if unit else "")


def _with_lines(source: str | Path, lines: Sequence[str]) -> Study:
    base = _netlist(source)
    kept = [st for st in base.statements if not isinstance(st, STUDY_STATEMENTS)]
    extra = nl.parse_netlist("\n".join(lines), "<python>").statements
    return build_study(nl.Netlist(kept + extra, base.file, base.text))


def sweep(source: str | Path, values: Mapping[str, Sequence[str | float]], *, zipped: bool = False,
          jobs: int | None = None, cluster: Any = None) -> StudyResult:
    """Run every combination of ``values`` (name -> list of values), or with ``zipped=True``
    the lists side by side (all the same length).

    Values are quantity text (``"47 nF"``) or SI floats in the parameter's
    own unit; names are ``let`` parameters of the file.
    """
    params = _parameter_values(_netlist(source))
    axes = []
    for name, vals in values.items():
        dim = params[name].dim if name in params else None
        texts = [_value_text(v, dim) if dim is not None or isinstance(v, str) else repr(float(v)) for v in vals]
        axes.append(f"{name} = " + ", ".join(texts))
    lines = [("sweep " + " and ".join(axes))] if zipped else [f"sweep {a}" for a in axes]
    return run_study(_with_lines(source, lines), jobs=jobs, cluster=cluster)


def _spread_lines(spreads: Mapping[str, str]) -> list[str]:
    return [f"spread {target} {how}" for target, how in spreads.items()]


def monte_carlo(source: str | Path, spreads: Mapping[str, str], *, runs: int, seed: int = 1,
                required_yield: str | None = None, jobs: int | None = None, cluster: Any = None) -> StudyResult:
    """``runs`` random samples of ``spreads`` (target -> ``"uniform 10 %"``, ``"normal 2 % clip=6 %"``,
    ``"uniform 0.5 V"``), reproducible from ``seed`` whatever ``jobs`` or ``cluster``."""
    lines = _spread_lines(spreads) + [f"monte-carlo runs={int(runs)} seed={int(seed)}"]
    if required_yield is not None:
        lines.append(f"required-yield {required_yield}")
    return run_study(_with_lines(source, lines), jobs=jobs, cluster=cluster)


def corners(source: str | Path, spreads: Mapping[str, str], *, only: Sequence[str] = (),
            jobs: int | None = None, cluster: Any = None) -> StudyResult:
    """Every spread (or those in ``only``) at both of its limits, all combinations."""
    lines = _spread_lines(spreads) + ["corners " + ", ".join(only)]
    return run_study(_with_lines(source, lines), jobs=jobs, cluster=cluster)
