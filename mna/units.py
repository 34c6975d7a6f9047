"""Quantities, SI prefixes and dimensions.

Every physical value inside mna is a float in SI base units (kg, m, s, A, K)
paired with a :class:`Dimension`. Angles are dimensionless, as in SI
(1 rad = 1), so a shaft speed in rad/s has the dimension of hertz (1/s) and
a machine constant in V*s/rad has the dimension of N*m/A (power balance
e*i = T*w).

Text enters through :func:`parse_unit` (``"mH"``, ``"N*m*s/rad"``) and
:func:`parse_quantity` (``"4.7 uF"``); numbers leave through
:func:`format_si` (``4.7 mH``). Prefixes follow SI exactly and are
case-sensitive: ``m`` is milli, ``M`` mega.
"""

from __future__ import annotations

import difflib
import math
import re
from dataclasses import dataclass
from decimal import Decimal
from fractions import Fraction
from functools import lru_cache
from numbers import Rational, Real

__all__ = [
    "Dimension",
    "Quantity",
    "UnitError",
    "DimensionError",
    "describe",
    "unit_symbol",
    "parse_unit",
    "parse_quantity",
    "format_si",
    "PREFIXES",
    "UNITS",
    "DIMENSIONLESS",
    "KILOGRAM",
    "MASS",
    "METRE",
    "LENGTH",
    "SECOND",
    "TIME",
    "AMPERE",
    "CURRENT",
    "KELVIN",
    "VOLT",
    "OHM",
    "SIEMENS",
    "FARAD",
    "HENRY",
    "HERTZ",
    "WATT",
    "JOULE",
    "COULOMB",
    "WEBER",
    "TESLA",
    "NEWTON",
    "AREA",
    "TORQUE",
    "ANGULAR_SPEED",
    "INERTIA",
    "ROTATIONAL_DAMPING",
    "MACHINE_CONSTANT",
    "ACTION_INTEGRAL",
    "THERMAL_RESISTANCE",
    "THERMAL_CAPACITANCE",
    "AbsoluteTemperature",
]


# --------------------------------------------------------------------------
# Errors
# --------------------------------------------------------------------------


class UnitError(ValueError):
    """A unit or quantity text cannot be read.

    ``offset`` is the character offset within the text where the bad part
    starts (None when unknown), so a caller can put a caret under it.
    """

    def __init__(self, message: str, offset: int | None = None):
        super().__init__(message)
        self.message = message
        self.offset = offset


class DimensionError(ValueError):
    """Two quantities of different dimensions were added, compared or mixed."""


# --------------------------------------------------------------------------
# Dimension
# --------------------------------------------------------------------------

Exponent = int | Fraction
_BASE_SYMBOLS = ("kg", "m", "s", "A", "K")


def _normalise(x: Exponent) -> Exponent:
    """An exponent as an int when whole, else as a Fraction."""
    if isinstance(x, int):
        return x
    x = Fraction(x)
    return x.numerator if x.denominator == 1 else x


def _as_exponent(power: object) -> Exponent:
    """A power for a dimension: int, Fraction, or a float close to a simple fraction."""
    if isinstance(power, bool):
        raise TypeError("a boolean is not an exponent")
    if isinstance(power, Rational):
        return _normalise(Fraction(power))
    if isinstance(power, Real):
        as_float = float(power)
        if math.isfinite(as_float):
            candidate = Fraction(as_float).limit_denominator(1000)
            if abs(float(candidate) - as_float) <= 1e-12 * max(1.0, abs(as_float)):
                return _normalise(candidate)
        raise DimensionError(
            f"cannot raise a physical unit to the power {power!r}: "
            "exponents of units must be whole numbers or simple fractions"
        )
    raise TypeError(f"exponent must be a number, got {type(power).__name__}")


@dataclass(frozen=True, slots=True)
class Dimension:
    """Exponents of the SI base units kg, m, s, A and K.

    Immutable and hashable; ints or Fractions. Angles are dimensionless.
    ``Dimension(kg=1, m=2, s=-3, A=-1)`` is the volt.
    """

    kg: Exponent = 0
    m: Exponent = 0
    s: Exponent = 0
    A: Exponent = 0
    K: Exponent = 0

    def __post_init__(self) -> None:
        for name in _BASE_SYMBOLS:
            object.__setattr__(self, name, _normalise(getattr(self, name)))

    @property
    def exponents(self) -> tuple[Exponent, ...]:
        """(kg, m, s, A, K) exponents."""
        return (self.kg, self.m, self.s, self.A, self.K)

    @classmethod
    def _from(cls, exps: tuple[Exponent, ...]) -> Dimension:
        return cls(*exps)

    @property
    def is_dimensionless(self) -> bool:
        """True for a plain number (all exponents zero)."""
        return not any(self.exponents)

    def __mul__(self, other: Dimension) -> Dimension:
        if not isinstance(other, Dimension):
            return NotImplemented
        return Dimension._from(tuple(a + b for a, b in zip(self.exponents, other.exponents)))

    def __truediv__(self, other: Dimension) -> Dimension:
        if not isinstance(other, Dimension):
            return NotImplemented
        return Dimension._from(tuple(a - b for a, b in zip(self.exponents, other.exponents)))

    def __pow__(self, power: int | Fraction) -> Dimension:
        p = _as_exponent(power)
        return Dimension._from(tuple(a * p for a in self.exponents))

    def __str__(self) -> str:
        """SI base expression such as ``kg*m^2*s^-3*A^-1``; ``1`` when dimensionless."""
        parts = []
        for symbol, exp in zip(_BASE_SYMBOLS, self.exponents):
            if exp == 0:
                continue
            if exp == 1:
                parts.append(symbol)
            elif isinstance(exp, Fraction):
                parts.append(f"{symbol}^({exp})")
            else:
                parts.append(f"{symbol}^{exp}")
        return "*".join(parts) if parts else "1"

    def __repr__(self) -> str:
        return f"Dimension({self})"


DIMENSIONLESS = Dimension()
KILOGRAM = MASS = Dimension(kg=1)
METRE = LENGTH = Dimension(m=1)
SECOND = TIME = Dimension(s=1)
AMPERE = CURRENT = Dimension(A=1)
KELVIN = Dimension(K=1)

NEWTON = KILOGRAM * METRE / SECOND**2
JOULE = NEWTON * METRE
WATT = JOULE / SECOND
COULOMB = AMPERE * SECOND
VOLT = WATT / AMPERE
OHM = VOLT / AMPERE
SIEMENS = AMPERE / VOLT
FARAD = COULOMB / VOLT
WEBER = VOLT * SECOND
HENRY = WEBER / AMPERE
TESLA = WEBER / METRE**2
HERTZ = DIMENSIONLESS / SECOND
AREA = METRE**2
TORQUE = NEWTON * METRE  # same dimension as JOULE
ANGULAR_SPEED = HERTZ  # rad/s; rad is 1 in SI
INERTIA = KILOGRAM * METRE**2
ROTATIONAL_DAMPING = TORQUE * SECOND  # N*m*s/rad
MACHINE_CONSTANT = VOLT * SECOND  # V*s/rad = N*m/A (e*i = T*w); same as WEBER
ACTION_INTEGRAL = AMPERE**2 * SECOND  # Joule integral I^2*t, A^2*s
THERMAL_RESISTANCE = KELVIN / WATT  # K/W (= degC/W, a temperature difference per watt)
THERMAL_CAPACITANCE = JOULE / KELVIN  # J/K


# Friendly names for error messages. Where one dimension has several common
# names (J and N*m, Hz and rad/s, Wb and V*s/rad) the text gives them all.
_DESCRIPTIONS: dict[Dimension, str] = {
    DIMENSIONLESS: "a plain number (no unit)",
    KILOGRAM: "kilograms (kg)",
    METRE: "metres (m)",
    SECOND: "seconds (s)",
    AMPERE: "amperes (A)",
    KELVIN: "kelvins (K)",
    VOLT: "volts (V)",
    OHM: "ohms (ohm)",
    SIEMENS: "siemens (S)",
    FARAD: "farads (F)",
    HENRY: "henries (H)",
    HERTZ: "hertz or rad/s (Hz, rad/s, rpm)",
    WATT: "watts (W)",
    JOULE: "joules or newton-metres (J, N*m)",
    COULOMB: "coulombs (C)",
    WEBER: "webers or volt-seconds per radian (Wb, V*s/rad, N*m/A)",
    TESLA: "teslas (T)",
    NEWTON: "newtons (N)",
    AREA: "square metres (m^2)",
    INERTIA: "kilogram square metres (kg*m^2)",
    ROTATIONAL_DAMPING: "newton-metre-seconds per radian (N*m*s/rad)",
    ACTION_INTEGRAL: "ampere-squared seconds (A^2*s)",
    THERMAL_RESISTANCE: "kelvins per watt (K/W)",
    THERMAL_CAPACITANCE: "joules per kelvin (J/K)",
}

# Preferred symbol for output labels. Each must parse back with scale 1.
_SYMBOLS: dict[Dimension, str] = {
    DIMENSIONLESS: "",
    KILOGRAM: "kg",
    METRE: "m",
    SECOND: "s",
    AMPERE: "A",
    KELVIN: "K",
    THERMAL_RESISTANCE: "K/W",
    THERMAL_CAPACITANCE: "J/K",
    VOLT: "V",
    OHM: "ohm",
    SIEMENS: "S",
    FARAD: "F",
    HENRY: "H",
    HERTZ: "1/s",
    WATT: "W",
    JOULE: "J",
    COULOMB: "C",
    WEBER: "Wb",
    TESLA: "T",
    NEWTON: "N",
    AREA: "m^2",
    INERTIA: "kg*m^2",
    ROTATIONAL_DAMPING: "N*m*s",
    ACTION_INTEGRAL: "A^2*s",
}


def describe(dim: Dimension) -> str:
    """A friendly name for ``dim`` for error messages, e.g. ``farads (F)``.

    Unnamed dimensions fall back to the SI base expression (``m^3``).
    """
    return _DESCRIPTIONS.get(dim, str(dim))


def unit_symbol(dim: Dimension) -> str:
    """The preferred SI symbol for output labels (``V``, ``ohm``, ``N*m*s``).

    1/s gives ``1/s``: hertz and rad/s are one dimension, so a caller that
    knows it holds a shaft speed writes ``rad/s`` itself. Likewise J and
    N*m are one dimension: this gives ``J`` and a torque label is the
    caller's ``N*m``; Wb and V*s/rad give ``Wb``. Dimensionless gives
    ``""``; anything unnamed its SI base expression.
    """
    return _SYMBOLS.get(dim, str(dim))


# --------------------------------------------------------------------------
# Prefixes and units
# --------------------------------------------------------------------------

#: SI prefix -> power of ten. ``c`` is accepted only in ``cm``.
PREFIXES: dict[str, int] = {
    "a": -18,
    "f": -15,
    "p": -12,
    "n": -9,
    "u": -6,
    "\u00b5": -6,  # MICRO SIGN
    "\u03bc": -6,  # GREEK SMALL LETTER MU
    "m": -3,
    "c": -2,
    "k": 3,
    "M": 6,
    "G": 9,
    "T": 12,
}


@dataclass(frozen=True, slots=True)
class _Unit:
    pow10: int  # decimal part of the scale to SI
    factor: float  # remaining (non-decimal) part of the scale, e.g. pi/180
    dim: Dimension
    prefixable: bool


#: Unit symbol -> definition. Scale to SI = 10**pow10 * factor.
UNITS: dict[str, _Unit] = {
    "V": _Unit(0, 1.0, VOLT, True),
    "A": _Unit(0, 1.0, AMPERE, True),
    "ohm": _Unit(0, 1.0, OHM, True),
    "\u03a9": _Unit(0, 1.0, OHM, True),  # GREEK CAPITAL LETTER OMEGA
    "\u2126": _Unit(0, 1.0, OHM, True),  # OHM SIGN
    "S": _Unit(0, 1.0, SIEMENS, True),
    "F": _Unit(0, 1.0, FARAD, True),
    "H": _Unit(0, 1.0, HENRY, True),
    "s": _Unit(0, 1.0, SECOND, True),
    "Hz": _Unit(0, 1.0, HERTZ, True),
    "W": _Unit(0, 1.0, WATT, True),
    "J": _Unit(0, 1.0, JOULE, True),
    "C": _Unit(0, 1.0, COULOMB, True),
    "Wb": _Unit(0, 1.0, WEBER, True),
    "T": _Unit(0, 1.0, TESLA, True),
    "m": _Unit(0, 1.0, METRE, True),
    "N": _Unit(0, 1.0, NEWTON, True),
    "g": _Unit(-3, 1.0, KILOGRAM, True),
    "K": _Unit(0, 1.0, KELVIN, True),
    "rad": _Unit(0, 1.0, DIMENSIONLESS, True),
    "kg": _Unit(0, 1.0, KILOGRAM, False),
    "rpm": _Unit(0, 2.0 * math.pi / 60.0, HERTZ, False),  # one turn (2*pi rad) per minute
    "deg": _Unit(0, math.pi / 180.0, DIMENSIONLESS, False),
    "%": _Unit(-2, 1.0, DIMENSIONLESS, False),
    # A degree Celsius inside a compound unit (degC/W) is a temperature
    # difference, the size of a kelvin. Alone it is an absolute temperature
    # with an offset: see parse_quantity and AbsoluteTemperature.
    "\u00b0C": _Unit(0, 1.0, KELVIN, False),
    "degC": _Unit(0, 1.0, KELVIN, False),
}

#: 0 degC in kelvins (exact, the SI definition of the Celsius scale).
CELSIUS_ZERO = 273.15
#: Unit spellings that, standing alone after a number, mean an absolute
#: temperature in degrees Celsius.
CELSIUS = ("\u00b0C", "degC")

_ONE = _Unit(0, 1.0, DIMENSIONLESS, False)  # the literal "1" in "1/s"


def _lookup(token: str) -> _Unit | None:
    """A symbol as a whole unit first, then as prefix + unit; None if neither."""
    unit = UNITS.get(token)
    if unit is not None:
        return unit
    if len(token) < 2:
        return None
    prefix, rest = token[0], token[1:]
    if prefix not in PREFIXES or (prefix == "c" and rest != "m"):
        return None
    base = UNITS.get(rest)
    if base is None or not base.prefixable:
        return None
    return _Unit(base.pow10 + PREFIXES[prefix], base.factor, base.dim, False)


def _all_symbols() -> list[str]:
    """Every spelling _lookup accepts (units and prefixed units)."""
    symbols = list(UNITS)
    for prefix in PREFIXES:
        for name, unit in UNITS.items():
            if unit.prefixable and (prefix != "c" or name == "m"):
                symbols.append(prefix + name)
    return symbols


_KNOWN_SYMBOLS = _all_symbols()


def _by_lowercase() -> dict[str, list[str]]:
    table: dict[str, list[str]] = {}
    for symbol in _KNOWN_SYMBOLS:
        table.setdefault(symbol.lower(), []).append(symbol)
    return table


_KNOWN_BY_LOWERCASE = _by_lowercase()


#: Tokens longer than this get no suggestion beyond a change of case (two
#: of the longest symbols joined); the searches below are quadratic.
_LONGEST_SUGGESTION = 24


def _suggestions(token: str) -> list[str]:
    """Likely intended spellings for an unknown unit symbol (best first)."""
    lowered = token.lower()
    found = list(_KNOWN_BY_LOWERCASE.get(lowered, []))  # wrong case: "Ohm", "KV"
    plural = _KNOWN_BY_LOWERCASE.get(lowered[:-1], []) if len(token) >= 4 and lowered.endswith("s") else []
    found += plural  # "ohms" -> "ohm"
    if len(token) > _LONGEST_SUGGESTION:
        return found  # no unit, nor a pair of units, is this long: no search
    if not plural:
        for cut in range(1, len(token)):  # missing '*': "Nm" -> "N*m"
            left, right = token[:cut], token[cut:]
            if left in UNITS and right in UNITS:
                found.append(f"{left}*{right}")
    if not found:
        close = difflib.get_close_matches(lowered, list(_KNOWN_BY_LOWERCASE), n=1, cutoff=0.6)
        found = [s for c in close for s in _KNOWN_BY_LOWERCASE[c]]
    return list(dict.fromkeys(found))


def _shorten(text: str, most: int = 60) -> str:
    """``text`` cut to ``most`` characters for a message (a runaway token is quoted in part)."""
    return text if len(text) <= most else f"{text[:most - 20]}...({len(text)} characters)"


_PREFIX_NAMES = {"f": "femto", "p": "pico", "n": "nano", "u": "micro", "\u00b5": "micro", "\u03bc": "micro",
                 "c": "centi", "k": "kilo", "M": "mega", "G": "giga", "T": "tera"}


def _prefix_alone(token: str, text: str, offset: int) -> UnitError | None:
    """``1k``, ``4.7u``, ``1 meg``: a prefix written without its unit."""
    prefix = "M" if token.lower() == "meg" else token
    if prefix not in _PREFIX_NAMES:
        return None
    number = _NUMBER.match(text, _SPACE.match(text, 0).end())
    value = number.group() if number else "1"
    example = {"u": "uF", "\u00b5": "uF", "\u03bc": "uF", "n": "nF", "p": "pF", "f": "fF", "c": "cm"}.get(
        prefix, prefix + "ohm")
    spelled = "'meg' is not a prefix; mega is M, and " if token.lower() == "meg" else ""
    return UnitError(f"{_shorten(text.strip())!r}: {spelled}a prefix needs its unit: {value} {example} "
                     f"({prefix} is {_PREFIX_NAMES[prefix]}; write the unit the value is in after it)", offset)


def _unknown_unit(token: str, text: str, offset: int) -> UnitError:
    alone = _prefix_alone(token, text, offset)
    if alone is not None:
        return alone
    message = f"unknown unit {_shorten(token)!r} in {_shorten(text)!r}"
    if token[0] == "c" and token[1:] in UNITS:
        message += " (the prefix 'c', centi, is used only in 'cm')"
    hints = _suggestions(token)
    if hints:
        message += "; did you mean " + " or ".join(repr(h) for h in hints) + "?"
    return UnitError(message, offset)


# --------------------------------------------------------------------------
# Unit expressions
# --------------------------------------------------------------------------

_SPACE = re.compile(r"[ \t]*")
_SYMBOL = re.compile(r"%|\u00b0C|1(?=[ \t]*/)|[^\W\d_]+")  # "1" only as in "1/s"
_EXPONENT = re.compile(r"[+-]?\d+")


#: Largest exponent of a unit in a quantity (``m^3``, ``s^-2``; nothing physical needs more).
MAX_UNIT_EXPONENT = 12
#: Decimal exponents of the literals mna reads: 1e-300 to 1e300 (floating point
#: ends near 1e308; below 2.2e-308 it loses precision, and 1e-320 ohm becomes
#: an infinite conductance).
MAX_DECIMAL_EXPONENT = 300


def _factor(text: str, pos: int) -> tuple[_Unit, int]:
    """Read one ``symbol[^exp]`` starting at ``pos``; return it and the next position."""
    match = _SYMBOL.match(text, pos)
    if match is None:
        if pos >= len(text):
            raise UnitError(f"expected a unit at the end of {text!r}", pos)
        raise UnitError(f"expected a unit at {text[pos]!r} in {text!r}", pos)
    token = match.group()
    unit = _ONE if token == "1" else _lookup(token)
    if unit is None:
        raise _unknown_unit(token, text, pos)
    pos = match.end()
    if pos < len(text) and text[pos] == "^":
        exp_match = _EXPONENT.match(text, pos + 1)
        if exp_match is None:
            raise UnitError(
                f"expected a whole-number exponent after '^' in {text!r} (e.g. 'm^2', 's^-1')",
                pos + 1,
            )
        digits = exp_match.group()
        exp = int(digits) if len(digits) <= 6 else 10**6  # (int() of thousands of digits is refused)
        if abs(exp) > MAX_UNIT_EXPONENT:
            raise UnitError(f"the exponent {_shorten(digits)} in {_shorten(text)!r} is out of range (a unit's exponent is at most "
                            f"{MAX_UNIT_EXPONENT} either way)", pos + 1)
        unit = _Unit(unit.pow10 * exp, unit.factor**exp, unit.dim**exp, False)
        pos = exp_match.end()
    return unit, pos


def _parse_parts(text: str, start: int = 0) -> tuple[int, float, Dimension]:
    """(pow10, factor, dimension) of the unit expression ``text[start:]``.

    Scale to SI = 10**pow10 * factor. Errors quote the whole ``text`` and
    give offsets into it, so a quantity parser can pass its full text.
    """
    pos = _SPACE.match(text, start).end()
    if pos == len(text):
        return 0, 1.0, DIMENSIONLESS
    pow10, factor, dim = 0, 1.0, DIMENSIONLESS
    op = "*"
    while True:
        unit, pos = _factor(text, pos)
        if op == "*":
            pow10, factor, dim = pow10 + unit.pow10, factor * unit.factor, dim * unit.dim
        else:
            pow10, factor, dim = pow10 - unit.pow10, factor / unit.factor, dim / unit.dim
        pos = _SPACE.match(text, pos).end()
        if pos == len(text):
            return pow10, factor, dim
        op = text[pos]
        if op not in "*/":
            hint = "; write exponents with '^', e.g. 'm^2'" if op.isdigit() else ""
            raise UnitError(f"unexpected {op!r} in {text!r}{hint}", pos)
        pos = _SPACE.match(text, pos + 1).end()


@lru_cache(maxsize=4096)
def _parse_parts_cached(text: str) -> tuple[int, float, Dimension]:
    return _parse_parts(text)


@lru_cache(maxsize=4096)
def parse_unit(text: str) -> tuple[float, Dimension]:
    """Parse a unit expression; return (scale to SI base units, dimension).

    ``parse_unit("mH") == (1e-3, HENRY)``; ``parse_unit("cm^2")`` is
    (1e-4, AREA) because an exponent applies to the prefixed unit.
    ``*`` and ``/`` are read left to right; ``1/s`` is allowed; an empty
    text is a plain number (1.0, DIMENSIONLESS). Raises :class:`UnitError`
    with ``.offset`` on an unknown unit or a malformed expression.
    """
    pow10, factor, dim = _parse_parts_cached(text)
    return float(f"1e{pow10}") * factor, dim


# --------------------------------------------------------------------------
# Quantity
# --------------------------------------------------------------------------


def _as_quantity(x: object) -> Quantity | None:
    if isinstance(x, Quantity):
        return x
    if isinstance(x, Real) and not isinstance(x, bool):
        return Quantity(float(x))
    return None


@dataclass(frozen=True, slots=True)
class Quantity:
    """A value in SI base units with its dimension.

    ``+``, ``-`` and comparisons need equal dimensions (else
    :class:`DimensionError`); ``*`` and ``/`` combine dimensions; ``**``
    takes a dimensionless exponent. Plain numbers act as dimensionless
    quantities.
    """

    value: float
    dim: Dimension = DIMENSIONLESS

    def __post_init__(self) -> None:
        object.__setattr__(self, "value", float(self.value))

    # --- helpers -----------------------------------------------------------

    def _same_dim(self, other: Quantity, verb: str, joiner: str) -> None:
        if self.dim != other.dim:
            raise DimensionError(
                f"cannot {verb} {describe(self.dim)} {joiner} {describe(other.dim)} "
                f"({self} {joiner} {other})"
            )

    # --- additive ----------------------------------------------------------

    def __add__(self, other: object) -> Quantity:
        q = _as_quantity(other)
        if q is None:
            return NotImplemented
        self._same_dim(q, "add", "and")
        return Quantity(self.value + q.value, self.dim)

    def __radd__(self, other: object) -> Quantity:
        q = _as_quantity(other)
        if q is None:
            return NotImplemented
        return q + self

    def __sub__(self, other: object) -> Quantity:
        q = _as_quantity(other)
        if q is None:
            return NotImplemented
        self._same_dim(q, "subtract", "and")
        return Quantity(self.value - q.value, self.dim)

    def __rsub__(self, other: object) -> Quantity:
        q = _as_quantity(other)
        if q is None:
            return NotImplemented
        return q - self

    def __neg__(self) -> Quantity:
        return Quantity(-self.value, self.dim)

    def __pos__(self) -> Quantity:
        return self

    def __abs__(self) -> Quantity:
        return Quantity(abs(self.value), self.dim)

    # --- multiplicative ----------------------------------------------------

    def __mul__(self, other: object) -> Quantity:
        q = _as_quantity(other)
        if q is None:
            return NotImplemented
        return Quantity(self.value * q.value, self.dim * q.dim)

    __rmul__ = __mul__

    def __truediv__(self, other: object) -> Quantity:
        q = _as_quantity(other)
        if q is None:
            return NotImplemented
        return Quantity(self.value / q.value, self.dim / q.dim)

    def __rtruediv__(self, other: object) -> Quantity:
        q = _as_quantity(other)
        if q is None:
            return NotImplemented
        return q / self

    def __pow__(self, power: object) -> Quantity:
        p = _as_quantity(power)
        if p is None:
            return NotImplemented
        if not p.dim.is_dimensionless:
            raise DimensionError(f"an exponent must be a plain number, got {describe(p.dim)}")
        exponent = power if isinstance(power, Rational) else p.value
        if self.dim.is_dimensionless:
            return Quantity(self.value**p.value)
        return Quantity(self.value**p.value, self.dim ** exponent)

    def __rpow__(self, base: object) -> Quantity:
        b = _as_quantity(base)
        if b is None:
            return NotImplemented
        return b**self

    # --- comparisons -------------------------------------------------------

    def _compare_with(self, other: object) -> Quantity | None:
        q = _as_quantity(other)
        if q is not None:
            self._same_dim(q, "compare", "with")
        return q

    def __lt__(self, other: object) -> bool:
        q = self._compare_with(other)
        return NotImplemented if q is None else self.value < q.value

    def __le__(self, other: object) -> bool:
        q = self._compare_with(other)
        return NotImplemented if q is None else self.value <= q.value

    def __gt__(self, other: object) -> bool:
        q = self._compare_with(other)
        return NotImplemented if q is None else self.value > q.value

    def __ge__(self, other: object) -> bool:
        q = self._compare_with(other)
        return NotImplemented if q is None else self.value >= q.value

    # --- conversions -------------------------------------------------------

    def __float__(self) -> float:
        if not self.dim.is_dimensionless:
            raise DimensionError(
                f"cannot use {describe(self.dim)} as a plain number ({self}); "
                "take .value for the SI value"
            )
        return self.value

    def __repr__(self) -> str:
        symbol = unit_symbol(self.dim)
        return f"Quantity({self.value!r} {symbol})" if symbol else f"Quantity({self.value!r})"

    def __str__(self) -> str:
        return format_si(self.value, unit_symbol(self.dim))


@dataclass(frozen=True, slots=True)
class AbsoluteTemperature(Quantity):
    """A temperature read on the Celsius scale (``40 °C``), held in kelvins (313.15 K).

    The Celsius scale has an offset, so such a value is an absolute
    temperature, never a difference. It may be compared, and added to or
    subtracted from (absolute + difference is absolute, absolute - absolute
    is a difference, both plain kelvins); it may not be scaled, negated or
    raised to a power, where ``10 °C`` meant as a 10 K difference would
    silently become 283.15 K. Arguments that take an absolute temperature
    (``ambient=``, a junction's reference temperature) accept it; the others
    refuse it (see :func:`refuse_celsius`).
    """

    def _refuse(self, *_: object) -> Quantity:
        raise DimensionError(
            f"{self.value - CELSIUS_ZERO:g} °C is an absolute temperature ({self.value:g} K) on a scale "
            "with an offset: it cannot be scaled or negated; write a temperature difference in K "
            "(a difference of 1 °C is 1 K)")

    __mul__ = __rmul__ = __truediv__ = __rtruediv__ = __pow__ = __rpow__ = __neg__ = _refuse

    def __str__(self) -> str:
        return f"{format_si(self.value - CELSIUS_ZERO, '', 6)} \u00b0C"


def refuse_celsius(q: Quantity, what: str) -> None:
    """Raise DimensionError when ``q`` was written in °C where a difference (or non-temperature) is meant."""
    if isinstance(q, AbsoluteTemperature):
        raise DimensionError(
            f"{what} takes a temperature difference (or no temperature), and {q} is an absolute "
            "temperature on the Celsius scale: write a difference in K (a difference of 1 °C is 1 K)")


_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")


@lru_cache(maxsize=4096)
def parse_quantity(text: str) -> Quantity:
    """Parse a number with an optional unit: ``4.7 uF``, ``4.7uF``, ``-5 V``, ``40 %``.

    The value is converted exactly from its decimal text (``4.7 uF`` gives
    exactly the float 4.7e-6). A bare number is dimensionless. Raises
    :class:`UnitError` with ``.offset`` into ``text``.
    """
    start = _SPACE.match(text, 0).end()
    match = _NUMBER.match(text, start)
    if match is None:
        raise UnitError(f"expected a number at the start of quantity {text!r}", start)
    try:
        pow10, factor, dim = _parse_parts_cached(text[match.end():])
    except UnitError:
        _parse_parts(text, match.end())  # raises again, quoting the whole quantity
        raise
    number = Decimal(match.group())
    if number and abs(number.adjusted() + pow10) > MAX_DECIMAL_EXPONENT:
        raise UnitError(f"{text.strip()[:40]!r} is out of range: quantities lie between "
                        f"1e-{MAX_DECIMAL_EXPONENT} and 1e{MAX_DECIMAL_EXPONENT} in SI units (or are 0)", start)
    value = float(number.scaleb(pow10))
    if factor != 1.0:
        value *= factor
    if text[match.end():].strip() in CELSIUS:
        return AbsoluteTemperature(value + CELSIUS_ZERO, KELVIN)
    return Quantity(value, dim)


# --------------------------------------------------------------------------
# Formatting
# --------------------------------------------------------------------------

_FORMAT_PREFIXES: dict[int, str] = {
    -18: "a", -15: "f", -12: "p", -9: "n", -6: "u", -3: "m", 0: "", 3: "k", 6: "M", 9: "G", 12: "T",
}
_LEADING_SYMBOL = re.compile(r"[^\W\d_]+|%")


def _takes_prefix(unit: str) -> bool:
    """True if a prefix written before ``unit`` scales it correctly.

    Only a prefixable first symbol without an exponent qualifies: ``mm^2``
    would mean (mm)^2, and ``kg`` already carries a prefix.
    """
    match = _LEADING_SYMBOL.match(unit)
    if match is None or match.group() not in UNITS:
        return False
    if match.end() < len(unit) and unit[match.end()] == "^":
        return False
    return UNITS[match.group()].prefixable


def _strip_zeros(digits: str) -> str:
    if "." in digits:
        digits = digits.rstrip("0").rstrip(".")
    return digits


def format_si(value: float, unit: str = "", digits: int = 4) -> str:
    """Engineering format with an SI prefix: ``format_si(0.0047, "H") == "4.7 mH"``.

    ``digits`` significant digits, trailing zeros stripped; prefixes a..T.
    Values outside that range, empty units and units that cannot take a
    prefix (``kg``, ``m^2``, ``1/s``) use an exponent in steps of three
    (``4.7e-3``). nan and inf are printed plainly.
    """
    if digits < 1:
        raise ValueError(f"digits must be at least 1, got {digits}")
    value = float(value)
    if not math.isfinite(value) or value == 0.0:
        number = "0" if value == 0.0 else repr(value)
        return f"{number} {unit}" if unit else number
    rounded = f"{value:.{digits - 1}e}"  # rounding first, so 999.96 -> 1.000e+03
    exponent = int(rounded.split("e")[1])
    eng = 3 * (exponent // 3)
    mantissa = _strip_zeros(format(Decimal(rounded).scaleb(-eng), "f"))
    if unit and eng in _FORMAT_PREFIXES and _takes_prefix(unit):
        return f"{mantissa} {_FORMAT_PREFIXES[eng]}{unit}"
    number = mantissa if eng == 0 else f"{mantissa}e{eng}"
    return f"{number} {unit}" if unit else number
