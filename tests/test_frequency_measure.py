"""Measurements on frequency responses (mna/measure_frequency.py) against closed forms.

The measurements interpolate between analysis frequencies (parabolas in
log f through the three nearest points), so each tolerance is set about
ten times above the error measured on the grid of the test and stated
beside it; each is far tighter than the error of a plausible bug: a peak
taken at the nearest grid point is off by up to half a spacing (1 to 2 %
here), a wrong definition of Q or of the half-power level by tens of
percent, a phase sign or a missing 180 deg by degrees.
"""

import math
import textwrap

import numpy as np
import pytest
from scipy.optimize import brentq

import mna
from mna import measure_frequency as mf
from mna.errors import InputError, UnitsError
from mna.measure import run_and_check


def run(text):
    circuit = mna.parse(textwrap.dedent(text))
    outcome = run_and_check(circuit)
    assert outcome.failure is None
    return {m.name: m for m in outcome.report.measurements}, outcome.report


# --- resonance, Q and bandwidth ---------------------------------------------------
# Nilsson & Riedel, Electric Circuits, ch. 14: series RLC band-pass,
# w0 = 1/sqrt(LC), bandwidth beta = R/L, Q = w0/beta = sqrt(L/C)/R;
# parallel RLC, beta = 1/(RC), Q = R*sqrt(C/L).

SERIES = """
voltage-source V1 in -> gnd 0 V stimulus=1 V
resistor  R1 in -> a 10 ohm
inductor  L1 a -> b 1 mH
capacitor C1 b -> gnd 1 uF
simulate frequency from=100 Hz to=100 kHz per-decade=100
measure f0 = resonance(i(L1))
measure q = quality(i(L1))
measure bw = bandwidth(i(L1))
measure top = largest(i(L1))
"""


def test_series_rlc_resonance_q_and_bandwidth():
    m, _ = run(SERIES)
    f0 = 1 / (2 * math.pi * math.sqrt(1e-3 * 1e-6))
    # Grid spacing 2.3 %; measured errors: f0 6e-7, Q and bandwidth 6e-6.
    assert m["f0"].value == pytest.approx(f0, rel=1e-5)
    assert m["q"].value == pytest.approx(math.sqrt(1e-3 / 1e-6) / 10, rel=1e-4)
    assert m["bw"].value == pytest.approx(10 / (2 * math.pi * 1e-3), rel=1e-4)
    assert m["top"].value == pytest.approx(0.1, rel=1e-5)  # V/R at resonance


PARALLEL = """
current-source I1 gnd -> top 0 A stimulus=1 A
resistor  R1 top -> gnd 200 ohm
inductor  L1 top -> gnd 100 uH
capacitor C1 top -> gnd 1 uF
simulate frequency from=1 kHz to=1 MHz per-decade=50
record z(top -> gnd)
measure f0 = resonance(z(top -> gnd))
measure q = quality(z(top -> gnd))
measure peak = largest(z(top -> gnd))
"""


def test_parallel_rlc_q_from_the_impedance_peak():
    m, _ = run(PARALLEL)
    f0 = 1 / (2 * math.pi * math.sqrt(100e-6 * 1e-6))
    # Q = 20 here: the peak is 5 % wide against a 4.7 % grid spacing
    # (measured errors: f0 3e-6, Q 3e-4, peak 3e-5).
    assert m["f0"].value == pytest.approx(f0, rel=5e-5)
    assert m["q"].value == pytest.approx(200 * math.sqrt(1e-6 / 100e-6), rel=3e-3)
    assert m["peak"].value == pytest.approx(200, rel=3e-4)
    assert m["peak"].unit == "ohm"


# --- an RC low-pass: cutoff, magnitude and phase at a frequency --------------------
# Hayt & Kemmerly, Engineering Circuit Analysis, ch. 16: H = 1/(1 + jw/wc),
# wc = 1/(RC); |H| = 1/sqrt(1 + (f/fc)^2), phase = -atan(f/fc).

RC = """
voltage-source V1 in -> gnd 5 V stimulus=1 V
resistor  R1 in -> out 1 kohm
capacitor C1 out -> gnd 100 nF
simulate frequency from=10 Hz to=100 kHz per-decade=40
measure fc = cutoff(v(out) / v(in))
measure m1 = magnitude(v(out), 1 kHz)
measure p1 = phase(v(out) / v(in), 1 kHz)
measure d10 = decibels(v(out) / v(in), 10 kHz)
check p1 within 0.5 deg of -atan(1 kHz / 1591.55 Hz) * 180 deg / pi
"""


def test_rc_low_pass_cutoff_magnitude_and_phase():
    m, report = run(RC)
    fc = 1 / (2 * math.pi * 1e3 * 100e-9)
    # The reference level is |H(10 Hz)| = 1 - 2e-5 (not exactly 1) and the
    # grid spacing 5.9 %: measured error 4e-5.
    assert m["fc"].value == pytest.approx(fc, rel=5e-4)
    assert m["m1"].value == pytest.approx(1 / math.sqrt(1 + (1e3 / fc) ** 2), rel=1e-9)  # 1 kHz is a grid point
    assert math.degrees(m["p1"].value) == pytest.approx(-math.degrees(math.atan(1e3 / fc)), abs=1e-7)
    assert m["d10"].value == pytest.approx(-10 * math.log10(1 + (1e4 / fc) ** 2), abs=1e-7)
    assert m["p1"].shown.endswith("deg") and m["d10"].shown.endswith("dB")
    assert report.checks[0].status == "pass"


def test_phase_between_grid_points_is_interpolated_in_log_f():
    m, _ = run(RC.replace("1 kHz)", "1.234 kHz)"))
    fc = 1 / (2 * math.pi * 1e3 * 100e-9)
    # Between two points 5.9 % apart: measured error 2.4e-4 deg.
    assert math.degrees(m["p1"].value) == pytest.approx(-math.degrees(math.atan(1.234e3 / fc)), abs=3e-3)


# --- crossover and phase margin of a loop gain ---------------------------------------
# A "loop gain" T = Za / (1 ohm) built from two 1 A stimuli: Za of
# C1 || (R2 + C2) || Rbig, a lead-lag integrator. The reference crossover
# and margin come from the closed form of Za solved with scipy's brentq.

LOOP = """
current-source Ia gnd -> a 0 A stimulus=1 A
current-source Ir gnd -> r 0 A stimulus=1 A
resistor  Rr r -> gnd 1 ohm
resistor  Rbig a -> gnd 1 Mohm
capacitor C1 a -> gnd 1 uF
resistor  R2 a -> b 0.5 ohm
capacitor C2 b -> gnd 10 uF
simulate frequency from=100 Hz to=1 MHz per-decade=100
measure fc = crossover(v(a) / v(r))
measure pm = phase_margin(v(a) / v(r))
"""


def loop_gain(f):
    w = 2 * np.pi * f
    return 1 / (1 / 1e6 + 1j * w * 1e-6 + 1 / (0.5 + 1 / (1j * w * 10e-6)))


def test_crossover_and_phase_margin():
    m, _ = run(LOOP)
    fc = brentq(lambda f: abs(loop_gain(f)) - 1, 1e3, 1e5, xtol=1e-9)
    pm = 180 + math.degrees(np.angle(loop_gain(fc)))
    # 2.3 % grid spacing; measured errors: fc 1e-8, margin 1e-9 deg.
    assert m["fc"].value == pytest.approx(fc, rel=1e-5)
    assert math.degrees(m["pm"].value) == pytest.approx(pm, abs=1e-3)
    assert 90 < pm < 180  # the lead of R2*C2 adds phase: a sanity check on the reference


# A three-pole ladder reaches -180 deg: its gain margin, against the closed
# form (chain of RC sections, Hayt & Kemmerly ladder analysis) and brentq.

GAIN_MARGIN = """
current-source Ia gnd -> n0 0 A stimulus=1 A
current-source Ir gnd -> r 0 A stimulus=1 A
resistor Rr r -> gnd 1 ohm
resistor R0 n0 -> gnd 10 ohm
resistor R1 n0 -> n1 10 ohm
capacitor C1 n1 -> gnd 10 uF
resistor R2 n1 -> n2 10 ohm
capacitor C2 n2 -> gnd 10 uF
resistor R3 n2 -> n3 10 ohm
capacitor C3 n3 -> gnd 10 uF
simulate frequency from=10 Hz to=100 kHz per-decade=100
measure gm = gain_margin(v(n3) / v(r))
"""


def ladder_gain(f):
    w = 2 * np.pi * f
    zc = 1 / (1j * w * 10e-6)
    # Work back from the open end: impedance looking right at each node, and
    # the voltage ratio of each section.
    z3 = zc
    z2 = zc * (10 + z3) / (zc + 10 + z3)
    z1 = zc * (10 + z2) / (zc + 10 + z2)
    zin = 10 * (10 + z1) / (10 + 10 + z1)  # R0 || (R1 + z1)
    v0 = zin  # 1 A in
    v1 = v0 * z1 / (10 + z1)
    v2 = v1 * z2 / (10 + z2)
    return v2 * z3 / (10 + z3)


def test_gain_margin_of_a_three_pole_ladder():
    m, _ = run(GAIN_MARGIN)
    f180 = brentq(lambda f: np.angle(ladder_gain(f)), 500, 5e4, xtol=1e-9)
    gm = -20 * math.log10(abs(ladder_gain(f180)))
    assert m["gm"].value == pytest.approx(gm, abs=1e-3)  # dB; measured error 3e-6 dB


# --- no value, and errors caught before the run ---------------------------------------

def test_a_peak_at_the_end_of_the_range_has_no_value():
    m, report = run(RC + "measure f = resonance(v(out))\ncheck f > 1 Hz\n")
    assert m["f"].status == "none" and "lowest frequency" in m["f"].message
    assert report.checks[-1].status == "fail"


def test_frequency_measurement_without_a_frequency_analysis():
    with pytest.raises(InputError, match="no 'simulate frequency' line"):
        mna.parse("voltage-source V1 a -> gnd 1 V\nresistor R1 a -> gnd 1 ohm\nsimulate dc\n"
                  "check largest(v(a)) < 2 V\n")


def test_frequency_outside_the_analysis_is_an_input_error():
    with pytest.raises(InputError, match="outside the analysis"):
        mna.parse(textwrap.dedent(RC) + "check magnitude(v(out), 1 MHz) < 1 V\n")


def test_units_of_frequency_measurements_are_checked():
    with pytest.raises(UnitsError, match="frequency needs"):
        mna.parse(textwrap.dedent(RC) + "check magnitude(v(out), 1 ms) < 1 V\n")
    with pytest.raises(UnitsError, match="compares"):
        mna.parse(textwrap.dedent(RC) + "check resonance(v(out)) < 1 V\n")
    with pytest.raises(UnitsError, match="unity gain"):
        mna.parse(textwrap.dedent(RC) + "check crossover(v(out)) < 1 kHz\n")


def test_kernels_on_a_plain_array():
    # The half-power points of 1/(1 + jQ(f/f0 - f0/f)) lie at
    # f0*(sqrt(1 + 1/(4Q^2)) +- 1/(2Q)) (Nilsson & Riedel ch. 14).
    f = np.logspace(2, 4, 801)
    q, f0 = 5.0, 1e3
    h = 1 / (1 + 1j * q * (f / f0 - f0 / f))
    low, high = mf.half_power_points(f, h)
    assert low == pytest.approx(f0 * (math.sqrt(1 + 1 / (4 * q * q)) - 1 / (2 * q)), rel=1e-4)
    assert high == pytest.approx(f0 * (math.sqrt(1 + 1 / (4 * q * q)) + 1 / (2 * q)), rel=1e-4)
    assert mf.quality(f, h) == pytest.approx(q, rel=1e-4)
