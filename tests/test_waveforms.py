"""Source waveforms: values, corners, and a PWM-driven RL load in steady state."""

import math

import numpy as np
import pytest

import mna
from mna.waveforms import Piecewise, Pulse, Sine, Step


def test_step_ramp_and_ideal_edge():
    s = Step(0.0, 24.0, at=1e-3, rise=10e-6)
    assert s.values(np.array([0.0, 1e-3, 1.005e-3, 1.01e-3, 2e-3])).tolist() == pytest.approx(
        [0, 0, 12, 24, 24])
    ideal = Step(0.0, 24.0, at=1e-3)
    # the value at the instant of an ideal step is the value before it
    assert ideal.values(np.array([1e-3, 1e-3 + 1e-12])).tolist() == [0.0, 24.0]
    assert s.corners(0, 1).tolist() == pytest.approx([1e-3, 1.01e-3])


def test_pwm_levels_edges_and_corners():
    p = Pulse(low=0.0, high=12.0, frequency=1e3, duty=0.4, rise=10e-6, fall=10e-6, delay=0.0)
    t = np.array([0, 5e-6, 10e-6, 0.3e-3, 0.4e-3, 0.405e-3, 0.42e-3, 1.0e-3, 1.2e-3])
    assert p.values(t).tolist() == pytest.approx([0, 6, 12, 12, 12, 6, 0, 0, 12])
    corners = p.corners(0, 2e-3)
    assert corners[:4].tolist() == pytest.approx([10e-6, 0.4e-3, 0.41e-3, 1e-3])
    # Mean over whole periods: duty*high with symmetric trapezoidal edges
    # (an edge contributes half its length at each level).
    t = np.linspace(0, 10e-3, 200001)
    assert np.trapezoid(p.values(t), t) / 10e-3 == pytest.approx(0.4 * 12, rel=1e-4)


def test_sine_and_delay():
    s = Sine(amplitude=170.0, frequency=60.0, offset=1.0, phase=0.5, delay=2e-3)
    t = np.array([0.0, 2e-3, 3e-3])
    expected = [1 + 170 * math.sin(0.5), 1 + 170 * math.sin(0.5),
                1 + 170 * math.sin(2 * math.pi * 60 * 1e-3 + 0.5)]
    assert s.values(t).tolist() == pytest.approx(expected)
    assert s.corners(0, 1).tolist() == [2e-3]


def test_piecewise():
    p = Piecewise((0.0, 1e-3, 3e-3, 4e-3), (0.0, 5.0, 5.0, 0.0))
    assert p.values(np.array([0.5e-3, 2e-3, 3.5e-3, 9e-3])).tolist() == pytest.approx([2.5, 5, 2.5, 0])
    assert p.corners(0, 10).tolist() == [1e-3, 3e-3, 4e-3]


def test_pwm_rl_steady_state_average_and_ripple():
    # Periodic steady state of an RL load under an ideal square wave (V, duty D,
    # period T, tau = L/R). Volt-second balance on the inductor gives the mean
    # current D*V/R; solving the two exponential segments for a periodic
    # solution gives the ripple
    #   di = (V/R) (1 - e^{-DT/tau}) (1 - e^{-(1-D)T/tau}) / (1 - e^{-T/tau})
    # (standard first-order circuit analysis, e.g. Nilsson & Riedel ch. 7).
    V, R, L, f, D = 12.0, 4.0, 2e-3, 20e3, 0.4
    T, tau = 1 / f, L / R
    text = (f"voltage-source V1 d -> gnd pwm(low=0 V, high={V} V, frequency={f} Hz, duty={D})\n"
            f"inductor L1 d -> gnd {L} H resistance={R} ohm\n")
    res = mna.parse(text).transient(until=10e-3 + 10 * T, step=T / 400, method="trapezoidal",
                                    start="rest")
    last = res.time >= 10e-3  # 20 time constants: settled
    i = res["i(L1)"][last]
    t = res.time[last]
    mean = np.trapezoid(i, t) / (t[-1] - t[0])
    assert mean == pytest.approx(D * V / R, rel=1e-3)
    ripple = (V / R) * (1 - math.exp(-D * T / tau)) * (1 - math.exp(-(1 - D) * T / tau)) / (1 - math.exp(-T / tau))
    assert np.ptp(i) == pytest.approx(ripple, rel=1e-3)


def test_ideal_edges_are_recorded_on_both_sides():
    # A zero-rise step: the results hold the value just before and just after
    # the edge at the same time, so a measurement over the waveform (the mean
    # of an ideal PWM is duty*high exactly) needs no interpolation across it.
    res = mna.parse("voltage-source V1 a -> gnd step(from=0 V, to=5 V, at=1 ms)\n"
                    "resistor R1 a -> gnd 1 ohm\n").transient(until=2e-3, step=0.1e-3)
    at_edge = np.flatnonzero(res.time == 1e-3)
    assert at_edge.size == 2
    assert res["v(a)"][at_edge].tolist() == [0.0, 5.0]
    pwm = mna.parse("voltage-source V1 a -> gnd pwm(high=12 V, frequency=20 kHz, duty=40 %)\n"
                    "resistor R1 a -> gnd 1 ohm\n").transient(until=0.5e-3, step=1e-6,
                                                                method="backward-euler")
    assert np.trapezoid(pwm["v(a)"], pwm.time) / 0.5e-3 == pytest.approx(0.4 * 12, rel=1e-12)
