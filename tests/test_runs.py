"""Runs are independent: one circuit run many times, or from two threads, gives one answer.

Expected values from Ohm's law and the first-order RL step response
(Nilsson & Riedel, *Electric Circuits*, ch. 7: i = V/R (1 - exp(-t R/L))).
"""

from __future__ import annotations

import textwrap
import threading

import numpy as np
import pytest

import mna

SCHEDULED = """
voltage-source V1 a -> gnd 10 V
switch S1 a -> b gate=schedule(open, 1 ms: closed)
resistor R1 b -> gnd 10 ohm
"""
# Closed: 10 V across 10 ohm + the switch's default on= of 10 mohm.
I_CLOSED = 10.0 / (10.0 + 10e-3)
# Open: 10 V across 10 Mohm (default off=) + 10 ohm.
I_OPEN = 10.0 / (10e6 + 10.0)


def _check_scheduled(res) -> None:
    t, i_r, i_s = res.time, res["i(R1)"], res["i(S1)"]
    # Before 1 ms the switch is open, after it closed; the series current is
    # the same in both elements to round-off (1e-9 relative is far below the
    # 1e6 ratio of a switch left in the wrong state).
    assert np.allclose(i_s, i_r, rtol=1e-9, atol=1e-15)
    assert i_r[t < 0.999e-3] == pytest.approx(I_OPEN, rel=1e-9)
    assert i_r[t > 1.001e-3] == pytest.approx(I_CLOSED, rel=1e-9)


def test_a_circuit_run_three_times_gives_the_same_answer_each_time():
    circuit = mna.parse(SCHEDULED)
    for _ in range(3):
        res = circuit.transient(until="3 ms", step="10 us")
        _check_scheduled(res)
        assert res["i(R1)"].max() == pytest.approx(I_CLOSED, rel=1e-9)


def test_two_identical_simulate_lines_give_the_same_answer():
    circuit = mna.parse(SCHEDULED + "simulate transient until=3 ms step=10 us\n" * 2)
    first, second = circuit.run()
    for res in (first, second):
        _check_scheduled(res)
    assert np.array_equal(first["i(S1)"], second["i(S1)"])


def test_the_operating_point_between_runs_does_not_disturb_them():
    circuit = mna.parse(SCHEDULED)
    a = circuit.transient(until="3 ms", step="10 us")
    op = circuit.dc()
    assert op["i(R1)"] == pytest.approx(I_OPEN, rel=1e-9)
    b = circuit.transient(until="3 ms", step="10 us")
    assert np.array_equal(a["i(R1)"], b["i(R1)"])


PWM_RL = """
voltage-source V1 s -> gnd 12 V
switch Q1 s -> x on=10 mohm off=10 Mohm gate=pwm(frequency=20 kHz, duty=40 %)
diode D1 gnd -> x
inductor L1 x -> y 1 mH
resistor R1 y -> gnd 2 ohm
record i(L1), v(x), state(Q1)
"""


def test_one_circuit_run_from_two_threads_at_once_gives_identical_answers():
    circuit = mna.parse(PWM_RL)
    reference = circuit.transient(until="2 ms")
    results: list = [None, None]
    errors: list = []

    def work(k: int) -> None:
        try:
            results[k] = circuit.transient(until="2 ms")
        except Exception as exc:  # pragma: no cover - reported below
            errors.append(exc)

    threads = [threading.Thread(target=work, args=(k,)) for k in range(2)]
    for th in threads:
        th.start()
    for th in threads:
        th.join()
    assert not errors
    for res in results:
        assert np.array_equal(res.time, reference.time)
        for label in ("i(L1)", "v(x)", "state(Q1)"):
            assert np.array_equal(res[label], reference[label])
    # 40 % duty from 12 V into 2 ohm: the average current approaches
    # 0.4 * 12 / 2 = 2.4 A less the diode drop share; at 2 ms (tau = 0.5 ms,
    # four time constants) it is within 10 % of that and far from 0.
    assert 1.8 < reference["i(L1)"][-1] < 2.6


# -- the state at the end of a run, and a run that starts from it -----------------


def test_a_run_continued_from_its_final_state_matches_one_long_run():
    # Fixed steps: the continued run takes the same time points as the long
    # one (up to the rounding of t0 + k*step against k*step), so the two
    # agree to round-off, switch states and diode included.
    circuit = mna.parse(PWM_RL)
    whole = circuit.transient(until="2 ms", step="1 us")
    first = circuit.transient(until="1 ms", step="1 us")
    state = first.final_state
    assert state.time == pytest.approx(1e-3, rel=1e-12)
    assert state["i(L1)"] == pytest.approx(first["i(L1)"][-1], rel=1e-15)
    with pytest.raises(ValueError):
        state.x[0] = 1.0  # immutable
    rest = circuit.transient(until="2 ms", step="1 us", start=state)
    assert rest.time[0] == pytest.approx(1e-3, rel=1e-12) and rest.time[-1] == pytest.approx(2e-3, rel=1e-12)
    k = np.searchsorted(whole.time, 1e-3 * (1 + 1e-9))
    for label in ("i(L1)", "v(x)", "state(Q1)"):
        assert np.allclose(rest[label][-200:], whole[label][-200:], rtol=1e-9, atol=1e-9)
    assert whole.time.size - k + 2 >= rest.time.size - 2


def test_a_comparison_gate_keeps_its_state_across_a_continued_run():
    # A hysteresis gate holds its state inside the band: the continued run
    # must start with the switch as the first run left it, not as a fresh
    # operating point would set it (open).
    text = """
    voltage-source V1 s -> gnd 10 V
    resistor R1 s -> c 1 kohm
    capacitor C1 c -> gnd 1 uF
    switch Q1 c -> gnd on=100 ohm gate=v(c) > 5 V hysteresis=4 V
    record v(c), state(Q1)
    """
    circuit = mna.parse(textwrap.dedent(text))
    whole = circuit.transient(until="4.4 ms", step="2 us", start="rest")
    first = circuit.transient(until="2.2 ms", step="2 us", start="rest")
    # At 2.2 ms the capacitor discharges through the closed switch, inside
    # the 3..7 V band (RC relaxation with R1 || on= = 91 ohm).
    assert first["state(Q1)"][-1] == 1.0 and 3.0 < first["v(c)"][-1] < 7.0
    rest = circuit.transient(until="4.4 ms", step="2 us", start=first.final_state)
    assert rest["state(Q1)"][0] == 1.0
    assert np.allclose(rest["v(c)"][-100:], whole["v(c)"][-100:], rtol=1e-6, atol=1e-6)


def test_a_state_of_another_circuit_or_an_end_before_it_is_refused():
    circuit = mna.parse(PWM_RL)
    state = circuit.transient(until="0.1 ms", step="1 us").final_state
    with pytest.raises(mna.InputError, match="must be after the time of the starting state"):
        circuit.transient(until="0.05 ms", start=state)
    other = mna.parse(SCHEDULED)
    with pytest.raises(mna.InputError, match="belongs to another circuit"):
        other.transient(until="1 ms", start=state)
    with pytest.raises(mna.InputError, match="start= must be dc, rest, or a state"):
        circuit.transient(until="1 ms", start="warm")
