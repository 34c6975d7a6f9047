"""Tests for mna.units: SI prefixes, units, dimensions, quantities, formatting.

Reference for prefixes and units: BIPM, "The International System of Units
(SI)", SI Brochure, 9th ed., 2019 -- SI prefixes (Table 7), derived units
with special names in base units (Table 4), non-SI units accepted for use
with the SI: degree = (pi/180) rad (Table 8). Table numbers from memory.
The expected dimensions below are written out from the brochure's base-unit
expressions, independently of the constants in mna.units.
"""

from __future__ import annotations

import dataclasses
import math
from fractions import Fraction

import pytest

from mna.units import (
    ACTION_INTEGRAL,
    AMPERE,
    ANGULAR_SPEED,
    AREA,
    COULOMB,
    DIMENSIONLESS,
    FARAD,
    HENRY,
    HERTZ,
    INERTIA,
    JOULE,
    KELVIN,
    KILOGRAM,
    MACHINE_CONSTANT,
    METRE,
    NEWTON,
    OHM,
    ROTATIONAL_DAMPING,
    SECOND,
    SIEMENS,
    TESLA,
    TORQUE,
    VOLT,
    WATT,
    WEBER,
    Dimension,
    DimensionError,
    Quantity,
    UnitError,
    describe,
    format_si,
    parse_quantity,
    parse_unit,
    unit_symbol,
)

D = Dimension

# SI Brochure Table 7: prefix -> power of ten (u, µ U+00B5 and μ U+03BC all micro).
SI_PREFIXES = {
    "f": -15, "p": -12, "n": -9, "u": -6, "\u00b5": -6, "\u03bc": -6,
    "m": -3, "k": 3, "M": 6, "G": 9, "T": 12,
}

# SI Brochure Table 4 (and base units): symbol -> (scale to SI, base-unit dimension).
SI_UNITS = {
    "V": (1.0, D(kg=1, m=2, s=-3, A=-1)),
    "A": (1.0, D(A=1)),
    "ohm": (1.0, D(kg=1, m=2, s=-3, A=-2)),
    "\u03a9": (1.0, D(kg=1, m=2, s=-3, A=-2)),
    "S": (1.0, D(kg=-1, m=-2, s=3, A=2)),
    "F": (1.0, D(kg=-1, m=-2, s=4, A=2)),
    "H": (1.0, D(kg=1, m=2, s=-2, A=-2)),
    "s": (1.0, D(s=1)),
    "Hz": (1.0, D(s=-1)),
    "W": (1.0, D(kg=1, m=2, s=-3)),
    "J": (1.0, D(kg=1, m=2, s=-2)),
    "C": (1.0, D(s=1, A=1)),
    "Wb": (1.0, D(kg=1, m=2, s=-2, A=-1)),
    "T": (1.0, D(kg=1, s=-2, A=-1)),
    "m": (1.0, D(m=1)),
    "N": (1.0, D(kg=1, m=1, s=-2)),
    "K": (1.0, D(K=1)),
    "rad": (1.0, D()),  # m/m: dimensionless in SI
    "g": (1e-3, D(kg=1)),
}

# Float rounding only: module and test build 10**n by different routes.
REL = 1e-12


# ---------------------------------------------------------------- prefixes x units


@pytest.mark.parametrize("unit", sorted(SI_UNITS))
@pytest.mark.parametrize("prefix", sorted(SI_PREFIXES))
def test_every_prefix_on_every_unit(prefix: str, unit: str) -> None:
    base_scale, dim = SI_UNITS[unit]
    scale, got_dim = parse_unit(prefix + unit)
    assert scale == pytest.approx(10.0 ** SI_PREFIXES[prefix] * base_scale, rel=REL)
    assert got_dim == dim


@pytest.mark.parametrize("unit", sorted(SI_UNITS))
def test_every_unit_alone(unit: str) -> None:
    base_scale, dim = SI_UNITS[unit]
    assert parse_unit(unit) == (pytest.approx(base_scale, rel=REL), dim)


@pytest.mark.parametrize(
    "text, scale, dim",
    [
        # A whole token that is a unit wins over a prefix split (LANGUAGE.md).
        ("T", 1.0, SI_UNITS["T"][1]),  # tesla, not tera
        ("Tohm", 1e12, SI_UNITS["ohm"][1]),  # tera-ohm
        ("mT", 1e-3, SI_UNITS["T"][1]),
        ("m", 1.0, D(m=1)),  # metre, not milli
        ("mm", 1e-3, D(m=1)),
        ("ms", 1e-3, D(s=1)),
        ("Ms", 1e6, D(s=1)),
        ("cm", 1e-2, D(m=1)),  # centi, allowed only before m
        ("kg", 1.0, D(kg=1)),
        ("mg", 1e-6, D(kg=1)),  # milligram: prefixes go on the gram
        ("K", 1.0, D(K=1)),  # kelvin; k is kilo (case-sensitive)
        ("mohm", 1e-3, SI_UNITS["ohm"][1]),  # milli ...
        ("Mohm", 1e6, SI_UNITS["ohm"][1]),  # ... vs mega
        ("\u2126", 1.0, SI_UNITS["ohm"][1]),  # OHM SIGN, canonically equal to omega
        # Non-SI units accepted for use with the SI (SI Brochure Table 8).
        ("deg", math.pi / 180, D()),
        # One revolution is 2*pi rad; 1 rpm = 2*pi rad per 60 s (LANGUAGE.md).
        ("rpm", 2 * math.pi / 60, D(s=-1)),
        ("%", 1 / 100, D()),
    ],
)
def test_named_units(text: str, scale: float, dim: Dimension) -> None:
    assert parse_unit(text) == (pytest.approx(scale, rel=REL), dim)


def test_rpm_is_a_shaft_speed_in_rad_per_s() -> None:
    # 1 rpm = 2*pi/60 rad/s; rad is 1, so rad/s has the dimension 1/s.
    rpm, rpm_dim = parse_unit("rpm")
    rad_s, rad_s_dim = parse_unit("rad/s")
    assert rpm_dim == rad_s_dim == ANGULAR_SPEED
    assert rpm / rad_s == pytest.approx(2 * math.pi / 60, rel=REL)


@pytest.mark.parametrize("micro", ["u", "\u00b5", "\u03bc"])
def test_both_micro_signs_and_u_are_micro(micro: str) -> None:
    assert parse_unit(micro + "F") == (pytest.approx(1e-6, rel=REL), FARAD)


# ---------------------------------------------------------------- compound units


@pytest.mark.parametrize(
    "text, scale, dim",
    [
        ("cm^2", 0.01**2, D(m=2)),  # the exponent applies to the prefixed unit
        ("mm^2", 0.001**2, D(m=2)),
        ("ms^-1", 1 / 0.001, D(s=-1)),
        ("m^-1", 1.0, D(m=-1)),
        ("kg*m^2", 1.0, D(kg=1, m=2)),
        ("A^2*s", 1.0, D(s=1, A=2)),
        ("N*m*s/rad", 1.0, D(kg=1, m=2, s=-1)),
        ("V*s/rad", 1.0, D(kg=1, m=2, s=-2, A=-1)),
        ("N*m/A", 1.0, D(kg=1, m=2, s=-2, A=-1)),
        ("m/s*s", 1.0, D(m=1)),  # left to right: (m/s)*s, not m/s^2
        ("m/s/s", 1.0, D(m=1, s=-2)),
        ("1/s", 1.0, D(s=-1)),
        ("kV*mA", 1e3 * 1e-3, D(kg=1, m=2, s=-3)),  # 1 kV * 1 mA = 1 W
        ("mV / uA", 1e-3 / 1e-6, SI_UNITS["ohm"][1]),  # spaces around operators
    ],
)
def test_compound_units(text: str, scale: float, dim: Dimension) -> None:
    assert parse_unit(text) == (pytest.approx(scale, rel=REL), dim)


def test_motor_constant_units_agree() -> None:
    # k_e in V*s/rad equals k_t in N*m/A in SI, by the power balance e*i = T*w
    # (Franklin, Powell & Emami-Naeini ch. 2, from memory).
    assert parse_unit("V*s/rad") == parse_unit("N*m/A")
    assert parse_unit("V*s/rad")[1] == MACHINE_CONSTANT


def test_parse_unit_is_cached() -> None:
    # Netlists repeat units tens of thousands of times; parse_unit memoises.
    parse_unit("kohm")
    hits = parse_unit.cache_info().hits
    parse_unit("kohm")
    assert parse_unit.cache_info().hits == hits + 1


# ---------------------------------------------------------------- dimensions


@pytest.mark.parametrize(
    "constant, symbol",
    [
        (VOLT, "V"), (AMPERE, "A"), (OHM, "ohm"), (SIEMENS, "S"), (FARAD, "F"),
        (HENRY, "H"), (SECOND, "s"), (HERTZ, "Hz"), (WATT, "W"), (JOULE, "J"),
        (COULOMB, "C"), (WEBER, "Wb"), (TESLA, "T"), (METRE, "m"), (NEWTON, "N"),
        (KELVIN, "K"),
    ],
)
def test_named_dimensions_match_si_brochure(constant: Dimension, symbol: str) -> None:
    assert constant == SI_UNITS[symbol][1]


@pytest.mark.parametrize(
    "left, right",
    [
        (VOLT / AMPERE, OHM),  # Ohm's law
        (AMPERE / VOLT, SIEMENS),
        (VOLT * AMPERE, WATT),  # P = V*I
        (WATT * SECOND, JOULE),  # E = P*t
        (NEWTON * METRE, JOULE),  # torque and energy share a dimension
        (TORQUE, JOULE),
        (COULOMB / VOLT, FARAD),  # C = Q/V
        (AMPERE * SECOND, COULOMB),
        (VOLT * SECOND, WEBER),  # Faraday: v = d(phi)/dt
        (WEBER / AMPERE, HENRY),  # L = phi/I
        (WEBER / METRE**2, TESLA),  # B = phi/A
        (DIMENSIONLESS / SECOND, HERTZ),
        (ANGULAR_SPEED, HERTZ),  # rad is 1 in SI
        (TORQUE / AMPERE, MACHINE_CONSTANT),  # k_t = k_e, e*i = T*w
        (TORQUE / ANGULAR_SPEED, ROTATIONAL_DAMPING),  # B in T = B*w
        (TORQUE / (ANGULAR_SPEED / SECOND), INERTIA),  # J in T = J*dw/dt
        (KILOGRAM * METRE**2, INERTIA),
        (METRE * METRE, AREA),
        (AMPERE**2 * SECOND, ACTION_INTEGRAL),  # Joule integral I^2*t
        (JOULE / OHM, ACTION_INTEGRAL),  # energy in R is R*I^2*t
    ],
)
def test_dimension_algebra(left: Dimension, right: Dimension) -> None:
    assert left == right
    assert hash(left) == hash(right)


def test_dimension_is_an_immutable_hashable_value() -> None:
    table = {VOLT: "volt"}
    assert table[WATT / AMPERE] == "volt"
    with pytest.raises(dataclasses.FrozenInstanceError):
        VOLT.kg = 2  # type: ignore[misc]


def test_dimension_powers_and_strings() -> None:
    assert AREA ** Fraction(1, 2) == METRE
    assert (METRE ** Fraction(1, 2)) ** 2 == METRE
    assert VOLT**0 == DIMENSIONLESS
    assert str(VOLT) == "kg*m^2*s^-3*A^-1"
    assert str(METRE ** Fraction(1, 2)) == "m^(1/2)"
    assert str(DIMENSIONLESS) == "1"
    assert DIMENSIONLESS.is_dimensionless and (VOLT / VOLT).is_dimensionless
    assert not HERTZ.is_dimensionless
    with pytest.raises(DimensionError):
        METRE**math.pi  # no physical unit has an irrational exponent


@pytest.mark.parametrize(
    "dim, text",
    [
        (FARAD, "farads (F)"),
        (HENRY, "henries (H)"),
        (VOLT, "volts (V)"),
        (AMPERE, "amperes (A)"),
        (OHM, "ohms (ohm)"),
        (SECOND, "seconds (s)"),
        (DIMENSIONLESS, "a plain number (no unit)"),
        (HERTZ, "hertz or rad/s (Hz, rad/s, rpm)"),
        (TORQUE, "joules or newton-metres (J, N*m)"),
        (INERTIA, "kilogram square metres (kg*m^2)"),
        (D(m=3), "m^3"),  # unnamed: SI base expression
    ],
)
def test_describe(dim: Dimension, text: str) -> None:
    assert describe(dim) == text


@pytest.mark.parametrize(
    "dim",
    [
        DIMENSIONLESS, KILOGRAM, METRE, SECOND, AMPERE, KELVIN, VOLT, OHM, SIEMENS,
        FARAD, HENRY, HERTZ, WATT, JOULE, COULOMB, WEBER, TESLA, NEWTON, AREA,
        TORQUE, ANGULAR_SPEED, INERTIA, ROTATIONAL_DAMPING, MACHINE_CONSTANT,
        ACTION_INTEGRAL, D(m=3, K=-1),
    ],
)
def test_unit_symbol_parses_back(dim: Dimension) -> None:
    assert parse_unit(unit_symbol(dim)) == (1.0, dim)


def test_unit_symbol_choices() -> None:
    assert unit_symbol(OHM) == "ohm"
    assert unit_symbol(HERTZ) == "1/s"  # same object as ANGULAR_SPEED
    assert unit_symbol(DIMENSIONLESS) == ""


# ---------------------------------------------------------------- quantities


def q(text: str) -> Quantity:
    return parse_quantity(text)


@pytest.mark.parametrize(
    "text, value, dim",
    [
        ("4.7 uF", 4.7 * 1e-6, FARAD),
        ("4.7uF", 4.7 * 1e-6, FARAD),
        ("12 mohm", 12 * 1e-3, OHM),
        ("2.2 kΩ", 2.2 * 1e3, OHM),
        ("3000 rpm", 3000 * 2 * math.pi / 60, ANGULAR_SPEED),
        ("1e-3 H", 1e-3, HENRY),
        ("40 %", 40 / 100, DIMENSIONLESS),
        ("-5 V", -5.0, VOLT),
        ("+5 V", 5.0, VOLT),
        (".5 A", 0.5, AMPERE),
        ("5. A", 5.0, AMPERE),
        ("2E3", 2000.0, DIMENSIONLESS),  # bare number: turns, coupling, ideality
        ("0.9", 0.9, DIMENSIONLESS),
        ("  1.5 cm^2  ", 1.5 * 0.01**2, AREA),
        ("50 mN*m", 50e-3, TORQUE),
        ("1e-4 kg*m^2", 1e-4, INERTIA),
        ("2.891766 A^2*s", 2.891766, ACTION_INTEGRAL),
    ],
)
def test_parse_quantity(text: str, value: float, dim: Dimension) -> None:
    got = parse_quantity(text)
    assert got.value == pytest.approx(value, rel=REL)
    assert got.dim == dim


def test_parse_quantity_converts_decimal_text_exactly() -> None:
    # The value is built from the decimal digits, so "4.7 uF" is the float
    # nearest to 4.7e-6 rather than 4.7 * 1e-6 with two roundings.
    assert parse_quantity("4.7 uF").value == float("4.7e-6")
    assert parse_quantity("0.1 mH").value == float("1e-4")


def test_quantity_arithmetic() -> None:
    v, i = q("10 V"), q("2 A")
    assert v / i == Quantity(5.0, OHM)
    assert v * i == Quantity(20.0, WATT)
    assert v + q("500 mV") == Quantity(10.5, VOLT)
    assert v - q("500 mV") == Quantity(9.5, VOLT)
    assert -v == Quantity(-10.0, VOLT)
    assert 2 * v == v * 2 == Quantity(20.0, VOLT)
    assert 1 / q("1 kohm") == Quantity(1e-3, SIEMENS)
    assert (i**2 * q("3 s")).dim == ACTION_INTEGRAL
    assert q("4 m^2") ** 0.5 == Quantity(2.0, METRE)
    assert q("4 m^2") ** q("0.5") == Quantity(2.0, METRE)
    assert q("2") ** 3 == Quantity(8.0)
    assert q("40 %") + 1 == Quantity(1.4)
    assert float(q("40 %")) == pytest.approx(0.4, rel=REL)
    assert q("1 mA") < q("2 mA") <= q("2 mA") and q("3 A") > q("2 A") >= q("2 A")


@pytest.mark.parametrize(
    "operation",
    [
        lambda a, b: a + b,
        lambda a, b: a - b,
        lambda a, b: a < b,
        lambda a, b: a <= b,
        lambda a, b: a > b,
        lambda a, b: a >= b,
    ],
    ids=["add", "sub", "lt", "le", "gt", "ge"],
)
def test_mixing_dimensions_is_an_error(operation) -> None:
    with pytest.raises(DimensionError) as info:
        operation(q("5 V"), q("2 A"))
    assert "volts (V)" in str(info.value) and "amperes (A)" in str(info.value)


def test_dimension_errors_on_plain_numbers_and_exponents() -> None:
    with pytest.raises(DimensionError, match=r"volts \(V\)"):
        float(q("5 V"))
    with pytest.raises(DimensionError, match=r"farads \(F\)"):
        q("1 uF") + 1
    with pytest.raises(DimensionError, match="exponent"):
        q("2 V") ** q("1 s")


def test_quantity_repr_and_str() -> None:
    assert repr(q("4.7 uF")) == "Quantity(4.7e-06 F)"
    assert repr(q("0.5")) == "Quantity(0.5)"
    assert str(q("4.7 uF")) == "4.7 uF"


# ---------------------------------------------------------------- unit errors


@pytest.mark.parametrize(
    "parse, text, bad, offset",
    [
        (parse_unit, "Vv", "Vv", 0),
        (parse_unit, "V*Vv", "Vv", 2),
        (parse_unit, "N*m/Ax", "Ax", 4),
        (parse_quantity, "5 Vv", "Vv", 2),
        (parse_quantity, "4.7uX", "uX", 3),
        (parse_unit, "cF", "cF", 0),  # c only before m
        (parse_unit, "krpm", "krpm", 0),  # no prefixes on rpm, %, deg, kg
        (parse_unit, "kkg", "kkg", 0),
    ],
)
def test_unknown_unit_message_and_offset(parse, text: str, bad: str, offset: int) -> None:
    with pytest.raises(UnitError) as info:
        parse(text)
    assert f"unknown unit {bad!r} in {text!r}" in str(info.value)
    assert info.value.offset == offset
    assert text[info.value.offset :].startswith(bad)


@pytest.mark.parametrize(
    "text, hint",
    [
        ("Ohm", "did you mean 'ohm'?"),
        ("ohms", "did you mean 'ohm'?"),
        ("KV", "'kV'"),
        ("MOHM", "'mohm' or 'Mohm'"),  # both exist; the case decides
        ("Nm", "'N*m'"),
        ("Vs", "did you mean 'V*s'?"),
        ("Vv", "did you mean 'V'?"),
    ],
)
def test_unknown_unit_suggestions(text: str, hint: str) -> None:
    with pytest.raises(UnitError, match="did you mean") as info:
        parse_unit(text)
    assert hint in str(info.value)


@pytest.mark.parametrize(
    "parse, text, offset",
    [
        (parse_unit, "V/", 2),
        (parse_unit, "*V", 0),
        (parse_unit, "V**2", 2),
        (parse_unit, "m^x", 2),
        (parse_unit, "m2", 1),  # exponent without '^'
        (parse_unit, "1", 0),  # "1" only as a numerator, "1/s"
        (parse_quantity, "uF", 0),  # no number
        (parse_quantity, "", 0),
        (parse_quantity, "5 1", 2),
        (parse_quantity, "5 V A", 4),
    ],
)
def test_malformed_units(parse, text: str, offset: int) -> None:
    with pytest.raises(UnitError) as info:
        parse(text)
    assert info.value.offset == offset
    assert repr(text) in str(info.value)


# ---------------------------------------------------------------- formatting


@pytest.mark.parametrize(
    "args, text",
    [
        ((0.0047, "H"), "4.7 mH"),
        ((1.5e6, "ohm"), "1.5 Mohm"),
        ((0.0, "V"), "0 V"),
        ((-2.5e-9, "s"), "-2.5 ns"),
        ((1e-15, "F"), "1 fF"),
        ((2e12, "ohm"), "2 Tohm"),
        ((123456.0, "V"), "123.5 kV"),  # 4 significant digits by default
        ((999.96, "V"), "1 kV"),  # rounding carries into the next prefix
        ((100.0, "V"), "100 V"),
        ((math.pi, "V", 3), "3.14 V"),
        ((math.nan, "V"), "nan V"),
        ((-math.inf, "A"), "-inf A"),
        ((1e-16, "V"), "100 aV"),  # atto: times of a failed first step read "532.5 as", not "532.5e-18 s"
        ((1e-19, "V"), "100e-21 V"),  # below atto: exponent form
        ((2e15, "W"), "2e15 W"),  # above tera
        ((0.0047, ""), "4.7e-3"),  # no unit: a lone prefix would read as metres
        ((2e-3, "m^2"), "2e-3 m^2"),  # "2 mm^2" would mean (mm)^2
        ((5000.0, "g"), "5 kg"),
        ((0.05, "N*m"), "50 mN*m"),
    ],
)
def test_format_si(args: tuple, text: str) -> None:
    assert format_si(*args) == text


def test_format_si_rejects_zero_digits() -> None:
    with pytest.raises(ValueError):
        format_si(1.0, "V", digits=0)


ROUND_TRIP_VALUES = [
    sign * mantissa * 10.0**exponent
    for sign in (1, -1)
    for mantissa in (1.0, 1.23456789, 4.7, 9.99951, 3.3333333)
    for exponent in range(-17, 17, 2)
]


@pytest.mark.parametrize("digits", [1, 3, 4, 6])
@pytest.mark.parametrize("unit", ["V", "ohm", "m^2", "N*m", ""])
def test_format_si_round_trips(unit: str, digits: int) -> None:
    # Rounding to `digits` significant digits moves a value by at most half a
    # unit in the last digit: relative error <= 0.5 * 10**(1 - digits)
    # (the leading digit is >= 1). The 1e-12 covers float rounding.
    tolerance = 0.5 * 10.0 ** (1 - digits) + 1e-12
    expected_dim = parse_unit(unit)[1]
    for value in ROUND_TRIP_VALUES:
        back = parse_quantity(format_si(value, unit, digits))
        assert back.dim == expected_dim
        assert back.value == pytest.approx(value, rel=tolerance), format_si(value, unit, digits)
