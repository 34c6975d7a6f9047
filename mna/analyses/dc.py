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
from ..solver import Factorizer, SingularMatrix, newton, raise_singular
from ..system import Probe, System
from .common import compute_signal, dc_leak, default_signals, prepare, unit_label

if TYPE_CHECKING:  # pragma: no cover
    from ..circuit import Circuit, SignalRef


def solve_dc(system: System, factorizer: Factorizer, leak: np.ndarray | None, t: float = 0.0,
             guess: np.ndarray | None = None) -> tuple[np.ndarray, int]:
    """x at the operating point and the Newton iterations it took."""
    x0 = np.zeros(system.n) if guess is None else guess
    try:
        result = newton(system, factorizer, x0, t, 0.0, None, extra_diag=leak, max_iterations=100,
                        hold=system.dc_hold)
    except SingularMatrix as exc:
        what = "DC operating point"
        if exc.unknowns and all(u.startswith("i(") for u in exc.unknowns):
            what += (" (currents in a loop of inductors or voltage sources with no resistance "
                     "have no DC solution; give a winding resistance=)")
        raise_singular(exc, time=t, step=None, what=what)
    if not result.converged:
        raise SimulationError(
            "DC operating point: Newton's method did not converge; unknowns still moving: "
            + ", ".join(result.worst),
            time=t,
            unknowns=result.worst,
        )
    return result.x, result.iterations


def operating_point(circuit: "Circuit", signals: Sequence["SignalRef"] = ()) -> OperatingPoint:
    """Solve the operating point and report every node, current and shaft speed.

    ``signals`` adds quantities beyond those (``p(R1)`` for a check, say).
    """
    started = _time.perf_counter()
    system, report = prepare(circuit)
    factorizer = Factorizer(system)
    x, iterations = solve_dc(system, factorizer, dc_leak(system, report))
    probe = Probe(system, np.zeros(1), x={i: x[i:i + 1] for i in range(system.n)},
                  rates={k: np.zeros(1) for k in range(system.Cs.shape[0])})
    labels = {r.label: r for r in default_signals(circuit)}
    labels.update({r.label: r for r in circuit.records})
    labels.update({r.label: r for r in signals})
    values = {label: float(compute_signal(ref, circuit, probe)[0]) + 0.0 for label, ref in labels.items()}
    return OperatingPoint(
        values=values,
        units={label: unit_label(ref) for label, ref in labels.items()},
        statistics={
            "unknowns": system.n,
            "newton_iterations": iterations,
            "factorizations": factorizer.factorizations,
            "wall_time_s": _time.perf_counter() - started,
        },
        warnings=list(circuit.warnings),
    )
