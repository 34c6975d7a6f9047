"""Value types shared by elaboration, the analyses and the measurements.

A leaf module: it imports nothing of mna but :mod:`mna.units` and
:mod:`mna.errors`, so :mod:`mna.circuit`, :mod:`mna.measure` and
:mod:`mna.analyses` can all use it without importing one another.

It holds the one table of circuit quantity names (:data:`QUANTITIES`):
which quantities apply to nodes, their dimension, the unit they are shown
in and how results store them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

from .errors import Span
from .units import ANGULAR_SPEED, DIMENSIONLESS, KELVIN, VOLT, Dimension, unit_symbol

ELECTRICAL = "electrical"
SHAFT = "shaft"
THERMAL = "thermal"

RPM = 2.0 * math.pi / 60.0  # rad/s per rpm


@dataclass(frozen=True)
class QuantityName:
    """One circuit quantity name, such as ``v`` or ``rpm``.

    ``domain`` and ``dimension`` are set for a quantity of a node
    (``v(out)`` of an electrical node, ``w(rotor)`` of a shaft node); a
    quantity of an element (``i(R1)``) takes its dimension from the
    element's ``outputs``. ``shown`` is the unit results and reports show
    it in ("" for the SI symbol of its dimension); ``stored_per_si`` is how
    many stored units make one SI unit (results keep ``rpm(x)`` in rpm).
    """

    name: str
    doc: str
    domain: str | None = None
    dimension: Dimension | None = None
    shown: str = ""
    stored_per_si: float = 1.0


#: Every quantity name with a meaning of its own. Element kinds may offer
#: other names in their ``outputs`` (a plugin's ``temperature(R1)``); those
#: are shown in the SI unit of their dimension.
QUANTITIES: dict[str, QuantityName] = {q.name: q for q in (
    QuantityName("v", "v(node), v(a -> b) or v(ELEMENT): voltage (V)", ELECTRICAL, VOLT),
    QuantityName("i", "i(ELEMENT): current (A)"),
    QuantityName("p", "p(ELEMENT): power taken in (W)"),
    QuantityName("w", "w(shaft): speed (rad/s)", SHAFT, ANGULAR_SPEED, shown="rad/s"),
    QuantityName("rpm", "rpm(shaft): speed (rpm)", SHAFT, ANGULAR_SPEED, shown="rpm", stored_per_si=1.0 / RPM),
    QuantityName("angle", "angle(shaft): angle turned since t = 0 (rad)", SHAFT, DIMENSIONLESS, shown="rad"),
    QuantityName("torque", "torque(ELEMENT): torque (N*m)", shown="N*m"),
    QuantityName("torque_out", "torque_out(ELEMENT): torque at the output shaft (N*m)", shown="N*m"),
    QuantityName("emf", "emf(ELEMENT): back-EMF (V)"),
    QuantityName("pmech", "pmech(ELEMENT): mechanical power (W)"),
    QuantityName("state", "state(ELEMENT): 1 closed, 0 open"),
    QuantityName("T", "T(thermal node): absolute temperature (K)", THERMAL, KELVIN),
    QuantityName("heat", "heat(ELEMENT): heat flow (W)"),
)}


def node_quantity(name: str) -> QuantityName | None:
    """The table entry of a quantity that applies to nodes (``v``, ``w``, ``rpm``, ``angle``)."""
    q = QUANTITIES.get(name)
    return q if q is not None and q.domain is not None else None


def shown_unit(quantity: str, dimension: Dimension) -> str:
    """The unit a signal is shown in (CSV headers, plot axes, the console)."""
    q = QUANTITIES.get(quantity)
    if q is not None and q.shown:
        return q.shown
    if dimension == DIMENSIONLESS:
        return ""
    return unit_symbol(dimension)


def stored_per_si(quantity: str) -> float:
    """Stored units per SI unit of a quantity's results (1 but for ``rpm``)."""
    q = QUANTITIES.get(quantity)
    return q.stored_per_si if q is not None else 1.0


@dataclass(frozen=True)
class SignalRef:
    """A circuit quantity named in ``record``, ``measure`` or ``check``.

    ``label`` is the text used as the CSV heading (``v(sw)``, ``i(Lcoil)``,
    ``v(a -> b)``). ``target`` is ``"node"`` (``v(n)``, ``w(shaft)``),
    ``"across"`` (``v(a -> b)``) or ``"element"`` (``i(R1)``, ``torque(M1)``).
    """

    quantity: str
    names: tuple[str, ...]
    target: str
    dimension: Dimension
    span: Span | None = None
    parts: tuple["SignalRef", ...] = ()  # a ratio's numerator and denominator

    @property
    def label(self) -> str:
        if self.target == "ratio":
            return f"{self.parts[0].label}/{self.parts[1].label}"
        return f"{self.quantity}({' -> '.join(self.names)})"

    @property
    def small_signal_only(self) -> bool:
        """An impedance ``z(a -> b)`` or a ratio ``v(out) / v(in)``: only ``simulate
        frequency`` computes it (``target`` is ``"impedance"`` or ``"ratio"``)."""
        return self.target in ("impedance", "ratio")

    @property
    def unit(self) -> str:
        """The unit its values are shown in (``rpm`` for ``rpm(x)``, ``V`` for ``v(x)``)."""
        return shown_unit(self.quantity, self.dimension)


@dataclass
class AnalysisRequest:
    """A ``simulate`` line: the analysis and its settings (SI values)."""

    analysis: str  # "dc" | "transient"
    settings: dict[str, Any] = field(default_factory=dict)
    span: Span | None = None
    spans: dict[str, Span] = field(default_factory=dict)  # setting -> span of its value
