"""Many runs of one file: what a worker pool costs and what it gains.

Prints (no asserts; timings on a shared machine vary by tens of percent):

1. Per-run overhead: one short run (an RC step response, ~60 steps) done
   alone in this process on an already loaded circuit, against the same run
   as a study run (re-elaborated from the plan) in this process, and through
   a 2-worker process pool (wall time x workers / runs, i.e. the cost of one
   run in worker-seconds).
2. Speed-up from 1 to 2 local worker processes on a study of heavier runs
   (the relay snubber's Monte Carlo, 40 runs of ~0.1 s). Target: at least
   1.7x on a 2-core machine.
3. The same study through a dask LocalCluster of 2 worker processes
   (start-up timed apart), against 1 local worker.

    python benchmarks/bench_study.py
"""

from __future__ import annotations

import os
import resource
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

import mna  # noqa: E402
from mna.analyses.sweep import build_study  # noqa: E402
from mna.measure import run_and_check  # noqa: E402
from mna.netlist import parse_file, parse_netlist  # noqa: E402
from mna.runner import Variant, run_one, run_study  # noqa: E402

SHORT = """\
voltage-source V1 in -> gnd step(from=0 V, to=1 V, at=0 s)
resistor R1 in -> out 1 kohm
capacitor C1 out -> gnd 1 uF
simulate transient until=2 ms method=trapezoidal
measure tau = crossing(v(out), (1 - exp(-1)) * 1 V)
check tau < 1.2 ms
spread C1 uniform 10 %
monte-carlo runs={runs} seed=1
"""


def cpu_of(fn) -> float:
    t0 = time.process_time()
    fn()
    return time.process_time() - t0


def best_of(n: int, fn) -> float:
    times = []
    for _ in range(n):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def overhead() -> None:
    runs = 200
    study = build_study(parse_netlist(SHORT.format(runs=runs)))
    circuit = study.circuit_for(study.runs[0].overrides)
    alone = best_of(3, lambda: [run_and_check(circuit) for _ in range(20)]) / 20
    variant = Variant.of(study)
    as_plan = best_of(3, lambda: [run_one(variant, p) for p in study.runs[:20]]) / 20
    cpu_alone = cpu_of(lambda: [run_one(variant, p) for p in study.runs[:40]]) / 40
    children = resource.getrusage(resource.RUSAGE_CHILDREN)
    pool = best_of(2, lambda: run_study(study, jobs=2))
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu_pool = (after.ru_utime + after.ru_stime - children.ru_utime - children.ru_stime) / (2 * runs)
    print("1. per-run overhead (short RC run)")
    print(f"   one run alone, circuit loaded:           {alone * 1e3:7.2f} ms")
    print(f"   one study run (elaborated from its plan): {as_plan * 1e3:7.2f} ms   ratio {as_plan / alone:5.2f}")
    per_run = pool * 2 / runs
    print(f"   2-worker pool, {runs} runs: {pool:.2f} s wall = {per_run * 1e3:7.2f} ms per run in worker time"
          f"   ratio to alone {per_run / alone:5.2f}")
    print(f"   CPU time per run (robust on a busy machine): here {cpu_alone * 1e3:6.2f} ms, in the pool's "
          f"workers {cpu_pool * 1e3:6.2f} ms   ratio {cpu_pool / cpu_alone:5.2f}")


def pool_start(variant) -> float:
    """Wall time to start a 2-worker pool with the study installed and stop it (no runs)."""
    from concurrent.futures import ProcessPoolExecutor

    from mna.runner import _install

    def start_stop():
        with ProcessPoolExecutor(max_workers=2, initializer=_install, initargs=(variant,)) as pool:
            list(pool.map(abs, [1, 2]))

    return best_of(3, start_stop)


def speedup() -> None:
    study = build_study(parse_file(ROOT / "circuits" / "relay_snubber_spread.mna"))
    cpu_serial = cpu_of(lambda: run_study(study, jobs=1))
    one = best_of(2, lambda: run_study(study, jobs=1))
    two = best_of(2, lambda: run_study(study, jobs=2))
    print(f"2. {len(study.runs)} relay-snubber runs: 1 worker {one:.2f} s, 2 workers {two:.2f} s: "
          f"speed-up {one / two:.2f}x (target >= 1.7x on 2 cores; this machine has {os.cpu_count()} cores)")
    start = pool_start(Variant.of(study))
    bound = cpu_serial / (cpu_serial / 2 + start)
    print(f"   on idle cores the pool can reach at most {bound:.2f}x: {cpu_serial:.2f} s of CPU shared by 2 workers "
          f"plus {start * 1e3:.0f} ms to start and stop them (load average now "
          f"{os.getloadavg()[0]:.1f}: a figure far below this bound is other jobs taking the cores)")
    return study, one


def on_cluster(study, one: float) -> None:
    try:
        from dask.distributed import Client, LocalCluster
    except ImportError:
        print("3. dask.distributed is not installed: pip install 'mna[cluster]'")
        return
    t0 = time.perf_counter()
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster, \
            Client(cluster) as client:
        client.run(lambda: sys.path.insert(0, str(ROOT)))
        started = time.perf_counter() - t0
        records = run_study(study, cluster=client)  # first use: imports in the workers
        bad = sum(r.status not in ("ok", "failed") for r in records)
        if bad:
            print(f"3. {bad} of {len(records)} runs did not finish on the cluster: {records[0].message}")
            return
        wall = best_of(2, lambda: run_study(study, cluster=client))
    print(f"3. dask LocalCluster, 2 worker processes: start-up {started:.2f} s; {len(study.runs)} runs "
          f"{wall:.2f} s: speed-up over 1 local worker {one / wall:.2f}x")


if __name__ == "__main__":
    print(f"mna {mna.__version__}, Python {sys.version.split()[0]}")
    overhead()
    study, one = speedup()
    on_cluster(study, one)
