"""Running the many runs of a study: in this process, on a local process pool, or on dask.

:func:`run_study` takes a :class:`~mna.analyses.sweep.Study` and returns one
:class:`RunRecord` per run, in run order whatever order they finish in.
Each run is independent: a new circuit elaborated from the study's
netlist with the run's parameter values, then its analyses, measurements
and checks (:func:`mna.measure.run_and_check`). A run that fails (no
convergence, an input error such as a value driven negative, a bug) is
recorded with its status and message and the others go on.

Where runs go:

- ``jobs=1``: one after the other in this process;
- ``jobs=N``: a local :class:`~concurrent.futures.ProcessPoolExecutor`;
  each worker receives the study once (pool initializer);
- ``cluster=ADDRESS`` (or a ``dask.distributed.Client``): a running
  dask.distributed scheduler; the study is scattered to the workers once
  and each run is one task. dask is an optional extra (``mna[cluster]``).

The values of run k are fixed before any run starts (see
:mod:`mna.analyses.sweep`), so the table is the same for any number of
workers and any finishing order.
"""

from __future__ import annotations

import os
import time
import traceback
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field
from typing import Any, Callable, Sequence

from .analyses.sweep import RunPlan, Study, Variable
from .errors import InputError, MnaError
from .units import format_si

#: Run status -> how reports name it. "failed" is a run whose checks ran and one failed.
RUN_STATUS = {
    "ok": "passed",
    "failed": "check failed",
    "input": "input error",
    "simulation": "simulation failed",
    "internal": "internal error",
}


@dataclass
class RunRecord:
    """What one run gave; plain data, so it crosses process boundaries.

    ``values`` are the varied values the run used (label -> SI), read back
    from the elaborated circuit. ``measures`` holds each measurement's SI
    value (None without one); ``checks`` each check's ``(status, value,
    margin)`` with status ``pass``, ``fail`` or ``error``.
    """

    index: int
    status: str
    values: dict[str, float] = field(default_factory=dict)
    measures: list[float | None] = field(default_factory=list)
    checks: list[tuple[str, float | None, float | None]] = field(default_factory=list)
    message: str = ""
    seconds: float = 0.0
    measure_units: list[str] = field(default_factory=list)
    check_units: list[str] = field(default_factory=list)
    check_limits: list[tuple[float, ...]] = field(default_factory=list)  # limit lines per check (SI)

    @property
    def ok(self) -> bool:
        return self.status == "ok"


@dataclass(frozen=True, eq=False)
class Variant:
    """The part of a study every run needs: the rewritten netlist and the varied
    values' names. Sent to each worker once; each worker elaborates the
    nominal circuit once (:meth:`base`) and every run derives from it."""

    netlist: Any
    variables: tuple[Variable, ...]

    @classmethod
    def of(cls, study: Study) -> "Variant":
        variant = cls(study.netlist, tuple(study.variables))
        _BASES[id(variant)] = (variant, study.base)  # this process has it already
        return variant

    def base(self):
        """The nominal circuit, elaborated once per process."""
        found = _BASES.get(id(self))
        if found is None or found[0] is not self:
            from .circuit import elaborate

            if len(_BASES) > 8:
                _BASES.clear()
            found = _BASES[id(self)] = (self, elaborate(self.netlist))
        return found[1]


_BASES: dict[int, tuple[Variant, Any]] = {}


def run_one(variant: Variant, plan: RunPlan) -> RunRecord:
    """Elaborate, simulate and check one run; never raises (see :class:`RunRecord`)."""
    from .analyses.sweep import circuit_for, value_of
    from .measure import run_and_check

    started = time.perf_counter()
    record = RunRecord(plan.index, "internal")
    try:
        circuit = circuit_for(variant.base(), plan.overrides)
        record.values = {v.label: value_of(circuit, v.parameter) for v in variant.variables}
        outcome = run_and_check(circuit)
        record.measures = [m.value if m.status == "ok" else None for m in outcome.report.measurements]
        record.checks = [(c.status, c.value, c.margin) for c in outcome.report.checks]
        record.measure_units = [m.unit for m in outcome.report.measurements]
        record.check_units = [c.unit for c in outcome.report.checks]
        record.check_limits = [_limit_lines(c) for c in outcome.report.checks]
        if outcome.failure is not None:
            where = outcome.failure.time
            record.status = "simulation"
            at = f"at t = {format_si(where, 's', 6)}: " if where is not None else ""
            record.message = (f"{at}"
                              f"{outcome.failure.message}")
        else:
            record.status = {0: "ok", 1: "failed", 2: "input"}[outcome.report.exit_code]
            if record.status == "input":
                record.message = next((c_message(c) for c in outcome.report.checks if c.status == "error"),
                                      next((m.message for m in outcome.report.measurements
                                            if m.status == "error"), ""))
    except InputError as exc:
        record.status, record.message = "input", str(exc)
    except MnaError as exc:
        record.status, record.message = "simulation", str(exc)
    except Exception as exc:  # noqa: BLE001 - one broken run must not stop the others
        record.message = (f"internal error in mna (please report it with the netlist): "
                          f"{type(exc).__name__}: {exc}\n{traceback.format_exc(limit=6)}")
    if not record.values:
        record.values = {v.label: plan.overrides.get(v.parameter, float("nan")) for v in variant.variables}
    record.seconds = time.perf_counter() - started
    return record


def _limit_lines(check) -> tuple[float, ...]:
    if check.limit is None:
        return ()
    if check.op == "within" and check.band is not None:
        return (check.limit - check.band, check.limit + check.band)
    return (check.limit,)


def c_message(check) -> str:
    return f"check {check.text}: {check.message}"


# --------------------------------------------------------------------------
# Where runs go.


def default_jobs() -> int:
    """Worker processes by default: one per CPU core."""
    return os.cpu_count() or 1


OnResult = Callable[[RunRecord], None]


def run_study(study: Study, *, jobs: int | None = None, cluster: Any = None,
              on_result: OnResult | None = None, on_wait: Callable[[], None] | None = None,
              wait_seconds: float = 0.2) -> list[RunRecord]:
    """Run every plan of ``study``; records in run order.

    ``jobs`` local worker processes (default one per core; 1 runs here).
    ``cluster`` is a dask scheduler address (``tcp://host:8786``) or a
    ``dask.distributed.Client``; it takes precedence over ``jobs``.
    ``on_result(record)`` is called as each run finishes (in finishing
    order), ``on_wait()`` every ``wait_seconds`` while waiting.
    """
    return run_plans(Variant.of(study), study.runs, jobs=jobs, cluster=cluster, on_result=on_result,
                     on_wait=on_wait, wait_seconds=wait_seconds)


def run_plans(variant: Variant, plans: Sequence[RunPlan], *, jobs: int | None = None, cluster: Any = None,
              on_result: OnResult | None = None, on_wait: Callable[[], None] | None = None,
              wait_seconds: float = 0.2) -> list[RunRecord]:
    """As :func:`run_study`, for given plans."""
    done: dict[int, RunRecord] = {}

    def finished(record: RunRecord) -> None:
        done[record.index] = record
        if on_result is not None:
            on_result(record)

    if cluster is not None:
        _on_cluster(variant, plans, cluster, finished, on_wait, wait_seconds)
    else:
        jobs = default_jobs() if jobs is None else jobs
        if jobs < 1:
            raise InputError(f"--jobs needs at least 1 worker process, got {jobs}")
        if jobs == 1 or len(plans) <= 1:
            for plan in plans:
                finished(run_one(variant, plan))
        else:
            _in_pool(variant, plans, min(jobs, len(plans)), finished, on_wait, wait_seconds)
    return [done[p.index] for p in plans]


# The study as each pool worker received it (set once by the pool's initializer).
_WORKER_VARIANT: Variant | None = None


def _install(variant: Variant) -> None:
    global _WORKER_VARIANT
    _WORKER_VARIANT = variant


def _run_installed(plan: RunPlan) -> RunRecord:
    assert _WORKER_VARIANT is not None, "the pool's initializer did not run"
    return run_one(_WORKER_VARIANT, plan)


def _in_pool(variant: Variant, plans: Sequence[RunPlan], workers: int, finished: OnResult,
             on_wait: Callable[[], None] | None, wait_seconds: float) -> None:
    # Workers started by fork inherit what is imported here: import the
    # solver (scipy) once rather than once in every worker.
    from .analyses import transient  # noqa: F401

    with ProcessPoolExecutor(max_workers=workers, initializer=_install, initargs=(variant,)) as pool:
        pending = {pool.submit(_run_installed, plan): plan for plan in plans}
        try:
            while pending:
                ready, _ = wait(pending, timeout=wait_seconds, return_when=FIRST_COMPLETED)
                for future in ready:
                    plan = pending.pop(future)
                    finished(_collect(future, plan, variant))
                if on_wait is not None and pending:
                    on_wait()
        except BaseException:
            pool.shutdown(wait=False, cancel_futures=True)
            raise


def _collect(future, plan: RunPlan, variant: Variant) -> RunRecord:
    try:
        return future.result()
    except BrokenProcessPool as exc:
        return _lost(plan, variant, f"the worker process of this run died: {exc}")


def _lost(plan: RunPlan, variant: Variant, message: str) -> RunRecord:
    values = {v.label: plan.overrides.get(v.parameter, float("nan")) for v in variant.variables}
    return RunRecord(plan.index, "internal", values, message=message)


def cluster_client(cluster: Any):
    """A ``dask.distributed.Client`` for an address, or the client given; a clear error without dask."""
    try:
        from dask.distributed import Client
    except ImportError:
        raise InputError("--cluster needs dask.distributed, which is not installed",
                         hint="pip install 'mna[cluster]'") from None
    if isinstance(cluster, Client):
        return cluster, False
    try:
        return Client(str(cluster), timeout="10s"), True
    except (OSError, TimeoutError) as exc:
        raise InputError(f"cannot reach the dask scheduler at {cluster}: {exc}",
                         hint="start one with 'dask scheduler' and workers with 'dask worker ADDRESS'") from None


def _on_cluster(variant: Variant, plans: Sequence[RunPlan], cluster: Any, finished: OnResult,
                on_wait: Callable[[], None] | None, wait_seconds: float) -> None:
    from dask.distributed import as_completed

    client, owned = cluster_client(cluster)
    try:
        shared = client.scatter(variant, broadcast=True, hash=False)
        futures = {client.submit(run_one, shared, plan, pure=False): plan for plan in plans}
        pending = as_completed(futures, with_results=False)
        last = time.perf_counter()
        for future in pending:
            plan = futures[future]
            if future.status == "finished":
                finished(future.result())
            else:
                finished(_lost(plan, variant, f"the cluster could not run this run: {future.exception()}"))
            future.release()
            if on_wait is not None and time.perf_counter() - last > wait_seconds:
                on_wait()
                last = time.perf_counter()
    finally:
        if owned:
            client.close()
