"""Element kinds. Each module holds one family; each kind is a plugin.

See :mod:`mna.elements.base` for the protocol and
:mod:`mna.elements.registry` for how kinds are found.
"""

from .base import (  # noqa: F401 - the protocol, re-exported for plugins
    CAPACITOR,
    CONDUCTOR,
    CURRENT,
    ELECTRICAL,
    ELEMENT,
    GYRATOR,
    INDUCTOR,
    REFERENCE,
    SHAFT,
    THERMAL,
    TWO_TERMINAL,
    VOLTAGE,
    Arg,
    Branch,
    Element,
    NonlinearBatch,
    Port,
    Unknown,
)

__all__ = [
    "CAPACITOR",
    "CONDUCTOR",
    "CURRENT",
    "ELECTRICAL",
    "ELEMENT",
    "GYRATOR",
    "INDUCTOR",
    "REFERENCE",
    "SHAFT",
    "THERMAL",
    "TWO_TERMINAL",
    "VOLTAGE",
    "Arg",
    "Branch",
    "Element",
    "NonlinearBatch",
    "Port",
    "Unknown",
]
