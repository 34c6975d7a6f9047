"""Results of analyses: :class:`Waveforms` and :class:`OperatingPoint`.

Both map a signal label exactly as written in ``record`` (``"v(sw)"``,
``"i(Lcoil)"``) to values in SI base units, and carry each signal's unit
and the run statistics. Writers for CSV live here too; every file is
written to a temporary name and moved into place, so it appears whole or
not at all.
"""

from __future__ import annotations

import csv
import io
import os
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterator

import numpy as np

from .outputs import umask



@dataclass
class OperatingPoint:
    """The DC operating point: ``op["v(out)"]`` is a float in SI units."""

    values: dict[str, float]
    units: dict[str, str]
    statistics: dict[str, Any] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    analysis: str = "dc"

    def __getitem__(self, label: str) -> float:
        try:
            return self.values[_normal(label)]
        except KeyError:
            raise KeyError(_missing(label, self.values)) from None

    def __contains__(self, label: str) -> bool:
        return _normal(label) in self.values

    def __iter__(self) -> Iterator[str]:
        return iter(self.values)

    def labels(self) -> list[str]:
        return list(self.values)


@dataclass
class Waveforms:
    """Transient results: ``res.time`` (s) and ``res["i(L1)"]``, numpy arrays.

    ``status`` is ``"ok"`` or ``"failed"``; a failed run keeps what it
    computed up to the failure and says why in ``message``.
    """

    time: np.ndarray
    signals: dict[str, np.ndarray]
    units: dict[str, str]
    statistics: dict[str, Any] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    status: str = "ok"
    message: str = ""
    analysis: str = "transient"
    #: The state at the end of the run (:class:`mna.runstate.CircuitState`: every
    #: unknown, the switch states, the time), to continue from with
    #: ``circuit.transient(until=..., start=res.final_state)``; None for a failed run.
    final_state: Any = None
    #: The method's dense output, recorded: every step's ends and two points
    #: inside it (at 1/3 and 2/3 of the step), so a cubic per step through
    #: these four points reproduces the method's own polynomial (exactly
    #: for methods of order up to 3). None for results built elsewhere.
    fine_time: np.ndarray | None = None
    fine_signals: dict[str, np.ndarray] | None = None

    def spectrum(self, label: str, harmonics: int = 40, fundamental: float | None = None):
        """Harmonics 0..``harmonics`` of one signal over the last whole periods
        (:class:`mna.harmonics.Spectrum`: arrays ``amplitude``, ``phase``,
        ``frequency``; ``dc``, ``rms``, ``crest``, ``thd()``). The period is a
        ``simulate periodic`` result's own, or ``1/fundamental`` (Hz)."""
        from .harmonics import period_of_result, spectrum

        period = 1.0 / fundamental if fundamental is not None else period_of_result(self)
        if period is None:
            raise ValueError("spectrum() of a transient run needs fundamental= (Hz)")
        return spectrum(self.time, self[label], period, harmonics)

    def __getitem__(self, label: str) -> np.ndarray:
        if label == "time":
            return self.time
        try:
            return self.signals[_normal(label)]
        except KeyError:
            raise KeyError(_missing(label, self.signals)) from None

    def __contains__(self, label: str) -> bool:
        return _normal(label) in self.signals

    def __iter__(self) -> Iterator[str]:
        return iter(self.signals)

    def labels(self) -> list[str]:
        return list(self.signals)

    def at(self, label: str, t: float) -> float:
        """A signal at time t (s), from the method's dense output."""
        return float(self.interpolate(label, np.array([float(t)]))[0])

    def dense_samples(self, label: str, per_step: int = 12) -> tuple[np.ndarray, np.ndarray]:
        """(time, values) of a signal ``per_step`` points per step, from the dense output.

        What the measurements use: a peak between two steps is found to the
        accuracy of the method's own polynomial. Without a dense output, the
        recorded samples.
        """
        if self.fine_time is None or self.fine_time.size < 4:
            return self.time, self[label]
        ft = self.fine_time
        start, end = ft[:-1:3], ft[3::3]
        body = start[:, None] + (end - start)[:, None] * (np.arange(per_step) / per_step)[None, :]
        times = np.append(body.ravel(), ft[-1])
        return times, self.interpolate(label, times)

    def interpolate(self, label: str, times: np.ndarray) -> np.ndarray:
        """A signal at the given times (s): the cubic through each step's dense points.

        Right-continuous at a jump (two samples at one time): the later value.
        Linear between the recorded samples when there is no dense output.
        """
        times = np.asarray(times, dtype=float)
        if self.fine_time is None or self.fine_time.size < 4:
            return np.interp(times, self.time, self[label])
        ft, fv = self.fine_time, self.fine_signals[_normal(label)]
        ends = ft[::3]
        k = np.clip(np.searchsorted(ends, times, side="right") - 1, 0, ends.size - 2)
        t0, t1 = ends[k], ends[k + 1]
        h = t1 - t0
        with np.errstate(invalid="ignore", divide="ignore"):
            th = np.where(h > 0, (times - t0) / np.where(h > 0, h, 1.0), 1.0)
        y = fv[3 * k[:, None] + np.arange(4)[None, :]]
        nodes = (0.0, 1.0 / 3.0, 2.0 / 3.0, 1.0)
        out = np.zeros(times.shape)
        for a in range(4):
            w = np.ones(times.shape)
            for b in range(4):
                if b != a:
                    w *= (th - nodes[b]) / (nodes[a] - nodes[b])
            out += w * y[:, a]
        return out

    def to_csv(self, path: str | Path) -> Path:
        """Write ``time`` then one column per signal (SI values); atomic."""
        buf = io.StringIO()
        writer = csv.writer(buf, lineterminator="\n")
        labels = self.labels()
        writer.writerow(["time", *labels])
        columns = np.column_stack([self.time] + [self.signals[k] for k in labels])
        np.savetxt(buf, columns, delimiter=",", fmt="%.10g")
        return write_atomic(path, buf.getvalue())


def _normal(label: str) -> str:
    """``v( a->b )`` -> ``v(a -> b)``: the canonical spelling of a label.

    The refused comma form ``v(a, b)`` becomes ``v(a, b)``, which no result
    holds; the did-you-mean of :func:`_missing` then shows ``v(a -> b)``.
    """
    label = label.strip()
    if "(" in label and label.endswith(")"):
        func, _, rest = label.partition("(")
        parts = [", ".join(a.strip() for a in part.split(",")) for part in rest[:-1].split("->")]
        return f"{func.strip()}({' -> '.join(p.strip() for p in parts)})"
    return label


def _missing(label: str, have) -> str:
    import difflib

    close = difflib.get_close_matches(_normal(label).replace(", ", " -> "), list(have), n=3)
    more = f"; did you mean {', '.join(close)}?" if close else f"; recorded: {', '.join(list(have)[:12])}"
    return f"no signal {label!r} in these results{more}"


def write_atomic(path: str | Path, text: str | bytes) -> Path:
    """Write a whole file or nothing: temporary file in the same folder, then rename."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    mode = "wb" if isinstance(text, bytes) else "w"
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    try:
        with os.fdopen(fd, mode, **({} if mode == "wb" else {"encoding": "utf-8", "newline": ""})) as fh:
            fh.write(text)
        os.chmod(tmp, 0o666 & ~umask())  # (mkstemp makes the file private to the user)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise
    return path


@dataclass
class FrequencyResponse:
    """Small-signal results: ``res.frequency`` (Hz) and ``res["v(out)"]``, complex arrays (SI).

    Each quantity is a phasor per frequency: its magnitude is the small-signal
    amplitude (the unit of the quantity, ohm for ``z(a -> b)``), its angle the
    phase against the stimuli.
    """

    frequency: np.ndarray
    signals: dict[str, np.ndarray]
    units: dict[str, str]
    statistics: dict[str, Any] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    status: str = "ok"
    message: str = ""
    analysis: str = "frequency"

    def __getitem__(self, label: str) -> np.ndarray:
        if label == "frequency":
            return self.frequency
        try:
            return self.signals[_normal_quantity(label)]
        except KeyError:
            raise KeyError(_missing(label, self.signals)) from None

    def __contains__(self, label: str) -> bool:
        return _normal_quantity(label) in self.signals

    def __iter__(self) -> Iterator[str]:
        return iter(self.signals)

    def labels(self) -> list[str]:
        return list(self.signals)

    def magnitude(self, label: str) -> np.ndarray:
        """|x| in the quantity's unit."""
        return np.abs(self[label])

    def decibels(self, label: str) -> np.ndarray:
        """20*log10(|x|), against 1 of the quantity's unit (1 V, 1 ohm, or 1 for a ratio)."""
        with np.errstate(divide="ignore"):
            return 20.0 * np.log10(np.abs(self[label]))

    def phase(self, label: str) -> np.ndarray:
        """Phase in degrees, continuous over frequency, the first point within (-180, 180]."""
        return continuous_phase(self[label])

    def to_csv(self, path: str | Path) -> Path:
        """``frequency`` (Hz), then per quantity its magnitude, dB and phase (deg); atomic."""
        buf = io.StringIO()
        writer = csv.writer(buf, lineterminator="\n")
        labels = self.labels()
        header = ["frequency"]
        for label in labels:
            header += [f"|{label}|", f"dB {label}", f"deg {label}"]
        writer.writerow(header)
        columns = [self.frequency]
        for label in labels:
            columns += [self.magnitude(label), self.decibels(label), self.phase(label)]
        np.savetxt(buf, np.column_stack(columns), delimiter=",", fmt="%.10g")
        return write_atomic(path, buf.getvalue())


def _normal_quantity(label: str) -> str:
    """``z(a->b)`` -> ``z(a -> b)``, ``v(out) / v(in)`` -> ``v(out)/v(in)``: labels as stored."""
    compact = "".join(label.split())
    return compact.replace("->", " -> ").replace(",", ", ")


def continuous_phase(values: np.ndarray) -> np.ndarray:
    """Phase (deg) of complex values, unwrapped along the array; the first within (-180, 180]."""
    phase = np.unwrap(np.angle(values))
    return np.degrees(phase)
