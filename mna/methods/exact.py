"""Exact intervals: the stepper of piecewise-linear circuits.

When every element is linear or piecewise linear (resistors, capacitors,
inductors, couplings, transformers, switches, ``ideal-diode``) and every
source is constant, a step, a ramp, a PWM train, a piecewise-linear table
or a sine, the circuit between two events is a linear time-invariant
descriptor system whose solution is known in closed form
(:mod:`mna.analyses.exact`). This stepper takes each interval in one piece:
no truncation error, no error control, no Newton iteration. Its dense
output is the exact trajectory, so events (a diode's drop crossed, a
comparison gate's level) are located on it and the output on any grid is
exact to round-off.

Per switch state the reduction to the differential part and the
eigen-decomposition are computed once; per (switch state, step length) the
propagators are computed once and reused, so a PWM period at a steady
frequency costs a few matrix-vector products (``statistics`` counts the
propagators built and reused).

The run picks this stepper by itself when the circuit qualifies
(:func:`qualifies`); ``method=exact`` asks for it and explains a refusal;
naming any other method forces the integrator.
"""

from __future__ import annotations

import numpy as np

from ..analyses.exact import Inputs, LinearModes, NotIndexOne, SourceEntries, state_matrices, _phi1, _phi2
from .base import CANDIDATE, DenseOutput, Step, Stepper

#: Largest circuit (unknowns) taken on the exact path: the reduction is dense.
EXACT_LIMIT = 200
#: With switching events possible, a step spans at most this many periods of
#: the fastest lasting oscillation, so that no crossing hides between the
#: points the run looks at (eight per step: two per period).
OSCILLATION_PERIODS = 4.0
#: Error of straight lines through the 4 points a step records, per
#: (h |lam|)^2 and unit amplitude: (1/3)^2 / 8 (see ExactStepper._resolution_step).
RESOLUTION_K = 1.0 / 72.0
#: Propagators kept per run (switch state x step length).
PROPAGATOR_CACHE = 256


class NotExact(Exception):
    """The circuit, or its present switch state, cannot take the exact path."""


def qualifies(system) -> str | None:
    """None if the system can take the exact path, else the reason (for a message)."""
    if system.n > EXACT_LIMIT:
        return f"it has {system.n} unknowns (the exact path takes up to {EXACT_LIMIT})"
    for slot in system.batches:
        if not slot.batch.piecewise_linear:
            names = ", ".join(e.name for e in slot.batch.elements[:3])
            return (f"{names} {'is' if len(slot.batch.elements) == 1 else 'are'} nonlinear "
                    "(only linear and switched elements, and ideal-diode, have exact intervals)")
        if slot.batch.q_rows.size:
            return f"{slot.batch.elements[0].name} has a charge that depends on its state"
    entries = SourceEntries(system)
    if not entries.supported:
        kinds = sorted({type(w).__name__ for w in entries.waves})
        return f"a source waveform ({', '.join(kinds)}) is not affine or sinusoidal between corners"
    return None


class ExactDense(DenseOutput):
    """The exact trajectory inside one interval (its coefficients computed on first use)."""

    order = 99  # exact: the run samples it as finely as its highest order asks
    exact = True
    #: Points the run looks at for events inside one step (two per period of
    #: the fastest lasting oscillation, see OSCILLATION_PERIODS).
    pieces = 8

    def __init__(self, modes: LinearModes, y0: np.ndarray, inputs: Inputs, t_old: float, t: float):
        super().__init__(t_old, t)
        self.modes, self.y0, self.inputs = modes, y0, inputs
        self._trajectory = None

    @property
    def trajectory(self):
        if self._trajectory is None:
            self._trajectory = self.modes.trajectory(self.y0, self.inputs)
        return self._trajectory

    def __call__(self, t):
        flat = np.atleast_1d(np.asarray(t, dtype=float) - self.t_old)
        x = self.modes.x_of(self.trajectory(flat), self.inputs.at(flat))
        return x[0] if np.ndim(t) == 0 else x

    def derivative(self, t):
        flat = np.atleast_1d(np.asarray(t, dtype=float) - self.t_old)
        xd = xdot_rows(self.modes, self.trajectory(flat), self.inputs, flat)
        return xd[0] if np.ndim(t) == 0 else xd


def xdot_rows(modes: LinearModes, y: np.ndarray, inputs: Inputs, s: np.ndarray) -> np.ndarray:
    """dx/dt (per second) on the exact trajectory at the offsets s (rows of y)."""
    u = inputs.at(s)
    du = np.broadcast_to(inputs.b, u.shape)
    if inputs.omega.size:
        ws = np.outer(s, inputs.omega)
        du = du + (-np.sin(ws) * inputs.omega) @ inputs.c + (np.cos(ws) * inputs.omega) @ inputs.d
    if modes.r:
        ydot = y @ modes.M.T + u @ modes.NS.T - modes.Nf0
        return ydot @ modes.P.T + du @ modes.QS.T
    return du @ modes.QS.T


class ExactStepper(Stepper):
    """One interval between corners or events in one exact step."""

    name = "exact"
    order = 99
    summary = "exact solution of piecewise-linear circuits between events (no truncation error)"

    def __init__(self, problem, t, x, h, rates=None):
        reason = qualifies(problem.system)
        if reason is not None:
            raise NotExact(reason)
        self.sources = SourceEntries(problem.system)
        self.modes_by_state: dict = {}
        self.propagators: dict = {}
        self.counts = {"propagators_built": 0, "propagators_reused": 0, "switch_states": 0}
        super().__init__(problem, t, x, h, rates)

    # -- per switch state ---------------------------------------------------------------
    def modes(self) -> LinearModes:
        key = self.problem.state_key()
        modes = self.modes_by_state.get(key)
        if modes is None:
            system = self.problem.system
            C, G, f0 = state_matrices(system, getattr(self.problem, "discrete", None), self.t)
            try:
                modes = LinearModes(C, G, f0, self.sources.S)
            except NotIndexOne as exc:
                raise NotExact(f"in the switch state at t = {self.t:.6g} s the circuit is not of index 1 "
                               f"({exc})") from None
            self.modes_by_state[key] = modes
            self.counts["switch_states"] += 1
        return modes

    def _restart(self, rates) -> None:
        self.current = self.modes()
        self.y = self.current.y_from_charges(self.current.C @ self.x)
        self.xdot = np.zeros(self.x.size)
        # Each interval is exact: the next step may reach the next corner,
        # unless the recorded points would not show the waveform.
        if not hasattr(self, "x_scale"):
            self.x_scale = np.zeros(self.x.size)
        inputs = self.sources.inputs(self.t, self.t + 1e-6 * max(abs(self.t), 1e-9))
        if getattr(getattr(self.problem, "cfg", None), "step", None) is not None:
            return  # a fixed step= is the output grid the user asked for
        self.h = min(self._longest_step(self.current),
                     self._resolution_step(self.current, self.y, self.x, inputs))

    def after_event(self, t: float, x: np.ndarray):
        """The state just after t in the new switch state: charges and fluxes
        kept, every algebraic unknown from the new topology (no jump solve)."""
        self.t = t
        modes = self.modes()
        y = modes.y_from_charges(modes.C @ x)
        # (the sources just after t: past an ideal edge's rounding guard of a
        # billionth of a period, short of any corner)
        delta = 1e-6 * max(abs(t), 1e-9)
        inputs = self.sources.inputs(t, t + delta)
        x_after = modes.x_of(y[None, :], inputs.a[None, :])[0]
        return x_after, xdot_rows(modes, y[None, :], inputs, np.zeros(1))[0]

    # -- one step -----------------------------------------------------------------------------
    def _attempt(self, t_new: float, h: float, error_control: bool) -> Step:
        modes = self.current
        inputs = self.sources.inputs(self.t, t_new)
        dense = ExactDense(modes, self.y, inputs, self.t, t_new)
        y1 = self._propagate(modes, inputs, h, dense)
        x1 = modes.x_of(y1[None, :], inputs.at([h]))[0]
        xdot = xdot_rows(modes, y1[None, :], inputs, np.array([h]))[0]
        h_next = min(self._longest_step(modes), self._resolution_step(modes, y1, x1, inputs))
        return Step(CANDIDATE, self.t, t_new, x=x1, xdot=xdot, dense=dense, error=0.0,
                    h_next=h_next, memo=y1, length=h)

    def _accept(self, step: Step) -> None:
        self.y = step.memo
        self.xdot = step.xdot

    def _longest_step(self, modes: LinearModes) -> float:
        """The next step may span the whole gap to the next corner, but not hide two crossings.

        With switching events possible, a step spans at most four periods
        of the fastest oscillation that lasts (one that loses less than
        e^-2pi of its amplitude per period), so that the eight points the
        run looks at in each step see every crossing.
        """
        if not getattr(self.problem, "event_batches", False) or not modes.use_eigen or not modes.lam.size:
            return np.inf
        lasting = np.abs(modes.lam.real) < np.abs(modes.lam.imag)
        if not lasting.any():
            return np.inf
        fastest = float(np.max(np.abs(modes.lam.imag[lasting])))
        return OSCILLATION_PERIODS * 2 * np.pi / fastest

    def _resolution_step(self, modes: LinearModes, y: np.ndarray, x: np.ndarray, inputs: Inputs) -> float:
        """The longest step whose recorded points (its ends and two inside) show the waveform.

        Measurements read the results as straight lines between recorded
        points, a third of a step apart; for a mode exp(lam s) of amplitude a
        the line is off by at most ``a (h |lam| / 3)^2 / 8`` (the
        interpolation remainder, |f''| spacing^2 / 8). Each mode's
        amplitude is its distance from the response the constant inputs
        hold it to, measured on every unknown against the largest value that
        unknown has had; a mode that has decayed below the tolerance no
        longer limits the step. A sine input limits the step as a mode of
        its frequency at full amplitude would.
        """
        tol = float(getattr(self.problem, "tolerance", 1e-3))
        np.maximum(self.x_scale, np.abs(x), out=self.x_scale)
        floor = 1e-6 * float(self.x_scale.max()) if self.x_scale.size else 0.0
        scale = np.maximum(self.x_scale, max(floor, 1e-30))
        h = np.inf
        for w in inputs.omega.tolist():
            h = min(h, (tol / RESOLUTION_K) ** 0.5 / w)
        if modes.r == 0 or not modes.use_eigen:
            return h
        lam = modes.lam
        moving = np.abs(lam) > 0
        if not moving.any():
            return h
        const, _, _ = modes.forcing(inputs)
        z = modes.X_inv @ y
        z_rest = np.zeros(z.shape, dtype=complex)
        z_rest[moving] = -(modes.X_inv @ const)[moving] / lam[moving]
        amplitude = np.abs(modes.PX) * np.abs(z - z_rest)[None, :]   # unknown x mode
        ratio = np.max(amplitude / scale[:, None], axis=0)
        limited = moving & (ratio > tol)
        if not limited.any():
            return h
        steps = (tol / (RESOLUTION_K * ratio[limited])) ** 0.5 / np.abs(lam[limited])
        return min(h, float(steps.min()))

    # -- propagators ------------------------------------------------------------------------
    def _propagate(self, modes: LinearModes, inputs: Inputs, h: float, dense: ExactDense) -> np.ndarray:
        """y at the end of a step of h (s); with affine sources by cached propagators."""
        if modes.r == 0:
            return np.zeros(0)
        if inputs.omega.size or not modes.use_eigen:
            return dense.trajectory([h])[0]
        key = (id(modes), h)
        prop = self.propagators.get(key)
        if prop is None:
            prop = self._build(modes, h)
            if len(self.propagators) >= PROPAGATOR_CACHE:
                self.propagators.pop(next(iter(self.propagators)))
            self.propagators[key] = prop
            self.counts["propagators_built"] += 1
        else:
            self.counts["propagators_reused"] += 1
        Phi, Ga, Gb, g0 = prop
        return Phi @ self.y + Ga @ inputs.a + Gb @ inputs.b - g0

    @staticmethod
    def _build(modes: LinearModes, h: float):
        """Real matrices of one step: y1 = Phi y0 + Ga a + Gb b - g0 (a, b: source values and slopes)."""
        lam, X, Xi = modes.lam, modes.X, modes.X_inv
        lh = lam * h
        Phi = (X * np.exp(lh)) @ Xi
        K1 = (X * (h * _phi1(lh))) @ Xi
        K2 = (X * (h * h * _phi2(lh))) @ Xi
        return Phi.real, (K1 @ modes.NS).real, (K2 @ modes.NS).real, (K1 @ modes.Nf0).real
