"""How much work one run may do: steps, source edges, output points, memory.

A netlist can ask for far more than a machine can give (``step=1e-12 s``
over 5 ms is five billion steps; a PWM at 1e12 Hz over 1 ms is four billion
edges). Each run carries a :class:`Limits`; the settings that raise them are
``step-limit=``, ``edge-limit=``, ``point-limit=`` and ``memory-limit=`` (MB)
on the ``simulate transient`` line, or the same options of
:meth:`mna.Circuit.transient` (``step_limit=...``).

- What the settings alone decide (a fixed step's count, the points of
  ``sample=``) is checked before the run starts and raised as a
  :class:`~mna.errors.LimitError` (an input error, exit status 2).
- Edges of periodic sources are counted before the array that holds them
  is built (:func:`periodic_edges`), under the limits of the run in
  progress (a context variable, so threads running circuits side by side
  keep their own).
- What only the run shows (the steps an error-controlled run takes, the
  memory of its recording) is checked as it goes; the run stops with a
  :class:`~mna.errors.LimitReached` that keeps the results computed so far.

This module is a leaf: it imports only the errors.
"""

from __future__ import annotations

import math
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass
from typing import Iterator, Sequence

import numpy as np

from .errors import LimitError, LimitReached

#: Defaults. A million-step run of a small circuit records about 0.3 GB
#: (benchmarks/bench_memory.py), so the step and point limits allow runs ten
#: times that long; the memory limit stops a wide circuit first.
DEFAULT_STEP_LIMIT = 10_000_000
DEFAULT_EDGE_LIMIT = 10_000_000
DEFAULT_POINT_LIMIT = 10_000_000
DEFAULT_MEMORY_LIMIT_MB = 4_000.0

#: Per-file time limit of ``mna check`` (s); ``--time-limit`` changes it.
DEFAULT_FILE_SECONDS = 600.0

#: Bytes per recorded number (float64).
_BYTES = 8


@dataclass(frozen=True)
class Limits:
    """The most work one transient run may do.

    ``steps``: solved steps, accepted and rejected; ``edges``: corners of
    periodic sources and gates over the run; ``points``: output samples
    (recorded points and the ``sample=`` grid); ``memory_mb``: the arrays
    that hold the recorded results, in MB (10^6 bytes).
    """

    steps: int = DEFAULT_STEP_LIMIT
    edges: int = DEFAULT_EDGE_LIMIT
    points: int = DEFAULT_POINT_LIMIT
    memory_mb: float = DEFAULT_MEMORY_LIMIT_MB

    # -- before the run -------------------------------------------------------
    def check_fixed_steps(self, until: float, step: float) -> None:
        """A fixed-step run of ``until`` (s) in steps of ``step`` (s)."""
        count = until / step
        if count > self.steps:
            raise LimitError(
                f"step={step:.6g} s over until={until:.6g} s is {count:.3g} steps, more than the "
                f"step limit of {self.steps:.3g}",
                hint="use a longer step=, or leave step= out for error-controlled steps; "
                     "to allow it, raise step-limit= on the simulate line")
        if count > self.points:
            raise LimitError(
                f"step={step:.6g} s over until={until:.6g} s records {count:.3g} points, more than "
                f"the point limit of {self.points:.3g}",
                hint="use a longer step= or sample=; to allow it, raise point-limit= on the simulate line")

    def check_sample(self, until: float, sample: float) -> None:
        """The uniform output grid of ``sample=`` (s) over ``until`` (s)."""
        count = until / sample
        if count > self.points:
            raise LimitError(
                f"sample={sample:.6g} s over until={until:.6g} s is {count:.3g} points, more than "
                f"the point limit of {self.points:.3g}",
                hint="use a longer sample=; to allow it, raise point-limit= on the simulate line")

    def check_memory(self, rows: float, columns: int, *, time: float | None = None, partial=None) -> None:
        """``rows`` recorded points of ``columns`` numbers each (plus the time column)."""
        need = rows * (columns + 1) * _BYTES / 1e6
        if need <= self.memory_mb:
            return
        message = (f"the results need {need:.4g} MB ({rows:.3g} points of {columns + 1} values), more than "
                   f"the memory limit of {self.memory_mb:.4g} MB")
        hint = "record fewer signals, or use a longer step= or sample=; to allow it, raise memory-limit= (MB)"
        if time is None:
            raise LimitError(message, hint=hint)
        raise LimitReached(f"{message}; the run stopped at t = {time:.6g} s ({hint})", time=time,
                           partial=partial)

    # -- during the run -------------------------------------------------------
    def check_run(self, steps: int, points: int, time: float) -> None:
        """Called as a run goes: ``steps`` solved so far, ``points`` recorded."""
        if steps >= self.steps:
            raise LimitReached(
                f"the run took {steps} steps, the step limit, and stopped at t = {time:.6g} s "
                "(loosen tolerance=, set a larger min-step=, or raise step-limit=)", time=time)
        if points >= self.points:
            raise LimitReached(
                f"the run recorded {points} points, the point limit, and stopped at t = {time:.6g} s "
                "(raise point-limit= to allow more)", time=time)

    def check_edges(self, count: float, what: str) -> None:
        if count > self.edges:
            raise LimitError(
                f"{what} has {count:.3g} edges over the run, more than the edge limit of {self.edges:.3g}",
                hint="check its frequency and the run's until=; to allow it, raise edge-limit= on the "
                     "simulate line")


_ACTIVE: ContextVar[Limits] = ContextVar("mna_limits", default=Limits())


def current() -> Limits:
    """The limits of the run in progress in this thread (the defaults outside a run)."""
    return _ACTIVE.get()


@contextmanager
def active(limits: Limits) -> Iterator[Limits]:
    """Make ``limits`` those of the code inside the ``with`` block (this thread only)."""
    token = _ACTIVE.set(limits)
    try:
        yield limits
    finally:
        _ACTIVE.reset(token)


def periodic_edges(start: float, stop: float, delay: float, period: float, offsets: Sequence[float],
                   what: str = "a periodic source") -> np.ndarray:
    """``delay + k*period + offset`` in (start, stop] for every period k >= 0, sorted (s).

    The count is checked against the edge limit of the run in progress
    before any array is built.
    """
    if stop <= delay or not len(offsets):
        return np.empty(0)
    periods = (stop - max(start, delay)) / period + 2.0  # inf for an absurdly short period
    current().check_edges(periods * len(offsets), what)
    first = max(0, math.floor((start - delay) / period))
    last = math.ceil((stop - delay) / period)
    k = np.arange(first, last + 1, dtype=float)[:, None]
    pts = (delay + k * period + np.asarray(offsets, dtype=float)).ravel()
    return np.unique(pts[(pts > start) & (pts <= stop)])
