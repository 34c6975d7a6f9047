"""Periodic steady state by shooting: the start-of-period state that repeats after one period.

A switched converter driven with period T settles, after its slow modes
have died out, into a waveform that repeats every period. Integrating until
then can take thousands of periods. Shooting (Aprille & Trick, "Steady-state
analysis of nonlinear circuits with periodic inputs", Proc. IEEE 60(1),
1972) finds the start-of-period state directly: with ``P(x0)`` the state
one period after ``x0`` (one transient run), it solves ``P(x0) - x0 = 0`` by
Newton's method over the differential unknowns (those that carry charge or
flux: capacitor voltages, inductor and winding currents, shaft speeds; the
switch states at the start of the period come with the run):

    (M - I) dx = -(P(x0) - x0),   M = dP/dx0

**The sensitivity M** is taken by finite differences of the period map:
one extra period per differential unknown, each started from ``x0`` with that
unknown moved by a small step (1e-6 of its scale); later iterations update
it by Broyden's rank-one formula from their own steps and take it afresh
only when a step fails. For a circuit that is
linear between switching instants set by time (PWM, schedules), the period
map is affine and the difference quotient is exact up to round-off; with
error-controlled steps it is exact as long as the perturbation does not
change a step-size decision (a changed decision shows up as a Newton step
that does not reduce the mismatch, and the step is then halved). Sensitivities
from the integration itself (the variational equations) would cost less
for circuits with many capacitors and inductors; they are not done here.

**Convergence**: every differential unknown repeats within
``repeat-tolerance`` of its scale (the largest magnitude it or another
unknown of the same unit reaches, at 1e-3 of the latter) after one period.
If Newton's method does not get there within ``newton-limit`` iterations, the
analysis falls back to plain periods from the best state found, up to
``period-limit`` periods, and says so in the result's warnings.

Every period run starts at t = 0, so every source and gate must repeat with
the period: the corners of the first two periods are compared and a
mismatch is an input error.
"""

from __future__ import annotations

import math
import time as _time
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any, Sequence

import numpy as np

from ..errors import InputError, SimulationError, UnknownNameError
from ..results import Waveforms
from ..runstate import CircuitState
from ..units import AMPERE, VOLT
from .common import default_signals, prepare
from .transient import transient

if TYPE_CHECKING:  # pragma: no cover
    from ..circuit import Circuit
    from ..values import SignalRef

#: Settings of ``simulate periodic`` that belong to it; the others go to the period runs.
OWN_SETTINGS = ("period", "period-of", "repeat-tolerance", "newton-limit", "periods", "warmup",
                "period-limit")
DEFAULT_REPEAT_TOLERANCE = 1e-6
DEFAULT_NEWTON_LIMIT = 12
DEFAULT_PERIOD_LIMIT = 2000
#: Finite-difference step of the period map, relative to each unknown's scale.
PERTURBATION = 1e-6
#: A Jacobian M - I whose equilibrated condition number exceeds this has a
#: mode that neither grows nor decays over a period (a capacitor with no DC
#: path, a shaft angle): there is no steady state to find.
SINGULAR_CONDITION = 1e8
#: Halvings of a Newton step that does not reduce the mismatch.
MAX_HALVINGS = 2


@dataclass
class PeriodicSettings:
    """Checked settings of one periodic analysis (times in s)."""

    period: float
    repeat_tolerance: float
    newton_limit: int
    periods: int
    warmup: int
    period_limit: int
    run_settings: dict[str, Any]


def _count(settings: dict, key: str, default: int, least: int) -> int:
    value = settings.get(key)
    if value is None:
        return default
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) \
            or value != int(value) or value < least:
        raise InputError(f"{key}= must be a whole number of at least {least}, got {value!r}")
    return int(value)


def period_of(circuit: "Circuit", name: str) -> float:
    """The period (s) of a named element's PWM gate (a switch, a transistor) or periodic source waveform."""
    from ..elements.switches import PwmGate
    from ..waveforms import Pulse, Sine

    element = circuit.elements.get(name)
    if element is None:
        import difflib

        close = difflib.get_close_matches(name, list(circuit.elements), n=1)
        raise UnknownNameError(f"simulate periodic period-of={name}: no element named {name!r}",
                               hint=f"did you mean {close[0]!r}?" if close else None)
    for gate in (getattr(element, "gate", None), getattr(element, "spec", None)):  # compiled, or as given
        if isinstance(gate, PwmGate):
            return gate.period
    for value in element.params.values():
        if isinstance(value, (Pulse, Sine)):
            return 1.0 / value.frequency
    raise InputError(f"simulate periodic period-of={name}: {element.keyword} {name} has no pwm() gate or "
                     "pwm()/sine() waveform to take a period from", hint="give period= instead")


def check_settings(circuit: "Circuit", settings: dict[str, Any]) -> PeriodicSettings:
    """The settings of ``simulate periodic`` (or ``Circuit.periodic``), checked."""
    period, source = settings.get("period"), settings.get("period-of")
    if (period is None) == (source is None):
        raise InputError("simulate periodic needs either period= (a time) or period-of= (a switch with a "
                         "pwm() gate, or a source with a pwm() or sine() waveform)")
    if source is not None:
        name = getattr(source, "name", source)
        if not isinstance(name, str):
            raise InputError("period-of= takes an element name, like period-of=Q1")
        period = period_of(circuit, name)
    period = float(period)
    if not (math.isfinite(period) and period > 0):
        raise InputError(f"period= must be a positive time, got {period!r}")
    tol = settings.get("repeat-tolerance")
    tol = DEFAULT_REPEAT_TOLERANCE if tol is None else float(tol)
    if not 0 < tol < 1:
        raise InputError(f"repeat-tolerance= must lie between 0 and 100 %, got {tol:g}")
    run = {k: v for k, v in settings.items() if k not in OWN_SETTINGS and v is not None}
    if "until" in run or "start" in run and not isinstance(run["start"], str):
        raise InputError("simulate periodic sets until= and start= of its period runs itself")
    return PeriodicSettings(
        period=period, repeat_tolerance=tol,
        newton_limit=_count(settings, "newton-limit", DEFAULT_NEWTON_LIMIT, 1),
        periods=_count(settings, "periods", 1, 1),
        warmup=_count(settings, "warmup", 1, 1),
        period_limit=_count(settings, "period-limit", DEFAULT_PERIOD_LIMIT, 1),
        run_settings=run,
    )


def check_repeats(system, period: float) -> None:
    """Refuse a circuit whose corners (PWM and source edges, schedule times) do
    not repeat with ``period``: shooting starts every period at t = 0."""
    first = system.corners(0.0, period)
    second = system.corners(period, 2.0 * period) - period
    first = first[first < period * (1 - 1e-9)]
    second = second[second < period * (1 - 1e-9)]
    tol = 1e-9 * period
    if first.size == second.size and (first.size == 0 or np.all(np.abs(first - second) <= tol)):
        return
    extra = np.setdiff1d(np.round(np.concatenate([first, second]) / tol), np.round(
        np.intersect1d(np.round(first / tol), np.round(second / tol))))
    where = f" (an edge at {extra[0] * tol:.6g} s into one period has no match in the other)" if extra.size else ""
    raise InputError(f"simulate periodic: the sources and gates do not repeat every {period:.6g} s{where}",
                     hint="every pwm(), schedule() and piecewise() must have the period (or a whole "
                          "fraction of it); give period= the period of the slowest source")


class _Shooting:
    """One periodic analysis: period runs, the mismatch, Newton's method."""

    def __init__(self, circuit: "Circuit", cfg: PeriodicSettings):
        self.circuit = circuit
        self.cfg = cfg
        system, _ = prepare(circuit)
        self.system = system
        check_repeats(system, cfg.period)
        cols = set(np.flatnonzero(np.diff(system.C.tocsc().indptr)).tolist())
        for slot in system.batches:
            cols.update(int(c) for c in np.asarray(slot.batch.jq_cols).tolist())
        #: The differential unknowns: those that carry charge or flux.
        self.diff = np.array(sorted(cols), dtype=np.int64)
        self.is_volt = np.array([system.dims[i] == VOLT for i in self.diff])
        self.is_amp = np.array([system.dims[i] == AMPERE for i in self.diff])
        self.probe_refs = default_signals(circuit)[:1]
        self.periods = 0
        self.iterations = 0

    def run(self, state: CircuitState | str, periods: int = 1, records: Any = "probe") -> Waveforms:
        settings = dict(self.cfg.run_settings)
        settings["until"] = periods * self.cfg.period
        settings["start"] = state.at(0.0) if isinstance(state, CircuitState) else state
        self.periods += periods
        return transient(self.circuit, settings, self.probe_refs if records == "probe" else records)

    def end(self, state: CircuitState) -> CircuitState:
        """The state one period after ``state``."""
        return self.run(state).final_state

    def scale(self, a: np.ndarray, b: np.ndarray) -> np.ndarray:
        """Each differential unknown's scale: its own magnitude, at least 1e-3 of the largest
        of its unit (so a current near zero is judged against the circuit's currents)."""
        mag = np.maximum(np.abs(a), np.abs(b))
        floor = np.full(mag.size, 1e-12)
        for mask in (self.is_volt, self.is_amp, ~(self.is_volt | self.is_amp)):
            if mask.any():
                floor[mask] = max(1e-3 * float(mag[mask].max()), 1e-12)
        return np.maximum(mag, floor)

    def mismatch(self, start: CircuitState, end: CircuitState) -> tuple[np.ndarray, float]:
        """``P(x0) - x0`` on the differential unknowns, and its size in units of the tolerance."""
        a, b = start.x[self.diff], end.x[self.diff]
        r = b - a
        scale = self.scale(a, b)
        return r, float(np.max(np.abs(r) / (self.cfg.repeat_tolerance * scale), initial=0.0))

    def jacobian(self, start: CircuitState, end: CircuitState) -> np.ndarray:
        """``dP/dx0`` over the differential unknowns, by forward differences."""
        n = self.diff.size
        M = np.empty((n, n))
        scale = self.scale(start.x[self.diff], end.x[self.diff])
        base = end.x[self.diff]
        for j, col in enumerate(self.diff):
            x = np.array(start.x)
            dx = PERTURBATION * scale[j]
            x[col] += dx
            M[:, j] = (self.end(start.with_values(x)).x[self.diff] - base) / dx
        return M

    def newton(self, start: CircuitState) -> tuple[CircuitState, CircuitState, float, bool]:
        """Newton's method on the period map from ``start``: (state, its end, mismatch, converged).

        The Jacobian is taken by finite differences once, then kept up to
        date by Broyden's rank-one update from each step (C. G. Broyden,
        Math. Comp. 19, 1965), which costs no extra period; it is taken
        afresh when a step fails. Safeguard for maps that are only piecewise
        smooth (a converter that changes between continuous and
        discontinuous conduction on the way): a step from a fresh Jacobian
        that does not reduce the mismatch is halved, twice at most, and if it
        still does not, one plain period is taken instead (it always moves
        towards a stable steady state).
        """
        end = self.end(start)
        r, size = self.mismatch(start, end)
        n = self.diff.size
        J, fresh = None, False
        iterations = 0
        while iterations < self.cfg.newton_limit:
            if size <= 1.0:
                return start, end, size, True
            iterations += 1
            self.iterations += 1
            if J is None:
                J, fresh = self.jacobian(start, end) - np.eye(n), True
                if not np.all(np.isfinite(J)) or _condition(J) > SINGULAR_CONDITION:
                    return start, end, size, False  # a mode that neither grows nor decays: no steady state
            try:
                step = np.linalg.solve(J, -r)
            except np.linalg.LinAlgError:
                step = np.full(n, np.nan)
            accepted = False
            for _ in range(MAX_HALVINGS + 1 if fresh else 1):
                if not np.all(np.isfinite(step)):
                    break
                x = np.array(end.x)  # algebraic unknowns from the end: the closest consistent values
                x[self.diff] = start.x[self.diff] + step
                trial = start.with_values(x)
                trial_end = self.end(trial)
                r_new, size_new = self.mismatch(trial, trial_end)
                if size_new < size:
                    accepted = True
                    break
                step = 0.5 * step
            if accepted:
                # Broyden: make J map this step onto the change of the mismatch it caused.
                y = r_new - r
                J = J + np.outer(y - J @ step, step) / float(step @ step)
                fresh = False
            elif not fresh:
                J = None  # an updated Jacobian that misled: take a fresh one from the same state
                continue
            else:
                trial = end.at(0.0)  # one plain period instead
                trial_end = self.end(trial)
                r_new, size_new = self.mismatch(trial, trial_end)
                J = None
            start, end, r, size = trial, trial_end, r_new, size_new
        return start, end, size, size <= 1.0

    def plain(self, start: CircuitState, end: CircuitState, size: float) -> tuple[CircuitState, float, bool]:
        """Plain periods from ``end`` until one repeats within the tolerance (or the limit)."""
        while self.periods < self.cfg.period_limit:
            start, end = end.at(0.0), self.end(end)
            r, size = self.mismatch(start, end)
            if size <= 1.0:
                return start, size, True
        return start, size, False


def _condition(J: np.ndarray) -> float:
    """Condition number of J after scaling rows, then columns, to a largest entry of 1
    (so volts against amperes does not count as ill-conditioning)."""
    with np.errstate(divide="ignore"):
        rows = 1.0 / np.abs(J).max(axis=1)
        scaled = J * rows[:, None]
        cols = 1.0 / np.abs(scaled).max(axis=0)
    if not (np.all(np.isfinite(rows)) and np.all(np.isfinite(cols))):
        return math.inf
    return float(np.linalg.cond(scaled * cols[None, :]))


def periodic(circuit: "Circuit", settings: dict[str, Any], records: Sequence["SignalRef"] | None) -> Waveforms:
    """Run a periodic steady-state analysis; see :meth:`mna.Circuit.periodic`."""
    started = _time.perf_counter()
    cfg = check_settings(circuit, settings)
    shoot = _Shooting(circuit, cfg)
    warm = shoot.run(cfg.run_settings.get("start", "dc"), periods=cfg.warmup)
    start = warm.final_state.at(0.0)
    notes: list[str] = []
    state, end, size, converged = shoot.newton(start)
    how = "shooting"
    if not converged:
        notes.append(f"simulate periodic: Newton's method on the period map did not converge in "
                     f"{shoot.iterations} iterations (the state still changed by {size:.3g} times the "
                     f"repeat-tolerance per period); continuing with plain periods")
        state, size, converged = shoot.plain(state, end, size)
        how = "plain periods"
        if not converged:
            notes.append(f"simulate periodic: NOT SETTLED after {shoot.periods} periods: the state still "
                         f"changes by {size * cfg.repeat_tolerance:.3g} of its scale per period "
                         f"(repeat-tolerance {cfg.repeat_tolerance:.3g}); the periods shown are the last ones "
                         "integrated, not a steady state. Raise period-limit= or check the circuit for a "
                         "state that drifts (a capacitor with no DC path, a shaft angle)")
            how = "not settled"
    result = shoot.run(state, periods=cfg.periods, records=records)
    stats = dict(result.statistics)
    stats.update({
        "period_s": cfg.period,
        "periods_integrated": int(shoot.periods),
        "newton_iterations_shooting": int(shoot.iterations),
        "steady_state": how,
        "repeat_mismatch": float(size * cfg.repeat_tolerance),
        "differential_unknowns": int(shoot.diff.size),
        "wall_time_s": _time.perf_counter() - started,
    })
    return replace(result, statistics=stats, warnings=list(result.warnings) + notes, analysis="periodic")
