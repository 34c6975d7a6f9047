"""The thermal domain: thermal resistance and capacity, Foster and Cauer ladders, temperature units.

References:
- Thermal-electrical analogy and the Foster/Cauer networks of a power
  device's transient thermal impedance: Lutz, Schlangenotto, Scheuermann
  and De Doncker, "Semiconductor Power Devices", Springer 2011, ch. 13
  (from memory). The Foster step response is
  Zth(t) = sum r_i (1 - exp(-t/tau_i)).
- Cauer synthesis of an RC impedance by continued fraction at s = infinity
  (Cauer's first form): E. A. Guillemin, "Synthesis of Passive Networks",
  Wiley 1957, ch. 3 (from memory). Done here with numpy polynomials.
- The Celsius scale: T/K = t/°C + 273.15 (SI Brochure, 9th ed., 2019, §2.3.1).
"""

from __future__ import annotations

import numpy as np
import pytest

import mna
from mna.errors import InputError, UnitsError
from mna.units import parse_quantity

R = np.array([0.1, 0.3, 0.6])  # K/W, invented example values
TAU = np.array([1e-3, 1e-2, 1e-1])  # s


def foster_step(t, p, r=R, tau=TAU):
    return p * (r * (1.0 - np.exp(-np.asarray(t)[:, None] / tau))).sum(axis=1)


def stages(first, second, u1, u2):
    return "stages(" + ", ".join(f"{float(a)!r} {u1}: {float(b)!r} {u2}" for a, b in zip(first, second)) + ")"


def test_foster_step_response_matches_the_datasheet_sum():
    # A 10 W step of loss into the junction, ambient at 40 °C: the rise is
    # 10 W * Zth(t) (Lutz et al. ch. 13). tolerance=1e-6 per step: the
    # accumulated error stays well under 1e-3 of the 10 K final rise; a wrong
    # C_i = tau_i / R_i (a factor of two in tau) would be off by ~1 K.
    text = ("ambient-temperature TA 40 °C\n"
            "heat-source P1 j step(from=0 W, to=10 W, at=0 s)\n"
            f"foster Z1 j -> ambient {stages(R, TAU, 'K/W', 's')}\n")
    w = mna.parse(text).transient(until=0.4, start="rest", tolerance=1e-6, record=["T(j)", "heat(Z1)"])
    expected = 313.15 + foster_step(w.time, 10.0)
    assert np.max(np.abs(w["T(j)"] - expected)) < 1e-2
    assert w["T(j)"][-1] == pytest.approx(313.15 + 10.0 * (R * (1 - np.exp(-0.4 / TAU))).sum(), abs=1e-2)
    # all the heat enters the ladder
    np.testing.assert_allclose(w["heat(Z1)"][2:], 10.0, rtol=1e-6)


def cauer_from_foster(r, tau):
    """Cauer I ladder (C_1 to ground, R_1 in series, ...) with the same Z(s) as the Foster cells.

    Z(s) = sum r_i / (1 + s tau_i) = N/D; Y = D/N is expanded as a
    continued fraction at s = infinity: Y = s C_1 + 1/(R_1 + 1/(s C_2 + ...))
    (Guillemin ch. 3).
    """
    P = np.polynomial.Polynomial
    num, den = P([0.0]), P([1.0])
    for ri, ti in zip(r, tau):
        cell = P([1.0, ti])
        num, den = num * cell + den * ri, den * cell
    n = len(r)
    a, b = den.coef[:n + 1], num.coef[:n]  # Y = a/b, ascending coefficients, degrees n and n - 1
    rs, cs = [], []
    for k in range(n):
        deg_a = n - k  # a has degree n - k, b degree n - k - 1
        c = a[deg_a] / b[deg_a - 1]  # Y ~ s*c at infinity
        a = (a - c * np.concatenate([[0.0], b]))[:deg_a]  # Y - s*c: degree n - k - 1
        rr = b[deg_a - 1] / a[deg_a - 1]  # impedance b/a ~ R at infinity
        b = (b - rr * a)[:deg_a - 1]  # b/a - R: degree n - k - 2
        cs.append(c)
        rs.append(rr)
    return np.array(rs), np.array(cs)


def test_cauer_synthesis_matches_the_foster_sum():
    # The synthesis itself: the ladder's total resistance is Zth(inf) = sum r_i.
    rs, cs = cauer_from_foster(R, TAU)
    assert rs.sum() == pytest.approx(R.sum(), rel=1e-9)
    assert np.all(rs > 0) and np.all(cs > 0)


def test_cauer_ladder_step_response_equals_the_equivalent_foster_network():
    # Same Z(s) => same step response (Guillemin ch. 3): the Cauer ladder
    # synthesised from the Foster table must follow sum r_i (1 - exp(-t/tau_i)).
    # A Cauer C_i tied to the wrong node would change Z(s) and miss by kelvins.
    rs, cs = cauer_from_foster(R, TAU)
    text = ("heat-source P1 j step(from=0 W, to=10 W, at=0 s)\n"
            f"cauer Z1 j -> ambient {stages(rs, cs, 'K/W', 'J/K')}\n")
    w = mna.parse(text).transient(until=0.4, start="rest", tolerance=1e-6, record=["T(j)", "heat(Z1)"])
    expected = 298.15 + foster_step(w.time, 10.0)  # default ambient 25 °C
    assert np.max(np.abs(w["T(j)"] - expected)) < 1e-2
    np.testing.assert_allclose(w["heat(Z1)"][2:], 10.0, rtol=1e-6)


def test_junction_case_heatsink_chain_at_steady_state():
    # Series thermal resistances: T_j = T_hs + P (R_jc + R_cs) at steady
    # state (the DC operating point); the heatsink is held at 60 °C.
    text = ("heat-source P1 j 25 W\n"
            "thermal-resistance Rjc j -> c 0.5 K/W\n"
            "thermal-capacitance Cj j -> ambient 0.2 J/K\n"
            "thermal-resistance Rcs c -> hs 0.3 °C/W\n"
            "temperature-source TH hs 60 °C\n")
    c = mna.parse(text)
    c.record("T(j)", "T(c)", "heat(TH)")
    op = c.dc()
    assert op["T(j)"] == pytest.approx(273.15 + 60 + 25 * 0.8, abs=1e-6)
    assert op["T(c)"] == pytest.approx(273.15 + 60 + 25 * 0.3, abs=1e-6)
    assert op["heat(TH)"] == pytest.approx(25.0, rel=1e-9)


def test_thermal_capacitance_charges_with_time_constant_rc():
    # P into R || C from rest: rise P R (1 - exp(-t/RC)) (first-order RC).
    text = ("heat-source P1 j step(from=0 W, to=4 W)\n"
            "thermal-resistance R1 j -> ambient 2 K/W\n"
            "thermal-capacitance C1 j -> ambient 0.05 J/K\n")
    w = mna.parse(text).transient(until=0.5, start="rest", tolerance=1e-6, record=["T(j)", "heat(C1)"])
    expected = 298.15 + 8.0 * (1 - np.exp(-w.time / 0.1))
    assert np.max(np.abs(w["T(j)"] - expected)) < 5e-3
    np.testing.assert_allclose(w["heat(C1)"][2:], 4.0 * np.exp(-w.time[2:] / 0.1), atol=5e-3)


# --------------------------------------------------------------------------
# Units: K and °C.


def test_celsius_literal_is_an_absolute_temperature():
    # SI Brochure §2.3.1: T/K = t/°C + 273.15
    assert parse_quantity("25 °C").value == pytest.approx(298.15, abs=1e-12)
    assert parse_quantity("-40 degC").value == pytest.approx(233.15, abs=1e-12)
    # inside a compound unit a degree Celsius is a difference, the size of a kelvin
    assert parse_quantity("0.5 °C/W").value == pytest.approx(0.5)
    # absolute - absolute is a difference; absolute + difference is absolute
    assert (parse_quantity("80 °C") - parse_quantity("25 °C")).value == pytest.approx(55.0)
    assert (parse_quantity("80 °C") + parse_quantity("5 K")).value == pytest.approx(358.15)


def test_celsius_cannot_be_scaled():
    from mna.units import DimensionError

    with pytest.raises(DimensionError, match="absolute temperature"):
        parse_quantity("10 °C") * 2


def test_celsius_refused_where_a_difference_is_meant():
    with pytest.raises(UnitsError, match="temperature difference") as exc:
        mna.parse("thermal-capacitance C1 j -> ambient 1 J/K initial=10 °C\n"
                  "thermal-resistance R1 j -> ambient 1 K/W\n")
    assert exc.value.span.line == 1


def test_ambient_in_celsius_from_a_let_parameter():
    text = ("let Ta = 50 °C\nambient-temperature TA Ta\n"
            "heat-source P1 j 2 W\nthermal-resistance R1 j -> ambient 1.5 K/W\n")
    assert mna.parse(text).dc()["T(j)"] == pytest.approx(323.15 + 3.0, abs=1e-9)


def test_check_line_compares_a_temperature_in_celsius():
    # 2 W * 1.5 K/W above 25 °C: 28 °C
    from mna.measure import evaluate_checks

    text = ("heat-source P1 j 2 W\nthermal-resistance R1 j -> ambient 1.5 K/W\n"
            "simulate transient until=1 ms\n"
            "check max(T(j)) < 28.5 °C\ncheck max(T(j)) > 27.5 °C\ncheck max(T(j)) < 27.9 °C\n")
    c = mna.parse(text)
    report = evaluate_checks(c, c.run())
    assert [ch.status for ch in report.checks] == ["pass", "pass", "fail"]


# --------------------------------------------------------------------------
# Errors.


def test_stages_need_pairs_with_the_right_units():
    with pytest.raises(UnitsError, match="tau of stage 2 of foster Z1 needs seconds"):
        mna.parse("heat-source P1 j 1 W\nfoster Z1 j -> ambient stages(0.1 K/W: 1 ms, 0.2 K/W: 3 J/K)\n").dc()
    with pytest.raises(InputError, match=r"stages\(R1: X1"):
        mna.parse("heat-source P1 j 1 W\nfoster Z1 j -> ambient 0.1 K/W\n")


def test_two_ambients_are_refused():
    with pytest.raises(InputError, match="already set"):
        mna.parse("ambient-temperature A1 20 °C\nambient-temperature A2 30 °C\n"
                  "heat-source P1 j 1 W\nthermal-resistance R1 j -> ambient 1 K/W\n").dc()


def test_a_thermal_node_without_a_path_is_a_topology_error():
    from mna.errors import TopologyError

    with pytest.raises(TopologyError, match="no path for its heat"):
        mna.parse("heat-source P1 j 1 W\nheat-source P2 j 2 W\n"
                  "thermal-resistance R1 k -> ambient 1 K/W\n").dc()


def test_an_electrical_node_cannot_be_a_thermal_node():
    with pytest.raises(InputError, match="thermal node"):
        mna.parse("resistor R1 a -> gnd 1 ohm\nthermal-resistance R2 a -> ambient 1 K/W\n")


def test_a_diode_takes_its_junction_temperature_in_celsius():
    # V = n Vt ln(I/Is + 1), Vt = k T / q at 125 °C = 398.15 K (SI Brochure §2.3.1)
    c = mna.parse("current-source I1 gnd -> a 1 mA\ndiode D1 a -> gnd temperature=125 °C\n")
    vt = 1.380649e-23 * 398.15 / 1.602176634e-19
    assert c.dc()["v(a)"] == pytest.approx(vt * np.log(1e-3 / 1e-14 + 1), rel=1e-6)


def test_a_foster_ladder_ending_on_an_unheld_node_is_warned_about():
    # A Foster network's capacitors sit across its resistors, not to ground,
    # so it passes a heat step through at once (Lutz et al. ch. 13): a case
    # node held by nothing but a thermal resistance jumps. mna says so.
    text = ("heat-source P1 j 1 W\nfoster Z1 j -> case stages(0.1 K/W: 1 ms)\n"
            "thermal-resistance R1 case -> ambient 1 K/W\n")
    c = mna.parse(text)
    c.dc()
    assert any("foster Z1 ends on thermal node 'case'" in w for w in c.warnings)
    held = mna.parse(text + "thermal-capacitance C1 case -> ambient 10 J/K\n")
    held.dc()
    assert not any("foster" in w for w in held.warnings)
