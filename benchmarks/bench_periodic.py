"""Time to the periodic steady state: shooting (simulate periodic) against plain periods.

For a buck and a boost converter at 100 kHz whose output filters take
hundreds of periods to settle, it times

- ``circuit.periodic(...)``: shooting, until each capacitor voltage and
  inductor current repeats within ``repeat_tolerance`` over a period;
- a plain transient run from the same start (the DC operating point),
  long enough to settle, and the time it takes to reach the first period
  whose change from the one before is within the same tolerance (the run's
  time scaled by the fraction of its periods needed),

with the same step settings, and prints the ratio and how far apart the two
steady states are. No time is asserted anywhere.

    python benchmarks/bench_periodic.py [--tolerance 1e-6] [--periods 2500]
"""

from __future__ import annotations

import argparse
import time

import numpy as np

import mna

BUCK = """
voltage-source Vin   vin -> gnd   24 V
switch         Q1    vin -> sw    on=20 mohm  off=10 Mohm  gate=pwm(frequency=100 kHz, duty=50 %)
diode          Dfw   gnd -> sw    saturation-current=20 uA  ideality=1.05  resistance=15 mohm
inductor       L1    sw -> out    47 uH  resistance=12 mohm
capacitor      Cout  out -> gnd   100 uF
resistor       Rload out -> gnd   6 ohm
record v(out), i(L1)
"""

BOOST = """
voltage-source Vin   vin -> gnd   12 V
inductor       L1    vin -> sw    47 uH  resistance=12 mohm
switch         Q1    sw -> gnd    on=20 mohm  off=10 Mohm  gate=pwm(frequency=100 kHz, duty=50 %)
diode          D1    sw -> out    saturation-current=20 uA  ideality=1.05  resistance=15 mohm
capacitor      Cout  out -> gnd   47 uF
resistor       Rload out -> gnd   12 ohm
record v(out), i(L1)
"""

PERIOD = 10e-6
SETTINGS = {"max_step": 100e-9}


def plain(circuit, periods: int, tolerance: float) -> tuple[float, int, dict[str, float]]:
    """Seconds to the first period that repeats within ``tolerance``, that period, its end values."""
    t0 = time.perf_counter()
    res = circuit.transient(until=periods * PERIOD, **SETTINGS)
    elapsed = time.perf_counter() - t0
    ends = np.arange(1, periods + 1) * PERIOD
    k_time = np.searchsorted(res.time, ends - 1e-15, side="left")  # the sample at each period's end
    values = {label: res[label][np.minimum(k_time, res.time.size - 1)] for label in ("v(out)", "i(L1)")}
    change = np.zeros(periods - 1)
    for v in values.values():
        scale = np.maximum(np.abs(v[1:]), 1e-3 * np.abs(v).max())
        change = np.maximum(change, np.abs(np.diff(v)) / scale)
    settled = np.flatnonzero(change <= tolerance)
    k = int(settled[0]) + 2 if settled.size else periods
    return elapsed * k / periods, k, {label: float(v[k - 1]) for label, v in values.items()}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--tolerance", type=float, default=1e-6)
    parser.add_argument("--periods", type=int, default=2500, help="length of the plain run, in periods")
    args = parser.parse_args()
    print(f"time to steady state, change per period <= {args.tolerance:g}; "
          f"both with max-step = {SETTINGS['max_step'] * 1e9:g} ns")
    print(f"{'circuit':<8}{'shooting s':>12}{'periods':>9}{'Newton':>8}{'plain s':>10}{'periods':>9}"
          f"{'ratio':>8}{'v(out) diff':>13}")
    for name, text in (("buck", BUCK), ("boost", BOOST)):
        circuit = mna.parse(text)
        circuit.dc()  # compile outside the timings
        t0 = time.perf_counter()
        pss = circuit.periodic(period=PERIOD, repeat_tolerance=args.tolerance, **SETTINGS)
        shoot = time.perf_counter() - t0
        st = pss.statistics
        seconds, k, ends = plain(circuit, args.periods, args.tolerance)
        diff = abs(pss["v(out)"][-1] - ends["v(out)"]) / abs(ends["v(out)"])
        flag = "" if k < args.periods else " (not settled: raise --periods)"
        print(f"{name:<8}{shoot:>12.3g}{st['periods_integrated']:>9}{st['newton_iterations_shooting']:>8}"
              f"{seconds:>10.3g}{k:>9}{seconds / shoot:>8.1f}{diff:>13.2g}{flag}")


if __name__ == "__main__":
    main()
