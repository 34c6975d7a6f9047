"""Defects found by fuzzing: each input below once crashed, hung or gave NaN with success.

Every one must now end in an :class:`~mna.errors.MnaError` that names the
line and column (or in a correct result), quickly.
"""

import pytest

import mna
from mna.errors import InputError, NetlistSyntaxError, UnitsError

RL = """\
voltage-source V1 in -> gnd 10 V
{resistor}
inductor L1 x -> gnd 1 mH
simulate transient until=1 ms
"""

MOTOR = """\
voltage-source V1 sup -> gnd 24 V
dc-machine M1 sup -> gnd shaft=motor resistance=0.6 ohm inductance=1.5 mH constant={k}
inertia Jm motor 1.5e-4 kg*m^2
gear G1 motor -> drum {ratio}
friction Bd drum -> frame 0.02 N*m*s/rad
simulate dc
"""

DIODE = """\
voltage-source V1 a -> gnd sine(amplitude=10 V, frequency=50 Hz)
diode D1 a -> b {args}
resistor R1 b -> gnd 1 kohm
simulate transient until=20 ms
"""

PWM = """\
voltage-source V1 a -> gnd pwm(high=10 V, frequency={f}, duty=50 %{more})
resistor R1 a -> b 1 ohm
inductor L1 b -> gnd 1 mH
simulate transient until=1 ms
"""


def error_of(text):
    with pytest.raises(mna.MnaError) as info:
        mna.parse(text, "fuzz.mna").run()
    return info.value


def where(err):
    return err.line, err.column


# -- 1. inf and NaN are not values ------------------------------------------------


@pytest.mark.parametrize("text, line, column", [
    ("let x = 1e999\n", 1, 9),
    ("let x = 1e999 - 1e999\n", 1, 9),
    ("let x = 1e200 * 1e200\n", 1, 9),  # finite operands, infinite product
    (DIODE.format(args="resistance=(1e999 ohm - 1e999 ohm)"), 2, 29),
    (DIODE.format(args="resistance=(1e300 ohm * 1e300)"), 2, 29),
    (PWM.format(f="1e999 Hz", more=""), 1, 53),
    (PWM.format(f="1 kHz", more=", delay=(1e200 s * 1e200 - 1e200 s * 1e200)"), 1, 78),
])
def test_infinite_and_undefined_values_are_input_errors_where_they_are_written(text, line, column):
    err = error_of(text)
    assert isinstance(err, InputError)
    assert where(err) == (line, column)


def test_a_switch_hysteresis_and_a_fan_coefficient_must_be_finite():
    switch = ("voltage-source V1 a -> gnd 10 V\nresistor R1 a -> b 1 ohm\n"
              "switch S1 b -> gnd gate=v(a) > 5 V hysteresis=(1e300 V * 1e300)\nsimulate dc\n")
    assert where(error_of(switch)) == (3, 48)
    load = ("speed-source W1 motor 100 rad/s\nload T1 motor fan=(1e300 N*m*s^2 * 1e300)\nsimulate dc\n")
    assert where(error_of(load)) == (2, 20)


# -- 2. a subnormal value no longer puts inf into the matrix ---------------------


def test_a_subnormal_resistance_is_an_input_error_at_once():
    # (it put inf into the matrix, and the diagnosis of the singular matrix hung in an SVD)
    err = error_of(RL.format(resistor="resistor R1 in -> x 1e-320 ohm"))
    assert isinstance(err, UnitsError) and where(err) == (2, 21)
    assert "out of range" in err.message


def test_the_singular_matrix_diagnosis_names_an_infinite_entry_instead_of_calling_svd():
    import numpy as np
    import scipy.sparse as sp

    from mna.solver import singular_unknowns

    class Names:
        @staticmethod
        def describe_unknowns(idx):
            return tuple(f"x{i}" for i in idx)

    A = sp.csc_matrix(np.array([[1.0, np.inf], [1.0, 1.0]]))
    names = singular_unknowns(Names, A)
    assert names[0] == "x0" and "infinite or undefined" in names[-1]


# -- 3. and 4. values the models cannot compute with --------------------------------


@pytest.mark.parametrize("k, ratio, column", [
    ("1e-320 V*s/rad", "15", 84),
    ("1e-200 V*s/rad", "15", 84),
    ("0.076 V*s/rad", "1e-320", 23),
    ("0.076 V*s/rad", "1e-170", 23),
])
def test_machine_constants_and_gear_ratios_beyond_the_float_range_are_input_errors(k, ratio, column):
    err = error_of(MOTOR.format(k=k, ratio=ratio))
    assert isinstance(err, InputError) and err.column == column


def test_a_tiny_but_representable_machine_constant_still_gives_the_right_operating_point():
    # k = 1e-60 V*s/rad: the stalled-motor limit. Steady state (any machine
    # text): i = V/R = 40 A, torque k*i turns the drum through the gear
    # (ratio 15) against friction B: w_drum = k*i/(15*B), w_motor = 15*w_drum.
    op = mna.parse(MOTOR.format(k="1e-60 V*s/rad", ratio="15")).dc()
    assert op["i(M1)"] == pytest.approx(40.0, rel=1e-9)
    assert op["w(drum)"] == pytest.approx(1e-60 * 40.0 / (15 * 0.02), rel=1e-6)


def test_a_diode_temperature_outside_the_models_range_is_refused():
    err = error_of(DIODE.format(args="temperature=1e-300 K"))
    assert isinstance(err, InputError) and where(err) == (2, 29)
    err = error_of(DIODE.format(args="temperature=2 K"))
    assert "between 10 K and 1000 K" in err.message and where(err) == (2, 29)


def test_a_nan_result_never_leaves_the_engine_as_a_success():
    from mna.analyses.common import require_finite
    from mna.results import Waveforms

    import numpy as np

    waves = Waveforms(time=np.array([0.0, 1e-3, 2e-3]), signals={"v(a)": np.array([1.0, np.nan, 2.0])},
                      units={"v(a)": "V"})
    with pytest.raises(mna.SimulationError) as info:
        require_finite(waves.signals, "the transient run", waves.time, partial=waves)
    assert info.value.time == 1e-3 and info.value.partial.status == "failed"
    with pytest.raises(mna.SimulationError):
        require_finite({"v(a)": float("inf")}, "the DC operating point")


# -- 5. the parser -------------------------------------------------------------------


@pytest.mark.parametrize("text, error, column", [
    ("let x = " + "-" * 493 + "1\n", NetlistSyntaxError, None),
    ("let x = 1" + " + 1" * 493 + "\n", NetlistSyntaxError, None),
    ("let x = 1e1000000\n", UnitsError, 9),
    ("let x = 1 km^999999999\n", UnitsError, 14),
    ("let x = 1 deg^-1000\n", UnitsError, 15),
    ("let x = 1 m^" + "9" * 5000 + "\n", UnitsError, 13),
    ("let x = (1 m)^1e300\n", UnitsError, 15),
    ("let x = -pi\nlet y = x ^ pi\n", InputError, None),  # (a complex number reached Quantity)
])
def test_parser_extremes_are_input_errors(text, error, column):
    err = error_of(text)
    assert isinstance(err, error) and err.line == text.count("\n")
    if column is not None:
        assert err.column == column
    assert len(str(err)) < 1000  # the message quotes a window of the line, not all of it


def test_deep_but_reasonable_expressions_still_evaluate():
    circuit = mna.parse("let x = " + "-" * 80 + "1\nlet y = 1" + " + 1" * 80 + "\n"
                        "let z = " + "(" * 400 + "2" + ")" * 400 + "\n")  # (parentheses add no depth)
    assert circuit.params["x"].value == 1.0 and circuit.params["y"].value == 81.0
    assert circuit.params["z"].value == 2.0


# -- 6. element validation ---------------------------------------------------------------


@pytest.mark.parametrize("line, column", [
    ("choke L2 a -> gnd 22 uH saturation-current=4.5 A saturated-inductance=4 uH saturation-drop=1e-17", 7),
    ("transformer T1 a -> gnd, s1 -> gnd ratio=1e-170 magnetising=200 uH leakage=5 uH", 42),
    ("transformer T1 a -> gnd, s1 -> gnd ratio=1e300 magnetising=200 uH leakage=5 uH", 42),
])
def test_element_arguments_that_overflow_their_formulas_are_input_errors(line, column):
    text = f"voltage-source V1 a -> gnd 1 V\n{line}\nresistor R s1 -> gnd 1 ohm\nsimulate dc\n"
    err = error_of(text)
    assert isinstance(err, InputError) and where(err) == (2, column)


def test_a_fan_speed_beyond_the_float_range_is_an_input_error():
    text = ("speed-source W1 motor 100 rad/s\nload T1 motor fan-torque=1 N*m fan-speed=1e-170 rad/s\n"
            "simulate dc\n")
    assert where(error_of(text)) == (2, 42)


# -- 8. a long unknown unit ------------------------------------------------------------------


def test_a_very_long_unknown_unit_is_rejected_with_a_short_message():
    # (the suggestion search sliced the token at every position: 42 s for this one)
    err = error_of("let x = 1 " + "q" * 400_000 + "\n")
    assert isinstance(err, UnitsError) and where(err) == (1, 11)
    assert "400000 characters" in err.message and len(str(err)) < 1000


# -- 13. control characters ---------------------------------------------------------------------


def test_error_messages_escape_control_characters_of_the_source_line():
    err = error_of('circuit demo "\x1b]0;pwned\x07\x1b[2J"\nresistr R1 a -> gnd 1 ohm\n')
    text = str(err)
    assert "\x1b" not in text
    err = error_of('resistor R1 a -> gnd 1 ohm # \x1b[2J\nresistr R2 a -> gnd 1 ohm\n')
    assert "\x1b" not in str(err) and where(err) == (2, 1)
    err = error_of('let x = 1 V \x1b[2J\n')
    assert "\x1b" not in str(err) and "\\x1b" in str(err)
