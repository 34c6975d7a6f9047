"""Output files of a run: the JSON summary and the PNG plot.

Both are written atomically (whole or not at all). matplotlib is imported
only when a plot is drawn, so ``mna --help`` stays quick.
"""

from __future__ import annotations

import io
import json
import math
from pathlib import Path
from typing import Any

import numpy as np

from .results import OperatingPoint, Waveforms, write_atomic

# Our own palette: dark teal, amber, brick, slate blue, olive, plum.
PALETTE = ["#1b6f77", "#d08c1b", "#a4402f", "#4a5d9c", "#6f7f2a", "#7d4a7a"]


def _clean(value: Any) -> Any:
    if isinstance(value, float):
        return value if math.isfinite(value) else str(value)
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    if isinstance(value, np.generic):
        return _clean(value.item())
    return value


def summary(circuit, results: list, outputs: dict[str, str] | None = None,
            extra: dict[str, Any] | None = None) -> dict[str, Any]:
    """The run summary as plain data (what ``summary.json`` holds)."""
    analyses = []
    for request, result in zip(circuit.analyses, results):
        entry: dict[str, Any] = {"analysis": request.analysis, "settings": dict(request.settings)}
        if isinstance(result, OperatingPoint):
            entry["operating_point"] = {k: {"value": v, "unit": result.units.get(k, "")}
                                        for k, v in result.values.items()}
            entry["status"] = "ok"
        elif getattr(result, "analysis", "") == "frequency":
            entry["status"] = result.status
            entry["signals"] = {k: result.units.get(k, "") for k in result.labels()}
            entry["frequency_hz"] = {"from": float(result.frequency[0]), "to": float(result.frequency[-1]),
                                     "points": int(result.frequency.size)}
        elif isinstance(result, Waveforms):
            entry["status"] = result.status
            if result.message:
                entry["message"] = result.message
            entry["signals"] = {k: result.units.get(k, "") for k in result.labels()}
        entry["statistics"] = dict(result.statistics)
        analyses.append(entry)
    data = {
        "circuit": {"name": circuit.name, "title": circuit.title, "file": circuit.file,
                    "elements": len(circuit.elements), "nodes": len(circuit.nodes) - 2},
        "analyses": analyses,
        "warnings": list(circuit.warnings),
        "outputs": outputs or {},
    }
    if extra:
        data.update(extra)
    return _clean(data)


def write_json(path: str | Path, data: dict[str, Any]) -> Path:
    return write_atomic(path, json.dumps(data, indent=2, sort_keys=False) + "\n")


def _time_scale(t_end: float) -> tuple[float, str]:
    for factor, unit in ((1.0, "s"), (1e-3, "ms"), (1e-6, "us"), (1e-9, "ns")):
        if t_end >= factor:
            return factor, unit
    return 1.0, "s"


_AXIS_PREFIXES = {-15: "f", -12: "p", -9: "n", -6: "\u00b5", -3: "m", 0: "", 3: "k", 6: "M", 9: "G", 12: "T"}


def value_scale(series, unit: str) -> tuple[float, str]:
    """The engineering prefix for an axis: (divide values by, unit shown), e.g. (1e-6, "µH").

    Chosen from the largest magnitude plotted, so tick labels read 0 to
    999 of the prefixed unit rather than 1e-5 H. A unit that takes no prefix
    (rpm, %, none) is left as it is.
    """
    import numpy as np

    from .units import _takes_prefix

    peaks = [float(np.nanmax(np.abs(v[np.isfinite(v)]))) for v in series if np.any(np.isfinite(v))]
    peak = max(peaks, default=0.0)
    if not unit or peak == 0.0 or not _takes_prefix(unit.replace("\u00b5", "u")):
        return 1.0, unit
    exponent = int(3 * np.floor(np.log10(peak) / 3))
    exponent = min(max(exponent, -15), 12)
    return 10.0 ** exponent, _AXIS_PREFIXES[exponent] + unit


def plot_waveforms(path: str | Path, waves: Waveforms, title: str) -> Path:
    """One panel per unit (signals of one unit share a panel), shared time axis."""
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    groups: dict[str, list[str]] = {}
    for label in waves.labels():
        groups.setdefault(waves.units.get(label, ""), []).append(label)
    panels = list(groups.items())[:6]
    t_end = float(waves.time[-1]) if waves.time.size else 1.0
    factor, t_unit = _time_scale(t_end)
    fig, axes = plt.subplots(len(panels) or 1, 1, sharex=True, figsize=(8.5, 2.2 + 1.9 * max(len(panels), 1)),
                             squeeze=False)
    for ax, (unit, labels) in zip(axes[:, 0], panels):
        shown = labels[:6]
        scale, shown_unit = value_scale([waves[label] for label in shown], unit)
        for j, label in enumerate(shown):
            ax.plot(waves.time / factor, waves[label] / scale, color=PALETTE[j % len(PALETTE)], linewidth=1.2,
                    label=label)
        ax.set_ylabel(f"[{shown_unit}]" if shown_unit else "[1]")
        ax.grid(True, color="#d9d9d9", linewidth=0.6)
        # Beside the panel, never over the traces.
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0.0, fontsize=8, frameon=False)
    axes[-1, 0].set_xlabel(f"time [{t_unit}]")
    fig.suptitle(title, fontsize=11)
    fig.tight_layout()
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110)
    plt.close(fig)
    return write_atomic(path, buf.getvalue())
