"""Elaboration: kinds, terminals, arguments, units, parameters, names — and their errors."""

import math

import pytest

import mna
from mna.errors import InputError, UnitsError, UnknownNameError


def error_of(text):
    with pytest.raises(InputError) as info:
        mna.parse(text, file="c.mna")
    return info.value


def test_values_arrive_in_si_units():
    c = mna.parse(
        "let Lcoil = 10 mH\n"
        "inductor L1 a -> gnd Lcoil resistance=38 ohm initial=0.5 A\n"
        "capacitor C1 a -> gnd 4.7 uF\n"
        "resistor R1 a -> gnd 2.2 kΩ\n"
    )
    L1 = c.elements["L1"].params
    assert L1 == {"inductance": pytest.approx(0.01), "resistance": 38.0, "initial": 0.5}
    assert c.elements["C1"].params["capacitance"] == pytest.approx(4.7e-6)
    assert c.elements["R1"].params["resistance"] == pytest.approx(2200.0)


def test_parameter_expressions_carry_units():
    # Resonance f = 1/(2*pi*sqrt(L*C)): standard LC result.
    c = mna.parse(
        "let L = 10 mH\nlet C = 47 nF\n"
        "let f_ring = 1 / (2*pi*sqrt(L * C))\n"
        "let Z0 = sqrt(L / C)\n"
        "resistor Rd a -> gnd Z0\n"
    )
    assert c.params["f_ring"].value == pytest.approx(1 / (2 * math.pi * math.sqrt(10e-3 * 47e-9)))
    assert c.params["f_ring"].dim == mna.units.HERTZ
    assert c.elements["Rd"].params["resistance"] == pytest.approx(math.sqrt(10e-3 / 47e-9))


def test_compound_main_value_in_parentheses():
    c = mna.parse("let R = 50 ohm\nresistor R2 a -> gnd (2 * R)\n")
    assert c.elements["R2"].params["resistance"] == pytest.approx(100.0)


def test_wrong_unit_names_argument_expected_unit_and_column():
    err = error_of("resistor R1 a -> gnd 1 ohm\ncapacitor C1 a -> gnd 4.7 uH\n")
    assert isinstance(err, UnitsError)
    assert (err.line, err.column) == (2, 23)
    assert "capacitance" in err.message and "farads (F)" in err.message and "uH" in err.message


def test_missing_unit_is_an_error():
    err = error_of("inductor L1 a -> gnd 10\n")
    assert isinstance(err, UnitsError)
    assert "henries (H)" in err.message and "plain number" in err.message


def test_wrong_unit_on_a_keyword_argument():
    err = error_of("inductor L1 a -> gnd 10 mH resistance=3 A\n")
    assert (err.line, err.column) == (1, 39) and "ohms" in err.message


def test_unknown_kind_suggests_a_close_one():
    err = error_of("resistor R1 a -> gnd 1 ohm\nresistr R2 a -> gnd 1 ohm\n")
    assert isinstance(err, UnknownNameError)
    assert (err.line, err.column) == (2, 1)
    assert "resistr" in err.message and "resistor" in err.hint


def test_duplicate_element_name_points_at_both():
    err = error_of("resistor R1 a -> gnd 1 ohm\nresistor R1 a -> b 2 ohm\n")
    assert (err.line, err.column) == (2, 10)
    assert "duplicate element name 'R1'" in err.message and "c.mna:1:10" in err.message


def test_unknown_node_in_record():
    err = error_of("resistor R1 a -> gnd 1 ohm\nrecord v(a), v(b)\n")
    assert isinstance(err, UnknownNameError)
    assert (err.line, err.column) == (2, 16)  # at the node name
    assert "'b'" in err.message


def test_unknown_element_in_record():
    err = error_of("resistor R1 a -> gnd 1 ohm\nrecord i(R9)\n")
    assert (err.line, err.column) == (2, 10) and "R9" in err.message


def test_quantity_the_element_does_not_offer():
    err = error_of("resistor R1 a -> gnd 1 ohm\nrecord torque(R1)\n")
    assert "resistor R1 has no quantity torque()" in err.message


def test_unknown_argument_suggests():
    err = error_of("inductor L1 a -> gnd 1 mH resistence=1 ohm\n")
    assert "resistance=" in err.hint and (err.line, err.column) == (1, 27)


def test_missing_required_value():
    err = error_of("resistor R1 a -> gnd\n")
    assert "needs its resistance" in err.message


def test_negative_resistance_rejected():
    err = error_of("resistor R1 a -> gnd -5 ohm\n")
    assert "must be positive" in err.message


def test_unknown_parameter_in_expression():
    err = error_of("let a = 1 V\nlet b = a + c\n")
    assert isinstance(err, UnknownNameError) and (err.line, err.column) == (2, 13)


def test_adding_volts_to_amperes_in_a_parameter():
    err = error_of("let a = 1 V + 2 A\n")
    assert isinstance(err, UnitsError) and err.line == 1


def test_waveform_argument_units_and_names():
    err = error_of("voltage-source V1 a -> gnd step(from=0 V, to=24 A)\n")
    assert "volts" in err.message
    err = error_of("voltage-source V1 a -> gnd step(from=0 V, too=24 V)\n")
    assert "has no argument 'too'" in err.message
    err = error_of("voltage-source V1 a -> gnd pwm(high=5 V, frequency=1 kHz, duty=140 %)\n")
    assert "duty" in err.message


def test_simulate_settings_are_checked():
    err = error_of("resistor R1 a -> gnd 1 ohm\nsimulate transient step=1 us\n")
    assert "needs until=" in err.message
    err = error_of("resistor R1 a -> gnd 1 ohm\nsimulate transient until=1 V\n")
    assert "seconds" in err.message
    err = error_of("resistor R1 a -> gnd 1 ohm\nsimulate transient until=1 ms method=euler\n")
    assert "backward-euler" in err.message
    err = error_of("resistor R1 a -> gnd 1 ohm\nsimulate transiant until=1 ms\n")
    assert "did you mean 'transient'" in err.hint


def test_netlist_text_cannot_run_code():
    # Expressions are walked by mna's own evaluator; Python names are just unknown.
    err = error_of('let x = __import__("os")\n')
    assert isinstance(err, InputError)
    err = error_of("let x = exec(1)\n")
    assert "not a function" in err.message


def test_python_api_builds_the_same_circuit():
    c = mna.Circuit("rl")
    c.add("voltage-source", "V1", "in", "gnd", "10 V")
    c.add("resistor", "R1", "in", "x", "5 ohm")
    c.add("inductor", "L1", "x", "gnd", 10e-3, resistance="1 ohm")
    assert c.elements["L1"].params["resistance"] == 1.0
    with pytest.raises(UnitsError):
        c.add("capacitor", "C1", "x", "gnd", "1 mH")
    op = c.dc()
    # DC: the inductor is a short with its 1 ohm winding: I = 10 V / 6 ohm (Ohm's law).
    assert op["i(L1)"] == pytest.approx(10 / 6)


def test_values_far_outside_what_parts_are_made_with_are_warned():
    # Common practice (catalogue ranges): a 10 MH inductor is a slip for 10 mH;
    # a 1 kF capacitor is far above any part; 10 F (a supercapacitor) is not.
    c = mna.parse("voltage-source V1 a -> gnd 1 V\ninductor L1 a -> b 10 MH\nresistor R1 b -> gnd 1 ohm\n"
                  "capacitor C1 a -> gnd 1 kF\ncapacitor C2 a -> gnd 10 F\n")
    assert any("line 2" in w and "10 MH" in w and "did you mean 10 mH?" in w for w in c.warnings)
    assert any("line 4" in w and "1 kF" in w and "check its prefix" in w for w in c.warnings)
    assert not any("C2" in w for w in c.warnings)


def test_a_prefix_without_its_unit_is_explained():
    with pytest.raises(mna.InputError, match="a prefix needs its unit: 1 kohm"):
        mna.parse("resistor R1 a -> gnd 1k\n")
    with pytest.raises(mna.InputError, match="'meg' is not a prefix; mega is M.*1 Mohm"):
        mna.parse("resistor R1 a -> gnd 1 meg\n")
    with pytest.raises(mna.InputError, match="4.7 uF"):
        mna.parse("capacitor C1 a -> gnd 4.7u\n")


def test_duty_given_as_a_plain_number_points_at_the_number():
    with pytest.raises(mna.InputError) as info:
        mna.parse("voltage-source V1 a -> gnd pwm(high=5 V, frequency=1 kHz, duty=60)\n")
    assert info.value.span.column == 64 and "write duty=60 %" in str(info.value)
    with pytest.raises(mna.InputError) as info:
        mna.parse("switch Q1 a -> gnd gate=pwm(frequency=1 kHz, duty=60)\n")
    assert info.value.span.column == 51 and "write duty=60 %" in str(info.value)


def test_hertz_for_a_speed_is_caught_through_a_parameter():
    # A let parameter in Hz used as a shaft speed: the hertz literal is found
    # through the parameter's definition, and the error points at the use.
    text = "let f = 50 Hz\nspeed-source S1 rotor speed=2 * f\ninertia J1 rotor 1 kg*m^2\n"
    with pytest.raises(UnitsError, match=r"angular speed.*f = 50 Hz \(line 1\)") as info:
        mna.parse(text)
    assert info.value.span.line == 2


def test_a_node_touched_by_one_terminal_is_reported_with_its_place():
    text = "voltage-source V1 out -> gnd 1 V\nresistor R1 out -> gnd 1 ohm\nresistor R2 outt -> gnd 1 ohm\n"
    (warning,) = [w for w in mna.parse(text).warnings if "one terminal" in w]
    assert warning.startswith("line 3, column 13: node 'outt'") and "did you mean 'out'?" in warning
    assert "unconnected outt" in warning
    # Marked as meant: no warning. A gate's sensed node counts as connected.
    quiet = mna.parse(text.replace("outt -> gnd", "out -> tp") + "unconnected tp\n")
    assert not any("one terminal" in w for w in quiet.warnings)
    gate = mna.parse("voltage-source Vg g -> gnd 5 V\nvoltage-source V1 a -> gnd 1 V\n"
                     "switch Q1 a -> gnd gate=v(g) > 2 V\n")
    assert not any("one terminal" in w for w in gate.warnings)
    with pytest.raises(UnknownNameError, match="unconnected names no node 'tq'"):
        mna.parse(text + "unconnected tq\n")
