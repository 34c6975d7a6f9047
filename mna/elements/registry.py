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

from ..errors import PluginError
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
    "ideal-diode": "mna.elements.ideal_diode:IdealDiode",
    "coupling": "mna.elements.magnetics:Coupling",
    "transformer": "mna.elements.magnetics:Transformer",
    "choke": "mna.elements.magnetics:Choke",
    "solenoid": "mna.elements.magnetics:Solenoid",
    "switch": "mna.elements.switches:Switch",
    "constant-power": "mna.elements.power_load:ConstantPower",
    "ambient-temperature": "mna.elements.thermal:AmbientTemperature",
    "thermal-resistance": "mna.elements.thermal:ThermalResistance",
    "thermal-capacitance": "mna.elements.thermal:ThermalCapacitance",
    "foster": "mna.elements.thermal:Foster",
    "cauer": "mna.elements.thermal:Cauer",
    "temperature-source": "mna.elements.thermal:TemperatureSource",
    "heat-source": "mna.elements.thermal:HeatSource",
    "mosfet": "mna.elements.transistors:Mosfet",
    "igbt": "mna.elements.transistors:Igbt",
}

_extra: dict[str, type[Element]] = {}
_targets: dict[str, str] | None = None  # keyword -> "module:Class", built-in and plugin
_loaded: dict[str, type[Element]] = {}


def _load(target: str) -> type[Element]:
    module, _, attr = target.partition(":")
    mod = __import__(module, fromlist=[attr])
    return getattr(mod, attr)


def _plugin_targets() -> dict[str, str]:
    """Entry points of the ``mna.elements`` group, name -> target, from the cache when it is fresh.

    Scanning the installed distributions takes a good part of a second on a
    busy machine; the result is kept in the user's cache folder, keyed by
    the folders on ``sys.path`` and their modification times (installing or
    removing a package changes its folder's time), and rescanned when that
    key changes.
    """
    from .. import cache

    key = cache.path_key()
    found = cache.read("entry-points", key)
    if found is None:
        found = {ep.name: ep.value for ep in entry_points(group="mna.elements")}
        cache.write("entry-points", key, found)
    return found


def _all_targets() -> dict[str, str]:
    global _targets
    if _targets is None:
        plugins = _plugin_targets()
        _targets = {**{k: v for k, v in BUILTIN.items() if k not in plugins}, **plugins}
    return _targets


def _load_kind(keyword: str, target: str) -> type[Element]:
    """Import one kind; a plugin that fails to load is reported as the plugin's fault."""
    try:
        cls = _load(target)
    except Exception as exc:  # noqa: BLE001 - whatever the plugin's import raises
        raise PluginError(f"the plugin entry point mna.elements:{keyword} ({target}) fails to load: "
                          f"{type(exc).__name__}: {exc}", plugin=target.partition(":")[0],
                          hint="fix or uninstall the package that declares it") from exc
    if not (isinstance(cls, type) and issubclass(cls, Element)):
        raise PluginError(f"the plugin entry point mna.elements:{keyword} ({target}) is not an "
                          "Element subclass", plugin=target.partition(":")[0])
    if cls.keyword != keyword:
        raise PluginError(
            f"the plugin entry point mna.elements:{keyword} ({target}) loads a class whose keyword is "
            f"{cls.keyword!r}; the entry-point name must equal the keyword", plugin=target.partition(":")[0])
    return cls


def keywords() -> list[str]:
    """Every element kind's keyword, without importing any kind."""
    return sorted({*_all_targets(), *_extra})


def element_kinds() -> dict[str, type[Element]]:
    """Every known element kind, keyword -> class (imports them all)."""
    for keyword in _all_targets():
        lookup(keyword)
    return {**_loaded, **_extra}


def refresh() -> None:
    """Forget discovered kinds (after installing a plugin at run time)."""
    global _targets
    _targets = None
    _loaded.clear()


def register(cls: type[Element]) -> type[Element]:
    """Register a kind for this process (usable as a class decorator)."""
    if not cls.keyword:
        raise ValueError(f"{cls.__name__} has no keyword")
    _extra[cls.keyword] = cls
    return cls


def lookup(keyword: str) -> type[Element] | None:
    """The class of one kind, importing only its module; None for an unknown keyword."""
    if keyword in _extra:
        return _extra[keyword]
    cls = _loaded.get(keyword)
    if cls is None:
        target = _all_targets().get(keyword)
        if target is None:
            return None
        cls = _loaded[keyword] = _load_kind(keyword, target)
    return cls


def is_builtin(cls: type) -> bool:
    """Whether a kind is one of mna's own."""
    return cls.__module__.startswith("mna.")


def suggest(keyword: str) -> list[str]:
    return difflib.get_close_matches(keyword, keywords(), n=3, cutoff=0.6)
