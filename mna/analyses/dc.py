"""The DC operating point.

d/dt = 0: inductors are shorts (their winding resistance remains),
capacitors are open, inertias carry no torque, sources take their t = 0
values. Nodes with no DC path get a tiny leak (see :mod:`mna.topology`).
States with no steady state of their own (a coil generator's angle) are
held at their initial values (:meth:`mna.system.Stamper.hold_at_dc`).
"""

from __future__ import annotations

import time as _time
from typing import TYPE_CHECKING, Sequence

import numpy as np

from ..errors import SimulationError
from ..results import OperatingPoint
from ..runstate import DiscreteStates
from ..solver import Factorizer, SingularMatrix, newton, raise_singular
from ..system import Probe, System
from ..topology import check_dc_loops
from .common import compute_signal, dc_leak, default_signals, prepare, require_finite, unit_label

if TYPE_CHECKING:  # pragma: no cover
    from ..circuit import Circuit, SignalRef


#: Leak stepping: the conductance (S) from every node to the reference starts
#: here and is divided by LEAK_FACTOR per successful solve down to LEAK_END,
#: then removed.
LEAK_START = 1e-2
LEAK_END = 1e-12
LEAK_FACTOR = 10.0
#: Source ramping: the smallest fraction by which the sources may be raised.
SOURCE_STEP_MIN = 1e-4
#: Most solves one leak-stepping or source-ramping ladder may take (keeps a hopeless
#: case from running for minutes before it reports).
MAX_LADDER_STEPS = 200
#: Most re-solves while switch gates settle into a consistent state.
MAX_EVENT_ROUNDS = 16


def solve_dc(system: System, factorizer: Factorizer, leak: np.ndarray | None, t: float = 0.0,
             guess: np.ndarray | None = None, info: dict | None = None,
             discrete: DiscreteStates | None = None) -> tuple[np.ndarray, int]:
    """x at the operating point and the Newton iterations it took.

    The point is found by the first of these that converges (``info``, when
    given, receives ``{"dc_method": ...}`` naming it):

    1. Newton's method from ``guess`` (zeros by default), with junction limiting;
    2. the same with damping (the step is halved while the residual grows);
    3. leak stepping: a conductance from every node to the reference, from
       :data:`LEAK_START` down to :data:`LEAK_END` by :data:`LEAK_FACTOR`
       (a smaller factor after a failure), then removed;
    4. source ramping: every independent source raised from 0 to its full
       value, in fractions that grow after a success and halve after a failure.

    A loop of ideal inductors and voltage sources is refused first
    (:func:`mna.topology.check_dc_loops`).

    Switching elements are then asked for their state at this point
    (``update_events``); while any state changes the point is solved again,
    so a comparator gate agrees with the voltages that drive it. Raises
    :class:`~mna.errors.SimulationError` (exit status 3) naming the
    unknowns that did not settle.
    """
    check_dc_loops(system.circuit)
    x = np.zeros(system.n) if guess is None else np.array(guess, dtype=float)
    if discrete is None:
        discrete = DiscreteStates(system, t)
    total = 0
    for _ in range(MAX_EVENT_ROUNDS):
        x, its, method = _solve_point(system, factorizer, leak, t, x, discrete)
        total += its
        changed = discrete.changed_batches(t, x)
        if not any(changed):
            if info is not None:
                info["dc_method"] = method
            return x, total
        factorizer.forget()
    names = sorted({e.name for slot, c in zip(system.batches, changed) if c for e in slot.batch.elements})
    raise SimulationError(
        f"DC operating point: the switching states of {', '.join(names[:6])} never settle: each solve "
        "flips them again (a comparison gate driven by its own switch); give the gate a hysteresis= "
        "band or change the comparison",
        time=t,
        unknowns=tuple(names),
    )


def _solve_point(system: System, factorizer: Factorizer, leak: np.ndarray | None, t: float,
                 x0: np.ndarray, discrete: DiscreteStates) -> tuple[np.ndarray, int, str]:
    """One operating point with the current switch states: (x, iterations, method)."""
    total = 0
    first_failure: tuple[str, ...] = ()
    singular: SingularMatrix | None = None
    for method, damping in (("newton", False), ("damped newton", True)):
        try:
            result = newton(system, factorizer, x0, t, 0.0, None, extra_diag=leak, max_iterations=100,
                            damping=damping, hold=system.dc_hold, states=discrete)
        except SingularMatrix as exc:
            if system.is_linear:
                _raise_dc_singular(exc, t)
            singular = singular or exc
            continue
        total += result.iterations
        if result.converged:
            return result.x, total, method
        first_failure = first_failure or result.worst
        if system.is_linear:
            break
    for method, ladder in (("leak stepping", leak_stepping), ("source ramping", source_ramping)):
        try:
            x, its = ladder(system, factorizer, leak, t, x0, discrete)
        except LadderFailed as exc:
            total += exc.iterations
            continue
        return x, total + its, method
    if singular is not None and not first_failure:
        _raise_dc_singular(singular, t)
    raise SimulationError(
        "DC operating point: no convergence by Newton's method, damped Newton, leak stepping or "
        "source ramping; unknowns still moving: " + (", ".join(first_failure) or "(unknown)"),
        time=t,
        unknowns=first_failure,
    )


def _raise_dc_singular(exc: SingularMatrix, t: float) -> None:
    what = "DC operating point"
    if exc.unknowns and all(u.split("(")[0] in ("i", "i1", "i2") for u in exc.unknowns):
        what += (" (currents in a loop of inductors or voltage sources with no resistance "
                 "have no DC solution; give a winding resistance=)")
    raise_singular(exc, time=t, step=None, what=what)


class LadderFailed(Exception):
    """A continuation ladder (leak stepping or source ramping) could not reach its end."""

    def __init__(self, iterations: int):
        self.iterations = iterations


def _node_diag(system: System, value: float, leak: np.ndarray | None) -> np.ndarray:
    diag = np.zeros(system.n) if leak is None else leak.copy()
    nodes = np.fromiter(system.node_index.values(), dtype=np.int64, count=len(system.node_index))
    diag[nodes] += value
    return diag


def _attempt(system, factorizer, x, t, leak_diag, scale=1.0, discrete=None):
    try:
        return newton(system, factorizer, x, t, 0.0, None, extra_diag=leak_diag, max_iterations=100,
                      source_scale=scale, damping=True, hold=system.dc_hold, states=discrete)
    except SingularMatrix:
        return None


def leak_stepping(system: System, factorizer: Factorizer, leak: np.ndarray | None, t: float,
                  x0: np.ndarray, discrete: DiscreteStates | None = None) -> tuple[np.ndarray, int]:
    """Step a node-to-reference conductance down to nothing; (x, Newton iterations).

    Raises :class:`LadderFailed` when even a very small reduction fails.
    """
    total = 0
    x = x0
    leak_g = LEAK_START
    factor = LEAK_FACTOR
    result = _attempt(system, factorizer, x, t, _node_diag(system, leak_g, leak), discrete=discrete)
    if result is None or not result.converged:
        raise LadderFailed(result.iterations if result else 0)
    total += result.iterations
    x = result.x
    for _ in range(MAX_LADDER_STEPS):
        if leak_g == 0:
            return x, total
        trial = leak_g / factor if leak_g / factor >= LEAK_END else 0.0
        diag = _node_diag(system, trial, leak) if trial else leak
        result = _attempt(system, factorizer, x, t, diag, discrete=discrete)
        total += result.iterations if result else 0
        if result is not None and result.converged:
            x, leak_g = result.x, trial
            factor = min(factor * 2.0, LEAK_FACTOR)
            continue
        factor = np.sqrt(factor)
        if factor < 1.01:
            break
    if leak_g == 0:
        return x, total
    raise LadderFailed(total)


def source_ramping(system: System, factorizer: Factorizer, leak: np.ndarray | None, t: float,
                    x0: np.ndarray, discrete: DiscreteStates | None = None) -> tuple[np.ndarray, int]:
    """Raise every source from 0 to its full value; (x, Newton iterations).

    ``x0`` is ignored: the ladder starts from the all-zero point, the
    solution with every source off. Raises :class:`LadderFailed`.
    """
    total = 0
    x = np.zeros(system.n)
    done = 0.0
    step = 0.1
    for _ in range(MAX_LADDER_STEPS):
        if done >= 1.0:
            return x, total
        target = min(1.0, done + step)
        result = _attempt(system, factorizer, x, t, leak, scale=target, discrete=discrete)
        total += result.iterations if result else 0
        if result is not None and result.converged:
            x, done = result.x, target
            step = min(step * 2.0, 0.5)
            continue
        step /= 2.0
        if step < SOURCE_STEP_MIN:
            break
    if done >= 1.0:
        return x, total
    raise LadderFailed(total)


def operating_point(circuit: "Circuit", signals: Sequence["SignalRef"] = ()) -> OperatingPoint:
    """Solve the operating point and report every node, current and shaft speed.

    ``signals`` adds quantities beyond those (``p(R1)`` for a check, say).
    """
    started = _time.perf_counter()
    system, report = prepare(circuit)
    factorizer = Factorizer(system)
    info: dict = {}
    discrete = DiscreteStates(system, 0.0)
    x, iterations = solve_dc(system, factorizer, dc_leak(system, report), info=info, discrete=discrete)
    probe = Probe(system, np.zeros(1), x={i: x[i:i + 1] for i in range(system.n)}, discrete=discrete,
                  rates={k: np.zeros(1) for k in range(system.Cs.shape[0])})
    labels = {r.label: r for r in default_signals(circuit)}
    labels.update({r.label: r for r in circuit.records})
    labels.update({r.label: r for r in signals})
    values = {label: float(compute_signal(ref, circuit, probe)[0]) + 0.0 for label, ref in labels.items()}
    require_finite(values, "the DC operating point")
    return OperatingPoint(
        values=values,
        units={label: unit_label(ref) for label, ref in labels.items()},
        statistics={
            "unknowns": system.n,
            "newton_iterations": iterations,
            "dc_method": info.get("dc_method", "newton"),
            "factorizations": factorizer.factorizations,
            "wall_time_s": _time.perf_counter() - started,
        },
        warnings=list(circuit.warnings),
    )
