"""Fourier coefficients, RMS, crest factor and THD against closed-form series.

Series (any table of Fourier series; here M. R. Spiegel, *Mathematical
Handbook of Formulas and Tables* (Schaum), section "Fourier series", from
memory; the same series are worked in Oppenheim & Willsky, *Signals and
Systems*, ch. 3):

- square wave of amplitude 1 (+1 for the first half period, -1 for the
  second): x = (4/pi) sum_{n odd} sin(n w t)/n, so A_n = 4/(pi n) for odd n;
- triangle wave of amplitude 1, -1 at t = 0, +1 at T/2:
  x = -(8/pi^2) sum_{n odd} cos(n w t)/n^2, so A_n = 8/(pi n)^2 for odd n;
- full-wave rectified sine |sin(pi t / T)| (period T):
  x = 2/pi - (4/pi) sum_{n>=1} cos(2 pi n t/T)/(4 n^2 - 1).

THD of the square wave: sqrt(sum_{n odd >= 3} 1/n^2) = sqrt(pi^2/8 - 1) =
48.3 % over all harmonics; over harmonics 2..40 (the IEC 61000 count) the
finite sum gives 47.0 %.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from mna.errors import MeasurementError
from mna.harmonics import spectrum

T = 1e-3


def _square(periods: int = 1, rng=None) -> tuple[np.ndarray, np.ndarray]:
    """An exact square wave as a solver would record it: unequal steps, both sides of every edge."""
    t, x = [], []
    for k in range(periods):
        for lo, hi, level in ((0.0, 0.5, 1.0), (0.5, 1.0, -1.0)):
            inner = np.sort(rng.uniform(lo, hi, 7)) if rng is not None else np.array([])
            pts = np.concatenate([[lo], inner, [hi]])
            t.extend((k + pts) * T)
            x.extend([level] * pts.size)
    return np.array(t), np.array(x)


def test_square_wave_coefficients_match_the_series():
    t, x = _square(periods=3, rng=np.random.default_rng(1))
    s = spectrum(t, x, T, harmonics=15)
    assert s.periods == 3
    for n in range(1, 16):
        expected = 4 / (math.pi * n) if n % 2 else 0.0
        # Exact integration of the line segments: only round-off remains.
        assert s.amplitude[n] == pytest.approx(expected, abs=1e-12)
    # sin(n w t) = cos(n w t - 90 deg): the phase of every odd harmonic is -pi/2.
    assert s.phase[1] == pytest.approx(-math.pi / 2, abs=1e-9)
    assert s.phase[3] == pytest.approx(-math.pi / 2, abs=1e-9)
    assert s.dc == pytest.approx(0.0, abs=1e-12)
    assert s.rms == pytest.approx(1.0, rel=1e-12)
    assert s.crest == pytest.approx(1.0, rel=1e-12)


def test_square_wave_thd():
    t, x = _square()
    s40 = spectrum(t, x, T)  # harmonics 2..40
    finite = math.sqrt(sum(1 / n ** 2 for n in range(3, 41, 2)))
    assert s40.thd() == pytest.approx(finite, rel=1e-9)
    assert s40.thd() == pytest.approx(0.470, abs=5e-4)
    many = spectrum(t, x, T, harmonics=4001)
    assert many.thd(4001) == pytest.approx(math.sqrt(sum(1 / n ** 2 for n in range(3, 4002, 2))), rel=1e-9)
    # All harmonics: sqrt(pi^2/8 - 1) = 48.34 %; the tail beyond 4001 takes
    # about 1/(2*4001) from the sum of squares 0.2337, i.e. 2.7e-4 of THD.
    assert many.thd(4001) == pytest.approx(math.sqrt(math.pi ** 2 / 8 - 1), rel=4e-4)
    assert many.thd(4001) == pytest.approx(0.483, abs=5e-4)


def test_triangle_coefficients_match_the_series():
    t = np.linspace(0.0, 2 * T, 5)
    x = np.array([-1.0, 1.0, -1.0, 1.0, -1.0])
    s = spectrum(t, x, T, harmonics=9)
    for n in range(1, 10):
        expected = 8 / (math.pi * n) ** 2 if n % 2 else 0.0
        assert s.amplitude[n] == pytest.approx(expected, abs=1e-12)
    # -cos(n w t): phase pi for odd harmonics.
    assert abs(s.phase[1]) == pytest.approx(math.pi, abs=1e-9)
    assert s.rms == pytest.approx(1 / math.sqrt(3), rel=1e-12)  # triangle: amplitude/sqrt(3)
    assert s.crest == pytest.approx(math.sqrt(3), rel=1e-12)


def test_rectified_sine_coefficients_match_the_series():
    # 4001 samples per period: the straight lines between samples err by
    # (h^2/8) x'' ~ 3e-7 of the amplitude, far below the 1e-5 asked.
    t = np.linspace(0.0, T, 4001)
    x = np.abs(np.sin(math.pi * t / T))
    s = spectrum(t, x, T, harmonics=6)
    assert s.dc == pytest.approx(2 / math.pi, rel=1e-5)
    for n in range(1, 7):
        assert s.amplitude[n] == pytest.approx(4 / (math.pi * (4 * n * n - 1)), rel=1e-4, abs=1e-7)
    assert s.rms == pytest.approx(1 / math.sqrt(2), rel=1e-6)


def test_a_sine_with_a_phase_and_a_record_that_is_not_whole_periods():
    # 2.6 periods recorded: the window is the last 2 whole periods (from
    # 0.6 T), where x = 3 + 2 cos(w (t - 0.6 T) + (0.3 + 0.6*2 pi)).
    t = np.linspace(0.0, 2.6 * T, 26001)
    x = 3.0 + 2.0 * np.cos(2 * math.pi * t / T + 0.3)
    s = spectrum(t, x, T, harmonics=3)
    assert s.periods == 2 and s.start == pytest.approx(0.6 * T, rel=1e-12)
    assert s.dc == pytest.approx(3.0, rel=1e-7)
    assert s.amplitude[1] == pytest.approx(2.0, rel=1e-6)
    expected_phase = math.remainder(0.3 + 0.6 * 2 * math.pi, 2 * math.pi)
    assert s.phase[1] == pytest.approx(expected_phase, abs=1e-6)
    assert s.amplitude[2] < 1e-6
    assert s.crest == pytest.approx(5.0 / math.sqrt(9.0 + 2.0), rel=1e-6)  # peak 5, rms sqrt(3^2 + 2^2/2)


def test_less_than_one_period_is_refused():
    t = np.linspace(0.0, 0.5 * T, 11)
    with pytest.raises(MeasurementError, match="at least one whole period"):
        spectrum(t, np.sin(t), T)
