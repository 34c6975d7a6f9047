"""Many runs: statistics against closed forms, the snubber rule, failed runs, workers, dask.

Every number checked here comes from a closed form or from scipy as a
reference solver, never from an earlier run of mna.
"""

from __future__ import annotations

import json
import math
import shlex
from pathlib import Path

import numpy as np
import pytest
from scipy import integrate, stats
from scipy.linalg import expm

import mna.studies as studies
from mna.cli import main

RC = """\
voltage-source V1 in -> gnd step(from=0 V, to=1 V, at=0 s)
resistor R1 in -> out 1 kohm
capacitor C1 out -> gnd 1 uF
simulate transient until=2 ms method=trapezoidal tolerance=0.001 %
measure tau = crossing(v(out), (1 - exp(-1)) * 1 V)
"""

DIVIDER = """\
let Vin = 10 V
voltage-source V1 in -> gnd Vin
resistor R1 in -> out 1 kohm
resistor R2 out -> gnd 1 kohm
simulate dc
check v(out) < 5.1 V
"""


def _product_of_uniforms_cdf(t: float, x: tuple[float, float], y: tuple[float, float]) -> float:
    """P(X*Y <= t) for independent X ~ U(x0, x1), Y ~ U(y0, y1), all positive (integrated by scipy)."""
    (x0, x1), (y0, y1) = x, y
    inner = lambda u: np.clip(t / u - y0, 0.0, y1 - y0)  # noqa: E731
    return integrate.quad(inner, x0, x1, limit=200)[0] / ((x1 - x0) * (y1 - y0))


def test_rc_time_constant_under_two_uniform_spreads_matches_the_product_of_uniforms():
    a, b = 0.10, 0.20  # R1 +-10 %, C1 +-20 %, uniform
    n = 200
    result = studies.monte_carlo(RC, {"R1": f"uniform {a * 100:g} %", "C1": f"uniform {b * 100:g} %"},
                                 runs=n, seed=2026, jobs=2)
    table = result.table
    tau, r, c = table["tau"], table["R1"], table["C1"]
    assert np.all(table["status"] == "ok")
    assert np.all(np.abs(r / 1e3 - 1) <= a) and np.all(np.abs(c / 1e-6 - 1) <= b)
    # Each run's time constant is its own R*C: v = 1 - exp(-t/RC) reaches 1 - 1/e at t = RC.
    # Trapezoidal at 0.001 % per step is within 2e-4 here; 5e-4 allows for the crossing's interpolation.
    assert np.abs(tau / (r * c) - 1).max() < 5e-4
    # Closed forms (independent factors): E[RC] = R0*C0; Var = R0^2 C0^2 ((1 + a^2/3)(1 + b^2/3) - 1),
    # since E[(1 + aU)^2] = 1 + a^2/3 for U uniform on (-1, 1).
    mean, std = 1e-3, 1e-3 * math.sqrt((1 + a * a / 3) * (1 + b * b / 3) - 1)
    # Sampling error with n = 200: the mean's standard error is std/sqrt(n) (0.9 % of the mean);
    # the standard deviation's about 4 %. Three standard errors each: a spread taken as the full
    # width instead of the half-width (std halved) or a spread applied twice fails.
    assert tau.mean() == pytest.approx(mean, abs=3 * std / math.sqrt(n))
    assert tau.std(ddof=1) == pytest.approx(std, rel=0.12)
    # The whole distribution: Kolmogorov-Smirnov against the exact CDF of the product.
    cdf = np.vectorize(lambda t: _product_of_uniforms_cdf(t, (1e3 * (1 - a), 1e3 * (1 + a)),
                                                          (1e-6 * (1 - b), 1e-6 * (1 + b))))
    assert stats.kstest(tau, cdf).pvalue > 0.01
    # ... which does reject the distribution of twice the spread (the test has the power to fail).
    wide = np.vectorize(lambda t: _product_of_uniforms_cdf(t, (1e3 * (1 - 2 * a), 1e3 * (1 + 2 * a)),
                                                           (1e-6 * (1 - 2 * b), 1e-6 * (1 + 2 * b))))
    assert stats.kstest(tau, wide).pvalue < 1e-3
    # The summary states the same statistics.
    m = result.summary.measures[0]
    assert (m.mean, m.std, m.minimum, m.maximum) == pytest.approx((tau.mean(), tau.std(ddof=1), tau.min(),
                                                                   tau.max()), rel=1e-12)


def test_divider_yield_under_a_normal_spread_follows_the_normal_cdf():
    n = 400
    result = studies.monte_carlo(DIVIDER, {"R2": "normal 5 %"}, runs=n, seed=7, jobs=2)
    # v(out) = 10 V * R2/(1 kohm + R2) < 5.1 V  <=>  R2 < (5.1/4.9) kohm  <=>  z < (5.1/4.9 - 1)/0.05.
    expected = stats.norm.cdf((5.1 / 4.9 - 1) / 0.05)  # 0.7929
    got = result.summary.checks[0].yield_
    # Binomial standard error sqrt(p(1-p)/n) = 0.020; three of them. A standard deviation read
    # as 10 % (yield 0.658) or a uniform +-5 % (0.908) is caught.
    assert got == pytest.approx(expected, abs=3 * math.sqrt(expected * (1 - expected) / n))
    # Run by run, the check's verdict is the closed form's on the run's own R2.
    r2 = result.table["R2"]
    assert np.array_equal(result.table["pass: v(out) < 5.1 V"] == 1.0, 10 * r2 / (1e3 + r2) < 5.1)
    worst = result.summary.checks[0]
    assert worst.worst_values["R2"] == pytest.approx(r2.max(), rel=1e-12)


SNUBBER = """\
# A 12 V, 1 mH coil (12 ohm) carrying 1 A when its switch opens at 10 us; an RC
# snubber across the switch takes the current.
let Rs = 100 ohm
let Cs = 100 nF
voltage-source V1 bus -> gnd 12 V
inductor L1 bus -> sw 1 mH resistance=12 ohm
switch Q1 sw -> gnd on=10 mohm off=100 Mohm gate=schedule(closed, 10 us: open)
resistor Rsn sw -> m Rs
capacitor Csn m -> gnd Cs
simulate transient until=160 us method=trapezoidal tolerance=0.01 % max-step=0.5 us
measure v_peak = max(v(sw))
sweep Rs = logarithmic(from=25 ohm, to=400 ohm, count=9)
sweep Cs = 47 nF, 100 nF, 220 nF
"""


def _snubber_peak(r: float, c: float, l: float = 1e-3, r_coil: float = 12.0, v: float = 12.0) -> float:
    """Peak switch voltage after the opening, from the exact solution of the series R-L-C loop
    (state [i, vC, 1], advanced by scipy's matrix exponential on a 2000-point grid)."""
    a = np.array([[-(r + r_coil) / l, -1 / l, v / l], [1 / c, 0, 0], [0, 0, 0]])
    t_end = 1.5 * math.pi * math.sqrt(l * c)
    step = expm(a * t_end / 2000)
    x = np.array([v / (r_coil + 0.01), 0.0, 1.0])
    peak = -np.inf
    for _ in range(2001):
        peak = max(peak, r * x[0] + x[1])
        x = step @ x
    return peak


def test_snubber_sweep_lowest_peak_lands_near_the_characteristic_impedance():
    result = studies.run_study(SNUBBER, jobs=2)
    table = result.table
    assert np.all(table["status"] == "ok")
    rs, cs, peak = table["Rs"].reshape(9, 3), table["Cs"].reshape(9, 3), table["v_peak"].reshape(9, 3)
    reference = np.vectorize(_snubber_peak)(rs, cs)
    # Each run against the exact loop response: the samples' maximum lies within 1 % of the true peak
    # at 0.01 % error per step (a sign or factor error in the spread-free path is far outside).
    np.testing.assert_allclose(peak, reference, rtol=0.01)
    for j in range(3):
        z0 = math.sqrt(1e-3 / cs[0, j])
        best = rs[np.argmin(peak[:, j]), j]
        # Snubber design practice: the resistor that gives the lowest peak for a given C is near the
        # characteristic impedance sqrt(L/C) (R. Severns, "Design of Snubbers for Power Circuits",
        # Cornell Dubilier; for this loss-free loop the exact optimum is about 0.55*sqrt(L/C)).
        assert 0.35 * z0 <= best <= 1.5 * z0, (best, z0)
        # The simulated optimum is the reference's, up to the flat bottom of the curve (1 %).
        ref_best = np.argmin(reference[:, j])
        assert peak[ref_best, j] <= peak[:, j].min() * 1.01


def test_a_failing_run_in_the_middle_keeps_the_others():
    text = DIVIDER.replace("resistor R2 out -> gnd 1 kohm", "let R2v = 1 kohm\nresistor R2 out -> gnd R2v")
    result = studies.sweep(text, {"R2v": ["1 kohm", "-1 kohm", "500 ohm", "2 kohm"]}, jobs=2)
    table = result.table
    assert list(table["status"]) == ["ok", "input", "ok", "failed"]
    assert table["R2v"][1] == -1e3  # reported with its parameter values
    assert "must be positive" in table.messages[1]
    # The others: v(out) = 10 V * R2/(1 kohm + R2), the divider's closed form.
    value = table["value: v(out) < 5.1 V"]
    assert value[[0, 2, 3]] == pytest.approx([5.0, 10 * 500 / 1500, 10 * 2000 / 3000], rel=1e-9)
    assert math.isnan(value[1])
    assert result.summary.passed == 2 and not result.summary.accepted
    assert result.summary.failures[0][:2] == (1, "input")


def test_a_run_whose_simulation_fails_keeps_the_others():
    text = """\
let Tmin = 1 ns
voltage-source V1 in -> gnd step(from=0 V, to=1 V, at=0.1 ms)
resistor R1 in -> out 1 kohm
capacitor C1 out -> gnd 10 nF
simulate transient until=1 ms min-step=Tmin method=backward-euler
measure v_end = final(v(out))
check v_end > 0.9 V
"""
    # A 0.2 ms smallest step cannot follow the 10 us time constant after the step at 0.1 ms.
    result = studies.sweep(text, {"Tmin": ["1 ns", "0.2 ms", "2 ns"]}, jobs=1)
    table = result.table
    assert list(table["status"]) == ["ok", "simulation", "ok"]
    assert "min-step" in table.messages[1]
    # RC charging: 1 - exp(-0.9 ms / 10 us) is 1 V to within 1e-39.
    assert table["v_end"][[0, 2]] == pytest.approx([1.0, 1.0], abs=1e-3)
    assert result.summary.failures[0][:2] == (1, "simulation")
    assert result.summary.failures[0][3] == {"Tmin": pytest.approx(2e-4)}


def test_progress_lines_in_a_log_and_on_a_terminal():
    import io

    from mna.runner import RunRecord
    from mna.study_report import StudyProgress

    clock = iter(np.arange(0.0, 100.0, 1.5))
    log = io.StringIO()
    progress = StudyProgress(log, 20, live=False, clock=lambda: next(clock))
    for k in range(20):
        progress.run_done(RunRecord(k, "ok" if k % 5 else "simulation"))
    lines = log.getvalue().splitlines()
    assert "\x1b" not in log.getvalue() and "\r" not in log.getvalue()
    assert lines[-1].strip().startswith("runs: 20 of 20 done, 4 not passed")
    assert 2 <= len(lines) <= 11  # about every tenth of the runs, at most one line per 2 s
    assert "left" in lines[0]
    tty = io.StringIO()
    live = StudyProgress(tty, 4, live=True, clock=lambda: 1.0)
    live.run_done(RunRecord(0, "ok"))
    live.finish()
    assert tty.getvalue().startswith("\r\x1b[K  runs: 1 of 4 done") and tty.getvalue().endswith("\r\x1b[K")


MC = DIVIDER + "spread R2 normal 5 % clip=15 %\nspread Vin uniform 1 V\nmonte-carlo runs=12 seed=99\n"


def _same(a, b) -> bool:
    return a.names == b.names and all(
        np.array_equal(a[k], b[k], equal_nan=a[k].dtype.kind == "f") for k in a.names)


def test_results_are_the_same_for_1_2_and_4_workers():
    tables = [studies.run_study(MC, jobs=jobs).table for jobs in (1, 2, 4)]
    assert _same(tables[0], tables[1]) and _same(tables[0], tables[2])
    assert len(set(tables[0]["R2"])) == 12  # twelve different draws


def test_a_dask_cluster_gives_the_table_of_the_local_pool():
    distributed = pytest.importorskip("dask.distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster, distributed.Client(cluster) as client:
        on_cluster = studies.run_study(MC, cluster=client).table
    assert _same(on_cluster, studies.run_study(MC, jobs=2).table)


def test_check_passes_a_study_on_its_required_yield(tmp_path, capsys):
    base = DIVIDER + "spread R2 normal 5 %\nmonte-carlo runs=40 seed=3\n"
    study = studies.run_study(base, jobs=1)
    r2 = study.table["R2"]
    passing = int(np.sum(10 * r2 / (1e3 + r2) < 5.1))  # the closed form, run by run
    assert 0 < passing < 40
    low, high = (passing - 1) / 40, (passing + 1) / 40
    (tmp_path / "low.mna").write_text(base + f"required-yield {low * 100:g} %\n")
    (tmp_path / "high.mna").write_text(base + f"required-yield {high * 100:g} %\n")
    (tmp_path / "all.mna").write_text(base)
    assert main(["check", str(tmp_path / "low.mna"), "--jobs", "1"]) == 0
    assert main(["check", str(tmp_path / "high.mna"), "--jobs", "1"]) == 1
    assert main(["check", str(tmp_path / "all.mna"), "--jobs", "1"]) == 1
    out = capsys.readouterr().out
    assert f"{passing}/40 runs" in out and "--set 'R2=" in out


def test_run_writes_the_table_summary_and_pictures_and_the_worst_run_runs_again(tmp_path, capsys):
    path = tmp_path / "divider.mna"
    path.write_text(DIVIDER + "spread R2 normal 5 %\nmonte-carlo runs=16 seed=4\n")
    out = tmp_path / "out"
    code = main(["run", str(path), "--out", str(out), "--jobs", "2"])
    printed = capsys.readouterr().out
    assert code == 1  # some runs fail the check; every run must pass by default
    assert "Monte Carlo, 16 runs (seed 4)" in printed and "worst: run" in printed
    rows = (out / "runs.csv").read_text().splitlines()
    assert rows[0].split(",")[:3] == ["run", "status", "R2"] and len(rows) == 17
    assert (out / "histogram-check-line6.png").stat().st_size > 1000
    summary = json.loads((out / "summary.json").read_text())
    check = summary["checks"][0]
    assert check["runs"] == 16 and summary["study"]["seed"] == 4
    # The worst run's --set line runs it alone and measures the same v(out).
    argv = shlex.split(check["rerun"])[1:]
    argv[1] = str(path)
    assert main(argv + ["--out", str(tmp_path / "again"), "--no-plot"]) == 1
    again = json.loads((tmp_path / "again" / "summary.json").read_text())
    r2 = check["worst_values"]["R2"]
    assert again["checks"][0]["value"] == pytest.approx(10 * r2 / (1e3 + r2), rel=1e-9)
    if _has("pyarrow"):
        import pyarrow.parquet as pq

        assert pq.read_table(out / "runs.parquet").column("R2").to_pylist() == pytest.approx(
            [float(row.split(",")[2]) for row in rows[1:]], rel=1e-15)


def _has(module: str) -> bool:
    import importlib.util

    return importlib.util.find_spec(module) is not None


def test_sweep_map_and_pandas_frame(tmp_path):
    text = DIVIDER.replace("resistor R2 out -> gnd 1 kohm", "let R2v = 1 kohm\nresistor R2 out -> gnd R2v")
    result = studies.sweep(text, {"Vin": ["9 V", "10 V", "11 V"], "R2v": [900.0, 1000.0]}, jobs=1)
    assert result.study.sweep_shape == (3, 2) and len(result.table) == 6
    from mna.study_plots import study_pictures

    outputs = study_pictures(tmp_path, result.table, result.study, "divider")
    assert any(name.startswith("map") for name in outputs)
    one = studies.sweep(text, {"R2v": [500.0, 1000.0, 2000.0]}, jobs=1)
    pictures = study_pictures(tmp_path / "one", one.table, one.study, "divider")
    assert Path(pictures["sweep value: v(out) < 5.1 V"]).stat().st_size > 1000
    if _has("pandas"):
        frame = result.table.to_pandas()
        assert list(frame["Vin"]) == [9.0, 9.0, 10.0, 10.0, 11.0, 11.0]
