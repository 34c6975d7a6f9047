"""Transient analysis: fixed or error-controlled steps, exact corners, events.

**Fixed step** (``step=`` given): the time points are ``k * step`` from 0 to
``until`` with every waveform corner and gate edge inserted; a grid point
closer to a corner than a millionth of a step is dropped so no step is
absurdly short.

**Error-controlled steps** (no ``step=``): each step's local truncation
error is estimated from divided differences of the charge and flux history
(the method's own error constant times the matching derivative), measured
against ``tolerance`` relative to the largest magnitude each charge or flux
has reached so far, plus an absolute floor from ``voltage-tolerance`` and
``current-tolerance``. A step whose error is too large is rejected and
retried smaller; the next step grows by at most a factor of 4 and never
beyond ``max-step``; it grows only when the error allows at least 1.5x.
Step sizes are rounded down to a ladder of half powers of two, so the few
distinct matrices that result are factored once each and reused from a
cache.

**Corners and events**: every corner (waveform kink, PWM edge, schedule
time) is landed on exactly. At a corner, and whenever a switched element
changes state, the integration history is cut: the next steps are
first-order (backward Euler) steps, so the trapezoidal rule does not ring on
the edge. A state change, and an ideal source edge (zero rise or fall
time), also record a second sample at the same time, solved just after it
(the switch voltage at 0+), so the waveforms hold both sides of the jump.

**Failure**: a step whose Newton iteration does not converge is retried at
a quarter of its length, down to ``min-step``; then the run stops with a
:class:`~mna.errors.SimulationError` naming the time and the unknowns that
did not settle, holding the waveforms computed so far in ``.partial``.

Per step on a linear circuit the work is one sparse mat-vec for the
history, one source evaluation per waveform kind, and one triangular solve.
"""

from __future__ import annotations

import math
import time as _time
from typing import TYPE_CHECKING, Any, Sequence

import numpy as np

from ..values import SignalRef
from ..errors import InputError, SimulationError
from ..integrate import IntegrationMethod, get_method
from ..results import Waveforms
from ..runstate import CircuitState, DiscreteStates
from ..solver import Factorizer, SingularMatrix, newton, raise_singular
from ..system import Probe, System
from .. import limits
from ..units import AMPERE, KELVIN, VOLT
from .common import compute_signal, dc_leak, default_signals, plan, prepare, require_finite, unit_label
from .dc import solve_dc
from .settings import DEFAULT_TOLERANCE
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
MAX_GROWTH = 4.0
SAFETY = 0.85
LADDER = 2  # step sizes are rounded down to 2**(k/LADDER) * until
GROWTH_THRESHOLD = 1.5  # a step grows only if the error allows at least this factor
#: A step this much shorter than the gap to the next corner is stretched to
#: land on it (the error test then judges the longer step), rather than
#: split into two halves.
LANDING_STRETCH = 1.1


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
    """Growable storage of the recorded unknowns and state rates."""

    def __init__(self, n_x: int, n_rates: int, capacity: int):
        capacity = max(capacity, 16)
        self.t = np.empty(capacity)
        self.x = np.empty((capacity, n_x))
        self.r = np.empty((capacity, n_rates))
        self.count = 0

    def add(self, t: float, x: np.ndarray, rates: np.ndarray) -> None:
        k = self.count
        if k == self.t.size:
            grow = max(16, k)
            limits.current().check_memory(k + grow, self.x.shape[1] + self.r.shape[1], time=float(t))
            self.t = np.concatenate([self.t, np.empty(grow)])
            self.x = np.concatenate([self.x, np.empty((grow, self.x.shape[1]))])
            self.r = np.concatenate([self.r, np.empty((grow, self.r.shape[1]))])
        self.t[k] = t
        self.x[k] = x
        self.r[k] = rates
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


class _Run:
    """One transient run: state, history and the time loop."""

    def __init__(self, system: System, cfg: _Settings, need_x: list[int], need_states: list[int], report):
        self.system = system
        self.cfg = cfg
        self.method = cfg.method
        self.need_x = np.asarray(need_x, dtype=np.int64)
        self.need_states = list(need_states)
        self.Cs_rec = system.Cs[need_states] if need_states else None
        self.report = report
        self.factorizer = Factorizer(system, cache_size=16)
        capacity = int(min(cfg.until / cfg.step, 5e7)) + 16 if cfg.step else 4096
        cfg.limits.check_memory(capacity, len(need_x) + len(need_states))
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

    # -- events -------------------------------------------------------------------
    def update_events(self, t: float, x: np.ndarray) -> bool:
        changed = self.discrete.update(t, x)
        if changed:
            # What the matrix depends on besides alpha: the discrete states,
            # so a state seen before (the same half of a PWM period) reuses
            # its factorisation.
            self.version = self.discrete.key()
            self.stats["events"] += 1
        return changed

    def event_time(self, t0, x0, t1, x1) -> float | None:
        return self.discrete.event_time(t0, x0, t1, x1)

    # -- the loop -------------------------------------------------------------------
    def record(self, t: float, x: np.ndarray, rates: np.ndarray) -> None:
        self.rec.add(t, x[self.need_x], rates)

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
        cfg, system, method = self.cfg, self.system, self.method
        until, t0 = cfg.until, cfg.t0
        corners = system.corners(t0, until)
        corners = corners[(corners > t0) & (corners < until)]
        fixed = cfg.step is not None
        grid = time_grid(until, cfg.step, corners, t0) if fixed else None
        grid_corner = _corner_flags(grid, corners) if fixed else None
        jumps = system.jumps(t0, until)
        jumps = jumps[(jumps > t0) & (jumps < until)]
        grid_k = 1

        x = self.initial_point()
        q = self.charges(x, t0)
        q_prev = q
        qdot = np.zeros(system.n)
        Cs = self.Cs_rec
        qs = Cs @ x if Cs is not None else np.empty(0)
        qs_prev = qs
        rates = np.zeros(qs.size)
        self.record(t0, x, rates)
        # History of accepted (t, q-rows) since the last restart, for error estimates.
        hist_t: list[float] = [t0]
        hist_q: list[np.ndarray] = [q[self.q_rows]]
        self.q_scale = np.abs(hist_q[0])

        t = t0
        h_prev: float | None = None
        order = method.order
        if fixed:
            h = cfg.step
        else:
            gap = (corners[0] if corners.size else until) - t0
            h = min(cfg.max_step, gap, until) * 1e-3
        corner_i = 0
        progress = cfg.progress
        next_report = _time.perf_counter() + 0.2
        uses_qdot = method.uses_derivative
        C = system.C
        plain = not system.batches
        adaptive = not fixed
        landing = False
        restart_steps = method.restart_steps
        since_restart = 0
        x_last = None
        # After a restart with a jump solve: the rates of the charge and flux
        # rows just after the discontinuity (for the first step's error
        # estimate), and the key under which that first step is remembered.
        qdot0 = None
        rates0 = None
        # The trapezoidal rule may take the first step after a restart itself
        # when the rates there are exact (from -f after a jump solve): the
        # derivative it inherits is then not left over from before the edge.
        exact_rates = False
        restart_key = None
        h_smooth = h
        if adaptive and self.q_rows.size:
            # The first step is error-controlled from the start when the
            # starting point is consistent just after t = 0: a start at rest
            # (solved at 0+), or an operating point with no ideal edge at 0.
            if cfg.start == "rest":
                rates0 = self.rates_after_jump(x, 0.0, self.start_h0, system.q_initial, q)
            elif cfg.start == "state":
                rates0 = self.rates_after_jump(x, t0, self.start_h0, self.q_start, q)
            elif not _contains(system.jumps(t0 - 1.0 - abs(t0), t0), t0):
                rates0 = system.rates(x, t0, self.discrete)
            if rates0 is not None:
                qdot0 = rates0[self.q_rows]
                if uses_qdot:
                    qdot, exact_rates = rates0, True

        while t < until:
            cfg.limits.check_run(self.stats["accepted"] + self.stats["rejected"] + self.stats["retries"],
                                 self.rec.count, t)
            if progress is not None and _time.perf_counter() > next_report:
                progress(t, until)
                next_report = _time.perf_counter() + 0.2
            # -- choose the next time point
            while corner_i < corners.size and corners[corner_i] <= t * (1 + 1e-15):
                corner_i += 1
            next_corner = corners[corner_i] if corner_i < corners.size else until
            if fixed:
                target = grid[grid_k]
                if h >= (target - t) * (1 - 1e-9):
                    t_new, h_try, landing = target, target - t, True
                else:
                    t_new, h_try, landing = t + h, h, False
                h_try = _snap(h_try, cfg.step)
            else:
                h_try = min(h, cfg.max_step)
                if since_restart > 0:
                    h_smooth = h_try
                gap = next_corner - t
                if h_try * LANDING_STRETCH >= gap:
                    h_try, t_new, landing = gap, next_corner, True
                else:
                    if h_try > 0.5 * gap:
                        h_try = 0.5 * gap
                    if self.pwl:
                        h_try = _ladder(h_try, until)
                    t_new, landing = t + h_try, False
            # -- solve
            if since_restart >= restart_steps:
                alpha, b0, b1, g0 = method.coefficients(h_try, h_prev)
            elif exact_rates:
                alpha, b0, b1, g0 = method.coefficients(h_try, h_prev or h_try)
            else:
                alpha, b0, b1, g0 = method.coefficients(h_try, None)
            history = b0 * q
            if b1:
                history = history + b1 * q_prev
            if g0:
                history = history + g0 * qdot
            # Newton starts from the linear extrapolation of the last two
            # points (within a smooth stretch), which often converges at once.
            guess = x
            if not self.pwl and x_last is not None and since_restart >= 1 and h_prev:
                guess = x + (x - x_last) * (h_try / h_prev)
            try:
                x_new = self.solve(guess, t_new, alpha, history)
            except SingularMatrix as exc:
                raise_singular(exc, time=t_new, step=h_try, what=f"transient at t = {t_new:.6g} s")
            if x_new is None:
                self.stats["retries"] += 1
                h = h_try * RETRY_FACTOR
                if h < cfg.min_step:
                    raise SimulationError(
                        f"no convergence at t = {t_new:.6g} s even with a step of {h_try:.3g} s; "
                        "unknowns still moving: " + ", ".join(self._worst),
                        time=t_new, step=h_try, unknowns=tuple(self._worst),
                    )
                continue
            # -- events inside the step: land on the first one
            if self.event_batches:
                te = self.event_time(t, x, t_new, x_new)
                if te is not None and te - t > max(cfg.min_step, 1e-6 * h_try) and t_new - te > 1e-9 * h_try:
                    h = te - t
                    if fixed:
                        grid = np.insert(grid, grid_k, te)
                        grid_corner = np.insert(grid_corner, grid_k, False)
                    else:
                        corners = np.insert(corners, corner_i, te)
                    continue
            q_new = C @ x_new if plain else self.charges(x_new, t_new)
            # -- local error (adaptive runs only)
            h_next = h
            if not fixed and self.q_rows.size:
                err = self.local_error(hist_t, hist_q, t_new, q_new[self.q_rows], h_try, h_prev, order,
                                       qdot0 if since_restart <= 1 else None,
                                       confluent=exact_rates and since_restart == 1)
                if err is not None:
                    # (backward-Euler restart steps, and the first step from
                    # exact rates, have first-order estimates)
                    if since_restart >= restart_steps or (exact_rates and since_restart >= 1):
                        step_order = order
                    else:
                        step_order = 1
                    factor = SAFETY * (max(err, 1e-10) ** (-1.0 / (step_order + 1)))
                    if err > 1.0:
                        self.stats["rejected"] += 1
                        h = h_try * max(0.2, min(factor, 0.9))
                        if h < cfg.min_step:
                            raise SimulationError(
                                f"the step fell below min-step ({cfg.min_step:.3g} s) at t = {t:.6g} s "
                                "while meeting the error tolerance; loosen tolerance= or check the circuit "
                                "for an unintended instant jump",
                                time=t, step=h,
                            )
                        continue
                    # Grow only when it pays (each new step length costs a
                    # factorisation); shrink as soon as the error asks for it.
                    if factor >= GROWTH_THRESHOLD:
                        h_next = h_try * min(MAX_GROWTH, factor)
                    elif factor >= 1.0:
                        h_next = h_try
                    else:
                        h_next = h_try * factor
                else:
                    h_next = h_try * MAX_GROWTH if len(hist_t) > 1 else h_try * 1.5
            # -- accept
            q_prev, q = q, q_new
            if uses_qdot or g0:
                qdot = alpha * q + history
            if Cs is not None:
                qs_new = Cs @ x_new
                rates = alpha * qs_new + b0 * qs + (b1 * qs_prev if b1 else 0.0) + (g0 * rates if g0 else 0.0)
                qs_prev, qs = qs, qs_new
            x_last = x
            x = x_new
            t = t_new
            self.record(t, x, rates)
            self.stats["accepted"] += 1
            if adaptive:
                hist_t.append(t)
                hist_q.append(q[self.q_rows])
                if len(hist_t) > 4:
                    del hist_t[0], hist_q[0]
                if self.q_rows.size:
                    np.maximum(self.q_scale, np.abs(hist_q[-1]), out=self.q_scale)
            if restart_key is not None and since_restart == 0:
                # What the error allows for this first step, for the next
                # restart into the same state (so it may grow period by period).
                self.restart_memory[restart_key] = h_next
            h_prev = h_try
            since_restart += 1
            h = h_next if not fixed else cfg.step
            if fixed and landing:
                grid_k += 1
            # -- corners and events cut the history
            restart = landing and (not fixed or grid_corner[grid_k - 1])
            jumped = bool(restart and jumps.size and _contains(jumps, t))
            switched = bool(self.event_batches) and self.update_events(t, x)
            qdot0 = restart_key = None
            if jumped or switched:
                h0 = max(h_try, cfg.min_step) * JUMP_FRACTION
                x = self.jump(x, t, h0, q)
                q_jump = self.charges(x, t)
                if Cs is not None:
                    qs_jump = Cs @ x
                    rates = (qs_jump - qs) / h0
                    qs = qs_prev = qs_jump
                if adaptive:
                    rates0 = self.rates_after_jump(x, t, h0, q, q_jump)
                    qdot0 = None if rates0 is None else rates0[self.q_rows]
                q = q_prev = q_jump
                self.record(t, x, rates)
                restart = True
            if restart:
                h_prev = None
                since_restart = 0
                qdot = np.zeros(system.n)
                exact_rates = qdot0 is not None and uses_qdot
                if exact_rates:
                    qdot = rates0
                if adaptive:
                    hist_t, hist_q = [t], [q[self.q_rows]]
                if not fixed:
                    gap = (corners[corner_i + 1] if corner_i + 1 < corners.size else until) - t
                    if qdot0 is not None:
                        # The first step's error is estimated from the rates
                        # just after the jump, so it may start long: as long
                        # as the first step after the same state last time,
                        # or else as the step before; a rejection shortens it.
                        restart_key = self.version
                        h = min(self.restart_memory.get(restart_key, h_smooth), gap, cfg.max_step)
                        h = max(h, cfg.min_step)
                    else:
                        # The time scale after a corner is unknown: start
                        # small and let the error control grow the step.
                        h = max(RESTART_FRACTION * min(h_try, gap, cfg.max_step), cfg.min_step)
            if t >= until * (1 - 1e-14):
                break
        self.end = (t, x)  # the values at the end, after any event there

    def local_error(self, hist_t, hist_q, t_new, q_new, h, h_prev, order, qdot0=None,
                    confluent: bool = False) -> float | None:
        """Largest local truncation error over the charge and flux rows, in units of their tolerance.

        ``qdot0``: the rates at the restart point (after a jump solve). On
        the first step after a restart they give the backward-Euler error
        ``h^2 q''/2 = (q1 - q0) - h*qdot0`` (a confluent divided difference,
        Hermite data at the restart point); an upper bound for a trapezoidal
        first step. With ``confluent`` (a trapezoidal second step from exact
        rates) the third divided difference ``q[t0, t0, t1, t2]`` gives the
        trapezoidal error, h^3/12 times the third derivative, at once.
        """
        ts = hist_t + [t_new]
        qs = hist_q + [q_new]
        need = order + 2
        if len(ts) == 2 and qdot0 is not None:
            lte = (q_new - hist_q[-1]) - h * qdot0
        elif len(ts) == 3 and qdot0 is not None and confluent:
            (t0, t1, t2), (q0, q1, q2) = ts, qs
            d01 = (q1 - q0) / (t1 - t0)
            d001 = (d01 - qdot0) / (t1 - t0)
            d012 = ((q2 - q1) / (t2 - t1) - d01) / (t2 - t0)
            lte = 0.5 * h ** 3 * (d012 - d001) / (t2 - t0)
        elif len(ts) < 3 or h_prev is None:
            return None
        elif len(ts) < need:
            # Not enough history for the method's own order: use a first-order estimate.
            lte = h * h * _divided_difference(ts[-3:], qs[-3:])
        elif order == 1:
            lte = h * h * _divided_difference(ts[-3:], qs[-3:])
        else:
            dd3 = _divided_difference(ts[-4:], qs[-4:])
            if self.method.name == "bdf2":
                w = h / h_prev
                lte = ((1 + w) ** 2 / (w * (1 + 2 * w))) * h ** 3 * dd3
            else:
                # trapezoidal: (h^3/12) q''' with q''' = 6 * dd3
                lte = 0.5 * h ** 3 * dd3
        tol = self.cfg.tolerance * np.maximum(self.q_scale, np.abs(q_new)) + self.q_atol
        return float(np.max(np.abs(lte) / tol))


def _divided_difference(ts: list[float], qs: list[np.ndarray]) -> np.ndarray:
    """The highest divided difference through the given points (vector-valued).

    Written as its explicit weights, sum_i q_i / prod_{j != i} (t_i - t_j),
    so it costs one small matrix-vector product.
    """
    n = len(ts)
    weights = np.empty(n)
    for i in range(n):
        d = 1.0
        for j in range(n):
            if j != i:
                d *= ts[i] - ts[j]
        weights[i] = 1.0 / d
    return weights @ np.asarray(qs)


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


def _finish(circuit, system: System, refs, run: _Run, started, cfg: _Settings, status, message) -> Waveforms:
    rec = run.rec
    n = rec.count
    time = rec.t[:n].copy()
    probe = Probe(
        system,
        time,
        x={int(idx): rec.x[:n, j] for j, idx in enumerate(run.need_x)},
        rates={sid: rec.r[:n, j] for j, sid in enumerate(run.need_states)},
        discrete=run.discrete,
    )
    # (+ 0.0 turns -0.0 into 0.0 so reports never show "-0")
    signals = {ref.label: compute_signal(ref, circuit, probe) + 0.0 for ref in refs}
    notes = [n for n in cfg.notes if not any(n in w for w in circuit.warnings)]
    if cfg.sample is not None and n > 1:
        time, signals = _resample(time, signals, cfg.sample, run.method.order)
    steps = np.diff(rec.t[:n])
    steps = steps[steps > 0]
    statistics = {
        "points": int(time.size),
        "accepted_steps": int(run.stats["accepted"]),
        "rejected_steps": int(run.stats["rejected"]),
        "retried_steps": int(run.stats["retries"]),
        "events": int(run.stats["events"]),
        "newton_iterations": int(run.stats["newton_iterations"]),
        "factorizations": int(run.factorizer.factorizations),
        "solves": int(run.factorizer.solves),
        "smallest_step_s": float(steps.min()) if steps.size else 0.0,
        "largest_step_s": float(steps.max()) if steps.size else 0.0,
        "method": run.method.name,
        "step_control": "fixed" if cfg.step is not None else "error-controlled",
        "unknowns": system.n,
        "wall_time_s": _time.perf_counter() - started,
    }
    statistics["steps"] = statistics["accepted_steps"]
    end = getattr(run, "end", None)
    final = None
    if status == "ok" and end is not None:
        final = CircuitState(end[0], end[1], tuple(system.names), run.discrete.snapshot())
    return Waveforms(
        final_state=final,
        time=time,
        signals=signals,
        units={ref.label: unit_label(ref) for ref in refs},
        statistics=statistics,
        warnings=list(circuit.warnings) + notes,
        status=status,
        message=message,
    )


def _resample(time: np.ndarray, signals: dict[str, np.ndarray], sample: float, order: int):
    """Signals on a uniform grid, interpolated with the method's order.

    Linear interpolation for first-order methods; for second-order methods a
    quadratic through the two neighbours and the nearest third point of the
    same smooth segment (never across a repeated time, i.e. an event).
    """
    grid = np.arange(time[0], time[-1] + sample * 1e-9, sample)
    out = {}
    # Index of the interval [time[i], time[i+1]] holding each sample (right-continuous).
    i = np.clip(np.searchsorted(time, grid, side="right") - 1, 0, time.size - 2)
    t0, t1 = time[i], time[i + 1]
    same = t1 <= t0  # a repeated time: take the later value
    for label, y in signals.items():
        y0, y1 = y[i], y[i + 1]
        with np.errstate(invalid="ignore", divide="ignore"):
            frac = np.where(same, 1.0, (grid - t0) / np.where(same, 1.0, t1 - t0))
        lin = y0 + (y1 - y0) * frac
        if order >= 2 and time.size >= 3:
            j = np.where(i + 2 < time.size, i + 2, i - 1)
            j = np.clip(j, 0, time.size - 1)
            t2, y2 = time[j], y[j]
            ok = (t2 != t0) & (t2 != t1) & ~same
            # A third point across a repeated time belongs to another segment.
            lo = np.minimum(np.minimum(i, i + 1), j)
            hi = np.maximum(np.maximum(i, i + 1), j)
            dup = np.zeros(time.size, dtype=bool)
            dup[1:] = np.diff(time) <= 0
            cum = np.cumsum(dup)
            ok &= (cum[hi] - cum[lo]) == 0
            with np.errstate(invalid="ignore", divide="ignore"):
                quad = (y0 * (grid - t1) * (grid - t2) / ((t0 - t1) * (t0 - t2))
                        + y1 * (grid - t0) * (grid - t2) / ((t1 - t0) * (t1 - t2))
                        + y2 * (grid - t0) * (grid - t1) / ((t2 - t0) * (t2 - t1)))
            lin = np.where(ok, quad, lin)
        out[label] = lin
    return grid, out
