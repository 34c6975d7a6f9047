"""The Bode plot of a frequency response: magnitude and phase over a log-frequency axis.

One magnitude panel per unit (log scale in that unit: ohm, V, or plain for
ratios), then one phase panel in degrees, all sharing the frequency axis.
Written atomically; matplotlib is imported only here, when a plot is drawn.
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np

from .report import PALETTE
from .results import FrequencyResponse, write_atomic

#: At most this many magnitude panels and this many curves per panel.
MAX_PANELS = 3
MAX_CURVES = 6


def plot_bode(path: str | Path, res: FrequencyResponse, title: str) -> Path:
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    groups: dict[str, list[str]] = {}
    for label in res.labels():
        groups.setdefault(res.units.get(label, ""), []).append(label)
    panels = list(groups.items())[:MAX_PANELS] or [("", [])]
    shown = [label for _, labels in panels for label in labels[:MAX_CURVES]]
    colour = {label: PALETTE[k % len(PALETTE)] for k, label in enumerate(shown)}
    heights = [3] * len(panels) + [2]
    fig, axes = plt.subplots(len(panels) + 1, 1, sharex=True, figsize=(8.5, 1.6 + 2.0 * sum(heights) / 2.5),
                             gridspec_kw={"height_ratios": heights}, squeeze=False)
    f = res.frequency
    for ax, (unit, labels) in zip(axes[:-1, 0], panels):
        for label in labels[:MAX_CURVES]:
            mag = np.abs(res[label])
            ax.plot(f, np.where(mag > 0, mag, np.nan), color=colour[label], linewidth=1.4, label=f"|{label}|")
        ax.set_yscale("log")
        ax.set_ylabel(f"magnitude [{unit}]" if unit else "magnitude [1]")
        _grid(ax)
        ax.legend(loc="best", fontsize=8, frameon=False)
    phase_ax = axes[-1, 0]
    for label in shown:
        phase_ax.plot(f, res.phase(label), color=colour[label], linewidth=1.1, linestyle=(0, (5, 1.5)))
    phase_ax.set_ylabel("phase [deg]")
    span = _phase_span(res, shown)
    phase_ax.set_yticks(np.arange(span[0], span[1] + 1, 90 if span[1] - span[0] <= 360 else 180))
    _grid(phase_ax)
    phase_ax.set_xscale("log")
    phase_ax.set_xlabel("frequency [Hz]")
    fig.suptitle(title, fontsize=11)
    fig.tight_layout()
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110)
    plt.close(fig)
    return write_atomic(path, buf.getvalue())


def _grid(ax) -> None:
    ax.grid(True, which="major", color="#cfcfcf", linewidth=0.7)
    ax.grid(True, which="minor", color="#ececec", linewidth=0.5)


def _phase_span(res: FrequencyResponse, labels: list[str]) -> tuple[int, int]:
    """Phase axis limits on whole multiples of 90 deg around every curve."""
    if not labels:
        return -180, 180
    values = np.concatenate([res.phase(label) for label in labels])
    values = values[np.isfinite(values)]
    if not values.size:
        return -180, 180
    low = int(np.floor(values.min() / 90.0)) * 90
    high = int(np.ceil(values.max() / 90.0)) * 90
    return (low, high) if high > low else (low - 90, high + 90)
