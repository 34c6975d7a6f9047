"""Finding element kinds: the ``mna.elements`` entry-point group.

An outside package adds a kind exactly the way the built-ins are added, by
declaring an entry point in its ``pyproject.toml``::

    [project.entry-points."mna.elements"]
    thermistor = "mypkg.thermistor:Thermistor"

The entry point's name must equal the class's ``keyword``. A kind can also
be registered at run time with :func:`register` (for a script or a test).
"""

from __future__ import annotations

import difflib
from importlib.metadata import entry_points

from ..errors import InputError
from .base import Element

#: The built-in kinds, as declared in pyproject.toml. Used when mna runs
#: from a source tree that was never installed (no entry points visible).
BUILTIN = {
    "resistor": "mna.elements.passive:Resistor",
    "capacitor": "mna.elements.passive:Capacitor",
    "inductor": "mna.elements.passive:Inductor",
    "voltage-source": "mna.elements.sources:VoltageSource",
    "current-source": "mna.elements.sources:CurrentSource",
    "dc-machine": "mna.elements.machines:DCMachine",
    "coil-generator": "mna.elements.machines:CoilGenerator",
    "inertia": "mna.elements.mechanical:Inertia",
    "friction": "mna.elements.mechanical:Friction",
    "load": "mna.elements.mechanical:Load",
    "speed-source": "mna.elements.mechanical:SpeedSource",
    "gear": "mna.elements.mechanical:Gear",
    "diode": "mna.elements.semiconductors:Diode",
    "coupling": "mna.elements.magnetics:Coupling",
    "transformer": "mna.elements.magnetics:Transformer",
    "choke": "mna.elements.magnetics:Choke",
    "solenoid": "mna.elements.magnetics:Solenoid",
    "switch": "mna.elements.switches:Switch",
    "ambient-temperature": "mna.elements.thermal:AmbientTemperature",
    "thermal-resistance": "mna.elements.thermal:ThermalResistance",
    "thermal-capacitance": "mna.elements.thermal:ThermalCapacitance",
    "foster": "mna.elements.thermal:Foster",
    "cauer": "mna.elements.thermal:Cauer",
    "temperature-source": "mna.elements.thermal:TemperatureSource",
    "heat-source": "mna.elements.thermal:HeatSource",
}

_extra: dict[str, type[Element]] = {}
_cache: dict[str, type[Element]] | None = None


def _load(target: str) -> type[Element]:
    module, _, attr = target.partition(":")
    mod = __import__(module, fromlist=[attr])
    return getattr(mod, attr)


def _discover() -> dict[str, type[Element]]:
    kinds: dict[str, type[Element]] = {}
    found = {ep.name: ep for ep in entry_points(group="mna.elements")}
    for name, target in BUILTIN.items():
        if name not in found:
            kinds[name] = _load(target)
    for name, ep in found.items():
        cls = ep.load()
        if not (isinstance(cls, type) and issubclass(cls, Element)):
            raise InputError(f"entry point mna.elements:{name} ({ep.value}) is not an Element subclass")
        if cls.keyword != name:
            raise InputError(
                f"entry point mna.elements:{name} loads a class whose keyword is {cls.keyword!r}; "
                "the entry-point name must equal the keyword"
            )
        kinds[name] = cls
    return kinds


def element_kinds() -> dict[str, type[Element]]:
    """Every known element kind, keyword -> class."""
    global _cache
    if _cache is None:
        _cache = _discover()
    return {**_cache, **_extra}


def refresh() -> None:
    """Forget discovered kinds (after installing a plugin at run time)."""
    global _cache
    _cache = None


def register(cls: type[Element]) -> type[Element]:
    """Register a kind for this process (usable as a class decorator)."""
    if not cls.keyword:
        raise ValueError(f"{cls.__name__} has no keyword")
    _extra[cls.keyword] = cls
    return cls


def lookup(keyword: str) -> type[Element] | None:
    return element_kinds().get(keyword)


def suggest(keyword: str) -> list[str]:
    return difflib.get_close_matches(keyword, sorted(element_kinds()), n=3, cutoff=0.6)
