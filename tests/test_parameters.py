"""Circuit.with_parameters: new let values reach everything that depends on them.

Expected values: the RC step response v = V (1 - exp(-t/RC)) (Nilsson &
Riedel, *Electric Circuits*, ch. 7); a fresh parse of the edited text is the
reference for everything else.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import mna
from mna.measure import evaluate_checks

RC_TEXT = """
let R = 1 kohm
let C = 1 uF
let tau = R*C
let Vin = 10 V
let Ton = 2 ms
voltage-source V1 in -> gnd step(from=0 V, to=Vin, at=0 s)
resistor R1 in -> out R
capacitor C1 out -> gnd C
switch S1 out -> load gate=schedule(open, Ton: closed)
resistor R2 load -> gnd 1 Mohm
record v(out), i(S1)
simulate transient until=(4*tau) step=(tau/2000) method=trapezoidal
measure t_half = crossing(v(out), Vin/2)
check t_half within 1 % of tau*ln(2)
"""


def _run(circuit):
    (res,) = circuit.run()
    return res, evaluate_checks(circuit, [res])


def test_with_parameters_equals_a_fresh_parse_of_the_edited_text():
    base = mna.parse(RC_TEXT)
    changed = base.with_parameters(R="2.2 kohm", Ton="3 ms")
    edited = mna.parse(RC_TEXT.replace("let R = 1 kohm", "let R = 2.2 kohm").replace("let Ton = 2 ms",
                                                                                      "let Ton = 3 ms"))
    a, report_a = _run(changed)
    b, report_b = _run(edited)
    assert np.array_equal(a.time, b.time)
    for label in ("v(out)", "i(S1)"):
        assert np.array_equal(a[label], b[label])
    assert [m.value for m in report_a.measurements] == [m.value for m in report_b.measurements]
    assert [c.status for c in report_a.checks] == ["pass"]
    # The switch schedule moved with Ton: open (1 pA-scale) before 3 ms, closed after.
    i_s = a["i(S1)"]
    assert np.abs(i_s[a.time < 2.99e-3]).max() < 1e-5
    assert i_s[a.time > 3.01e-3].min() > 1e-6


def test_the_original_circuit_is_untouched():
    base = mna.parse(RC_TEXT)
    before, _ = _run(base)
    base.with_parameters(R="10 kohm", C=2e-6)
    assert base.params["R"].value == 1e3 and base.elements["R1"].params["resistance"] == 1e3
    after, report = _run(base)
    assert np.array_equal(before["v(out)"], after["v(out)"])
    assert report.measurements[0].value == pytest.approx(1e-3 * math.log(2), rel=1e-3)


@pytest.mark.parametrize("r, c", [(1e3, 1e-6), (4.7e3, 1e-6), (1e3, 220e-9)])
def test_the_rc_time_constant_follows_the_new_values(r, c):
    # v(out) crosses Vin/2 at t = RC ln 2 (closed form above), corrected for
    # the open switch's 10 Mohm (default off=) plus R2 = 1 Mohm loading the
    # output (Thevenin: Vth = Vin Rl/(R + Rl), Rth = R || Rl; Ton is beyond
    # the run, so the switch stays open). The trapezoidal rule at tau/2000
    # has a global error near (h/tau)^2/12 = 2e-8, and the linear
    # interpolation of the crossing adds less than 1e-7: 1e-5 relative.
    circuit = mna.parse(RC_TEXT).with_parameters({"R": r, "C": f"{c * 1e9:g} nF"}, Ton="1 s")
    _, report = _run(circuit)
    rl = 10e6 + 1e6
    vth, rth = 10.0 * rl / (r + rl), r * rl / (r + rl)
    expected = rth * c * math.log(vth / (vth - 5.0))
    assert report.measurements[0].value == pytest.approx(expected, rel=1e-5)
    assert expected == pytest.approx(r * c * math.log(2), rel=1e-3)
    assert report.checks[0].status == "pass"
    # The simulate line's until= (4*tau) followed the new tau too.
    assert circuit.analyses[0].settings["until"] == pytest.approx(4 * r * c, rel=1e-12)


def test_a_derived_parameter_and_a_chain_of_changes():
    base = mna.parse(RC_TEXT)
    one = base.with_parameters(R="2 kohm")
    two = one.with_parameters(C="2 uF")
    assert two.params["tau"].value == pytest.approx(4e-3, rel=1e-12)
    assert one.params["tau"].value == pytest.approx(2e-3, rel=1e-12)
    assert base.params["tau"].value == pytest.approx(1e-3, rel=1e-12)


def test_parameters_given_to_parse_and_load(tmp_path):
    path = tmp_path / "rc.mna"
    path.write_text(RC_TEXT)
    loaded = mna.load(path, parameters={"R": "3.3 kohm"})
    parsed = mna.parse(RC_TEXT, parameters={"R": 3300.0})
    assert loaded.elements["R1"].params["resistance"] == 3300.0
    assert parsed.elements["R1"].params["resistance"] == 3300.0


def test_a_wrong_unit_is_a_units_error_naming_the_parameter():
    with pytest.raises(mna.InputError, match=r"parameter R \(line 2\) needs ohms.*got 2 uF") as info:
        mna.parse(RC_TEXT).with_parameters(R="2 uF")
    assert type(info.value).__name__ == "UnitsError"


def test_an_unknown_name_is_refused_with_the_closest_name():
    with pytest.raises(mna.InputError, match="no let parameter named 'Rr'") as info:
        mna.parse(RC_TEXT).with_parameters(Rr="2 ohm")
    assert "did you mean 'R'" in str(info.value)
    # A dotted name is a block instance's parameter.
    with pytest.raises(mna.InputError, match="no block parameter 'stage.R'"):
        mna.parse(RC_TEXT).with_parameters({"stage.R": 5.0})


def test_elements_added_from_python_are_added_again():
    base = mna.parse("let R = 1 kohm\nvoltage-source V1 a -> gnd 10 V\nresistor R1 a -> b R\n")
    base.add("resistor", "R2", "b", "gnd", "1 kohm")
    base.record("v(b)")
    op = base.with_parameters(R="3 kohm").dc()
    # Divider: 10 V * 1k / (3k + 1k) = 2.5 V.
    assert op["v(b)"] == pytest.approx(2.5, rel=1e-9)
    assert base.dc()["v(b)"] == pytest.approx(5.0, rel=1e-9)


def test_a_block_parameter_by_its_hierarchical_name():
    from tests.test_blocks import SNUBBER

    text = SNUBBER + "voltage-source V1 in -> gnd 1 V\nrc-snubber S1 in -> gnd\nrc-snubber S2 in -> gnd\n"
    base = mna.parse(text)
    changed = base.with_parameters({"S2.resistance": "33 ohm"})
    again = changed.with_parameters({"S1.resistance": 47.0})  # SI float: ohms
    assert changed.elements["S2.R"].params["resistance"] == 33.0
    assert changed.elements["S1.R"].params["resistance"] == base.elements["S1.R"].params["resistance"]
    assert again.elements["S1.R"].params["resistance"] == 47.0
    assert again.elements["S2.R"].params["resistance"] == 33.0
    assert base.elements["S2.R"].params["resistance"] == 10.0
    with pytest.raises(mna.InputError, match="S2.resistance needs ohms"):
        base.with_parameters({"S2.resistance": "1 uF"})
