"""The stepper protocol: one class per integration method.

A transient run integrates the descriptor system ``d/dt q(x) + f(x, t) = 0``.
A :class:`Stepper` owns everything that belongs to its method: the history
it needs (past charges, rates), its local error estimate, its dense output
(a polynomial through the step, of the method's own order) and what it does
after a discontinuity (:meth:`Stepper.restart`). The run loop only

1. picks the end of the next step (``max-step``, corners, the fixed grid),
2. calls :meth:`Stepper.attempt`, which returns a :class:`Step`: a candidate
   accepted by the error test, a step rejected by it, or a Newton failure,
3. looks for events on the candidate's dense output and, if there is none,
   calls :meth:`Stepper.accept`, records, and restarts the stepper after a
   corner or an event.

The loop never asks which method it runs. A stepper that has finished or
failed refuses to step again (:class:`StepperDone`).

The run gives the stepper a :class:`Problem`: the compiled system and the
few operations every method needs (one implicit solve, charges, rates, the
error norm). A new method is a subclass with a netlist ``name``; defining
the class registers it (:data:`METHODS`), and the netlist word
``method=<name>`` selects it. See DEVELOPERS.md, "Adding a method".
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Callable, ClassVar, Protocol

import numpy as np

if TYPE_CHECKING:  # pragma: no cover
    from ..system import System

#: Netlist name -> stepper class; filled by defining a subclass with a ``name``.
METHODS: dict[str, type["Stepper"]] = {}

#: Step statuses of :class:`Step`.
CANDIDATE, REJECTED, NOT_CONVERGED = "candidate", "rejected", "not-converged"

SAFETY = 0.85  # on the step size the error estimate asks for
MAX_GROWTH = 4.0  # a step grows by at most this factor
MIN_SHRINK = 0.2  # a rejected step shrinks by at least 0.9 and at most this factor
GROWTH_THRESHOLD = 1.5  # a step grows only if the error allows at least this factor


class StepperDone(RuntimeError):
    """A stepper that has finished or failed was asked for another step."""


class Problem(Protocol):
    """What a run offers its stepper (implemented by the transient run object)."""

    system: "System"
    #: Every element is linear between events: an implicit solve is one
    #: triangular solve with a matrix that changes only with h and the switch state.
    pwl: bool
    #: Rows of q that hold a charge or a flux (where the local error is measured).
    q_rows: np.ndarray

    def solve(self, x_guess: np.ndarray, t: float, alpha: float, history: np.ndarray,
              refine: bool = False, max_iterations: int = 50) -> np.ndarray | None:
        """x (SI) at time t (s) for ``alpha*q(x) + history + f(x, t) = 0``; None if Newton fails."""

    def charges(self, x: np.ndarray, t: float) -> np.ndarray:
        """q(x): charges (C) and fluxes (Wb), the full vector."""

    def rates(self, x: np.ndarray, t: float) -> np.ndarray:
        """``-f(x, t)``: d/dt q at a consistent point (A, V, ... per row)."""

    def error_norm(self, lte: np.ndarray, q_new: np.ndarray) -> float:
        """Largest local error over ``q_rows`` in units of its tolerance (1.0 = just allowed)."""

    def state_key(self):
        """A hashable key of everything besides h the system matrix depends on (switch states)."""


class DenseOutput:
    """x(t) inside one step, ``t_old <= t <= t``: a polynomial of the method's order.

    Subclasses implement :meth:`__call__` for a scalar or an array of times (s);
    an array gives one row per time.
    """

    order: int = 1
    #: The trajectory itself, not an approximation (events may be landed on anywhere).
    exact: bool = False

    def __init__(self, t_old: float, t: float):
        self.t_old = t_old
        self.t = t

    def __call__(self, t):  # pragma: no cover - interface
        raise NotImplementedError

    def derivative(self, t):  # pragma: no cover - interface
        """dx/dt (per second) at the times t, one row per time for an array."""
        raise NotImplementedError

    def theta(self, t) -> np.ndarray:
        h = self.t - self.t_old
        return (np.asarray(t, dtype=float) - self.t_old) / h if h > 0 else np.ones_like(t, dtype=float)


class LinearDense(DenseOutput):
    """Straight line between the step's ends (first order)."""

    order = 1

    def __init__(self, t_old: float, x_old: np.ndarray, t: float, x: np.ndarray):
        super().__init__(t_old, t)
        self.x_old, self.x = x_old, x

    def __call__(self, t):
        th = self.theta(t)
        return self.x_old + np.multiply.outer(th, self.x - self.x_old)

    def derivative(self, t):
        h = self.t - self.t_old
        slope = (self.x - self.x_old) / h if h > 0 else np.zeros_like(self.x)
        return np.broadcast_to(slope, np.shape(t) + slope.shape).copy()


class QuadraticDense(DenseOutput):
    """The parabola through the last three points (second order); the step is the last interval."""

    order = 2

    def __init__(self, ts: tuple[float, float, float], xs: tuple[np.ndarray, np.ndarray, np.ndarray]):
        super().__init__(ts[1], ts[2])
        self.ts, self.xs = ts, xs

    def __call__(self, t):
        t = np.asarray(t, dtype=float)
        (t0, t1, t2), (x0, x1, x2) = self.ts, self.xs
        w0 = (t - t1) * (t - t2) / ((t0 - t1) * (t0 - t2))
        w1 = (t - t0) * (t - t2) / ((t1 - t0) * (t1 - t2))
        w2 = (t - t0) * (t - t1) / ((t2 - t0) * (t2 - t1))
        return np.multiply.outer(w0, x0) + np.multiply.outer(w1, x1) + np.multiply.outer(w2, x2)

    def derivative(self, t):
        t = np.asarray(t, dtype=float)
        (t0, t1, t2), (x0, x1, x2) = self.ts, self.xs
        w0 = (2 * t - t1 - t2) / ((t0 - t1) * (t0 - t2))
        w1 = (2 * t - t0 - t2) / ((t1 - t0) * (t1 - t2))
        w2 = (2 * t - t0 - t1) / ((t2 - t0) * (t2 - t1))
        return np.multiply.outer(w0, x0) + np.multiply.outer(w1, x1) + np.multiply.outer(w2, x2)


@dataclass
class Step:
    """One attempted step from ``t_old`` to ``t``.

    ``status`` is :data:`CANDIDATE` (passed the error test, or no test was
    asked for), :data:`REJECTED` (error too large; the stepper has already
    shortened its next step) or :data:`NOT_CONVERGED` (Newton failed).
    ``xdot`` is dx/dt at ``t`` as the method defines it (per second), for
    the recorded state rates. ``memo`` is the stepper's own data, for
    :meth:`Stepper.accept`.
    """

    status: str
    t_old: float
    t: float
    x: np.ndarray | None = None
    xdot: np.ndarray | None = None
    dense: DenseOutput | None = None
    error: float | None = None
    h_next: float | None = None
    memo: object = None
    #: Names of the unknowns that had not settled when Newton gave up.
    unsettled: tuple = ()

    @property
    def h(self) -> float:
        """The step's length (s)."""
        return self.length if self.length is not None else self.t - self.t_old

    length: float | None = None


class Stepper:
    """Base class of the integration methods; see the module docstring.

    Class data: ``name`` (the netlist word; defining a subclass with a name
    registers it), ``order`` (of the local error), ``summary`` (one line for
    the docs and error messages).

    The state every method shares: ``t`` (s), ``x`` (the unknowns at t),
    ``h`` (the step the method wants next, s), ``status``
    (``"running"``, ``"finished"``, ``"failed"``).
    """

    name: ClassVar[str] = ""
    order: ClassVar[int] = 1
    #: Order of the dense output (the polynomial inside a step).
    dense_order: ClassVar[int] = 1
    summary: ClassVar[str] = ""

    def __init_subclass__(cls, **kwargs):
        super().__init_subclass__(**kwargs)
        if cls.__dict__.get("name"):
            METHODS[cls.name] = cls

    def __init__(self, problem: Problem, t: float, x: np.ndarray, h: float,
                 rates: np.ndarray | None = None):
        self.problem = problem
        self.status = "running"
        self.h = h
        self.stats = {"rejected": 0}
        self.restart(t, x, h, rates)

    # -- the protocol ---------------------------------------------------------------
    def restart(self, t: float, x: np.ndarray, h: float, rates: np.ndarray | None = None,
                xdot: np.ndarray | None = None) -> None:
        """Start again at (t, x) after a corner, an event or the start of the run.

        ``rates``: the full vector d/dt q just after t when it is known
        (after a jump solve, or at a consistent operating point), else None.
        ``h`` (s): the first step to try. ``xdot``: dx/dt the recorded rates
        continue from (the slope of a jump solve), if the method uses it.
        """
        self.t, self.x, self.h = t, x, h
        if xdot is not None:
            self.xdot = xdot
        self._restart(rates)

    def attempt(self, t_new: float, h: float | None = None, error_control: bool = True) -> Step:
        """Try one step to ``t_new`` (s); nothing changes until :meth:`accept`.

        ``h`` (s): the step length the formulas use, when the caller knows
        it more exactly than ``t_new - t`` (default).
        """
        if self.status != "running":
            raise StepperDone(f"the {self.name} stepper has {self.status}; it cannot step again")
        step = self._attempt(t_new, t_new - self.t if h is None else h, error_control)
        if step.status == REJECTED:
            self.stats["rejected"] += 1
            self.h = step.h_next
        return step

    def accept(self, step: Step) -> None:
        """Make the candidate ``step`` the new current point."""
        if step.status != CANDIDATE:
            raise ValueError(f"cannot accept a step that is {step.status}")
        self._accept(step)
        self.t, self.x = step.t, step.x
        if step.h_next is not None:
            self.h = step.h_next

    def after_event(self, t: float, x: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
        """``(x, dx/dt)`` just after a switching event or a source jump at t, in
        the new switch state, keeping the charges and fluxes of ``x``; None
        (the default) lets the run find it by a very short implicit step."""
        return None

    def finish(self) -> None:
        self.status = "finished"

    def fail(self) -> None:
        self.status = "failed"

    # -- for subclasses -------------------------------------------------------------
    def _restart(self, rates: np.ndarray | None) -> None:
        raise NotImplementedError

    def _attempt(self, t_new: float, h: float, error_control: bool) -> Step:
        raise NotImplementedError

    def _accept(self, step: Step) -> None:
        raise NotImplementedError

    @staticmethod
    def next_step(h: float, error: float, order: int) -> tuple[bool, float]:
        """(accepted, next h) from the error norm of a step of length h and the estimate's order.

        The step grows only when it pays (each new step length costs a
        factorization): by at least GROWTH_THRESHOLD, at most MAX_GROWTH.
        """
        factor = SAFETY * max(error, 1e-10) ** (-1.0 / (order + 1))
        if error > 1.0:
            return False, h * max(MIN_SHRINK, min(factor, 0.9))
        if factor >= GROWTH_THRESHOLD:
            return True, h * min(MAX_GROWTH, factor)
        return True, h * min(factor, 1.0)


def get_method(method: "str | Stepper | type[Stepper]") -> type[Stepper]:
    """A stepper class by netlist name, or a user's own subclass."""
    if isinstance(method, type) and issubclass(method, Stepper):
        return method
    if isinstance(method, Stepper):
        return type(method)
    try:
        return METHODS[method]
    except (KeyError, TypeError):
        from ..errors import InputError

        raise InputError(
            f"unknown integration method {method!r}; choose one of {', '.join(METHODS)}"
        ) from None


def divided_difference(ts, qs) -> np.ndarray:
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


Callback = Callable[[float, float], None]
