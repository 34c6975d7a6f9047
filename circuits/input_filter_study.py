"""Plot the input filter's output impedance with and without its damping leg
against the converter's input impedance magnitude V^2/P.

    python circuits/input_filter_study.py [OUT.png]

Uses circuits/input_filter_impedance.mna as it is (damped) and with the
damping leg Rd + Cd taken out (undamped), and prints each peak of |Zo|
against |Zin| = V^2/P (Middlebrook's criterion: |Zo| well below |Zin|).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

import mna

HERE = Path(__file__).resolve().parent
FILE = HERE / "input_filter_impedance.mna"


def output_impedance(text: str):
    circuit = mna.parse(text, str(FILE))
    res = circuit.frequency("100 Hz", "1 MHz", per_decade=200, record=["z(out -> gnd)"])
    vbus, power = circuit.params["Vbus"].value, circuit.params["Pconv"].value
    return res.frequency, np.abs(res["z(out -> gnd)"]), vbus**2 / power


def main(out: Path) -> None:
    text = FILE.read_text(encoding="utf-8")
    undamped = "\n".join(line for line in text.splitlines()
                         if not line.startswith(("resistor       Rd", "capacitor      Cd")))
    curves = {"damped (Rd + Cd)": output_impedance(text), "undamped": output_impedance(undamped)}
    zin = next(iter(curves.values()))[2]
    for name, (f, z, _) in curves.items():
        k = int(np.argmax(z))
        verdict = "meets" if z[k] < 0.5 * zin else "violates"
        print(f"{name:18} |Zo| peaks at {z[k]:.3g} ohm at {f[k] / 1e3:.3g} kHz; |Zin| = {zin:.3g} ohm: "
              f"{verdict} |Zo| < |Zin|/2")
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from mna.report import PALETTE

    fig, ax = plt.subplots(figsize=(8, 4.5))
    for (name, (f, z, _)), colour in zip(curves.items(), PALETTE):
        ax.loglog(f, z, color=colour, linewidth=1.5, label=f"|Zo| {name}")
    ax.axhline(zin, color=PALETTE[2], linestyle=(0, (6, 2)), label="|Zin| = V^2/P of the converter")
    ax.axhline(zin / 2, color=PALETTE[2], linestyle=":", linewidth=1.0, label="|Zin| / 2 (6 dB margin)")
    ax.set_xlabel("frequency [Hz]")
    ax.set_ylabel("impedance [ohm]")
    ax.grid(True, which="both", color="#e2e2e2", linewidth=0.6)
    ax.legend(fontsize=8, frameon=False)
    fig.tight_layout()
    out.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(out, dpi=110)
    print(f"plot: {out}")


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else Path("results") / "input_filter_study.png")
