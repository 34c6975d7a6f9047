"""The element-kind protocol: what a plugin declares and implements.

An element kind is a subclass of :class:`Element`. It declares, as class
attributes:

1. ``keyword`` -- the word that starts its netlist line (``"resistor"``).
2. ``ports`` -- its terminals as :class:`Port` objects: a two-terminal
   connection ``a -> b``, a single node, a keyword connection
   (``shaft=rotor``) or a list of other elements (``coupling``), each with
   its domain (``"electrical"``, ``"shaft"`` or ``"thermal"``).
3. ``main`` -- the name of the argument that the bare value after the
   terminals fills (``resistance`` for ``resistor R1 a -> b 100 ohm``).
4. ``arguments`` -- every argument as an :class:`Arg`, with the dimension it
   must have and its default. Values reach the instance in SI units, in
   ``self.params``.
5. ``outputs`` -- the quantities the element exposes for ``record`` and
   checks (``{"i": AMPERE, "v": VOLT, "p": WATT}``).

and implements:

6. ``branches()`` -- its connections for the topology checks, each with a
   role (:data:`CONDUCTOR`, :data:`VOLTAGE`, :data:`CURRENT`, :data:`INDUCTOR`,
   :data:`CAPACITOR`, :data:`GYRATOR`).
7. ``unknowns()`` -- the extra unknowns it needs beyond node potentials
   (a branch current, a winding current), as (local name, dimension).
8. ``stamp(stamper)`` -- its contributions to the descriptor system
   ``d/dt q(x) + f(x, t) = 0``: constant conductance-like entries of ``f``,
   constant capacitance-like entries of ``q``, source terms, recordable
   charges. Called once, at compile time.
9. ``output(name, probe)`` -- the arrays of one output quantity over the
   run, computed after the run from what the probe recorded.
10. ``corners(start, stop)`` -- times (s) where its sources or gates change
    slope or state; the transient solver lands on each one.

A kind whose behaviour is nonlinear or changes at events sets ``Batch`` to
a :class:`NonlinearBatch` subclass. The engine builds one batch per kind
holding *all* instances, and evaluates it with one vectorised call per
Newton iteration -- never a Python loop over instances inside the time loop.

Kinds are found through the ``mna.elements`` entry-point group (see
:mod:`mna.elements.registry`); the built-in kinds register the same way.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, ClassVar, Sequence

import numpy as np

from ..units import Dimension

if TYPE_CHECKING:  # pragma: no cover
    from ..errors import Span
    from ..system import Probe, Stamper

ELECTRICAL = "electrical"
SHAFT = "shaft"
THERMAL = "thermal"  # temperature (K) as the potential, heat flow (W) as the flow
ELEMENT = "element"  # a port that names other elements (coupling)

#: The reference node of each domain.
REFERENCE = {ELECTRICAL: "gnd", SHAFT: "frame", THERMAL: "ambient"}

# Topology roles of a branch.
CONDUCTOR = "conductor"  # conducts at DC: resistor, diode, closed switch
VOLTAGE = "voltage"  # fixes the potential difference: voltage source, speed source
CURRENT = "current"  # fixes the flow: current source, load torque
INDUCTOR = "inductor"  # conducts at DC, but its current is a state
CAPACITOR = "capacitor"  # blocks DC: capacitor, inertia
GYRATOR = "gyrator"  # a machine's coupling of an armature and a shaft

REQUIRED = object()


@dataclass(frozen=True)
class Arg:
    """One argument of an element kind.

    ``kind`` says what the value is:

    - ``"quantity"``: a number with the unit of ``dimension`` (checked);
    - ``"waveform"``: a quantity or ``step(...)``, ``pwm(...)``,
      ``sine(...)``, ``piecewise(...)`` whose values have ``dimension``;
    - ``"choice"``: one word of ``choices``;
    - ``"expr"``: an expression the element interprets itself (a switch
      gate, for instance). With ``resolve``, elaboration calls
      ``resolve(expr, value)`` and passes on what it returns; ``value(e)``
      evaluates a sub-expression to a :class:`~mna.units.Quantity` with
      the circuit's parameters. Without it the element gets the raw
      expression tree.

    ``minimum`` and ``maximum`` (SI, inclusive) bound a quantity to the
    range its model holds for (a junction temperature of 10 K to 1000 K).

    ``angular=True`` marks an angular speed (dimension 1/s): a value
    written in hertz is refused as ambiguous (cycles or radians per
    second?) and the user is asked for rad/s or rpm.
    """

    name: str
    dimension: Dimension | None = None
    default: Any = REQUIRED
    kind: str = "quantity"
    choices: tuple[str, ...] = ()
    positive: bool = False
    nonnegative: bool = False
    doc: str = ""
    angular: bool = False
    absolute: bool = False  # an absolute temperature: takes K or a literal in degC
    resolve: Any = None
    #: How the unit is written in ``mna kinds`` and the docs when the SI
    #: description of ``dimension`` would read differently ("N*m*s^2" rather
    #: than kg*m^2, "rad or deg" for an angle that is a plain number in SI).
    unit: str = ""
    #: The physical range of a quantity (SI), checked at input; None: no bound.
    minimum: float | None = None
    maximum: float | None = None

    @property
    def required(self) -> bool:
        return self.default is REQUIRED


@dataclass(frozen=True)
class Port:
    """Terminals of an element.

    ``names`` holds one name (a single node, or a keyword connection) or
    two (a connection ``a -> b``). ``keyword=True`` means the terminal is
    given as ``name=node``. ``variadic=True`` (with ``domain=ELEMENT``) means
    a list of element names. A keyword terminal with ``minimum=0`` is
    optional (a transistor's ``junction=`` thermal node): when it is left
    out, ``nodes`` has no entry for it.
    """

    names: tuple[str, ...]
    domain: str = ELECTRICAL
    keyword: bool = False
    variadic: bool = False
    minimum: int = 1


TWO_TERMINAL = (Port(("a", "b"), ELECTRICAL),)


@dataclass(frozen=True)
class Branch:
    """A connection between two nodes with a topology role.

    ``resistive=True`` on an :data:`INDUCTOR` branch says that it has a
    resistance of its own in series (a winding's ``resistance=``), so it is
    not a short circuit at the DC operating point.
    """

    a: str
    b: str
    role: str
    resistive: bool = False


@dataclass(frozen=True)
class Unknown:
    """An extra unknown an element asks for (a branch current...)."""

    name: str
    dimension: Dimension
    description: str = ""
    #: Absolute Newton tolerance of this unknown (SI units of ``dimension``).
    #: None takes the one of its dimension (1 uV, 1 pA, 1 urad/s, 1 uK; see
    #: :data:`mna.system.ABSTOL`), or 1e-9 for a dimension mna has no entry for:
    #: a plugin with a new kind of unknown (a flux in Wb, a pressure) says here
    #: what "converged" means for it.
    tolerance: float | None = None


class Element:
    """Base class of element kinds. See the module docstring for the protocol."""

    keyword: ClassVar[str] = ""
    ports: ClassVar[tuple[Port, ...]] = TWO_TERMINAL
    main: ClassVar[str | None] = None
    arguments: ClassVar[tuple[Arg, ...]] = ()
    outputs: ClassVar[dict[str, Dimension]] = {}
    Batch: ClassVar[type["NonlinearBatch"] | None] = None
    summary: ClassVar[str] = ""

    def __init__(
        self,
        name: str,
        nodes: dict[str, Any],
        params: dict[str, Any],
        span: "Span | None" = None,
        spans: dict[str, "Span"] | None = None,
    ):
        self.name = name
        self.nodes = nodes  # terminal name -> node name (or list of names)
        self.params = params  # argument name -> SI value / waveform / expression
        self.span = span
        self.spans = spans or {}
        self.validate()

    def __repr__(self) -> str:
        nodes = ", ".join(f"{k}={v}" for k, v in self.nodes.items())
        return f"<{self.keyword} {self.name} {nodes}>"

    # -- checks ------------------------------------------------------------
    def validate(self) -> None:
        """Check argument values beyond their dimension. Raise InputError."""

    def span_of(self, argument: str) -> "Span | None":
        """The span of an argument's value, or the element's span."""
        return self.spans.get(argument, self.span)

    @classmethod
    def arg(cls, name: str) -> Arg | None:
        for a in cls.arguments:
            if a.name == name:
                return a
        return None

    # -- topology ------------------------------------------------------------
    def branches(self) -> list[Branch]:
        return []

    def sensed_nodes(self) -> tuple[str, ...]:
        """Nodes the element reads without a terminal on them (a switch gate's
        ``v(g)``); they count as connected for the one-terminal check."""
        return ()

    def terminal_nodes(self) -> list[tuple[str, str]]:
        """(node, domain) pairs of every node terminal."""
        out = []
        for port in self.ports:
            if port.domain == ELEMENT:
                continue
            for n in port.names:
                if n in self.nodes:  # an optional keyword connection may be left out
                    out.append((self.nodes[n], port.domain))
        return out

    # -- compile -------------------------------------------------------------
    def unknowns(self) -> tuple[Unknown, ...]:
        return ()

    def stamp(self, s: "Stamper") -> None:
        """Add this element's constant contributions. Called once per compile."""

    @classmethod
    def check_stamped(cls, elements: Sequence["Element"], s: "Stamper") -> None:
        """After every element has stamped: checks that need all instances of
        the kind at once (the couplings' combined inductance matrix). Raise
        InputError."""

    def corners(self, start: float, stop: float) -> np.ndarray:
        return np.empty(0)

    def jumps(self, start: float, stop: float) -> np.ndarray:
        """The corners where a source value jumps (ideal edges): the solver
        records the values just before and just after each one."""
        return np.empty(0)

    # -- results -------------------------------------------------------------
    def output(self, quantity: str, probe: "Probe") -> np.ndarray:
        raise NotImplementedError(f"{self.keyword} {self.name} has no output {quantity!r}")


class NonlinearBatch:
    """All instances of one nonlinear (or event-switched) kind, evaluated together.

    Protocol, filled in by subclasses at construction (indices into the
    unknown vector, as :meth:`~mna.system.Stamper.node` gives them: -1 for
    a reference node). Entries that name a reference node, in a row or a
    column, are dropped by the engine once at compile time, and the values
    ``evaluate`` returns for them are ignored; a batch may list them or
    leave them out (the built-in ones leave them out, see
    :mod:`mna.elements.batching`):

    1. ``f_rows`` -- residual rows of the nonlinear ``f`` contributions.
    2. ``jf_rows``, ``jf_cols`` -- the sparsity pattern of ``df/dx``.
    3. ``q_rows``, ``jq_rows``, ``jq_cols`` -- same for nonlinear charges
       ``q`` (empty arrays when the kind has none).
    4. ``evaluate(x, t)`` returns ``(f_vals, jf_vals, q_vals, jq_vals)``,
       one numpy computation for all instances.
    5. ``limit(x_new, x_old)`` may shorten a Newton update (junction
       limiting); the default returns ``x_new``.
    6. ``piecewise_linear = True`` declares that ``f`` and ``q`` are affine
       in x between events (a switch: ``f = g(state) * v``): the engine then
       solves each step with one factorization reused until the next event,
       instead of Newton iterations.
    7. ``new_state(t)`` returns a fresh object holding the discrete states
       of one run as they are at time ``t`` (a switch's open/closed, its
       log), or None for a kind without any. The batch itself never changes
       after compilation: every method below that needs the states takes
       this object as its ``state`` argument, so two runs of one compiled
       system (in turn or in two threads) cannot see each other's states.
       ``evaluate`` is called as ``evaluate(x, t, state)`` when the kind has
       a state and as ``evaluate(x, t)`` when ``new_state`` returns None.
    8. ``update_events(t, x, state)`` is called after every accepted time
       point (and once at t = 0); it updates the discrete states held in
       ``state`` and returns True when any changed. The engine then
       refactors, records a second sample at the same time with the new
       state, and restarts the integration method.
    9. ``event_time(t0, x0, t1, x1, state)`` returns the time in (t0, t1] at
       which a state would change (a comparator gate crossing its
       threshold, located by interpolation), or None. The engine shortens
       the step to land on it. Time-driven changes (a schedule, a PWM gate)
       are ``corners`` instead, which the engine lands on exactly.
    10. ``state_key(state)`` returns a hashable summary of the discrete
        states (or None): factorizations are cached under it, so the two
        halves of a PWM period each factor once for the whole run.
    11. ``snapshot(state)`` returns an immutable copy of the discrete states
        (for :class:`mna.results.RunEnd`), and ``restore(snapshot, t)`` a
        fresh state object from it (a run that continues from another).
    12. ``state_log(state, element)`` returns ``(times, values)``: the log of
        an element's discrete state over the run (for its outputs).
    13. ``limit_quiet`` (SI units of the unknowns): ``limit`` leaves every
        update alone whose largest entry is at most this, and Newton does
        not call it for such updates (default 0: always called).
    14. ``jacobian_floor`` (in the units of the Jacobian entries): Newton
        keeps a Jacobian while each entry stays within 30 % of its value
        plus this floor (:mod:`mna.assembly`). A junction sets the linear
        leak conductance always in parallel with it; the default 0 asks
        for every entry within 30 % of itself.
    """

    piecewise_linear: ClassVar[bool] = False
    jacobian_floor: ClassVar[float] = 0.0
    limit_quiet: float = 0.0
    empty = np.empty(0, dtype=np.int64)

    def __init__(self, elements: Sequence[Element], stamper: "Stamper"):
        self.elements = list(elements)
        self.f_rows = self.empty
        self.jf_rows = self.empty
        self.jf_cols = self.empty
        self.q_rows = self.empty
        self.jq_rows = self.empty
        self.jq_cols = self.empty

    def evaluate(self, x: np.ndarray, t: float):
        raise NotImplementedError

    def limit(self, x_new: np.ndarray, x_old: np.ndarray) -> np.ndarray:
        return x_new

    def new_state(self, t: float = 0.0):
        """The discrete states of a new run at time ``t``; None for a kind without any."""
        return None

    def update_events(self, t: float, x: np.ndarray, state=None) -> bool:
        return False

    def event_time(self, t0: float, x0: np.ndarray, t1: float, x1: np.ndarray, state=None) -> float | None:
        return None

    def state_key(self, state=None):
        """A hashable summary of the discrete states (``state.tobytes()``), or
        None. With it the engine reuses the factorization of a state seen before."""
        return None

    def snapshot(self, state=None):
        """An immutable copy of the discrete states in ``state`` (None if none)."""
        return None

    def restore(self, snapshot, t: float):
        """A new state object from :meth:`snapshot`'s result, for a run starting at ``t``."""
        return self.new_state(t)

    def state_log(self, state, element: Element) -> tuple[np.ndarray, np.ndarray]:
        """Times and values of ``element``'s discrete state over a run."""
        return np.empty(0), np.empty(0)

    def corners(self, start: float, stop: float) -> np.ndarray:
        return np.empty(0)
