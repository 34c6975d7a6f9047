"""Work limits of a run and the checked settings of transient runs (mna.limits, mna.analyses.settings)."""

import math

import numpy as np
import pytest

import mna
from mna.errors import InputError, LimitError, LimitReached

# An RL circuit: 10 V into 5 ohm and 10 mH, tau = L/R = 2 ms.
RL = """\
voltage-source V1 in -> gnd 10 V
resistor R1 in -> x 5 ohm
inductor L1 x -> gnd 10 mH
simulate transient until={until} {extra}
record i(L1)
"""


def rl(until="10 ms", extra="start=rest"):
    return mna.parse(RL.format(until=until, extra=extra), "rl.mna")


def test_a_fixed_step_over_the_step_limit_is_an_input_error_before_the_run():
    # step=1e-12 s over 5 ms is 5e9 steps (and would need 37 GiB of time points).
    with pytest.raises(LimitError) as info:
        rl("5 ms", "step=1e-12 s")
    err = info.value
    assert err.line == 4 and err.column == 10  # the word 'transient' on the simulate line
    assert "5e+09 steps" in err.message and "step-limit=" in err.hint


def test_raising_the_step_limit_lets_the_memory_limit_speak_next():
    with pytest.raises(LimitError) as info:
        rl("5 ms", "step=1e-12 s step-limit=1e10 point-limit=1e10")
    assert "memory limit" in info.value.message and "memory-limit=" in info.value.hint


def test_a_fine_sample_grid_is_refused_before_the_run():
    with pytest.raises(LimitError) as info:
        rl("1 ms", "sample=1e-30 s")
    assert "1e+27 points" in info.value.message and "point-limit=" in info.value.hint


def test_a_pwm_with_more_edges_than_the_limit_is_refused_before_its_edges_are_built():
    text = ("voltage-source V1 a -> gnd pwm(high=10 V, frequency=1e12 Hz, duty=50 %)\n"
            "resistor R1 a -> gnd 1 ohm\nsimulate transient until=1 ms\n")
    with pytest.raises(LimitError) as info:
        mna.parse(text).run()
    # 1e9 periods of 4 corners each (rise start and end, fall start and end)
    assert "4e+09 edges" in info.value.message and "edge-limit=" in info.value.hint
    assert info.value.message.startswith("voltage-source V1:") and info.value.line == 1


def test_an_error_controlled_run_stops_at_the_step_limit_with_its_partial_results():
    circuit = rl("10 ms", "start=rest step-limit=40")
    with pytest.raises(LimitReached) as info:
        circuit.run()
    partial = info.value.partial
    assert partial is not None and partial.status == "failed"
    t = partial.time[-1]
    assert 0 < t < 10e-3 and info.value.time == pytest.approx(t)
    # What was computed is right: i = V/R * (1 - exp(-t/tau)) (first-order RL
    # step response, any circuit-theory text). 1 % of the final 2 A allows
    # the 0.1 % local error per step accumulated over the steps taken.
    expected = 2.0 * (1.0 - np.exp(-partial.time / 2e-3))
    assert np.max(np.abs(partial["i(L1)"] - expected)) < 0.02


def test_a_step_longer_than_until_warns_and_takes_one_step():
    circuit = rl("1 ms", "step=5 ms start=rest method=backward-euler")
    assert any("rl.mna:4:10" in w and "longer than until" in w for w in circuit.warnings)
    res = circuit.run()[0]
    assert res.time[-1] == pytest.approx(1e-3)
    # One backward-Euler step of h from rest: L*(i1 - 0)/h + R*i1 = V, so
    # i1 = V*h/(L + R*h) (the companion model of the inductor).
    h = 1e-3
    assert res["i(L1)"][-1] == pytest.approx(10 * h / (10e-3 + 5 * h), rel=1e-9)


def test_the_api_warns_about_a_step_longer_than_until_in_the_results():
    res = rl().transient(until="1 ms", step="5 ms", start="rest")
    assert any("longer than until" in w for w in res.warnings)


@pytest.mark.parametrize("options, words", [
    ({"voltage_tolerance": -1}, "must be positive"),
    ({"current_tolerance": 0}, "must be positive"),
    ({"tolerance": float("nan")}, "finite"),
    ({"max_step": float("inf")}, "finite"),
    ({"min_step": "1 V"}, "seconds"),
    ({"tolerance": 2}, "between 0 and 100 %"),
    ({"step_limit": -5}, "must be positive"),
    ({"sample": True}, "number"),
])
def test_transient_options_from_python_are_checked_as_the_netlist_settings(options, words):
    with pytest.raises(InputError) as info:
        rl().transient(until="1 ms", **options)
    assert words in str(info.value)


def test_until_from_python_must_be_finite():
    for until in (math.inf, math.nan, "1e999 s"):
        with pytest.raises(InputError):
            rl().transient(until=until)


def test_limits_given_from_python_apply_to_the_run():
    with pytest.raises(LimitReached):
        rl().transient(until="10 ms", start="rest", step_limit=30)
    res = rl().transient(until="1 ms", step="10 us", start="rest", point_limit=200)
    assert res.time.size == 101


def test_a_plain_number_before_a_hyphenated_setting_has_no_unit():
    # '0.01 max-step=1 us' once read 'max' as the unit of 0.01.
    circuit = rl("1 ms", "tolerance=0.01 max-step=1 us step-limit=1e6 point-limit=2e6")
    settings = circuit.analyses[0].settings
    assert settings["tolerance"] == 0.01 and settings["max-step"] == 1e-6
    assert settings["step-limit"] == 1e6 and settings["point-limit"] == 2e6


def test_a_limit_reached_in_a_run_writes_the_partial_results_and_exits_3(tmp_path, capsys):
    from mna.cli import main

    path = tmp_path / "rl.mna"
    path.write_text(RL.format(until="10 ms", extra="start=rest step-limit=40"), encoding="utf-8")
    code = main(["run", str(path), "--out", str(tmp_path / "out"), "--no-plot", "--quiet"])
    err = capsys.readouterr().err
    assert code == 3 and "step limit" in err and "step-limit=" in err
    rows = (tmp_path / "out" / "waveforms.csv").read_text().splitlines()
    assert rows[0] == "time,i(L1)" and len(rows) > 10
