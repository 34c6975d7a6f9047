"""Transient analysis at a fixed step that lands exactly on every corner.

The time grid is ``k * step`` from 0 to ``until`` with every waveform
corner and gate event inserted; a grid point closer to a corner than a
millionth of a step is dropped so no step is absurdly short. The step
after a corner restarts the integration method (multistep history is not
carried across a kink).

Per step on a linear circuit the work is one sparse mat-vec for the
history, one source evaluation per waveform kind, and one triangular solve
with a factorisation reused for every step of the same length.
"""

from __future__ import annotations

import time as _time
from typing import TYPE_CHECKING, Any, Sequence

import numpy as np

from ..circuit import SignalRef
from ..errors import InputError, SimulationError
from ..integrate import get_method
from ..results import Waveforms
from ..solver import Factorizer, SingularMatrix, newton, raise_singular
from ..system import Probe, System
from .common import compute_signal, dc_leak, default_signals, plan, prepare, unit_label
from .dc import solve_dc

if TYPE_CHECKING:  # pragma: no cover
    from ..circuit import Circuit

#: Steps of a run that starts at rest begin with a backward-Euler step this
#: much shorter than the first step, to find values consistent with the
#: initial charges and fluxes (a capacitor across a source charges at once).
REST_START_FRACTION = 1e-9


def time_grid(until: float, step: float, corners: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Time points (s) and, for each, whether a corner lies there."""
    count = int(np.ceil(until / step - 1e-9))
    grid = np.arange(count + 1, dtype=float) * step
    grid[-1] = until
    corners = corners[(corners > 0) & (corners < until)]
    if corners.size:
        tol = step * 1e-6
        idx = np.searchsorted(corners, grid)
        near = np.zeros(grid.size, dtype=bool)
        for j in (idx - 1, idx):
            ok = (j >= 0) & (j < corners.size)
            near[ok] |= np.abs(corners[j[ok]] - grid[ok]) < tol
        near[0] = near[-1] = False
        times = np.union1d(grid[~near], corners)
    else:
        times = grid
    is_corner = np.zeros(times.size, dtype=bool)
    if corners.size:
        is_corner[np.searchsorted(times, corners)] = True
    return times, is_corner


def _quantise(h: np.ndarray, step: float) -> np.ndarray:
    """Make steps that differ only by rounding exactly equal (for LU reuse)."""
    return np.round(h / step, 9) * step


def transient(circuit: "Circuit", settings: dict[str, Any], records: Sequence[SignalRef] | None) -> Waveforms:
    """Run a transient analysis; see :meth:`mna.Circuit.transient`."""
    started = _time.perf_counter()
    until = float(settings["until"])
    if not until > 0:
        raise InputError(f"until= must be positive, got {until:g} s")
    step = settings.get("step")
    notes: list[str] = []
    if step is None:
        step = until / 1000.0
        notes.append(
            f"no step= given: using a fixed step of until/1000 = {step:.6g} s"
        )
    step = float(step)
    if not step > 0:
        raise InputError(f"step= must be positive, got {step:g} s")
    if step > until:
        step = until
    method = get_method(settings.get("method", "backward-euler"))
    start = settings.get("start", "dc")
    if start not in ("dc", "rest"):
        raise InputError(f"start= must be dc or rest, got {start!r}")

    system, report = prepare(circuit)
    refs = list(records) if records else (list(circuit.records) or default_signals(circuit))
    need_x, need_states = plan(system, circuit, refs)
    times, is_corner = time_grid(until, step, system.corners(0.0, until))
    steps = np.diff(times)
    steps_q = _quantise(steps, step)
    n_points = times.size

    factorizer = Factorizer(system)
    x_rec = np.empty((n_points, len(need_x)))
    rate_rec = np.empty((n_points, len(need_states)))
    Cs_rec = system.Cs[need_states] if need_states else None
    stats = {"steps": 0, "newton_iterations": 0}

    def results(count: int, status: str = "ok", message: str = "") -> Waveforms:
        return _finish(circuit, system, refs, times[:count], x_rec[:count], rate_rec[:count], need_x,
                       need_states, factorizer, stats, started, status, message, notes)

    # -- initial point ---------------------------------------------------------
    if start == "dc":
        x, its = solve_dc(system, factorizer, dc_leak(system, report), t=0.0)
        stats["newton_iterations"] += its
        q = system.charges(x, 0.0)
        qdot = np.zeros(system.n)
    else:
        h0 = steps_q[0] * REST_START_FRACTION
        q_init = system.q_initial
        try:
            res = newton(system, factorizer, np.zeros(system.n), 0.0, 1.0 / h0, -q_init / h0)
        except SingularMatrix as exc:
            raise_singular(exc, time=0.0, step=h0, what="start at rest")
        x = res.x
        q = system.charges(x, 0.0)
        qdot = np.zeros(system.n)
        factorizer.forget()
    x_rec[0] = x[need_x]
    qs = Cs_rec @ x if Cs_rec is not None else None
    qs_prev = qs
    rates = np.zeros(len(need_states))
    rate_rec[0] = rates
    q_prev = q

    # -- time loop --------------------------------------------------------------
    linear = system.is_linear
    h_prev: float | None = None
    uses_derivative = method.uses_derivative
    C = system.C
    progress = settings.get("progress")  # callable(t, until), called about 5 times a second
    next_report = _time.perf_counter() + 0.2
    for k in range(1, n_points):
        if progress is not None and not k & 511 and _time.perf_counter() > next_report:
            progress(float(times[k - 1]), until)
            next_report = _time.perf_counter() + 0.2
        t = times[k]
        h = steps_q[k - 1]
        alpha, b0, b1, g0 = method.coefficients(h, h_prev)
        history = b0 * q
        if b1:
            history += b1 * q_prev
        if g0:
            history += g0 * qdot
        try:
            if linear:
                lu = factorizer.factor(system.matrix_data(alpha), key=alpha)
                rhs = system.add_sources(-history, t)
                x = lu.solve(rhs)
                factorizer.solves += 1
                stats["newton_iterations"] += 1
            else:
                res = newton(system, factorizer, x, t, alpha, history)
                stats["newton_iterations"] += res.iterations
                if not res.converged:
                    raise SimulationError(
                        f"no convergence at t = {t:.6g} s (step {h:.3g} s); unknowns still moving: "
                        + ", ".join(res.worst),
                        time=t, step=h, unknowns=res.worst,
                    )
                x = res.x
        except SingularMatrix as exc:
            partial = results(k, "failed", "singular matrix")
            raise_singular(exc, time=t, step=h, partial=partial, what=f"transient at t = {t:.6g} s")
        except SimulationError as exc:
            exc.partial = results(k, "failed", exc.message)
            raise
        q_prev = q
        q = C @ x if linear else system.charges(x, t)
        if uses_derivative or g0:
            qdot = alpha * q + history
        if Cs_rec is not None:
            qs_new = Cs_rec @ x
            rates = alpha * qs_new + b0 * qs + (b1 * qs_prev if b1 else 0.0) + (g0 * rates if g0 else 0.0)
            qs_prev, qs = qs, qs_new
            rate_rec[k] = rates
        x_rec[k] = x[need_x]
        h_prev = None if is_corner[k] else h
        stats["steps"] += 1
    return results(n_points)


def _finish(circuit, system: System, refs, time, x_rec, rate_rec, need_x, need_states, factorizer,
            stats, started, status, message, notes) -> Waveforms:
    probe = Probe(
        system,
        time,
        x={idx: x_rec[:, j] for j, idx in enumerate(need_x)},
        rates={sidx: rate_rec[:, j] for j, sidx in enumerate(need_states)},
    )
    # (+ 0.0 turns -0.0 into 0.0 so reports never show "-0")
    signals = {ref.label: compute_signal(ref, circuit, probe) + 0.0 for ref in refs}
    steps = np.diff(time)
    statistics = {
        "points": int(time.size),
        "steps": int(stats["steps"]),
        "newton_iterations": int(stats["newton_iterations"]),
        "factorizations": int(factorizer.factorizations),
        "solves": int(factorizer.solves),
        "smallest_step_s": float(steps.min()) if steps.size else 0.0,
        "largest_step_s": float(steps.max()) if steps.size else 0.0,
        "unknowns": system.n,
        "wall_time_s": _time.perf_counter() - started,
    }
    return Waveforms(
        time=time,
        signals=signals,
        units={ref.label: unit_label(ref) for ref in refs},
        statistics=statistics,
        warnings=list(circuit.warnings) + notes,
        status=status,
        message=message,
    )
