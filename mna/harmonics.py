"""Harmonics of a waveform over a whole number of periods: Fourier series, RMS, crest factor, THD.

The solver's samples are joined by straight lines (as everywhere in mna's
measurements), and the Fourier coefficients of that piecewise-linear curve
are integrated **exactly**, segment by segment:

    c_n = 1/(K T) * integral over K periods of x(t) exp(-i n w (t - t_s)) dt

with ``w = 2 pi / T`` and ``t_s`` the start of the window, so unequal steps,
the short steps after an event and the two samples at one instant of a
switching edge all count with their true weight; nothing is resampled. The
window is the last ``K`` whole periods of the run (every period of a
``simulate periodic`` result). Over whole periods the rectangular window is
exact: each harmonic falls on a bin of its own and nothing leaks into its
neighbours. Over a window that is not a whole number of periods, a
harmonic's energy spreads into the others (leakage), and no window function
fully undoes that; that is why the window is cut to whole periods.

With ``x(t) = dc + sum A_n cos(n w (t - t_s) + phi_n)``:

- ``amplitude[n] = A_n = 2 |c_n|`` (peak value; ``A_n / sqrt(2)`` is the
  harmonic's RMS), ``phase[n] = phi_n = arg c_n`` (rad);
- ``dc = c_0``; ``rms``, ``peak`` (largest magnitude) and
  ``crest = peak / rms`` over the window, exactly for the line segments;
- ``thd`` (total harmonic distortion) ``= sqrt(sum_{n=2..40} A_n^2) / A_1``:
  harmonics 2 to 40 against the fundamental, as in IEC 61000 practice
  (IEC 61000-2-2 and -4-7 count harmonics up to the 40th; the ratio is to
  the fundamental, not to the total RMS).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .errors import MeasurementError

#: The highest harmonic that THD counts (IEC 61000 practice).
THD_HARMONICS = 40
#: |theta| below this uses the power series of the segment weights.
_SERIES_BELOW = 0.05


@dataclass(frozen=True)
class Spectrum:
    """The harmonics of one waveform over ``periods`` whole periods from ``start`` (s).

    Arrays are indexed by harmonic number ``order`` (0 is the DC value):
    ``frequency`` (Hz), ``amplitude`` (peak, in the waveform's unit; at 0
    the DC value itself), ``phase`` (rad, cosine reference at ``start``).
    """

    period: float
    periods: int
    start: float
    order: np.ndarray
    frequency: np.ndarray
    amplitude: np.ndarray
    phase: np.ndarray
    dc: float
    rms: float
    peak: float

    @property
    def crest(self) -> float:
        """Peak over RMS (a sine has sqrt(2))."""
        return self.peak / self.rms if self.rms > 0 else math.nan

    def thd(self, up_to: int = THD_HARMONICS) -> float:
        """Total harmonic distortion: harmonics 2..``up_to`` (RMS sum) over the fundamental."""
        if up_to > self.order[-1]:
            raise ValueError(f"this spectrum holds harmonics up to {self.order[-1]}, not {up_to}")
        a1 = self.amplitude[1]
        if not a1 > 0:
            return math.nan
        return float(np.sqrt(np.sum(self.amplitude[2:up_to + 1] ** 2)) / a1)

    def harmonic_rms(self, n: int) -> float:
        """The RMS value of harmonic ``n`` (the DC value for n = 0)."""
        return float(self.amplitude[n] / math.sqrt(2.0)) if n else float(self.amplitude[0])


def _weights(theta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """phi1 = int_0^1 exp(-i theta u) du and phi2 = int_0^1 u exp(-i theta u) du, elementwise."""
    small = np.abs(theta) < _SERIES_BELOW
    with np.errstate(divide="ignore", invalid="ignore"):
        e = np.exp(-1j * theta)
        phi1 = (1.0 - e) / (1j * theta)
        phi2 = e * (1j / theta + 1.0 / theta ** 2) - 1.0 / theta ** 2
    if small.any():
        z = -1j * theta[small]
        s1 = np.zeros(z.shape, dtype=complex)
        s2 = np.zeros(z.shape, dtype=complex)
        term = np.ones(z.shape, dtype=complex)  # z^k / k!
        for k in range(8):
            s1 += term / (k + 1)
            s2 += term / (k + 2)
            term = term * z / (k + 1)
        phi1[small] = s1
        phi2[small] = s2
    return phi1, phi2


def whole_periods(time: np.ndarray, period: float) -> tuple[float, int]:
    """Start (s) and count of the last whole periods in ``time``; MeasurementError if none."""
    span = float(time[-1] - time[0])
    count = int(math.floor(span / period + 1e-9))
    if count < 1:
        raise MeasurementError(f"harmonics need at least one whole period of {period:.6g} s; the run covers "
                               f"{span:.6g} s")
    start = max(float(time[-1]) - count * period, float(time[0]))
    return start, count


def _window(time: np.ndarray, values: np.ndarray, start: float) -> tuple[np.ndarray, np.ndarray]:
    """The samples from ``start`` on, with a point interpolated at ``start``."""
    k = int(np.searchsorted(time, start, side="right"))
    if k > 0 and time[k - 1] == start:
        return time[k - 1:], values[k - 1:]
    if k == 0:
        return time, values
    v0 = values[k - 1] + (values[k] - values[k - 1]) * (start - time[k - 1]) / (time[k] - time[k - 1])
    return np.concatenate([[start], time[k:]]), np.concatenate([[v0], values[k:]])


def spectrum(time: np.ndarray, values: np.ndarray, period: float, harmonics: int = THD_HARMONICS) -> Spectrum:
    """Harmonics 0..``harmonics`` of a sampled waveform over its last whole periods.

    ``time`` (s) ascending (repeated instants allowed: both sides of a
    jump), ``values`` in any unit, ``period`` (s) the fundamental's period.
    """
    time = np.asarray(time, dtype=float)
    values = np.asarray(values, dtype=float)
    if not (period > 0 and math.isfinite(period)):
        raise MeasurementError(f"the fundamental period must be positive, got {period!r}")
    if time.size < 2:
        raise MeasurementError("harmonics need at least two samples")
    start, count = whole_periods(time, period)
    t, x = _window(time, values, start)
    h = np.diff(t)
    keep = h > 0
    t0, h, x0, dx = t[:-1][keep], h[keep], x[:-1][keep], np.diff(x)[keep]
    total = count * period
    order = np.arange(harmonics + 1)
    omega = 2.0 * math.pi * order[1:] / period
    coef = np.empty(harmonics + 1, dtype=complex)
    coef[0] = np.sum(h * (x0 + 0.5 * dx)) / total
    chunk = max(1, 2_000_000 // max(h.size, 1))
    for lo in range(0, omega.size, chunk):
        w = omega[lo:lo + chunk, None]
        phi1, phi2 = _weights(w * h[None, :])
        seg = h * np.exp(-1j * w * (t0 - start)[None, :]) * (x0 * phi1 + dx * phi2)
        coef[1 + lo:1 + lo + w.shape[0]] = seg.sum(axis=1) / total
    amplitude = np.abs(coef)
    amplitude[1:] *= 2.0
    x1 = x0 + dx
    mean_square = np.sum(h * (x0 * x0 + x0 * x1 + x1 * x1)) / (3.0 * total)
    return Spectrum(
        period=float(period), periods=count, start=start, order=order, frequency=order / period,
        amplitude=amplitude, phase=np.angle(coef), dc=float(coef[0].real),
        rms=float(math.sqrt(max(mean_square, 0.0))), peak=float(np.max(np.abs(x))),
    )


def period_of_result(result) -> float | None:
    """The period (s) of a ``simulate periodic`` result, or None for other runs."""
    if getattr(result, "analysis", "") == "periodic":
        return float(result.statistics["period_s"])
    return None


# --------------------------------------------------------------------------
# The spectrum plot.

_BAR = "#2f6f4f"  # the project's spectrum look: dark green bars, amber fundamental
_FUNDAMENTAL = "#c77d12"


def plot_spectra(path: str | Path, waves, period: float, title: str, harmonics: int = THD_HARMONICS):
    """One panel per recorded signal: harmonic amplitudes as bars (log scale),
    the DC value and THD in the panel's corner. Returns the path, or None if
    nothing could be plotted."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from .results import write_atomic

    labels = [label for label in waves.labels() if np.all(np.isfinite(waves[label]))]
    if not labels:
        return None
    fig, axes = plt.subplots(len(labels), 1, figsize=(7.5, 1.9 + 1.7 * len(labels)), squeeze=False)
    for ax, label in zip(axes[:, 0], labels):
        s = spectrum(waves.time, waves[label], period, harmonics)
        unit = waves.units.get(label, "")
        amps = s.amplitude[1:]
        floor = max(float(amps.max()) * 1e-6, 1e-300)
        shown = amps > floor
        ax.bar(s.order[1:][shown], amps[shown] - floor, width=0.6, color=_BAR, bottom=floor)
        if amps[0] > floor:
            ax.bar([1], [amps[0] - floor], width=0.6, color=_FUNDAMENTAL, bottom=floor)
        ax.set_yscale("log")
        ax.set_xlim(0.3, harmonics + 0.7)
        ax.set_ylabel(f"{label} peak" + (f" ({unit})" if unit else ""))
        thd = s.thd() if harmonics >= THD_HARMONICS else math.nan
        note = f"DC {s.dc:.4g} {unit}   RMS {s.rms:.4g} {unit}   THD(2-40) {thd * 100:.3g} %"
        ax.text(0.99, 0.95, note, transform=ax.transAxes, ha="right", va="top", fontsize=8,
                bbox={"facecolor": "white", "edgecolor": "#bbbbbb", "boxstyle": "round,pad=0.3"})
        ax.grid(axis="y", color="#dddddd", linewidth=0.6)
        ax.spines[["top", "right"]].set_visible(False)
    axes[-1, 0].set_xlabel(f"harmonic number (fundamental {1.0 / period:.6g} Hz)")
    fig.suptitle(f"{title}: harmonics over {s.periods} period{'s' if s.periods != 1 else ''}", fontsize=10)
    fig.tight_layout()
    import io

    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110)
    plt.close(fig)
    return write_atomic(Path(path), buf.getvalue())
