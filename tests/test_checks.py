"""check and measure lines: pass and fail, units, names, windows, the plain-value (dc) form."""

from __future__ import annotations

import math

import pytest

import mna
from mna.errors import InputError, MeasurementError, UnitsError, UnknownNameError
from mna.expressions import evaluate
from mna.measure import run_and_check, signals_used
from mna.netlist import Call, parse_netlist, statement_text
from mna.units import VOLT, Quantity

# An RC charge: 5 V through 1 kohm into 1 uF from rest. vC = 5*(1 - exp(-t/RC)),
# RC = 1 ms (Nilsson & Riedel ch. 7); it ends the 10 ms run at 5*(1 - e^-10).
RC = """
let Vs = 5 V
voltage-source V1 in -> gnd Vs
resistor R1 in -> out 1 kohm
capacitor C1 out -> gnd 1 uF
simulate transient until=10 ms step=10 us method=trapezoidal start=rest
record v(out)
"""


def report_of(lines: str):
    outcome = run_and_check(mna.parse(RC + lines))
    assert outcome.failure is None
    return outcome.report


def statuses(report) -> list[str]:
    return [c.status for c in report.checks]


# --------------------------------------------------------------------------
# passing and failing


def test_comparisons_pass_and_fail_with_signed_margins():
    report = report_of("""
check max(v(out)) < 6 V
check max(v(out)) < 4 V
check max(v(out)) >= 4.9 V
check min(v(out)) > 0.1 V
""")
    assert statuses(report) == ["pass", "fail", "pass", "fail"]
    first, second = report.checks[:2]
    final = 5 * (1 - math.exp(-10))  # the maximum of a rising charge is its last value
    assert first.value == pytest.approx(final, rel=1e-6)
    assert first.margin == pytest.approx(6 - first.value)  # headroom: positive when passing
    assert second.margin == pytest.approx(4 - second.value) and second.margin < 0
    assert second.shown_limit == "< 4 V" and second.shown_value == "4.9998 V"
    assert second.shown_margin.startswith("-") and first.shown_margin.startswith("+")
    assert report.exit_code == 1


def test_within_relative_and_absolute():
    report = report_of("""
check final(v(out)) within 1 % of 5 V
check final(v(out)) within 10 uV of 5 V
check final(v(out)) within 1 mV of Vs
""")
    # final = 5 - 5*e^-10 = 5 V - 227 uV: inside 50 mV and 1 mV, outside 10 uV.
    assert statuses(report) == ["pass", "fail", "pass"]
    relative, absolute, _ = report.checks
    assert relative.band == pytest.approx(0.05)
    assert relative.margin == pytest.approx(0.05 - 5 * math.exp(-10), rel=1e-3)
    assert absolute.band == pytest.approx(10e-6)
    assert relative.shown_limit == "5 V ± 1 %"


def test_measures_are_reported_and_usable_in_later_lines():
    report = report_of("""
measure vmax = max(v(out))
measure t_half = crossing(v(out), vmax / 2)
check t_half within 1 % of 1 ms * ln(2)
check vmax - min(v(out)) > 4 V
""")
    vmax, t_half = report.measurements
    assert vmax.unit == "V" and t_half.unit == "s"
    # Half of the final value is reached at RC*ln 2 (the run's end is e^-10 short of 5 V).
    assert t_half.value == pytest.approx(1e-3 * math.log(2), rel=1e-3)
    assert t_half.text == "t_half = crossing(v(out), vmax / 2)"
    assert statuses(report) == ["pass", "pass"]


def test_checks_on_parameters_alone_need_no_signal():
    # max(a, b) of parameters stays the plain function, not a measurement.
    report = report_of("""
let f_corner = 1 / (2 * pi * 1 kohm * 1 uF)
check f_corner > 100 Hz
check max(Vs, 2 V) >= 5 V
""")
    assert statuses(report) == ["pass", "pass"]


def test_check_text_is_the_line_as_written():
    netlist = parse_netlist("check  max(v(sw))   <  60 V   # clamp\ncheck final(v(out))\n  within 2 % of 5 V\n")
    assert [st.text for st in netlist.statements] == ["max(v(sw)) < 60 V", "final(v(out)) within 2 % of 5 V"]
    assert statement_text("measure x = max(v(a)) # note", "measure") == "x = max(v(a))"


# --------------------------------------------------------------------------
# input errors, found when the file is loaded (before any simulation)


def test_a_unit_mismatch_across_a_check_is_an_input_error():
    with pytest.raises(UnitsError, match=r"check compares volts \(V\) with amperes \(A\)") as info:
        mna.parse(RC + "check max(v(out)) < 2 A\n")
    assert info.value.line == RC.count("\n") + 1


@pytest.mark.parametrize("line, error, message", [
    ("check final(v(out)) within 2 A of 5 V", UnitsError, r"tolerance is a percentage .* got amperes"),
    ("check crossing(v(out), 1 A) < 1 ms", UnitsError, r"level needs volts"),
    ("check max(v(out), from=1 V) < 1 V", UnitsError, r"from= needs seconds"),
    ("check settling(v(out), 1 A) < 1 ms", UnitsError, r"band is a percentage of the step"),
    ("check max(v(nowhere)) < 1 V", UnknownNameError, r"no electrical node named 'nowhere'"),
    ("check energy(R9) < 1 J", UnknownNameError, r"no element named 'R9'"),
    ("check maxi(v(out)) < 1 V", UnknownNameError, r"unknown function maxi\(\)"),
    ("check t_late < 1 ms\nmeasure t_late = crossing(v(out), 1 V)", UnknownNameError, r"used before it is defined"),
    ("check vout_max < 1 V", UnknownNameError, r"unknown name 'vout_max'"),
    ("check v(out) > 1 V", InputError, r"changes over the transient run"),
    ("check max(v(out), v(in)) < 1 V", InputError, r"write max\(x, from=T1, to=T2\)"),
    ("check max(v(out), start=1 ms) < 1 V", UnknownNameError, r"max\(\) has no argument start="),
    ("check crossing(v(out), 1 V, direction=up) < 1 ms", InputError, r"direction= is rising, falling or either"),
    ("check final(v(out)) within 2 % of 0 V", InputError, r"no band at all"),
    ("measure Vs = max(v(out))", InputError, r"already a parameter"),
    ("measure a = max(v(out))\nmeasure a = min(v(out))", InputError, r"already defined at line"),
])
def test_input_errors_at_load_time(line, error, message):
    with pytest.raises(error, match=message) as info:
        mna.parse(RC + line + "\n")
    assert info.value.line is not None and info.value.line > RC.count("\n")


@pytest.mark.parametrize("window", ["from=12 ms", "to=11 ms", "from=-1 ms", "from=5 ms, to=2 ms"])
def test_a_window_outside_the_run_is_an_input_error_before_the_run(window):
    with pytest.raises(MeasurementError):
        mna.parse(RC + f"check max(v(out), {window}) < 6 V\n")


def test_at_outside_the_run_is_an_input_error():
    with pytest.raises(MeasurementError, match="lies outside the run"):
        mna.parse(RC + "check at(v(out), 20 ms) < 6 V\n")


def test_a_window_found_outside_the_run_only_after_it_is_an_error_of_that_check():
    # The window end depends on a measurement, so only the run can tell.
    report = report_of("""
measure t1 = crossing(v(out), 1 V)
check max(v(out), from=t1 * 100) < 6 V
check max(v(out)) < 6 V
""")
    assert statuses(report) == ["error", "pass"]
    assert "starts after the run ends" in report.checks[0].message
    assert report.exit_code == 2


# --------------------------------------------------------------------------
# plain values at the operating point, measurements without a transient


DIVIDER = """
voltage-source V1 in -> gnd 12 V
resistor R1 in -> out 1 kohm
resistor R2 out -> gnd 500 ohm
simulate dc
"""


def test_plain_quantities_use_the_operating_point_with_dc_alone():
    # Voltage divider: v(out) = 12 V * 500/(1000 + 500) = 4 V; R2 absorbs v^2/R = 32 mW.
    outcome = run_and_check(mna.parse(DIVIDER + """
check v(out) within 0.1 % of 4 V
check p(R2) < 30 mW
"""))
    assert [c.status for c in outcome.report.checks] == ["pass", "fail"]
    assert outcome.report.checks[1].value == pytest.approx(4.0**2 / 500)
    assert outcome.exit_code == 1


def test_a_measurement_needs_a_transient_run():
    with pytest.raises(InputError, match="no 'simulate transient' line"):
        mna.parse(DIVIDER + "check max(v(out)) < 5 V\n")


# --------------------------------------------------------------------------
# what gets recorded


def test_signals_used_by_checks_are_kept_but_not_added_to_the_record_list():
    circuit = mna.parse(RC + "check max(i(R1)) < 6 mA\ncheck energy(C1) > 1 uJ\n")
    assert [r.label for r in signals_used(circuit)] == ["i(R1)", "p(C1)"]
    assert [r.label for r in circuit.records] == ["v(out)"]
    outcome = run_and_check(circuit)
    (waves,) = outcome.results
    assert set(waves.labels()) == {"v(out)", "i(R1)", "p(C1)"}
    # The capacitor stores C*V^2/2 = 12.5 uJ at 5 V (less e^-10 here).
    assert [c.status for c in outcome.report.checks] == ["pass", "pass"]


def test_the_last_transient_run_is_the_one_measured():
    report = run_and_check(mna.parse(RC + "simulate transient until=2 ms step=10 us start=rest\n"
                                     "measure t_end = crossing(v(out), final(v(out)))\n")).report
    # final() of the last run (2 ms) is reached at its end.
    assert report.measurements[0].value == pytest.approx(2e-3, rel=1e-9)


# --------------------------------------------------------------------------
# the evaluator hook


def test_evaluate_asks_the_call_handler_first_and_falls_back_to_functions():
    seen = []

    def handler(call: Call, sub):
        seen.append(call.func)
        return Quantity(3.0, VOLT) if call.func == "probe" else None

    expr = parse_netlist("let x = 2 * probe(a) + sqrt(4 V^2)").statements[0].value
    result = evaluate(expr, {}, handler)
    assert result == Quantity(8.0, VOLT)
    assert seen == ["probe", "sqrt"]
    with pytest.raises(UnknownNameError, match="not a function"):
        evaluate(expr, {})  # without the hook probe() is unknown, as before
