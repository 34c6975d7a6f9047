"""The discrete states of one run, kept apart from the compiled system.

A :class:`~mna.system.System` is a description: it never changes after
compilation, so one system can be run many times, in turn or from several
threads. What a run changes lives in run objects made fresh for each run:

- :class:`DiscreteStates` -- the state object of every batch that has one
  (a switch's open/closed and its log), made by the batch's ``new_state``;
- :class:`mna.solver.Factorizer` -- the factorizations of this run, cached
  under keys that name everything the matrix depends on;
- the analysis's own loop state (histories, statistics).

:class:`DiscreteStates` is what the engine hands to
``System.evaluate_batches`` and to the batches' event methods.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:  # pragma: no cover
    from .elements.base import Element
    from .system import System


class DiscreteStates:
    """The state object of each batch of ``system`` for one run, from time ``t`` (s).

    ``snapshot`` (from :meth:`snapshot` of an earlier run of the same
    system) starts the batches from the states that run ended with.
    Indexing gives the state of batch k (what ``evaluate_batches`` takes).
    """

    def __init__(self, system: "System", t: float = 0.0, snapshot: tuple | None = None):
        self.batches = tuple(slot.batch for slot in system.batches)
        if snapshot is None:
            self.states = tuple(b.new_state(t) for b in self.batches)
        else:
            if len(snapshot) != len(self.batches):
                raise ValueError("the saved switch states belong to another circuit")
            self.states = tuple(b.restore(s, t) if s is not None else b.new_state(t)
                                for b, s in zip(self.batches, snapshot))
        self._evented = [(b, s) for b, s in zip(self.batches, self.states) if s is not None]
        self._owner = {e.name: k for k, b in enumerate(self.batches) for e in b.elements}
        #: Number of state changes so far (a key part for batches without ``state_key``).
        self.changes = 0

    def __getitem__(self, k: int):
        return self.states[k]

    def __len__(self) -> int:
        return len(self.states)

    def __iter__(self):
        return iter(self.states)

    @property
    def any(self) -> bool:
        """Whether any batch has discrete states (events can happen)."""
        return bool(self._evented)

    def update(self, t: float, x: np.ndarray) -> bool:
        """Let every batch update its states at an accepted point; True if any changed."""
        changed = False
        for batch, state in self._evented:
            changed |= bool(batch.update_events(t, x, state))
        if changed:
            self.changes += 1
        return changed

    def changed_batches(self, t: float, x: np.ndarray) -> list[bool]:
        """As :meth:`update`, but which batches changed, in order of ``system.batches``."""
        out = []
        for batch, state in zip(self.batches, self.states):
            out.append(state is not None and bool(batch.update_events(t, x, state)))
        if any(out):
            self.changes += 1
        return out

    def event_time(self, t0: float, x0: np.ndarray, t1: float, x1: np.ndarray) -> float | None:
        """The first state change strictly inside (t0, t1), or None."""
        best = None
        for batch, state in self._evented:
            te = batch.event_time(t0, x0, t1, x1, state)
            if te is not None and t0 < te < t1 and (best is None or te < best):
                best = te
        return best

    def key(self):
        """A hashable summary of every discrete state (what a matrix depends on
        besides the step), so a state seen before reuses its factorization.
        Batches without a ``state_key`` make it the count of changes so far."""
        keys = []
        for batch, state in self._evented:
            k = batch.state_key(state)
            if k is None:
                return ("change", self.changes)
            keys.append(k)
        return tuple(keys)

    def snapshot(self) -> tuple:
        """Immutable copies of every batch's states (None for a batch without)."""
        return tuple(b.snapshot(s) if s is not None else None for b, s in zip(self.batches, self.states))

    def log(self, element: "Element") -> tuple[np.ndarray, np.ndarray]:
        """Times and values of ``element``'s discrete state over the run."""
        k = self._owner.get(element.name)
        if k is None or self.states[k] is None:
            return np.empty(0), np.empty(0)
        return self.batches[k].state_log(self.states[k], element)


@dataclass(frozen=True, eq=False)
class CircuitState:
    """The complete state of a circuit at one instant, immutable.

    Read from a run as :attr:`mna.results.Waveforms.final_state`; given back
    as ``circuit.transient(until=..., start=state)`` a run continues from it.

    - ``time`` (s): the instant;
    - ``x``: every unknown of the compiled system (node potentials in V or
      rad/s, branch currents in A, fluxes in Wb...), read-only, in the order
      of ``unknowns``;
    - ``unknowns``: the names of the unknowns (``v(out)``, ``i(L1)``), which
      also tie the state to the circuit it came from;
    - ``switches``: the discrete states of every batch (for switches a
      :class:`~mna.elements.switches.SwitchSnapshot`: each switch's
      open/closed, which a comparison gate keeps; schedule and PWM gates
      take the state their time gives).
    """

    time: float
    x: np.ndarray
    unknowns: tuple[str, ...]
    switches: tuple = ()

    def __post_init__(self) -> None:
        x = np.array(self.x, dtype=float)
        x.flags.writeable = False
        object.__setattr__(self, "x", x)
        object.__setattr__(self, "time", float(self.time))
        if x.shape != (len(self.unknowns),):
            raise ValueError(f"a state of {len(self.unknowns)} unknowns got {x.size} values")

    def __getitem__(self, name: str) -> float:
        """One unknown by name: ``state["v(out)"]``, ``state["i(L1)"]``."""
        try:
            return float(self.x[self.unknowns.index(name)])
        except ValueError:
            raise KeyError(f"no unknown {name!r}; the unknowns are {', '.join(self.unknowns)}") from None

    def at(self, time: float) -> "CircuitState":
        """The same values, taken as the state at another ``time`` (s)."""
        return replace(self, time=time)

    def with_values(self, x: np.ndarray) -> "CircuitState":
        """The same instant and switch states with other values of the unknowns."""
        return replace(self, x=x)
