"""Transient analysis: the run loop over a stepper, corners, events, recording.

The integration method is a stepper (:mod:`mna.methods`): it owns its
history, its error estimate, its dense output and its restart after a
discontinuity. This module never asks which method it runs; it

1. picks where the next step ends: the next corner (waveform kink, PWM
   edge, schedule time) is landed on exactly, a step is capped by
   ``max-step``; with ``step=`` the points are the fixed grid;
2. asks the stepper for a step there and handles a rejection (the stepper
   has already shortened its step) or a Newton failure (a quarter of the
   step, down to ``min-step``);
3. looks for a switching event on the step's dense output and, if there is
   one, steps again to land on it;
4. records the step's end and two points of its dense output inside it,
   so measurements and resampling see the method's own polynomial;
5. after a corner or an event restarts the stepper. A state change, and an
   ideal source edge (zero rise or fall time), also record a second sample
   at the same time, solved just after it (the switch voltage at 0+), so
   the waveforms hold both sides of the jump.

**Error control** (no ``step=``): each method measures its local error on
the rows of q that hold charge or flux, against ``tolerance`` relative to
the largest magnitude each has reached so far, plus an absolute floor from
``voltage-tolerance`` and ``current-tolerance``. A circuit that stores no
energy (no capacitor, no inductor) has no local error: its steps go from
corner to corner, capped by ``max-step``.

**Failure**: a step whose Newton iteration does not converge is retried at
a quarter of its length, down to ``min-step``; then the run stops with a
:class:`~mna.errors.SimulationError` naming the time and the unknowns that
did not settle, holding the waveforms computed so far in ``.partial``.
"""

from __future__ import annotations

import math
import time as _time
from typing import TYPE_CHECKING, Any, Sequence

import numpy as np

from .. import limits
from ..errors import InputError, SimulationError
from ..methods import ExactStepper, NotExact, Step, Stepper, get_method
from ..methods.base import CANDIDATE, NOT_CONVERGED
from ..results import Waveforms
from ..runstate import CircuitState, DiscreteStates
from ..solver import Factorizer, SingularMatrix, newton, raise_singular
from ..system import Probe, System
from ..units import AMPERE, KELVIN, VOLT
from ..values import SignalRef
from .common import compute_signal, dc_leak, default_signals, plan, prepare, require_finite, unit_label
from .dc import solve_dc
from .settings import DEFAULT_METHOD, DEFAULT_TOLERANCE
from .settings import TransientSettings as _Settings

if TYPE_CHECKING:  # pragma: no cover
    from ..circuit import Circuit

#: A run that starts at rest, and the instant after an event, are solved
#: with a backward-Euler step this much shorter than the current step: it
#: finds values consistent with the charges and fluxes (a capacitor across
#: a source charges at once; a switch voltage jumps when it opens).
JUMP_FRACTION = 1e-9
#: Absolute floor of the local error on temperatures (K) at the default
#: tolerance= (it scales with tolerance=): a junction's rise is worth resolving
#: to a millikelvin, not to the microvolt floor of voltages.
TEMPERATURE_TOLERANCE = 1e-3

#: Newton iterations allowed from a remembered guess before the jump solve
#: starts again from the values before the jump.
JUMP_GUESS_ITERATIONS = 6

RETRY_FACTOR = 0.25
RESTART_FRACTION = 0.01  # first step after a corner or event, relative to the step before
LADDER = 2  # step sizes are rounded down to 2**(k/LADDER) * until
#: A step this much shorter than the gap to the next corner is stretched to
#: land on it (the error test then judges the longer step), rather than
#: split into two halves.
LANDING_STRETCH = 1.1
#: Where inside each step the dense output is recorded (fractions of the step).
INNER_POINTS = (1.0 / 3.0, 2.0 / 3.0)
PIECES = 4


def time_grid(until: float, step: float, corners: np.ndarray, start: float = 0.0) -> np.ndarray:
    """Fixed-step time points (s) from ``start``: the regular grid with the corners inserted."""
    count = int(np.ceil((until - start) / step - 1e-9))
    grid = start + np.arange(count + 1, dtype=float) * step
    grid[-1] = until
    corners = corners[(corners > start) & (corners < until)]
    if not corners.size:
        return grid
    tol = step * 1e-6
    idx = np.searchsorted(corners, grid)
    near = np.zeros(grid.size, dtype=bool)
    for j in (idx - 1, idx):
        ok = (j >= 0) & (j < corners.size)
        near[ok] |= np.abs(corners[j[ok]] - grid[ok]) < tol
    near[0] = near[-1] = False
    return np.union1d(grid[~near], corners)


class _Recorder:
    """Growable storage of the recorded unknowns and state rates.

    Row k holds the point at ``t[k]``; ``inner_x[k]``/``inner_r[k]`` the
    dense output at INNER_POINTS of the step that ends there (for k = 0,
    and for the second sample of a jump, copies of the point itself).
    """

    def __init__(self, n_x: int, n_rates: int, capacity: int):
        capacity = max(capacity, 16)
        self.t = np.empty(capacity)
        self.x = np.empty((capacity, n_x))
        self.r = np.empty((capacity, n_rates))
        self.inner_x = np.empty((capacity, len(INNER_POINTS), n_x))
        self.inner_r = np.empty((capacity, len(INNER_POINTS), n_rates))
        self.count = 0

    @property
    def width(self) -> int:
        """Numbers stored per recorded point."""
        return (self.x.shape[1] + self.r.shape[1]) * (len(INNER_POINTS) + 1)

    def add(self, t: float, x: np.ndarray, rates: np.ndarray, inner_x=None, inner_r=None) -> None:
        k = self.count
        if k == self.t.size:
            grow = max(16, k)
            limits.current().check_memory(k + grow, self.width, time=float(t))
            for name in ("t", "x", "r", "inner_x", "inner_r"):
                a = getattr(self, name)
                setattr(self, name, np.concatenate([a, np.empty((grow,) + a.shape[1:])]))
        self.t[k] = t
        self.x[k] = x
        self.r[k] = rates
        self.inner_x[k] = x if inner_x is None else inner_x
        self.inner_r[k] = rates if inner_r is None else inner_r
        self.count = k + 1


def transient(circuit: "Circuit", settings: dict[str, Any], records: Sequence[SignalRef] | None) -> Waveforms:
    """Run a transient analysis; see :meth:`mna.Circuit.transient`."""
    started = _time.perf_counter()
    cfg = _Settings(settings)
    system, report = prepare(circuit)
    refs = list(records) if records else (list(circuit.records) or default_signals(circuit))
    need_x, need_states = plan(system, circuit, refs)
    run = _Run(system, cfg, need_x, need_states, report)
    try:
        with limits.active(cfg.limits):
            run.execute()
    except SimulationError as exc:
        exc.partial = _finish(circuit, system, refs, run, started, cfg, "failed", exc.message)
        raise
    waves = _finish(circuit, system, refs, run, started, cfg, "ok", "")
    require_finite(waves.signals, "the transient run", waves.time, partial=waves)
    return waves


class _Timeline:
    """Where steps may end: the corners (adaptive runs) or the fixed grid, and the source jumps."""

    def __init__(self, system: System, cfg: _Settings):
        until, t0 = self.until, self.t0 = cfg.until, cfg.t0
        corners = system.corners(t0, until)
        self.corners = corners[(corners > t0) & (corners < until)]
        jumps = system.jumps(t0, until)
        self.jumps = jumps[(jumps > t0) & (jumps < until)]
        self.fixed = cfg.step is not None
        self.step = cfg.step
        self.max_step = cfg.max_step
        self.ladder = system.is_piecewise_linear
        if self.fixed:
            self.grid = time_grid(until, cfg.step, self.corners, t0)
            self.grid_corner = _corner_flags(self.grid, self.corners)
        self.k = 1  # next grid point
        self.i = 0  # next corner

    def land_on(self, times: np.ndarray) -> None:
        """Make every time in ``times`` (s) the end of a step (exact output on a grid)."""
        times = np.asarray(times, dtype=float)
        times = times[(times > 0) & (times < self.until)]
        if self.fixed:
            self.grid = np.union1d(self.grid, times)
            self.grid_corner = _corner_flags(self.grid, self.corners)
        else:
            self.corners = np.union1d(self.corners, times)

    def first_step(self) -> float:
        """The first step to try (s)."""
        if self.fixed:
            return self.step
        gap = (self.corners[0] if self.corners.size else self.until) - self.t0
        return min(self.max_step, gap, self.until) * 1e-3

    def next_corner(self, t: float) -> float:
        while self.i < self.corners.size and self.corners[self.i] <= t * (1 + 1e-15):
            self.i += 1
        return self.corners[self.i] if self.i < self.corners.size else self.until

    def target(self, t: float, h: float) -> tuple[float, float, bool]:
        """(end of the next step (s), its length (s), whether it lands on a corner or grid point)."""
        if self.fixed:
            target = self.grid[self.k]
            if h >= (target - t) * (1 - 1e-9):
                return target, _snap(target - t, self.step), True
            return t + h, _snap(h, self.step), False
        h = min(h, self.max_step)
        corner = self.next_corner(t)
        gap = corner - t
        if h * LANDING_STRETCH >= gap:
            return corner, gap, True
        if h > 0.5 * gap:
            h = 0.5 * gap
        if self.ladder:
            h = _ladder(h, self.until)
        return t + h, h, False

    def gap(self, t: float) -> float:
        return self.next_corner(t) - t

    def insert_event(self, te: float) -> None:
        """An event at te (s) inside the next step: land on it first."""
        if self.fixed:
            self.grid = np.insert(self.grid, self.k, te)
            self.grid_corner = np.insert(self.grid_corner, self.k, False)
        else:
            self.corners = np.insert(self.corners, self.i, te)

    def landed(self, t: float) -> tuple[bool, bool]:
        """After a step landed at t: (restart the method here, a source jumps here)."""
        restart = True
        if self.fixed:
            self.k += 1
            restart = bool(self.grid_corner[self.k - 1])
        jumped = bool(restart and self.jumps.size and _contains(self.jumps, t))
        return restart, jumped


class _Run:
    """One transient run: everything it changes, and the loop.

    It is also the :class:`~mna.methods.Problem` its stepper works on:
    :meth:`solve`, :meth:`charges`, :meth:`rates`, :meth:`jacobians`,
    :meth:`error_norm`, :meth:`state_key`.
    """

    def __init__(self, system: System, cfg: _Settings, need_x: list[int], need_states: list[int], report):
        self.system = system
        self.cfg = cfg
        self.need_x = np.asarray(need_x, dtype=np.int64)
        self.need_states = list(need_states)
        self.Cs_rec = system.Cs[need_states] if need_states else None
        self.report = report
        self.factorizer = Factorizer(system, cache_size=16)
        self.tolerance = cfg.tolerance
        self.stepper: Stepper | None = None
        #: Why the run took the path it took (exact intervals or the integrator).
        self.path_notes: list[str] = []
        capacity = int(min(cfg.until / cfg.step, 5e7)) + 16 if cfg.step else 4096
        self.rec = _Recorder(len(need_x), len(need_states), 16)
        cfg.limits.check_memory(capacity, self.rec.width)
        self.rec = _Recorder(len(need_x), len(need_states), capacity)
        self.stats = {"accepted": 0, "rejected": 0, "newton_iterations": 0, "events": 0,
                      "retries": 0}
        #: The switch states of this run (never kept on the system or its batches).
        start = cfg.initial_state
        if start is not None and tuple(start.unknowns) != tuple(system.names):
            raise InputError("start=: the state belongs to another circuit (its unknowns are "
                             f"{', '.join(start.unknowns[:6])}...; this circuit's are "
                             f"{', '.join(system.names[:6])}...)")
        self.discrete = DiscreteStates(system, cfg.t0, start.switches if start is not None else None)
        self.event_batches = self.discrete.any
        self.pwl = system.is_piecewise_linear
        self.version = self.discrete.key()
        self._affine: dict = {}
        # Local-error control on the rows of q that hold charge or flux.
        absC = abs(system.C)
        atol_x = np.where(np.array([d == VOLT for d in system.dims]), cfg.voltage_tolerance,
                          np.where(np.array([d == AMPERE for d in system.dims]), cfg.current_tolerance,
                                   cfg.voltage_tolerance))
        atol_x[np.array([d == KELVIN for d in system.dims], dtype=bool)] = \
            TEMPERATURE_TOLERANCE * cfg.tolerance / DEFAULT_TOLERANCE
        self.q_atol = absC @ atol_x
        q_rows = set(np.flatnonzero(np.diff(system.C.tocsr().indptr)).tolist())
        for slot in system.batches:
            for r in np.asarray(slot.batch.q_rows).tolist():
                q_rows.add(r)
                self.q_atol[r] = max(self.q_atol[r], atol_x[r])
        self.q_rows = np.array(sorted(q_rows), dtype=np.int64)
        self.q_atol = self.q_atol[self.q_rows] if self.q_rows.size else np.empty(0)
        self.q_scale = np.zeros(self.q_rows.size)
        self.x_before: np.ndarray | None = None  # the values at the current point
        #: The accepted first step after a restart into each switch state.
        self.restart_memory: dict = {}
        #: The values after the last jump into each switch state (Newton's guess).
        self.jump_memory: dict = {}

    # -- one solve --------------------------------------------------------------
    def solve(self, x_guess: np.ndarray, t: float, alpha: float, history: np.ndarray,
              refine: bool = False, max_iterations: int = 50) -> np.ndarray | None:
        """x at time t for ``alpha*q(x) + history + f(x, t) = 0``; None if Newton fails.

        ``refine`` adds iterative refinement to the piecewise-linear solve, for
        the badly scaled systems of the instant after an event.
        """
        system = self.system
        if self.pwl:
            key = (alpha, self.version)
            lu = self.factorizer._cache.get(key)
            affine = self._affine.get(self.version)
            if affine is None:
                affine = system.affine_parts(t, self.discrete)
                if len(self._affine) >= 16:
                    self._affine.pop(next(iter(self._affine)))
                self._affine[self.version] = affine
            f0, q0, jf, jq = affine
            if lu is None or refine:
                data = system.matrix_data(alpha, jf, jq)
                if lu is None:
                    lu = self.factorizer.factor(data, key=key)
            rhs = system.add_sources(-history, t)
            if f0 is not None:
                rhs -= f0
                if alpha:
                    rhs -= alpha * q0
            self.factorizer.solves += 1
            self.stats["newton_iterations"] += 1
            x = lu.solve(rhs)
            if refine:
                A = system.matrix(data)
                for _ in range(2):
                    x += lu.solve(rhs - A @ x)
            if not np.isfinite(x).all():  # a numerically singular matrix
                raise SingularMatrix(("(the circuit equations are numerically singular at this step)",))
            return x
        res = newton(system, self.factorizer, x_guess, t, alpha, history, max_iterations=max_iterations,
                     states=self.discrete)
        self.stats["newton_iterations"] += res.iterations
        self._worst = res.worst
        return res.x if res.converged else None

    def charges(self, x: np.ndarray, t: float) -> np.ndarray:
        return self.system.C @ x if not self.system.batches else self.system.charges(x, t, self.discrete)

    def rates(self, x: np.ndarray, t: float) -> np.ndarray:
        return self.system.rates(x, t, self.discrete)

    def jacobians(self, x: np.ndarray, t: float) -> tuple[np.ndarray, np.ndarray]:
        """CSC data of df/dx and dq/dx at (x, t) on the system's pattern."""
        system = self.system
        jf = jq = None
        if system.batches:
            _, _, jf, jq = system.evaluate_batches(x, t, self.discrete)
        data_f = system.matrix_data(0.0, jf, None)
        data_q = system.matrix_data(1.0, None, jq) - system.G_data
        return data_f, data_q

    def error_norm(self, lte: np.ndarray, q_new: np.ndarray) -> float:
        """Largest |lte| over the charge and flux rows in units of their tolerance."""
        tol = self.tolerance * np.maximum(self.q_scale, np.abs(q_new)) + self.q_atol
        return float(np.max(np.abs(lte) / tol))

    def state_key(self):
        return self.version

    # -- events -------------------------------------------------------------------
    def update_events(self, t: float, x: np.ndarray) -> bool:
        changed = self.discrete.update(t, x)
        if changed:
            # What the matrix depends on besides alpha: the discrete states,
            # so a state seen before (the same half of a PWM period) reuses
            # its factorization.
            self.version = self.discrete.key()
            self.stats["events"] += 1
        return changed

    def event_time(self, t0, x0, t1, x1) -> float | None:
        return self.discrete.event_time(t0, x0, t1, x1)

    # -- the loop -------------------------------------------------------------------
    def record(self, t: float, x: np.ndarray, rates: np.ndarray, dense=None) -> None:
        inner_x = inner_r = None
        if dense is not None:
            times = dense.t_old + np.array(INNER_POINTS) * (dense.t - dense.t_old)
            inner_x = dense(times)[:, self.need_x]
            if self.Cs_rec is not None:
                inner_r = (self.Cs_rec @ dense.derivative(times).T).T
        self.rec.add(t, x[self.need_x], rates, inner_x, inner_r)

    def state_rates(self, xdot: np.ndarray) -> np.ndarray:
        return self.Cs_rec @ xdot if self.Cs_rec is not None else np.empty(0)

    def initial_point(self) -> np.ndarray:
        cfg, system = self.cfg, self.system
        first = cfg.step or cfg.until * 1e-6
        if cfg.start == "state":
            # The state's charges and fluxes, with values of the other
            # unknowns made consistent with them (a state whose charges were
            # set by hand, as shooting does, need not be consistent).
            x = np.array(cfg.initial_state.x)
            h0 = self.start_h0 = first * JUMP_FRACTION
            self.q_start = self.charges(x, cfg.t0)
            return self.jump(x, cfg.t0, h0, self.q_start)
        if cfg.start == "dc":
            leak = dc_leak(system, self.report)
            self.factorizer.forget()
            for _ in range(8):  # settle comparator gates on the operating point
                self._affine.clear()
                x, its = solve_dc(system, self.factorizer, leak, t=0.0, discrete=self.discrete)
                self.version = self.discrete.key()
                self.stats["newton_iterations"] += its
                if not self.update_events(0.0, x):
                    break
            self._affine.clear()
            return x
        h0 = self.start_h0 = first * JUMP_FRACTION
        x = np.zeros(system.n)
        for _ in range(8):  # settle comparator gates on the starting values
            x = self.jump(x, 0.0, h0, system.q_initial)
            if not self.update_events(0.0, x):
                break
        return x

    def rates_after_jump(self, x: np.ndarray, t: float, h0: float, q_before: np.ndarray,
                         q_after: np.ndarray) -> np.ndarray | None:
        """Rates of the charge and flux rows just after a jump solve (per second).

        They come from the equations, ``-f`` at the consistent point the jump
        solve found (the slope ``(q_after - q_before)/h0`` would amplify its
        round-off 1e9 times). When a charge itself jumped (a capacitor
        straight across a source that steps) the jump solve's currents are
        the impulse that moved it; one more step of h0 gives the rates that
        follow the impulse. None if that step does not converge.
        """
        rows = self.q_rows
        moved = np.abs(q_after[rows] - q_before[rows])
        limit = self.cfg.tolerance * np.maximum(self.q_scale, np.abs(q_after[rows])) + self.q_atol
        if not (moved > limit).any():
            return self.system.rates(x, t + h0, self.discrete)
        try:
            x2 = self.solve(x, t + 2 * h0, 1.0 / h0, -q_after / h0, refine=True)
        except SingularMatrix:
            return None
        return None if x2 is None else self.system.rates(x2, t + 2 * h0, self.discrete)

    def jump(self, x: np.ndarray, t: float, h0: float, q: np.ndarray) -> np.ndarray:
        """Values just after t: a tiny backward-Euler step from the charges q.

        A nonlinear circuit's Newton iteration starts from the values after
        the last jump into the same switch state when there was one (the
        same edge of the previous period: the junctions already on the
        right side), and from the values before the jump otherwise.
        """
        try:
            x_new = None
            remembered = self.jump_memory.get(self.version) if not self.pwl else None
            if remembered is not None:
                try:
                    x_new = self.solve(remembered, t + h0, 1.0 / h0, -q / h0,
                                       max_iterations=JUMP_GUESS_ITERATIONS)
                except SingularMatrix:  # a guess that leads nowhere: start over from x
                    x_new = None
            if x_new is None:
                x_new = self.solve(x, t + h0, 1.0 / h0, -q / h0, refine=True)  # sources just after t
            if x_new is not None and not self.pwl:
                self.jump_memory[self.version] = x_new
        except SingularMatrix as exc:
            raise_singular(exc, time=t, step=h0, what=f"solving the instant after t = {t:.6g} s")
        if x_new is None:
            raise SimulationError(
                f"no convergence just after t = {t:.6g} s (an event or the start at rest); "
                "unknowns still moving: " + ", ".join(self._worst),
                time=t, step=h0, unknowns=self._worst,
            )
        return x_new


    def execute(self) -> None:
        """The time loop: step, record, restart after corners and events."""
        cfg = self.cfg
        line = _Timeline(self.system, cfg)
        t0 = cfg.t0
        x = self.x_before = self.initial_point()
        self.record(t0, x, np.zeros(len(self.need_states)))
        self.q_scale = np.abs(self.charges(x, t0)[self.q_rows])
        stepper = self.stepper = self.new_stepper(t0, x, line.first_step(), self.starting_rates(x))
        self.h_smooth = stepper.h
        if isinstance(stepper, ExactStepper) and cfg.sample is not None:
            # Exact intervals give exact values where a step ends: end one on every sample.
            line.land_on(np.arange(0.0, cfg.until + cfg.sample * 1e-9, cfg.sample))
        self.restart_key = None
        self.since_restart = 0
        next_report = _time.perf_counter() + 0.2
        while stepper.t < cfg.until:
            cfg.limits.check_run(self.stats["accepted"] + self.stats["rejected"] + self.stats["retries"],
                                 self.rec.count, stepper.t)
            if cfg.progress is not None and _time.perf_counter() > next_report:
                cfg.progress(stepper.t, cfg.until)
                next_report = _time.perf_counter() + 0.2
            step, landing = self.advance(stepper, line)
            self.accept(stepper, step)
            if landing or self.event_batches:
                self.after_step(stepper, line, step, landing)
                stepper = self.stepper  # (a switch state without exact intervals changes it)
            if stepper.t >= cfg.until * (1 - 1e-14):
                break
        stepper.finish()
        self.end = (stepper.t, self.x_before)  # the values at the end, after any event there

    def new_stepper(self, t: float, x: np.ndarray, h: float, rates) -> Stepper:
        """The exact-interval stepper when asked for, or chosen and the circuit qualifies; else the method."""
        cfg = self.cfg
        if cfg.method is ExactStepper or cfg.method_chosen:
            try:
                return ExactStepper(self, t, x, h, rates)
            except NotExact as exc:
                if not cfg.method_chosen:
                    raise InputError(f"method=exact cannot solve this circuit: {exc}; name an integration "
                                     f"method instead (method={DEFAULT_METHOD})") from None
                self.path_notes.append(f"integrated: no exact intervals because {exc}")
        method = get_method(DEFAULT_METHOD) if cfg.method is ExactStepper else cfg.method
        return method(self, t, x, h, rates)

    def starting_rates(self, x: np.ndarray) -> np.ndarray | None:
        """d/dt q just after t = 0 when the start is consistent there, else None.

        A start at rest is solved at 0+; an operating point is consistent
        unless an ideal edge happens at t = 0.
        """
        if self.cfg.step is not None or not self.q_rows.size:
            return None
        t0 = self.cfg.t0
        if self.cfg.start == "rest":
            return self.rates_after_jump(x, 0.0, self.start_h0, self.system.q_initial, self.charges(x, 0.0))
        if self.cfg.start == "state":
            return self.rates_after_jump(x, t0, self.start_h0, self.q_start, self.charges(x, t0))
        if not _contains(self.system.jumps(t0 - 1.0 - abs(t0), t0), t0):
            return self.system.rates(x, t0, self.discrete)
        return None

    def advance(self, stepper: Stepper, line: _Timeline) -> tuple[Step, bool]:
        """One step the error test accepts, ending before any event: (step, landed on a corner)."""
        cfg = self.cfg
        while True:
            t_new, h_try, landing = line.target(stepper.t, stepper.h)
            if self.since_restart > 0:
                self.h_smooth = min(stepper.h, cfg.max_step)
            try:
                step = stepper.attempt(t_new, h_try, error_control=not line.fixed)
            except SingularMatrix as exc:
                stepper.fail()
                raise_singular(exc, time=t_new, step=h_try, what=f"transient at t = {t_new:.6g} s")
            if step.status == NOT_CONVERGED:
                self.stats["retries"] += 1
                stepper.h = h_try * RETRY_FACTOR
                if stepper.h < cfg.min_step:
                    stepper.fail()
                    raise SimulationError(
                        f"no convergence at t = {t_new:.6g} s even with a step of {h_try:.3g} s; "
                        "unknowns still moving: " + ", ".join(self._worst),
                        time=t_new, step=h_try, unknowns=tuple(self._worst),
                    )
                continue
            if step.status != CANDIDATE:
                self.stats["rejected"] += 1
                if stepper.h < cfg.min_step:
                    stepper.fail()
                    raise SimulationError(
                        f"the step fell below min-step ({cfg.min_step:.3g} s) at t = {stepper.t:.6g} s "
                        "while meeting the error tolerance; loosen tolerance= or check the circuit "
                        "for an unintended instant jump",
                        time=stepper.t, step=stepper.h,
                    )
                continue
            te = self.event_on(step)
            if te is not None:
                stepper.h = te - stepper.t
                line.insert_event(te)
                continue
            return step, landing

    def event_on(self, step: Step) -> float | None:
        """The first switching event strictly inside the step, located on its dense output."""
        if not self.event_batches:
            return None
        t0, t1 = step.t_old, step.t
        h = t1 - t0
        pieces = getattr(step.dense, "pieces", None) or (1 if step.dense.order <= 2 else PIECES)
        times = t0 + h * np.arange(pieces + 1) / pieces
        xs = [self.x_before] + list(step.dense(times[1:-1])) + [step.x]
        for a in range(pieces):
            te = self.event_time(times[a], xs[a], times[a + 1], xs[a + 1])
            if te is not None:
                if t1 - te <= 1e-9 * h:  # at the step's end: the state changes there
                    return None
                if step.dense.exact:  # (an integrator's next step would not land on its dense output's root)
                    te = self.refine_event(step.dense, times[a], xs[a], times[a + 1], xs[a + 1], te)
                # (an integrator does not land within a millionth of a step
                # of its start; an exact trajectory lands anywhere)
                near = self.cfg.min_step if step.dense.exact else max(self.cfg.min_step, 1e-6 * h)
                if te - t0 > near and t1 - te > 1e-9 * h:
                    return te
                return None
        return None

    def refine_event(self, dense, ta: float, xa: np.ndarray, tb: float, xb: np.ndarray, te: float) -> float:
        """The event in (ta, tb] located on the dense output to ``event-tolerance`` (s).

        Regula falsi on the batches' own crossing test (each ``event_time``
        interpolates linearly inside the bracket it is given), with a
        bisection every third iteration so that a curved trajectory cannot
        hold one end of the bracket still.
        """
        tol = self.cfg.event_tolerance
        for k in range(60):
            if tb - ta <= tol:
                break
            if k % 3 == 2 or not ta < te < tb:
                te = 0.5 * (ta + tb)
            xe = dense(te)
            inside = self.event_time(ta, xa, te, xe)
            if inside is not None:
                tb, xb, te = te, xe, inside
            else:
                ta, xa = te, xe
                te = self.event_time(ta, xa, tb, xb)
                if te is None:  # pragma: no cover - the crossing left the bracket (round-off)
                    break
        final = self.event_time(ta, xa, tb, xb)  # (the batches note the crossing they land on)
        return tb if final is None else final

    def accept(self, stepper: Stepper, step: Step) -> None:
        stepper.accept(step)
        if self.cfg.step is not None:
            stepper.h = self.cfg.step
        self.x_before = stepper.x
        self.rates_now = self.state_rates(step.xdot)
        self.record(step.t, step.x, self.rates_now, step.dense)
        self.stats["accepted"] += 1
        if self.cfg.step is None and self.q_rows.size:
            np.maximum(self.q_scale, np.abs(self.charges(step.x, step.t)[self.q_rows]), out=self.q_scale)
        if self.restart_key is not None and self.since_restart == 0:
            # What the error allows for this first step, for the next
            # restart into the same state (so it may grow period by period).
            self.restart_memory[self.restart_key] = stepper.h
        self.since_restart += 1

    def after_step(self, stepper: Stepper, line: _Timeline, step: Step, landing: bool) -> None:
        """Corners and events cut the method's history; a jump records both sides."""
        t, x = stepper.t, stepper.x
        restart, jumped = line.landed(t) if landing else (False, False)
        switched = bool(self.event_batches) and self.update_events(t, x)
        self.restart_key = None
        if not (restart or jumped or switched):
            return
        rates0 = xdot = None
        h_try = step.h
        if jumped or switched:
            own = self.after_event_of(stepper, t, x)
            if own is not None:  # the stepper's own consistent state just after t
                x_jump, xdot = own
            else:
                h0 = max(h_try, self.cfg.min_step) * JUMP_FRACTION
                q = self.charges(x, t)
                x_jump = self.jump(x, t, h0, q)
                # One change can cause another at the same instant (a switch
                # opens and drives a diode's voltage past its drop): settle them.
                seen = {self.version}
                for _ in range(8):
                    if not (self.event_batches and self.update_events(t, x_jump)) or self.version in seen:
                        break  # settled, or back in a state seen at this instant (it chatters)
                    seen.add(self.version)
                    x_jump = self.jump(x, t, h0, q)
                xdot = (x_jump - x) / h0
                if not line.fixed:
                    rates0 = self.rates_after_jump(x_jump, t, h0, q, self.charges(x_jump, t))
            self.rates_now = self.state_rates(xdot)
            x = self.x_before = x_jump
            self.record(t, x, self.rates_now)
        h_next = self.restart_step(line, t, h_try, rates0)
        try:
            stepper.restart(t, x, h_next, rates0, xdot)
        except NotExact as exc:
            # This switch state has no exact intervals: integrate from here on.
            self.path_notes.append(f"exact intervals stopped at t = {t:.6g} s: {exc}; integrated from there")
            self.stepper = self.cfg.method(self, t, x, h_next, rates0)
        self.since_restart = 0

    def after_event_of(self, stepper: Stepper, t: float, x: np.ndarray):
        """(x, dx/dt) just after an event at t from the stepper itself, settling
        changes that cause others at the same instant; None where it has no
        such state of its own (the run then solves a short jump step)."""
        try:
            own = stepper.after_event(t, x)
            seen = {self.version}
            for _ in range(8):
                if own is None or not self.update_events(t, own[0]) or self.version in seen:
                    break  # settled, or back in a state seen at this instant (it chatters)
                seen.add(self.version)
                own = stepper.after_event(t, x)
        except NotExact:
            return None
        return own

    def restart_step(self, line: _Timeline, t: float, h_try: float, rates0) -> float:
        """The first step after a restart (s)."""
        cfg = self.cfg
        if line.fixed:
            return cfg.step
        gap = line.gap(t)
        if rates0 is not None:
            # The first step's error is estimated from the rates just after
            # the jump, so it may start long: as long as the first step
            # after the same state last time, or else as the step before; a
            # rejection shortens it.
            self.restart_key = self.version
            h = min(self.restart_memory.get(self.restart_key, self.h_smooth), gap, cfg.max_step)
            return max(h, cfg.min_step)
        # The time scale after a corner is unknown: start small and let the
        # error control grow the step.
        return max(RESTART_FRACTION * min(h_try, gap, cfg.max_step), cfg.min_step)


def _snap(h: float, step: float) -> float:
    """Make steps that differ from ``step`` only by rounding exactly equal (LU reuse)."""
    return step if abs(h - step) <= 1e-9 * step else h


def _ladder(h: float, until: float) -> float:
    """Round a step down to the ladder 2**(k/LADDER) * until (few distinct matrices)."""
    k = math.floor(LADDER * math.log2(h / until) + 1e-9)
    return until * 2.0 ** (k / LADDER)


def _contains(sorted_times: np.ndarray, t: float) -> bool:
    i = np.searchsorted(sorted_times, t)
    return bool(i < sorted_times.size and sorted_times[i] == t)


def _corner_flags(grid: np.ndarray, corners: np.ndarray) -> np.ndarray:
    """For each grid point, whether it is a corner (where the history is cut)."""
    flags = np.zeros(grid.size, dtype=bool)
    if corners.size:
        idx = np.clip(np.searchsorted(grid, corners), 0, grid.size - 1)
        flags[idx[grid[idx] == corners]] = True
    return flags


def _fine_arrays(rec: _Recorder) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Time (s), unknowns and rates on the fine timeline: each step's start, its inner points, its end."""
    n = rec.count
    m = len(INNER_POINTS) + 1
    t = rec.t[:n]
    h = np.diff(t)
    inner_t = t[:-1, None] + h[:, None] * np.array(INNER_POINTS)[None, :]
    fine_t = np.empty((n - 1) * m + 1)
    fine_t[0] = t[0]
    fine_t[1:].reshape(n - 1, m)[:, :-1] = inner_t
    fine_t[m::m] = t[1:]

    def interleave(main: np.ndarray, inner: np.ndarray) -> np.ndarray:
        out = np.empty(((n - 1) * m + 1,) + main.shape[1:])
        out[0] = main[0]
        body = out[1:].reshape((n - 1, m) + main.shape[1:])
        body[:, :-1] = inner[1:n]
        body[:, -1] = main[1:n]
        return out

    return fine_t, interleave(rec.x[:n], rec.inner_x[:n]), interleave(rec.r[:n], rec.inner_r[:n])


def _finish(circuit, system: System, refs, run: _Run, started, cfg: _Settings, status, message) -> Waveforms:
    rec = run.rec
    n = rec.count
    m = len(INNER_POINTS) + 1
    fine_t, fine_x, fine_r = _fine_arrays(rec) if n > 1 else (rec.t[:n], rec.x[:n], rec.r[:n])
    probe = Probe(
        system,
        fine_t,
        x={int(idx): fine_x[:, j] for j, idx in enumerate(run.need_x)},
        rates={sid: fine_r[:, j] for j, sid in enumerate(run.need_states)},
        discrete=run.discrete,
    )
    # (+ 0.0 turns -0.0 into 0.0 so reports never show "-0")
    fine = {ref.label: np.asarray(compute_signal(ref, circuit, probe), dtype=float) + 0.0 for ref in refs}
    time = fine_t[::m].copy()
    signals = {label: values[::m].copy() for label, values in fine.items()}
    end = getattr(run, "end", None)
    final = None
    if status == "ok" and end is not None:
        final = CircuitState(end[0], end[1], tuple(system.names), run.discrete.snapshot())
    waves = Waveforms(
        final_state=final,
        time=time,
        signals=signals,
        units={ref.label: unit_label(ref) for ref in refs},
        statistics=_statistics(run, cfg, system, started, n),
        warnings=list(circuit.warnings) + [n for n in cfg.notes if not any(n in w for w in circuit.warnings)],
        status=status,
        message=message,
        fine_time=fine_t,
        fine_signals=fine,
    )
    if cfg.sample is not None and n > 1:
        grid = np.arange(time[0], time[-1] + cfg.sample * 1e-9, cfg.sample)
        waves.time = grid
        waves.signals = {label: waves.interpolate(label, grid) for label in signals}
        waves.statistics["points"] = int(grid.size)
    return waves


def _statistics(run: _Run, cfg: _Settings, system: System, started: float, n: int) -> dict[str, Any]:
    steps = np.diff(run.rec.t[:n])
    steps = steps[steps > 0]
    work = getattr(getattr(run, "stepper", None), "stats_work", {})
    statistics = {
        "points": int(n),
        "accepted_steps": int(run.stats["accepted"]),
        "rejected_steps": int(run.stats["rejected"]),
        "retried_steps": int(run.stats["retries"]),
        "events": int(run.stats["events"]),
        "newton_iterations": int(run.stats["newton_iterations"] + work.get("newton_iterations", 0)),
        "factorizations": int(run.factorizer.factorizations + work.get("factorizations", 0)),
        "solves": int(run.factorizer.solves + work.get("solves", 0)),
        "smallest_step_s": float(steps.min()) if steps.size else 0.0,
        "largest_step_s": float(steps.max()) if steps.size else 0.0,
        "method": run.stepper.name if run.stepper is not None else cfg.method.name,
        "path": "exact intervals" if isinstance(run.stepper, ExactStepper) else "integrator",
        "path_notes": list(run.path_notes),
        "step_control": ("exact" if isinstance(run.stepper, ExactStepper) else
                         "fixed" if cfg.step is not None else "error-controlled"),
        "unknowns": system.n,
        "wall_time_s": _time.perf_counter() - started,
    }
    statistics["steps"] = statistics["accepted_steps"]
    if isinstance(run.stepper, ExactStepper):
        statistics.update(run.stepper.counts)
    return statistics


