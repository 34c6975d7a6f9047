"""Tests of mna.waveform_math against closed forms from circuit theory.

Interpolation error bound used throughout (standard numerical analysis,
e.g. Burden & Faires, *Numerical Analysis*, ch. 3 on interpolation error,
from memory): linear interpolation between samples h apart is within
h**2/8 * max|f''| of a smooth f. Where a tolerance is computed from that
bound, the comment says so.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from mna import waveform_math as wm
from mna.waveform_math import MeasurementError


def lerp_error_bound(h: float, max_second_derivative: float) -> float:
    """Largest gap between a smooth signal and its linear interpolant on a step h."""
    return h * h / 8 * max_second_derivative


# ---------------------------------------------------------------------------
# rms, mean, integral


@pytest.mark.parametrize(
    "periods, phase, start_fraction", [(1, 0.0, 0.0), (3, 0.7, 0.0), (2, 0.0, 1 / 3)]
)
def test_rms_of_sine_over_whole_periods(periods, phase, start_fraction):
    # RMS of a sinusoid = amplitude/sqrt(2), standard AC circuit theory
    # (Alexander & Sadiku ch. 11), over any whole number of periods.
    amplitude, frequency = 170.0, 60.0
    period = 1 / frequency
    start = start_fraction * period  # between samples when 1/3: exercises the window ends
    t = np.linspace(0, (periods + 1) * period, 1000 * (periods + 1) + 1)
    v = amplitude * np.sin(2 * np.pi * frequency * t + phase)
    measured = wm.rms(t, v, start=start, stop=start + periods * period)
    # |rms(interpolant) - rms(sine)| <= max|interpolant - sine| (triangle
    # inequality for the rms norm), bounded by h^2/8 * A*w^2.
    tol = lerp_error_bound(t[1] - t[0], amplitude * (2 * np.pi * frequency) ** 2)
    assert measured == pytest.approx(amplitude / math.sqrt(2), abs=tol)
    assert tol < 1e-5 * amplitude  # the check stays sharp


def test_rms_of_sine_on_non_uniform_grid():
    # Same closed form as above (Alexander & Sadiku ch. 11); the solver's
    # grid is non-uniform, so the bound uses the widest step.
    amplitude, frequency = 2.0, 50.0
    period = 1 / frequency
    rng = np.random.default_rng(7)
    t = np.sort(np.concatenate(([0.0, 2 * period], rng.uniform(0, 2 * period, 6000))))
    v = amplitude * np.sin(2 * np.pi * frequency * t)
    tol = lerp_error_bound(np.max(np.diff(t)), amplitude * (2 * np.pi * frequency) ** 2)
    assert wm.rms(t, v) == pytest.approx(amplitude / math.sqrt(2), abs=tol)


def triangle(t: np.ndarray, amplitude: float, period: float) -> np.ndarray:
    """Symmetric triangle wave: -A at whole periods, +A at half periods."""
    phase = np.mod(t / period, 1.0)
    return amplitude * (1 - 4 * np.abs(phase - 0.5))


def test_rms_of_triangle_is_exact_on_a_coarse_grid_where_the_naive_rule_is_not():
    # RMS of a symmetric triangle wave = A/sqrt(3) (standard result, from
    # memory; any table of waveform rms values). The triangle is piecewise
    # linear, so with samples on its corners the segment formula
    # h*(a^2 + ab + b^2)/3 is exact up to rounding; the trapezoidal rule on
    # v^2 overestimates by h*(a - b)^2/6 per segment.
    amplitude, period = 3.0, 1e-3
    fractions = np.array([0.0, 0.07, 0.31, 0.5, 0.62, 0.9])
    t = np.concatenate([(k + fractions) * period for k in range(2)] + [[2 * period]])
    v = triangle(t, amplitude, period)
    exact = amplitude / math.sqrt(3)
    naive = math.sqrt(np.trapezoid(v**2, t) / (t[-1] - t[0]))
    assert wm.rms(t, v) == pytest.approx(exact, rel=1e-12)
    assert naive > exact * 1.05  # the naive rule is visibly wrong on this grid


@pytest.mark.parametrize(
    "low, high, duty, rise, fall",
    [
        (0.0, 12.0, 0.40, 0.0, 0.0),  # ideal edges: two samples at each edge time
        (0.0, 12.0, 0.40, 0.05, 0.05),
        (-5.0, 15.0, 0.25, 0.02, 0.10),
    ],
)
def test_mean_of_pwm(low, high, duty, rise, fall):
    # Mean of a trapezoidal pulse train, by direct integration (common
    # practice): per period the
    # area above `low` is (high-low)*(plateau + rise/2 + fall/2); with duty
    # measured from the start of the rise to the start of the fall
    # (plateau = duty*T - rise) the mean is
    #   low + (high-low)*(duty + (fall - rise)/(2T)),
    # which is the textbook duty*high for ideal edges and low = 0.
    period = 1 / 20e3
    rise, fall = rise * period, fall * period
    corners = np.array([0.0, rise, duty * period, duty * period + fall])
    levels = np.array([low, high, high, low])
    periods = 5
    t = np.concatenate([k * period + corners for k in range(periods)] + [[periods * period]])
    v = np.concatenate([levels] * periods + [[low]])
    expected = low + (high - low) * (duty + (fall - rise) / (2 * period))
    assert wm.mean(t, v) == pytest.approx(expected, rel=1e-12)  # exact: piecewise linear


def test_joule_heating_of_constant_current():
    # Energy in a resistor carrying constant I: W = I^2*R*t (Joule's law).
    current, resistance = 2.5, 0.47
    t = np.sort(np.random.default_rng(3).uniform(0, 10e-3, 200))
    t = np.concatenate(([0.0], t, [10e-3]))
    power = np.full_like(t, current**2 * resistance)
    start, stop = 1.3e-3, 7.9e-3  # between samples
    expected = current**2 * resistance * (stop - start)
    assert wm.integral(t, power, start=start, stop=stop) == pytest.approx(expected, rel=1e-12)


def test_mean_and_rms_of_a_ramp_in_a_window():
    # v = k*t on [a, b]: mean k(a+b)/2; rms^2 = k^2 (a^2 + ab + b^2)/3
    # (direct integration of k*t and k^2 t^2). The window ends fall between
    # samples, so this checks the interpolated end samples too.
    k, a, b = 3.0, 0.25, 1.7
    t = np.linspace(0, 2, 9)
    v = k * t
    assert wm.mean(t, v, start=a, stop=b) == pytest.approx(k * (a + b) / 2, rel=1e-12)
    assert wm.rms(t, v, start=a, stop=b) == pytest.approx(
        k * math.sqrt((a * a + a * b + b * b) / 3), rel=1e-12
    )


# ---------------------------------------------------------------------------
# series RLC step: overshoot and settling (Nilsson & Riedel, *Electric Circuits*, ch. 8)


class SeriesRLC:
    """Underdamped series RLC step, vC(0) = 0, i(0) = 0 (Nilsson & Riedel ch. 8)."""

    def __init__(self, V: float, R: float, L: float = 1e-3, C: float = 1e-6):
        self.V, self.L, self.C = V, L, C
        self.alpha = R / (2 * L)
        self.w0 = 1 / math.sqrt(L * C)
        self.zeta = self.alpha / self.w0
        self.wd = self.w0 * math.sqrt(1 - self.zeta**2)

    def vc(self, t):
        a, wd = self.alpha, self.wd
        return self.V * (1 - np.exp(-a * t) * (np.cos(wd * t) + a / wd * np.sin(wd * t)))

    def current(self, t):
        return self.V / (self.wd * self.L) * np.exp(-self.alpha * t) * np.sin(self.wd * t)

    def max_vc_second_derivative(self) -> float:
        # vC'' = i'/C and |i'| <= V*w0/(wd*L), so |vC''| <= |V|*w0^3/wd.
        return abs(self.V) * self.w0**3 / self.wd

    def sampled(self, h: float, decays: float = 30.0):
        """Samples every h until exp(-alpha*t) = exp(-decays): vC has reached V."""
        t = np.arange(0.0, decays / self.alpha, h)
        return t, self.vc(t)

    def final_error(self, t_end: float) -> float:
        # |vC - V| <= |V| (w0/wd) exp(-alpha t) (envelope of the closed form)
        return abs(self.V) * self.w0 / self.wd * math.exp(-self.alpha * t_end)

    def exact_settling(self, fraction: float) -> float:
        """Exact last exit of vC from V*(1 ± fraction), by brentq on the closed form.

        The error e = vC - V = -V (w0/wd) exp(-alpha t) cos(wd t - phi),
        phi = atan(alpha/wd), has its extremes at t_k = k*pi/wd (where i = 0)
        with |e(t_k)| = |V| exp(-alpha t_k). The last extreme outside the band
        is k* = floor(ln(1/fraction) * wd / (alpha*pi)); |e| falls
        monotonically from there to the zero of e at (k*pi + pi/2 + phi)/wd,
        and the last exit is the one root of |e| = band in that bracket.
        """
        k = math.floor(math.log(1 / fraction) * self.wd / (self.alpha * math.pi))
        phi = math.atan(self.alpha / self.wd)
        t_peak = k * math.pi / self.wd
        t_zero = (k * math.pi + math.pi / 2 + phi) / self.wd
        band = fraction * abs(self.V)

        def beyond_band(t: float) -> float:
            return abs(self.vc(t) - self.V) - band

        return brentq(beyond_band, t_peak, t_zero, xtol=1e-16, rtol=1e-15)


# L = 1 mH, C = 1 uF (invented values; closed form of Nilsson & Riedel, *Electric Circuits*, ch. 8); R = 10 ohm is its zeta = 0.158
# case, 30 and 50 ohm give zeta = 0.47 and 0.79. V < 0 makes a falling step.
RLC_CASES = [(1.0, 10.0), (1.0, 30.0), (-2.0, 50.0)]
STEP = 20e-9  # w0*h = 6e-4: interpolation bounds below are ~1e-8 of V


@pytest.mark.parametrize("V, R", RLC_CASES)
def test_overshoot_of_underdamped_second_order_step(V, R):
    # %OS = 100*exp(-zeta*pi/sqrt(1 - zeta^2)), Nise, Control Systems
    # Engineering, ch. 4 (chapter from memory); Nilsson & Riedel, *Electric Circuits*, ch. 8.
    circuit = SeriesRLC(V, R)
    t, v = circuit.sampled(STEP)
    expected = 100 * math.exp(-circuit.zeta * math.pi / math.sqrt(1 - circuit.zeta**2))
    # Tolerance: the sampled extreme misses the true one by at most the
    # interpolation bound d; the last sample misses V by at most e (envelope).
    # %OS = 100 (M - F)/F moves by at most 100 (d + e*M/F)/|V| with M/F < 2.
    d = lerp_error_bound(STEP, circuit.max_vc_second_derivative())
    e = circuit.final_error(t[-1])
    tol = 1.1 * 100 * (d + 2 * e) / abs(V)
    assert wm.overshoot(t, v) == pytest.approx(expected, abs=tol)
    assert tol < 1e-5  # percentage points: the check stays sharp


@pytest.mark.parametrize("V, R", RLC_CASES)
def test_two_percent_settling_of_underdamped_second_order_step(V, R):
    # Reference: the exact last exit from the 2 % band of the closed-form
    # response (Nilsson & Riedel ch. 8), found with brentq. Not the rule of
    # thumb Ts = 4/(zeta*wn) (Nise ch. 4): that comes from the envelope
    # exp(-zeta*wn*t)/sqrt(1 - zeta^2) = 0.02 with ln(50) ~ 4 and the square
    # root dropped, while the true response leaves the band only at its
    # oscillation extremes, so the real settling time jumps in steps of half
    # a ringing period: for these cases 4/(zeta*wn) is off by 9 %, 2 % and 37 %.
    fraction = 0.02
    circuit = SeriesRLC(V, R)
    t, v = circuit.sampled(STEP)
    expected = circuit.exact_settling(fraction)
    # Tolerance: the interpolant's band crossing is shifted from the true one
    # by (value error)/(slope there); value error <= interpolation bound d
    # plus the final-value error e that moves the band; slope = |i|/C.
    # Factor 2 covers the slope changing across one step.
    d = lerp_error_bound(STEP, circuit.max_vc_second_derivative())
    e = circuit.final_error(t[-1])
    slope = abs(circuit.current(expected)) / circuit.C
    tol = 2 * (d + e) / slope
    # The last peak outside the band must clear it by more than d, or the
    # samples could miss it: then the case would be ill-conditioned.
    k = math.floor(math.log(1 / fraction) * circuit.wd / (circuit.alpha * math.pi))
    assert math.exp(-circuit.alpha * k * math.pi / circuit.wd) - fraction > d / abs(V)
    assert wm.settling_fraction(t, v, fraction) == pytest.approx(expected, abs=tol)
    assert wm.settling(t, v, fraction * abs(V)) == pytest.approx(expected, abs=tol)
    assert tol < 1e-6 * expected  # the check stays sharp


def test_overshoot_is_zero_for_a_monotone_step():
    # RC charge V(1 - exp(-t/RC)) never exceeds V (Nilsson & Riedel ch. 7).
    t = np.linspace(0, 10e-3, 1001)
    v = 5.0 * (1 - np.exp(-t / 1e-3))
    assert wm.overshoot(t, v) == 0.0


def test_overshoot_and_settling_need_a_step():
    t = np.array([0.0, 1.0, 2.0, 3.0])
    v = np.array([0.0, 1.0, 1.0, 0.0])  # a pulse: ends where it started
    with pytest.raises(MeasurementError, match="ends where it starts"):
        wm.overshoot(t, v)
    with pytest.raises(MeasurementError, match="ends where it starts"):
        wm.settling_fraction(t, v, 0.02)


def test_settling_returns_window_start_when_never_outside_band():
    t = np.linspace(0, 1, 11)
    v = 1.0 + 0.01 * np.cos(t)  # within 0.01 of the final value throughout
    assert wm.settling(t, v, 0.05, start=0.25) == 0.25


@pytest.mark.parametrize("band", [0.0, -1.0, math.inf, math.nan])
def test_settling_rejects_a_band_that_is_not_positive(band):
    t = np.linspace(0, 1, 11)
    with pytest.raises(MeasurementError, match="positive"):
        wm.settling(t, t, band)


# ---------------------------------------------------------------------------
# crossing


@pytest.mark.parametrize("level", [1.0, 2.5, 4.5])
def test_crossing_of_rc_charge(level):
    # vC = V(1 - exp(-t/RC)) reaches L at t = -RC ln(1 - L/V)
    # (Nilsson & Riedel ch. 7); 4.5 V of 5 V is RC ln 10.
    V, R, C = 5.0, 1e3, 1e-6
    tau = R * C
    h = 2e-6
    t = np.arange(0, 10 * tau + h / 2, h)
    v = V * (1 - np.exp(-t / tau))
    expected = -tau * math.log(1 - level / V)
    # Time error <= (interpolation bound)/(slope at the crossing); |vC''| <= V/tau^2,
    # slope = (V - L)/tau; factor 2 covers the slope changing across one step.
    tol = 2 * lerp_error_bound(h, V / tau**2) / ((V - level) / tau)
    assert wm.crossing(t, v, level, direction="rising") == pytest.approx(expected, abs=tol)
    assert wm.crossing(t, v, level) == pytest.approx(expected, abs=tol)
    assert tol < 1e-5 * expected


@pytest.mark.parametrize("direction, twelfths", [("rising", 1), ("falling", 5), ("either", 1)])
def test_crossing_direction_on_a_sine(direction, twelfths):
    # A sin(wt) = A/2 at wt = pi/6 (rising) and 5pi/6 (falling), i.e. T/12 and
    # 5T/12 (sin(pi/6) = 1/2, any trigonometry table).
    amplitude, period = 1.0, 1e-3
    w = 2 * math.pi / period
    t = np.linspace(0, period, 2001)
    v = amplitude * np.sin(w * t)
    expected = twelfths * period / 12
    slope = amplitude * w * math.cos(math.pi / 6)  # |v'| at both crossings
    tol = 2 * lerp_error_bound(t[1], amplitude * w**2) / slope
    assert wm.crossing(t, v, amplitude / 2, direction=direction) == pytest.approx(expected, abs=tol)


def test_crossing_at_the_first_sample_returns_its_time():
    t = np.linspace(0, 1, 11)
    v = np.sin(t)  # v(0) == 0 exactly
    assert wm.crossing(t, v, 0.0) == 0.0
    assert wm.crossing(t, v, 0.0, direction="falling") == 0.0  # documented rule
    # the window start is an interpolated sample: sin(0.35) reached there
    assert wm.crossing(t, v, float(np.interp(0.35, t, v)), start=0.35) == 0.35


def test_crossing_never_reached_raises():
    t = np.linspace(0, 10e-3, 101)
    v = 5.0 * (1 - np.exp(-t / 1e-3))
    with pytest.raises(MeasurementError, match="never reaches 6"):
        wm.crossing(t, v, 6.0)
    with pytest.raises(MeasurementError, match="never reaches 2.5 falling"):
        wm.crossing(t, v, 2.5, direction="falling")
    with pytest.raises(MeasurementError, match="never reaches 4.5"):
        wm.crossing(t, v, 4.5, stop=2e-3)  # reached at RC ln 10 = 2.3 ms, after the window


def test_crossing_rejects_unknown_direction():
    t = np.linspace(0, 1, 3)
    with pytest.raises(MeasurementError, match="rising, falling, either"):
        wm.crossing(t, t, 0.5, direction="up")


# ---------------------------------------------------------------------------
# windows, single values and errors

T4 = np.array([0.0, 1.0, 2.0, 3.0])
V4 = np.array([0.0, 10.0, 20.0, 10.0])


def test_window_adds_interpolated_end_samples():
    # linear interpolation by hand: v(0.5) = 5, v(2.5) = 15
    t, v = wm.window(T4, V4, start=0.5, stop=2.5)
    np.testing.assert_array_equal(t, [0.5, 1.0, 2.0, 2.5])
    np.testing.assert_array_equal(v, [5.0, 10.0, 20.0, 15.0])
    t, v = wm.window(T4, V4, start=1.0, stop=2.0)  # ends on samples: nothing added
    np.testing.assert_array_equal(t, [1.0, 2.0])
    t, v = wm.window(T4, V4, start=1.25, stop=1.75)  # no sample inside
    np.testing.assert_array_equal(v, [12.5, 17.5])


@pytest.mark.parametrize(
    "function, kwargs, expected",
    [
        (wm.maximum, {"start": 2.5}, 15.0),  # interpolated end sample is the largest
        (wm.minimum, {"start": 0.5, "stop": 2.0}, 5.0),
        (wm.final, {"stop": 2.5}, 15.0),
        (wm.final, {}, 10.0),
        (wm.integral, {}, 5 + 15 + 15),  # trapezoids by hand
    ],
)
def test_single_value_measurements(function, kwargs, expected):
    assert function(T4, V4, **kwargs) == expected


def test_peak_is_the_largest_magnitude():
    assert wm.peak(T4, -V4) == 20.0
    assert wm.peak(T4, V4 - 15.0) == 15.0  # -15 at t = 0 beats +5 at t = 2


def test_value_at_interpolates_and_refuses_times_outside_the_run():
    assert wm.value_at(T4, V4, 2.25) == 17.5
    with pytest.raises(MeasurementError, match="outside the run"):
        wm.value_at(T4, V4, 3.5)


RUN_T = np.linspace(0, 4e-3, 41)
RUN_V = np.sin(RUN_T * 1e3)


@pytest.mark.parametrize(
    "start, stop, message",
    [
        (5e-3, None, "window from=5 ms starts after the run ends at 4 ms"),
        (None, -1e-3, "window to=-1 ms ends before the run starts at 0 s"),
        (2e-3, 2e-3, "from=2 ms to=2 ms is empty"),
        (3e-3, 1e-3, "from=3 ms to=1 ms is empty"),
        (-1e-6, 2e-3, "from=-1 us starts before the run starts"),
        (1e-3, 4.5e-3, "to=4.5 ms ends after the run ends"),
    ],
)
def test_window_errors_name_the_times(start, stop, message):
    with pytest.raises(MeasurementError, match=message):
        wm.mean(RUN_T, RUN_V, start=start, stop=stop)


def test_window_end_off_by_rounding_is_taken_as_the_run_end():
    assert wm.final(RUN_T, RUN_V, stop=4e-3 * (1 + 1e-13)) == RUN_V[-1]
    assert wm.window(RUN_T, RUN_V, start=-1e-18)[0][0] == 0.0


@pytest.mark.parametrize(
    "time, values, message",
    [
        ([], [], "no samples"),
        ([1e-3], [2.0], "single instant"),
        ([0.0, 1.0], [1.0], "one value per time point"),
        ([0.0, 2.0, 1.0], [0.0, 0.0, 0.0], "runs backwards at sample 2"),
        ([0.0, 1.0], [0.0, math.nan], "nan at t = 1 s"),
    ],
)
def test_malformed_waveforms_are_refused(time, values, message):
    with pytest.raises(MeasurementError, match=message):
        wm.mean(np.array(time), np.array(values))


def test_measurement_error_is_a_value_error():
    assert issubclass(MeasurementError, ValueError)


# ---------------------------------------------------------------------------
# discontinuities stored as two samples at one time

STEP_T = np.array([0.0, 1.0, 1.0, 2.0])  # unit step at t = 1
STEP_V = np.array([0.0, 0.0, 1.0, 1.0])


def test_duplicate_samples_add_nothing_to_integrals():
    # unit step at t = 1 on [0, 2]: integral 1, mean 1/2, rms sqrt(1/2) (by hand)
    assert wm.integral(STEP_T, STEP_V) == 1.0
    assert wm.mean(STEP_T, STEP_V) == 0.5
    assert wm.rms(STEP_T, STEP_V) == pytest.approx(math.sqrt(0.5), rel=1e-15)
    assert wm.integral(STEP_T, STEP_V, start=0.5, stop=1.5) == 0.5


def test_duplicate_samples_in_points_and_windows():
    assert wm.value_at(STEP_T, STEP_V, 1.0) == 1.0  # the value just after the jump
    assert wm.crossing(STEP_T, STEP_V, 0.5) == 1.0
    t, v = wm.window(STEP_T, STEP_V, start=1.0)  # closed window keeps both samples
    np.testing.assert_array_equal(t, [1.0, 1.0, 2.0])
    np.testing.assert_array_equal(v, [0.0, 1.0, 1.0])
    assert wm.final(STEP_T, STEP_V, stop=1.0) == 1.0
    assert wm.settling_fraction(STEP_T, STEP_V, 0.02) == 1.0
    assert wm.overshoot(STEP_T, STEP_V, start=1.0) == 0.0
