"""The settings of ``simulate frequency`` and of :meth:`mna.Circuit.frequency`, checked.

``from=`` and ``to=`` (Hz) with ``per-decade=`` sweep a range; ``at=list(F1,
F2, ...)`` names the frequencies instead. Frequencies are in hertz: a value
written in rad/s or rpm is refused, since both share the dimension 1/s and
would silently be read as hertz.
"""

from __future__ import annotations

import math
import re
from typing import TYPE_CHECKING, Any, Iterable

from . import netlist as nl
from .errors import InputError, Span, UnitsError
from .units import HERTZ, Quantity, describe, parse_quantity

if TYPE_CHECKING:  # pragma: no cover
    from .circuit import Elaborator

#: Most frequencies one analysis may solve (a typo such as per-decade=1e6 is an error, not an hour's run).
MAX_POINTS = 100_000

_ANGULAR = re.compile(r"(rad|rpm)")


def check_frequency_settings(settings: dict[str, Any], spans: dict[str, Span], st: nl.SimulateStatement,
                             elaborator: "Elaborator") -> None:
    """Validate the settings in place; ``at=`` becomes a list of floats (Hz)."""
    for key in ("from", "to"):
        expr = next((a.value for a in st.arguments if a.key == key), None)
        if expr is not None:
            _refuse_angular(expr, f"simulate frequency {key}=")
    if settings.get("at") is not None:
        if settings.get("from") is not None or settings.get("to") is not None:
            raise InputError("simulate frequency takes either from= and to= or at=, not both", spans["at"])
        settings["at"] = _frequency_list(settings["at"], elaborator)
        return
    low, high = settings.get("from"), settings.get("to")
    if low is None or high is None:
        raise InputError(
            "simulate frequency needs from= and to= (a sweep) or at=list(...) (chosen frequencies)",
            st.analysis_span, hint="e.g. 'simulate frequency from=10 Hz to=1 MHz per-decade=50'")
    if not high > low:
        raise InputError(f"simulate frequency to= ({high:g} Hz) must lie above from= ({low:g} Hz)", spans["to"])
    _check_count(low, high, settings["per-decade"], spans.get("per-decade", st.analysis_span))


def _refuse_angular(expr: nl.Expr, what: str) -> None:
    if isinstance(expr, nl.Number) and _ANGULAR.search(expr.text.lstrip("+-0123456789.eE ")):
        raise UnitsError(f"{what} is a frequency in hertz; got {expr.text}, an angular speed",
                         expr.span, hint="write it in Hz (1 rad/s = 0.159 Hz)")


def _frequency_list(expr: nl.Expr, elaborator: "Elaborator") -> list[float]:
    if not isinstance(expr, nl.Call) or expr.func != "list" or expr.named or not expr.args:
        raise InputError("at= takes a list of frequencies, like at=list(50 Hz, 1 kHz, 20 kHz)",
                         getattr(expr, "span", None))
    values = []
    for item in expr.args:
        _refuse_angular(item, "a frequency in at=list(...)")
        f = elaborator.quantity(item, HERTZ, "a frequency in at=list(...)")
        if not f > 0:
            raise InputError(f"a frequency must be positive, got {f:g} Hz", item.span)
        if values and f <= values[-1]:
            raise InputError("the frequencies in at=list(...) must increase", item.span)
        values.append(f)
    return values


def _check_count(low: float, high: float, per_decade: float, span: Span | None) -> None:
    count = per_decade * math.log10(high / low)
    if count > MAX_POINTS:
        raise InputError(f"simulate frequency would solve {count:.3g} frequencies; at most {MAX_POINTS}", span,
                         hint="lower per-decade= or narrow from= and to=")


def _hertz(value: float | str, what: str) -> float:
    if isinstance(value, str):
        if _ANGULAR.search(value):
            raise UnitsError(f"{what} is a frequency in hertz; got {value!r}, an angular speed")
        q = parse_quantity(value)
    elif isinstance(value, Quantity):
        q = value
    else:
        return float(value)
    if q.dim != HERTZ:
        raise UnitsError(f"{what} needs {describe(HERTZ)}, got {describe(q.dim)}")
    return q.value


def python_settings(low, high, per_decade: float, at: Iterable | None) -> dict[str, Any]:
    """Settings of :meth:`mna.Circuit.frequency`, checked like those of a netlist line."""
    if at is not None:
        if low is not None or high is not None:
            raise InputError("frequency() takes either low= and high= or at=, not both")
        values = [_hertz(f, "a frequency in at=") for f in at]
        if not values or any(not f > 0 for f in values) or any(b <= a for a, b in zip(values, values[1:])):
            raise InputError("frequency() at= needs positive frequencies in increasing order")
        return {"at": values}
    if low is None or high is None:
        raise InputError("frequency() needs low= and high= (Hz) or at=[...]")
    lo, hi = _hertz(low, "low"), _hertz(high, "high")
    if not 0 < lo < hi:
        raise InputError(f"frequency() needs 0 < low < high, got low={lo:g} Hz, high={hi:g} Hz")
    if not per_decade > 0:
        raise InputError(f"frequency() per_decade must be positive, got {per_decade:g}")
    _check_count(lo, hi, per_decade, None)
    return {"from": lo, "to": hi, "per-decade": per_decade}
