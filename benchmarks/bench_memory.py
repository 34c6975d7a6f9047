"""Peak memory of a long run, and the start-up time of the command.

A 10-node circuit run for 1,000,000 fixed steps recording three signals:
the results hold 3 signals x 1e6 points, and the engine keeps only the
unknowns those signals need. Measured as the peak resident set size of a
child process (so this script's own imports do not count). Then the time
`mna --help` takes, the median of several runs. Prints; asserts nothing.

    python benchmarks/bench_memory.py [--steps 1000000]
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import time

CHILD = r"""
import resource, sys, time
import mna
lines = ["voltage-source V1 n0 -> gnd pwm(low=0 V, high=12 V, frequency=10 kHz, duty=30 %)"]
for k in range(4):
    lines.append(f"resistor R{k} n{2*k} -> n{2*k+1} 1 ohm")
    lines.append(f"inductor L{k} n{2*k+1} -> n{2*k+2} 100 uH")
    lines.append(f"capacitor C{k} n{2*k+2} -> gnd 10 uF")
lines.append("resistor Rload n8 -> gnd 5 ohm")
lines.append("record v(n8), i(L0), i(L3)")
c = mna.parse("\n".join(lines))
before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
steps = int(sys.argv[1])
t0 = time.perf_counter()
res = c.transient(until=steps * 1e-7, step=1e-7, start="rest")
wall = time.perf_counter() - t0
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
print(len(res.time), len(res.labels()), before / 1024, peak / 1024, wall)
"""


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--steps", type=int, default=1_000_000)
    args = ap.parse_args()
    out = subprocess.run([sys.executable, "-c", CHILD, str(args.steps)], capture_output=True, text=True,
                         check=True).stdout.split()
    points, signals, before, peak, wall = int(out[0]), int(out[1]), float(out[2]), float(out[3]), float(out[4])
    print(f"long run: {points} points x {signals} signals, peak RSS {peak:.0f} MB "
          f"(after imports {before:.0f} MB), {wall:.1f} s, {points / wall:,.0f} steps/s")
    times = []
    for _ in range(5):
        t0 = time.perf_counter()
        subprocess.run([sys.executable, "-m", "mna", "--help"], capture_output=True, check=True)
        times.append(time.perf_counter() - t0)
    bare = []
    for _ in range(5):
        t0 = time.perf_counter()
        subprocess.run([sys.executable, "-c", "pass"], capture_output=True, check=True)
        bare.append(time.perf_counter() - t0)
    print(f"mna --help: {statistics.median(times) * 1e3:.0f} ms "
          f"(a bare interpreter start: {statistics.median(bare) * 1e3:.0f} ms)")


if __name__ == "__main__":
    main()
