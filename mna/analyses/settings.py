"""The settings of a transient run, checked: ``simulate transient ...`` or ``Circuit.transient()``.

:class:`TransientSettings` turns the settings dictionary (SI values, keys
spelled as on the ``simulate`` line) into checked numbers: every time and
tolerance finite and positive, ``tolerance`` below 100 %, the choices
known, and the work the settings alone decide (a fixed step's count, the
``sample=`` grid) within the run's :class:`~mna.limits.Limits`. The netlist
path and the Python API give the same errors, because both end here.

A ``step=`` longer than ``until=`` is shortened to ``until`` with a note in
``notes`` (the run's warnings).
"""

from __future__ import annotations

import math
from numbers import Real
from typing import Any

from ..errors import InputError, Span
from ..methods import Stepper, get_method
from ..runstate import CircuitState
from ..limits import (DEFAULT_EDGE_LIMIT, DEFAULT_MEMORY_LIMIT_MB, DEFAULT_POINT_LIMIT, DEFAULT_STEP_LIMIT,
                      Limits)

DEFAULT_METHOD = "backward-euler"
DEFAULT_TOLERANCE = 1e-3  # relative local error per step
DEFAULT_VOLTAGE_TOLERANCE = 1e-6  # V, absolute floor of the local error
DEFAULT_CURRENT_TOLERANCE = 1e-9  # A

#: The work limits: setting name -> (Limits field, default).
LIMIT_SETTINGS = {
    "step-limit": ("steps", DEFAULT_STEP_LIMIT),
    "edge-limit": ("edges", DEFAULT_EDGE_LIMIT),
    "point-limit": ("points", DEFAULT_POINT_LIMIT),
    "memory-limit": ("memory_mb", DEFAULT_MEMORY_LIMIT_MB),
}


def _number(settings: dict[str, Any], key: str, unit: str) -> float | None:
    """The setting ``key`` as a finite positive float, or None when not given."""
    value = settings.get(key)
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, Real):
        raise InputError(f"{key}= must be a number in {unit}, got {value!r}")
    value = float(value)
    if not math.isfinite(value):
        raise InputError(f"{key}= must be a finite number, got {value!r}")
    if not value > 0:
        raise InputError(f"{key}= must be positive, got {value:g} {unit}".rstrip())
    return value


class TransientSettings:
    """Checked settings of one transient run (times in s)."""

    def __init__(self, settings: dict[str, Any]):
        self.notes: list[str] = []
        until = _number(settings, "until", "s")
        if until is None:
            raise InputError("a transient run needs until= (its end time)")
        self.until = until
        self.step = _number(settings, "step", "s")
        if self.step is not None and self.step > self.until:
            self.notes.append(f"step={self.step:.6g} s is longer than until={self.until:.6g} s: "
                              f"the run takes one step of {self.until:.6g} s")
            self.step = self.until
        asked = settings.get("method")
        self.method: type[Stepper] = get_method(asked or DEFAULT_METHOD)
        #: No method named: piecewise-linear circuits take exact intervals.
        self.method_chosen = asked is None
        self.start = settings.get("start") or "dc"
        #: A run continuing from an earlier run's end (start=CircuitState): its
        #: time is the run's start time t0.
        self.initial_state: CircuitState | None = None
        self.t0 = 0.0
        if isinstance(self.start, CircuitState):
            self.initial_state, self.start, self.t0 = self.start, "state", self.start.time
            if not self.until > self.t0:
                raise InputError(f"until= ({self.until:g} s) must be after the time of the starting state "
                                 f"({self.t0:g} s): until is the time at which the run ends")
        elif self.start not in ("dc", "rest"):
            raise InputError(f"start= must be dc, rest, or a state from an earlier run "
                             f"(Waveforms.final_state), got {self.start!r}")
        self.tolerance = _number(settings, "tolerance", "") or DEFAULT_TOLERANCE
        if not self.tolerance < 1:
            raise InputError(f"tolerance= must lie between 0 and 100 %, got {self.tolerance:g}")
        self.voltage_tolerance = _number(settings, "voltage-tolerance", "V") or DEFAULT_VOLTAGE_TOLERANCE
        self.current_tolerance = _number(settings, "current-tolerance", "A") or DEFAULT_CURRENT_TOLERANCE
        self.max_step = _number(settings, "max-step", "s") or self.until / 50.0
        self.min_step = _number(settings, "min-step", "s") or self.until * 1e-13
        if self.min_step >= self.until:
            raise InputError(f"min-step={self.min_step:.6g} s must be shorter than until={self.until:.6g} s")
        self.sample = _number(settings, "sample", "s")
        #: How precisely switching events are located on the dense output (s).
        self.event_tolerance = _number(settings, "event-tolerance", "s") or self.until * 1e-12
        self.progress = settings.get("progress")
        self.limits = Limits(**{field: _limit(settings, key, default)
                                for key, (field, default) in LIMIT_SETTINGS.items()})
        if self.step is not None:
            self.limits.check_fixed_steps(self.until, self.step)
            self.limits.check_memory(self.until / self.step, 1)  # the time and at least one signal
        if self.sample is not None:
            self.limits.check_sample(self.until, self.sample)


def _limit(settings: dict[str, Any], key: str, default: float) -> float:
    value = _number(settings, key, "MB" if key == "memory-limit" else "")
    if value is None:
        return default
    return value if key == "memory-limit" else int(math.ceil(value))


def check_request(settings: dict[str, Any], span: Span | None) -> list[str]:
    """Check a ``simulate transient`` line's settings at input; errors and notes carry ``span``.

    Returns the notes (warnings) to show with the file's other warnings.
    """
    try:
        checked = TransientSettings(settings)
    except InputError as exc:
        if exc.span is None and span is not None:
            raise type(exc)(exc.message, span, hint=exc.hint) from None
        raise
    where = f"{span.where()}: " if span is not None else ""
    return [where + note for note in checked.notes]
