"""Measure the buck choke studies (the numbers quoted in README.md).

    python circuits/buck_study.py

For circuits/buck_choke.mna and buck_choke_saturating.mna: the output
voltage, the choke current's mean, peak-to-peak ripple and peak over the
last switching period, and the ripple that (Vin - Vout) D / (f L0)
predicts from the small-current inductance.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

import mna

HERE = Path(__file__).resolve().parent
F_SW, DUTY, VIN, L0 = 200e3, 0.225, 24.0, 22e-6


def measure(path: Path) -> dict:
    (res,) = mna.load(path).run()
    t = res.time
    last = t >= t[-1] - 1 / F_SW  # the last whole period
    i = res["i(L1)"][last]
    vout = float(np.mean(res["v(out)"][last]))
    out = {"vout": vout, "mean": float(np.trapezoid(i, t[last]) * F_SW), "ripple": float(np.ptp(i)),
           "peak": float(i.max()), "predicted": (VIN - vout) * DUTY / (F_SW * L0)}
    if "inductance(L1)" in res:
        out["lowest_inductance"] = float(res["inductance(L1)"][last].min())
    return out


def main() -> None:
    for name in ("buck_choke.mna", "buck_choke_saturating.mna"):
        m = measure(HERE / name)
        extra = f", inductance falls to {m['lowest_inductance'] * 1e6:.1f} uH" if "lowest_inductance" in m else ""
        print(f"{name:28} Vout {m['vout']:.3f} V, i(L1) mean {m['mean']:.3f} A, ripple {m['ripple']:.3f} A p-p "
              f"(L0 predicts {m['predicted']:.3f} A), peak {m['peak']:.3f} A{extra}")


if __name__ == "__main__":
    main()
