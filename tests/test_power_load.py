"""The constant-power load (a regulated converter's input) against its definition.

Middlebrook, "Input filter considerations in design and application of
switching regulators", IEEE IAS 1976: a converter that regulates its
output draws constant power, i = P/v, so its incremental input resistance
is dv/di = -v^2/P. Below minimum-voltage= the load is the resistor
Vmin^2/P (grammar/README.md).
"""

import textwrap

import numpy as np
import pytest

import mna
from mna.errors import InputError


def parse(text):
    return mna.parse(textwrap.dedent(text))


BENCH = """
voltage-source Vb v -> gnd {v} V
resistor Rs v -> x 10 mohm
constant-power P1 x -> gnd 150 W minimum-voltage=36 V
"""


def test_draws_power_over_voltage_at_its_operating_point():
    op = parse(BENCH.format(v=48)).dc()
    v = op["v(x)"]
    # 48 V = v + 0.01 ohm * 150 W / v: the upper root of v^2 - 48 v + 1.5 = 0.
    assert v == pytest.approx((48 + np.sqrt(48**2 - 4 * 1.5)) / 2, rel=1e-9)
    assert op["i(P1)"] == pytest.approx(150 / v, rel=1e-9)
    assert op["i(P1)"] * v == pytest.approx(150, rel=1e-9)


def test_is_a_resistor_below_its_minimum_voltage():
    op = parse(BENCH.format(v=24)).dc()
    r = 36**2 / 150  # Vmin^2/P
    assert op["i(P1)"] == pytest.approx(24 / (r + 0.01), rel=1e-9)


def test_incremental_input_resistance_is_minus_v_squared_over_p():
    c = parse("""
    voltage-source Vb v -> gnd 48 V
    inductor Ltee v -> x 1000 H
    constant-power P1 x -> gnd 150 W minimum-voltage=36 V
    """)
    res = c.frequency(at=[1e3, 1e4, 1e5], record=["z(x -> gnd)"])
    z_load = -(48**2) / 150
    w = 2 * np.pi * res.frequency
    z = z_load * (1j * w * 1000) / (z_load + 1j * w * 1000)  # in parallel with the bias choke
    np.testing.assert_allclose(res["z(x -> gnd)"], z, rtol=1e-9)
    assert res["z(x -> gnd)"][0].real == pytest.approx(-15.36, rel=1e-6)


def test_a_power_step_in_a_transient_run():
    c = parse("""
    voltage-source Vb v -> gnd 48 V
    resistor Rs v -> x 0.1 ohm
    capacitor C1 x -> gnd 100 uF
    constant-power P1 x -> gnd step(from=100 W, to=150 W, at=1 ms) minimum-voltage=36 V
    """)
    res = c.transient(until="3 ms", record=["v(x)", "p(P1)"])
    # Settled before and after the step (tau = Rs*C = 10 us): p is the power asked for.
    assert res.at("p(P1)", 0.9e-3) == pytest.approx(100, rel=1e-4)
    assert res["p(P1)"][-1] == pytest.approx(150, rel=1e-4)


def test_negative_power_is_an_input_error():
    with pytest.raises(InputError, match="must not be negative"):
        parse("voltage-source Vb x -> gnd 48 V\nconstant-power P1 x -> gnd -5 W minimum-voltage=36 V\n")
