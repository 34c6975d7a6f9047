"""Measure the valve protection studies side by side (the table in README.md).

    python circuits/valve_study.py

For each circuits/valve_*.mna: the peak drain (switch) voltage, the
release time (from the switch opening until the coil current's magnitude
falls below 10 % of its on-state current for good, an assumed drop-out
level; a ringing current that swings back above it counts as still
holding), and the energy each part absorbs after the opening. Uses the files' own simulate
settings.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

import mna

HERE = Path(__file__).resolve().parent
T_OPEN = 1e-3  # s, the schedule edge in every valve_*.mna
DROP_OUT = 0.10  # fraction of the on-state current taken as release

STUDIES = [
    ("no protection", "valve_no_protection.mna"),
    ("freewheeling diode", "valve_freewheel_diode.mna"),
    ("diode + 24 V Zener", "valve_diode_zener.mna"),
    ("RC snubber 47 ohm + 10 uF", "valve_rc_snubber.mna"),
]


def measure(path: Path) -> dict:
    circuit = mna.load(path)
    (result,) = circuit.run()
    t, i, v = result.time, result["i(Lvalve)"], result["v(drain)"]
    i_on = float(np.interp(T_OPEN * 0.999, t, i))
    after = t >= T_OPEN
    above = np.flatnonzero(after & (np.abs(i) >= DROP_OUT * i_on))
    if above.size and above[-1] + 1 < t.size:
        k = above[-1]  # last sample above the level: interpolate the crossing after it
        level = DROP_OUT * i_on
        frac = (abs(i[k]) - level) / (abs(i[k]) - abs(i[k + 1]))
        release = float(t[k] + frac * (t[k + 1] - t[k]) - T_OPEN)
    else:
        release = float("nan")
    energies = {}
    for label in result.labels():
        if label.startswith("p("):
            energies[label[2:-1]] = float(np.trapezoid(result[label][after], t[after]))
    return {"peak": float(v.max()), "release": release, "i_on": i_on, "energy": energies,
            "stored": 0.5 * circuit.elements["Lvalve"].params["inductance"] * i_on**2}


def main() -> None:
    print(f"{'protection':28} {'peak v(drain)':>14} {'release':>10}  energy absorbed after opening")
    for name, file in STUDIES:
        m = measure(HERE / file)
        parts = ", ".join(f"{k} {e * 1e3:.2f} mJ" for k, e in m["energy"].items() if abs(e) > 1e-6)
        print(f"{name:28} {m['peak']:11.1f} V {m['release'] * 1e3:8.2f} ms  {parts}"
              f"  (coil held {m['stored'] * 1e3:.2f} mJ)")


if __name__ == "__main__":
    main()
