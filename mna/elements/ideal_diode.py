"""The piecewise-linear diode: ``ideal-diode``.

Netlist::

    ideal-diode D1 a -> k  drop=0.7 V  on=20 mohm  off=10 Mohm

A diode made of two straight lines: conducting, ``i = (v - drop) / on``;
blocking, ``i = v / off``. It conducts while ``v > drop`` (the two lines
meet there only approximately, at ``i = drop / off``, a leakage of 70 nA
with the defaults). Between its changes of state it is linear, so a
circuit built from it, switches and linear parts is piecewise linear:
each interval between events is solved exactly (``mna.analyses.exact``)
and a PWM period costs a few matrix-vector products. The change of state
is located where ``v`` crosses ``drop`` on the exact trajectory.

When to use which diode:

- ``ideal-diode`` for converter and clamp studies where what matters is
  the conduction interval, the forward drop and the energy, and for the
  speed of long switching runs.
- ``diode`` (exponential junction) where the curve itself matters: the
  soft knee at low current, a Zener's breakdown knee, junction
  capacitance, the temperature dependence of the drop.

Results: ``v i p`` and ``state`` (1 conducting, 0 blocking).
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError
from ..units import AMPERE, DIMENSIONLESS, OHM, VOLT, WATT
from .base import CONDUCTOR, Arg, Branch, NonlinearBatch
from .batching import BranchPattern, states_from_log
from .passive import TwoTerminal


class IdealDiode(TwoTerminal):
    """``ideal-diode D1 a -> k drop=0.7 V on=20 mohm off=10 Mohm``: two straight lines."""

    keyword = "ideal-diode"
    arguments = (
        Arg("drop", VOLT, default=0.7, nonnegative=True, doc="forward drop where conduction starts"),
        Arg("on", OHM, default=10e-3, positive=True, doc="slope resistance when conducting"),
        Arg("off", OHM, default=10e6, positive=True, doc="resistance when blocking"),
    )
    outputs = {"v": VOLT, "i": AMPERE, "p": WATT, "state": DIMENSIONLESS}
    summary = "piecewise-linear diode: forward drop, on-resistance, off-resistance (exact switched intervals)"

    def validate(self):
        p = self.params
        if not p["on"] < p["off"]:
            raise InputError(f"ideal-diode {self.name}: on= ({p['on']:g} ohm) must be below "
                             f"off= ({p['off']:g} ohm)", self.span_of("on"))

    def branches(self):
        return [Branch(self.nodes["a"], self.nodes["b"], CONDUCTOR)]

    def stamp(self, s):
        self._a, self._b = s.node(self.nodes["a"]), s.node(self.nodes["b"])

    def states(self, probe) -> np.ndarray:
        """Conducting (1.0) or blocking (0.0) at each recorded time, from the run's log."""
        return states_from_log(probe, self)

    def current(self, probe):
        on = self.states(probe) > 0.5
        v = self.across(probe)
        p = self.params
        return np.where(on, (v - p["drop"]) / p["on"], v / p["off"])

    def output(self, quantity, probe):
        if quantity == "state":
            return self.states(probe)
        return super().output(quantity, probe)


class IdealDiodeState:
    """Which diodes conduct in one run, with the log of changes."""

    __slots__ = ("on", "pending", "t_seen", "log_t", "log_s", "chatter")

    def __init__(self, n: int, t: float):
        self.on = np.zeros(n, dtype=bool)
        self.pending: tuple[float, float, np.ndarray] | None = None
        self.t_seen = t
        self.log_t = [t]
        self.log_s = [self.on.copy()]
        self.chatter = np.zeros(n, dtype=np.int64)


class IdealDiodeBatch(NonlinearBatch):
    """All ideal diodes: ``f = g(state) v - state * drop / on``, affine between events."""

    piecewise_linear = True
    #: Consecutive accepted points with a change before the run calls it chatter.
    max_chatter = 100

    def __init__(self, elements, stamper):
        super().__init__(elements, stamper)
        self.pattern = BranchPattern(np.array([e._a for e in elements]), np.array([e._b for e in elements]))
        self.f_rows = self.pattern.f_rows
        self.jf_rows, self.jf_cols = self.pattern.jf_rows, self.pattern.jf_cols
        self.drop = np.array([e.params["drop"] for e in elements])
        self.g_on = np.array([1.0 / e.params["on"] for e in elements])
        self.g_off = np.array([1.0 / e.params["off"] for e in elements])
        self.tol = 1e-9 * np.maximum(self.drop, 1e-3)
        self.column = {e.name: k for k, e in enumerate(elements)}
        self.names = [e.name for e in elements]

    def new_state(self, t: float = 0.0) -> IdealDiodeState:
        return IdealDiodeState(len(self.elements), t)

    def snapshot(self, state: IdealDiodeState):
        return tuple(bool(v) for v in state.on)

    def restore(self, snapshot, t: float) -> IdealDiodeState:
        state = self.new_state(t)
        state.on[:] = np.asarray(snapshot, dtype=bool)
        state.log_s = [state.on.copy()]
        return state

    def state_log(self, state: IdealDiodeState, element):
        k = self.column[element.name]
        return np.array(state.log_t, dtype=float), np.array([s[k] for s in state.log_s], dtype=float)

    def state_key(self, state: IdealDiodeState):
        return state.on.tobytes()

    def evaluate(self, x, t, state: IdealDiodeState):
        g = np.where(state.on, self.g_on, self.g_off)
        v = self.pattern.across(x)
        current = g * v - np.where(state.on, self.g_on * self.drop, 0.0)
        return self.pattern.f_values(current), self.pattern.jf_values(g), self.empty, self.empty

    def _margin(self, x: np.ndarray) -> np.ndarray:
        """``v - drop`` of every diode (V): conducting where positive."""
        return self.pattern.across(x) - self.drop

    def update_events(self, t, x, state: IdealDiodeState) -> bool:
        state.t_seen = max(state.t_seen, t)
        y = self._margin(x)
        turn_on = ~state.on & (y > self.tol)
        turn_off = state.on & (y < -self.tol)
        if state.pending is not None:
            te, span, which = state.pending
            if abs(t - te) <= 1e-6 * span:
                turn_on |= which & ~state.on
                turn_off |= which & state.on
            state.pending = None
        flip = turn_on | turn_off
        state.chatter = np.where(flip, state.chatter + 1, 0)
        if np.any(state.chatter >= self.max_chatter):
            from ..errors import SimulationError

            k = int(np.argmax(state.chatter))
            raise SimulationError(
                f"ideal-diode {self.names[k]} changes state at each of the last {self.max_chatter} "
                f"time points (t = {t:.6g} s): it chatters about its drop; give it a larger on= "
                "resistance or a snubber, or use the exponential diode",
                time=t, unknowns=(self.names[k],))
        if not np.any(flip):
            return False
        state.on ^= flip
        state.log_t.append(t)
        state.log_s.append(state.on.copy())
        return True

    def event_time(self, t0, x0, t1, x1, state: IdealDiodeState):
        if not t1 > t0:
            return None
        y0, y1 = self._margin(x0), self._margin(x1)
        crosses = np.where(state.on, (y0 >= 0) & (y1 < -self.tol), (y0 <= 0) & (y1 > self.tol))
        if not np.any(crosses):
            return None
        with np.errstate(invalid="ignore", divide="ignore"):
            frac = np.where(crosses, -y0 / (y1 - y0), math.inf)
        te_all = t0 + np.clip(frac, 0.0, 1.0) * (t1 - t0)
        te = float(np.min(te_all))
        span = t1 - t0
        state.pending = (te, span, crosses & (te_all <= te + 1e-6 * span))
        return te


IdealDiode.Batch = IdealDiodeBatch
