"""Pictures of a study: a histogram per measurement with its check limits; for a
two-parameter sweep a map of each measurement over the grid with the failing region;
for a one-parameter sweep each measurement against the swept value.

matplotlib is imported only here, when a picture is drawn. The look is the
project's own (palette of :mod:`mna.report`): teal bars, amber limit lines
with the passing side shaded pale green, failing cells of a map hatched
in brick red.
"""

from __future__ import annotations

import io
import re
from pathlib import Path

import numpy as np

from .report import PALETTE
from .results import write_atomic
from .units import format_si

TEAL, AMBER, BRICK = PALETTE[0], PALETTE[1], PALETTE[2]
PASS_SHADE = "#e3f1e0"


def _pyplot():
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def _save(fig, path: Path) -> Path:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110)
    _pyplot().close(fig)
    return write_atomic(path, buf.getvalue())


def file_stem(name: str) -> str:
    """A measurement or check as part of a file name: ``t_peak``, ``check-12``."""
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", name).strip("_") or "value"


def _scale(values: np.ndarray, unit: str) -> tuple[float, str]:
    """A factor and prefixed unit for an axis (``1e-3, "ms"``), from the values' magnitude."""
    finite = np.abs(values[np.isfinite(values)])
    if not unit or finite.size == 0 or finite.max() == 0:
        return 1.0, unit
    shown = format_si(float(finite.max()), unit)
    number, _, prefixed = shown.partition(" ")
    try:
        factor = float(finite.max()) / float(number)
    except ValueError:
        return 1.0, unit
    return (factor, prefixed) if prefixed else (1.0, unit)


def histogram(path: str | Path, values: np.ndarray, name: str, unit: str, limits: list[tuple[str, list[float]]],
              title: str, failed_runs: int = 0) -> Path:
    """A histogram of one measurement over the runs, with each check's limit lines.

    ``limits`` holds ``(check text, [limit, ...], operator)`` in SI; the
    passing side of each check is shaded.
    """
    plt = _pyplot()
    finite = values[np.isfinite(values)]
    factor, shown_unit = _scale(np.concatenate([finite, *[np.asarray(v) for _, v, _ in limits]]) if limits
                                else finite, unit)
    fig, ax = plt.subplots(figsize=(7.5, 4.2))
    bins = max(5, min(50, int(np.sqrt(max(finite.size, 1))) * 2))
    if finite.size:
        ax.hist(finite / factor, bins=bins, color=TEAL, edgecolor="white", linewidth=0.6, zorder=3)
    marks = [x / factor for _, lines, _ in limits for x in lines]
    if finite.size or marks:
        lo, hi = ax.get_xlim() if finite.size else (min(marks), max(marks))
        if marks:
            lo, hi = min([lo] + marks), max([hi] + marks)
        pad = 0.04 * (hi - lo) or 1.0
        ax.set_xlim(lo - pad, hi + pad)  # every limit in view; the shading must not widen it
    for text, lines, op in limits:
        lo, hi = ax.get_xlim()
        span = ((lo, lines[0] / factor) if op in ("<", "<=") else (lines[0] / factor, hi) if op in (">", ">=")
                else (lines[0] / factor, lines[-1] / factor))
        ax.axvspan(*span, color=PASS_SHADE, zorder=1, linewidth=0)
    for text, lines, op in limits:
        for j, x in enumerate(lines):
            ax.axvline(x / factor, color=AMBER, linewidth=2.0, linestyle=(0, (6, 3)), zorder=4,
                       label=f"limit: {text}" if j == 0 else None)
    ax.set_xlabel(f"{name} [{shown_unit}]" if shown_unit else name)
    ax.set_ylabel("runs")
    note = f"{finite.size} runs with a value" + (f", {failed_runs} without" if failed_runs else "")
    if finite.size:
        note += (f"; mean {format_si(float(finite.mean()), unit)}, "
                 f"std {format_si(float(finite.std(ddof=1)) if finite.size > 1 else 0.0, unit)}")
    ax.set_title(f"{title}\n{note}", fontsize=9.5, loc="left")
    ax.grid(True, axis="y", color="#d9d9d9", linewidth=0.6, zorder=0)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    if limits:
        ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize=8, frameon=False)
    fig.tight_layout()
    return _save(fig, Path(path))


def grid_map(path: str | Path, x: np.ndarray, y: np.ndarray, z: np.ndarray, failing: np.ndarray,
             broken: np.ndarray, labels: tuple[str, str, str], units: tuple[str, str, str],
             scales: tuple[str, str], title: str, others: np.ndarray | None = None) -> Path:
    """A map of one measurement over a two-parameter sweep.

    ``x`` and ``y`` are the axes' values (SI), ``z[i, j]`` the measurement at
    ``(x[i], y[j])``, ``failing[i, j]`` where a check on this measurement
    fails (hatched, outlined), ``others[i, j]`` where only another check
    fails (a dot), ``broken[i, j]`` where the run itself failed (a cross).
    """
    from matplotlib.patches import Rectangle

    plt = _pyplot()
    fx, ux = _scale(x, units[0])
    fy, uy = _scale(y, units[1])
    fz, uz = _scale(z, units[2])
    fig, ax = plt.subplots(figsize=(7.5, 5.2))
    ex, ey = _edges(x / fx, scales[0] == "log"), _edges(y / fy, scales[1] == "log")
    mesh = ax.pcolormesh(ex, ey, np.ma.masked_invalid(z / fz).T, shading="flat", cmap="cividis")
    bar = fig.colorbar(mesh, ax=ax)
    bar.set_label(f"{labels[2]} [{uz}]" if uz else labels[2])
    first = True
    for i, j in zip(*np.nonzero(failing)):
        ax.add_patch(Rectangle((ex[i], ey[j]), ex[i + 1] - ex[i], ey[j + 1] - ey[j], facecolor="none",
                               edgecolor=BRICK, hatch="///", linewidth=1.5,
                               label=f"fails a check on {labels[2]}" if first else None))
        first = False
    X, Y = np.meshgrid(x / fx, y / fy, indexing="ij")
    if others is not None and (others & ~failing & ~broken).any():
        only = others & ~failing & ~broken
        ax.plot(X[only], Y[only], linestyle="none", marker="o", markersize=6, color="white",
                markeredgecolor=BRICK, label="fails another check")
    if broken.any():
        ax.plot(X[broken], Y[broken], linestyle="none", marker="x", markersize=8, color="black",
                label="run failed")
    for axis, values, scale in ((ax.xaxis, x / fx, scales[0]), (ax.yaxis, y / fy, scales[1])):
        if scale == "log":
            (ax.set_xscale if axis is ax.xaxis else ax.set_yscale)("log")
        axis.set_ticks(values if len(values) <= 12 else values[:: int(np.ceil(len(values) / 12))])
        axis.set_ticklabels([f"{v:.3g}" for v in axis.get_ticklocs()])
        axis.set_minor_locator(_NoTicks())
    ax.set_xlim(ex[0], ex[-1])
    ax.set_ylim(ey[0], ey[-1])
    ax.set_xlabel(f"{labels[0]} [{ux}]" if ux else labels[0])
    ax.set_ylabel(f"{labels[1]} [{uy}]" if uy else labels[1])
    ax.set_title(title, fontsize=9.5, loc="left")
    if failing.any() or broken.any() or (others is not None and others.any()):
        ax.legend(loc="upper left", bbox_to_anchor=(0.0, -0.12), ncol=3, fontsize=8, frameon=False)
    fig.tight_layout()
    return _save(fig, Path(path))


def _NoTicks():
    from matplotlib.ticker import NullLocator

    return NullLocator()


def _edges(centres: np.ndarray, log: bool) -> np.ndarray:
    """Cell edges around sweep values: midpoints (geometric on a log axis), the ends mirrored."""
    c = np.log(centres) if log and np.all(centres > 0) else np.asarray(centres, dtype=float)
    if c.size == 1:
        half = abs(c[0]) * 0.1 or 0.5
        e = np.array([c[0] - half, c[0] + half]) if not log else np.array([c[0] - 0.1, c[0] + 0.1])
    else:
        mid = (c[1:] + c[:-1]) / 2
        e = np.concatenate([[2 * c[0] - mid[0]], mid, [2 * c[-1] - mid[-1]]])
    return np.exp(e) if log and np.all(centres > 0) else e


def study_pictures(out_dir: Path, table, study, title: str) -> dict[str, str]:
    """Every picture of a study: histograms always, maps for a two-parameter sweep."""
    outputs: dict[str, str] = {}
    broken_runs = int(np.isin(table["status"], ["input", "simulation", "internal"]).sum())
    by_measure: dict[str, list[tuple[str, list[float]]]] = {}
    for check in table.checks:
        if check.left_name is not None and check.text in table.limits:
            by_measure.setdefault(check.left_name, []).append((check.text, table.limits[check.text], check.op))
    for name in table.measures:
        png = histogram(out_dir / f"histogram-{file_stem(name)}.png", table[name], name, table.units[name],
                        by_measure.get(name, []), title, broken_runs)
        outputs[f"histogram {name}"] = str(png)
    for check in table.checks:
        if check.left_name is None:
            values = table[f"value: {check.text}"]
            limits = [(check.text, table.limits[check.text], check.op)] if check.text in table.limits else []
            png = histogram(out_dir / f"histogram-check-line{check.line}.png", values, check.text,
                            table.units[f"value: {check.text}"], limits, title, broken_runs)
            outputs[f"histogram check line {check.line}"] = str(png)
    if study.mode == "sweep" and len(study.sweep_shape) == 2:
        outputs.update(_maps(out_dir, table, study, title))
    if study.mode == "sweep" and len(study.sweep_shape) == 1:
        outputs.update(_curves(out_dir, table, study, title))
    return outputs


def curve(path: str | Path, x: np.ndarray, y: np.ndarray, failing: np.ndarray, broken: np.ndarray,
          labels: tuple[str, str], units: tuple[str, str], scale: str,
          limits: list[tuple[str, list[float], str]], title: str) -> Path:
    """One measurement against the one swept value, with its checks' limits; failing points marked."""
    plt = _pyplot()
    fx, ux = _scale(x, units[0])
    fy, uy = _scale(np.concatenate([y, *[np.asarray(v) for _, v, _ in limits]]) if limits else y, units[1])
    fig, ax = plt.subplots(figsize=(7.5, 4.2))
    ax.plot(x / fx, y / fy, color=TEAL, linewidth=1.6, marker="o", markersize=4, zorder=3)
    if failing.any():
        ax.plot(x[failing] / fx, y[failing] / fy, linestyle="none", marker="s", markersize=8,
                markerfacecolor="none", markeredgecolor=BRICK, markeredgewidth=1.6, zorder=4,
                label="a check fails")
    for text, lines, _ in limits:
        for j, level in enumerate(lines):
            ax.axhline(level / fy, color=AMBER, linewidth=2.0, linestyle=(0, (6, 3)), zorder=2,
                       label=f"limit: {text}" if j == 0 else None)
    if broken.any():
        for xb in x[broken] / fx:
            ax.axvline(xb, color="black", linewidth=0.8, linestyle=":", zorder=1)
    if scale == "log":
        from matplotlib.ticker import FuncFormatter

        ax.set_xscale("log")
        plain = FuncFormatter(lambda v, _: f"{v:g}")
        ax.xaxis.set_major_formatter(plain)
        ax.xaxis.set_minor_formatter(plain)
    ax.set_xlabel(f"{labels[0]} [{ux}]" if ux else labels[0])
    ax.set_ylabel(f"{labels[1]} [{uy}]" if uy else labels[1])
    ax.set_title(title + (f"\n{int(broken.sum())} runs failed (dotted)" if broken.any() else ""),
                 fontsize=9.5, loc="left")
    ax.grid(True, color="#d9d9d9", linewidth=0.6, zorder=0)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    if failing.any() or limits:
        ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize=8, frameon=False)
    fig.tight_layout()
    return _save(fig, Path(path))


def _curves(out_dir: Path, table, study, title: str) -> dict[str, str]:
    """For a one-line sweep: each measurement against the first swept name."""
    first = study.variable(study.sweep_labels[0][0])
    x = table[first.label]
    status = table["status"]
    broken = np.isin(status, ["input", "simulation", "internal"])
    out = {}
    names = list(table.measures) + [f"value: {c.text}" for c in table.checks if c.left_name is None]
    for name in names:
        own = [c for c in table.checks if c.left_name == name or f"value: {c.text}" == name]
        failing = np.zeros(len(table), dtype=bool)
        for c in own:
            failing |= table[f"pass: {c.text}"] == 0.0
        limits = [(c.text, table.limits[c.text], c.op) for c in own if c.text in table.limits]
        shown = name.replace("value: ", "")
        png = curve(out_dir / f"sweep-{file_stem(name.replace('value: ', 'check '))}.png", x, table[name],
                    failing, broken, (first.label, shown), (first.unit, table.units[name]),
                    study.sweep_scales[0], limits, title)
        out[f"sweep {name}"] = str(png)
    return out


def _maps(out_dir: Path, table, study, title: str) -> dict[str, str]:
    shape = study.sweep_shape
    # The first name of each sweep line labels its axis (names joined by "and" move with it).
    first_x = study.variable(study.sweep_labels[0][0])
    first_y = study.variable(study.sweep_labels[1][0])
    x = table[first_x.label].reshape(shape)[:, 0]
    y = table[first_y.label].reshape(shape)[0, :]
    status = table["status"].reshape(shape)
    broken = np.isin(status, ["input", "simulation", "internal"])
    any_failed = status == "failed"
    names = list(table.measures) + [f"value: {c.text}" for c in table.checks if c.left_name is None]
    out = {}
    for name in names:
        z = table[name].reshape(shape)
        own = [c for c in table.checks if c.left_name == name or f"value: {c.text}" == name]
        if own:
            failing = np.zeros(shape, dtype=bool)
            for c in own:
                failing |= table[f"pass: {c.text}"].reshape(shape) == 0.0
            others = any_failed & ~failing
        else:
            failing, others = any_failed, None
        stem = file_stem(name.replace("value: ", "check "))
        png = grid_map(out_dir / f"map-{stem}.png", x, y, z, failing, broken,
                       (first_x.label, first_y.label, name.replace("value: ", "")),
                       (first_x.unit, first_y.unit, table.units[name]), study.sweep_scales, title, others)
        out[f"map {name}"] = str(png)
    return out
