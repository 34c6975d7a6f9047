"""`mna check` and `mna run` as CI sees them: exit status, summary, JUnit XML, no control characters."""

from __future__ import annotations

import io
import json
import math
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from mna.batch import check_file, find_circuits
from mna.cli import main
from mna.console import RunProgress, progress_text
from mna.errors import InputError, SimulationError

REPO = Path(__file__).resolve().parent.parent

# RC charge, 5 V, 1 kohm, 1 uF from rest: it reaches 4.5 V at RC*ln(10) = 2.30 ms
# (Nilsson & Riedel, *Electric Circuits*, ch. 7).
RC = """voltage-source V1 in -> gnd 5 V
resistor R1 in -> out 1 kohm
capacitor C1 out -> gnd 1 uF
simulate transient until=5 ms step=10 us method=trapezoidal start=rest
"""

GOOD = RC + "check crossing(v(out), 4.5 V) within 1 % of 2.3026 ms\ncheck max(v(out)) < 5 V\n"
BAD = RC + "check crossing(v(out), 4.5 V) < 2 ms\ncheck max(i(R1)) <= 5 mA\n"
BROKEN = "resistor R1 a -> gnd 1 F\nsimulate dc\n"
ALSO_GOOD = RC + "measure t45 = crossing(v(out), 4.5 V)\ncheck t45 > 2 ms\n"


@pytest.fixture
def folder(tmp_path: Path) -> Path:
    (tmp_path / "good.mna").write_text(GOOD)
    (tmp_path / "bad.mna").write_text(BAD)
    (tmp_path / "broken.mna").write_text(BROKEN)
    (tmp_path / "sub").mkdir()
    (tmp_path / "sub" / "also_good.mna").write_text(ALSO_GOOD)
    (tmp_path / ".hidden").mkdir()
    (tmp_path / ".hidden" / "ignored.mna").write_text(BROKEN)
    (tmp_path / "notes.txt").write_text("not a circuit")
    return tmp_path


def run_cli(*args: str, cwd: Path | None = None) -> subprocess.CompletedProcess:
    """`python -m mna ...` in a child process, its stdout a pipe (not a terminal)."""
    return subprocess.run([sys.executable, "-m", "mna", *args], capture_output=True, text=True,
                          cwd=cwd or REPO, timeout=300)


def no_control_characters(text: str) -> bool:
    return "\r" not in text and "\x1b" not in text


# --------------------------------------------------------------------------
# finding files


def test_folders_are_searched_recursively_for_circuit_files(folder):
    found = find_circuits([folder])
    assert [p.relative_to(folder).as_posix() for p in found] == [
        "bad.mna", "broken.mna", "good.mna", "sub/also_good.mna"]


def test_a_missing_path_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match="no such file or folder"):
        find_circuits([tmp_path / "nope"])
    with pytest.raises(InputError, match="no circuit files"):
        find_circuits([tmp_path])


# --------------------------------------------------------------------------
# a folder with passing, failing and broken files


def test_check_over_a_folder_in_parallel(folder, tmp_path):
    report = tmp_path / "out" / "report.xml"
    result = run_cli("check", str(folder), "--jobs", "2", "--junit", str(report))
    # An input error (2) outranks a failed check (1).
    assert result.returncode == 2, result.stdout + result.stderr
    out = result.stdout
    assert no_control_characters(out)
    lines = out.splitlines()
    assert lines[-1] == "4 passed, 1 failed, 1 file with errors"  # the broken file counts in the last line
    assert lines[-2].startswith("checks: 4 passed, 1 failed; files: 2 ok, 1 with a failed check, "
                                "1 with an input error")
    assert "needs ohms (ohm), got 1 F" in out  # the broken file's error, with its place
    assert "crossing(v(out), 4.5 V) < 2 ms" in out  # the failed check is named

    root = ET.parse(report).getroot()
    assert root.tag == "testsuites"
    assert (root.get("tests"), root.get("failures"), root.get("errors")) == ("6", "1", "1")
    suites = {Path(s.get("name")).name: s for s in root.iter("testsuite")}
    assert set(suites) == {"good.mna", "bad.mna", "broken.mna", "also_good.mna"}
    bad = suites["bad.mna"]
    assert (bad.get("tests"), bad.get("failures"), bad.get("errors")) == ("2", "1", "0")
    (failure,) = bad.iter("failure")
    assert "measured 2.30" in failure.get("message") and "limit < 2 ms" in failure.get("message")
    case = next(c for c in bad.iter("testcase") if c.find("failure") is not None)
    assert case.get("name") == "crossing(v(out), 4.5 V) < 2 ms" and case.get("line") == "5"
    broken = suites["broken.mna"]
    (error,) = broken.iter("error")
    assert error.get("type") == "input error" and broken.find("testcase/failure") is None
    also = suites["also_good.mna"]
    assert [p.get("name") for p in also.iter("property")] == ["measure t45"]


@pytest.mark.parametrize("names, code", [(["good.mna"], 0), (["good.mna", "bad.mna"], 1),
                                         (["bad.mna", "broken.mna"], 2)])
def test_exit_status_is_the_worst_file(folder, names, code, capsys):
    assert main(["check", *(str(folder / n) for n in names), "--jobs", "1"]) == code
    out = capsys.readouterr().out
    assert no_control_characters(out)


def test_quiet_lists_only_what_is_wrong(folder, capsys):
    main(["check", str(folder / "good.mna"), str(folder / "bad.mna"), "--jobs", "1", "--quiet"])
    out = capsys.readouterr().out
    assert "good.mna" not in out and "bad.mna" in out
    assert out.splitlines()[-1] == "3 passed, 1 failed"


def test_a_failed_simulation_is_an_error_of_every_check(folder, monkeypatch, tmp_path):
    def diverges(circuit, settings, records):
        raise SimulationError("no convergence at t = 1 ms", time=1e-3)

    monkeypatch.setattr("mna.analyses.transient.transient", diverges)
    result = check_file(folder / "good.mna")
    assert result.status == "simulation" and result.exit_code == 3
    assert [c.status for c in result.checks] == ["error", "error"]
    report = tmp_path / "sim.xml"
    assert main(["check", str(folder / "good.mna"), str(folder / "bad.mna"), "--jobs", "1",
                 "--junit", str(report)]) == 3
    root = ET.parse(report).getroot()
    assert (root.get("tests"), root.get("failures"), root.get("errors")) == ("4", "0", "4")
    assert {e.get("type") for e in root.iter("error")} == {"simulation failed"}


def test_the_project_circuits_all_pass():
    # The project's own CI: every example circuit's checks hold.
    result = run_cli("check", "circuits")
    assert result.returncode == 0, result.stdout + result.stderr
    assert result.stdout.splitlines()[-1].endswith(" passed, 0 failed")
    assert no_control_characters(result.stdout)


# --------------------------------------------------------------------------
# mna run


def test_run_prints_the_table_writes_json_and_exits_1_on_a_failed_check(folder, tmp_path):
    out_dir = tmp_path / "results"
    result = run_cli("run", str(folder / "bad.mna"), "--out", str(out_dir), "--no-plot")
    assert result.returncode == 1
    assert no_control_characters(result.stdout)
    assert "checks: 1 passed, 1 failed" in result.stdout
    row = next(line for line in result.stdout.splitlines() if "< 2 ms" in line)
    assert row.split()[0] == "FAIL" and "2.30" in row
    data = json.loads((out_dir / "summary.json").read_text())
    # RC crossing time -RC*ln(1 - 4.5/5) = RC*ln(10) (Nilsson & Riedel, *Electric Circuits*, ch. 7), to the solver's accuracy.
    assert data["checks"][0]["value"] == pytest.approx(1e-3 * math.log(10), rel=1e-4)
    assert [c["status"] for c in data["checks"]] == ["fail", "pass"]
    assert data["checks"][0]["limit"] == pytest.approx(2e-3)
    assert data["measurements"] == []


def test_run_keeps_the_csv_to_the_record_list(tmp_path, capsys):
    path = tmp_path / "rec.mna"
    path.write_text(RC + "record v(out)\ncheck energy(R1) < 1 mJ\n")
    assert main(["run", str(path), "--out", str(tmp_path / "o"), "--no-plot"]) == 0
    assert (tmp_path / "o" / "waveforms.csv").read_text().splitlines()[0] == "time,v(out)"
    data = json.loads((tmp_path / "o" / "summary.json").read_text())
    assert data["checks"][0]["unit"] == "J"


def test_run_quiet_prints_only_failures(folder, tmp_path, capsys):
    assert main(["run", str(folder / "bad.mna"), "--out", str(tmp_path / "o"), "--no-plot", "--quiet"]) == 1
    out = capsys.readouterr().out
    assert "max(i(R1))" not in out and "< 2 ms" in out and "results in" not in out


def test_run_input_error_in_a_check_exits_2(tmp_path, capsys):
    path = tmp_path / "units.mna"
    path.write_text(RC + "check max(v(out)) < 2 A\n")
    assert main(["run", str(path), "--out", str(tmp_path / "o")]) == 2
    assert "check compares volts (V) with amperes (A)" in capsys.readouterr().err


# --------------------------------------------------------------------------
# progress on a terminal


class FakeTerminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_progress_text_estimates_what_is_left():
    # A quarter of the simulated time took 1 s of wall time: 3 s more at that rate.
    assert progress_text(5e-3, 20e-3, 1.0) == "t = 5 ms of 20 ms (25 %), about 3.0 s left"
    assert progress_text(0.0, 20e-3, 0.0) == "t = 0 s of 20 ms (0 %)"


def test_run_progress_rewrites_one_line_and_clears_it():
    ticks = iter([0.0, 2.0, 4.0])
    stream = FakeTerminal()
    progress = RunProgress(stream, clock=lambda: next(ticks))
    progress(10e-3, 20e-3)
    progress.clear()
    text = stream.getvalue()
    assert text.startswith("\r") and "t = 10 ms of 20 ms (50 %), about 2.0 s left" in text
    assert text.endswith("\r\x1b[K")


def test_run_shows_progress_only_on_a_terminal(folder, tmp_path, monkeypatch):
    import mna.measure

    real = mna.measure.run_and_check
    seen = []

    def spy(circuit, progress=None):
        seen.append(progress)
        if progress is not None:
            progress(1e-3, 5e-3)
        return real(circuit, progress)

    monkeypatch.setattr(mna.measure, "run_and_check", spy)
    terminal = FakeTerminal()
    monkeypatch.setattr(sys, "stdout", terminal)
    assert main(["run", str(folder / "good.mna"), "--out", str(tmp_path / "a"), "--no-plot"]) == 0
    assert seen[-1] is not None
    assert "\r\x1b[K  t = 1 ms of 5 ms (20 %)" in terminal.getvalue()
    plain = io.StringIO()
    monkeypatch.setattr(sys, "stdout", plain)
    assert main(["run", str(folder / "good.mna"), "--out", str(tmp_path / "b"), "--no-plot"]) == 0
    assert seen[-1] is None and no_control_characters(plain.getvalue())
    monkeypatch.setattr(sys, "stdout", terminal)
    assert main(["run", str(folder / "good.mna"), "--out", str(tmp_path / "c"), "--no-plot", "--quiet"]) == 0
    assert seen[-1] is None


def test_last_line_counts_files_that_fail_to_load(tmp_path):
    # Every file fails to load: the last line must not read "0 passed, 0 failed".
    from mna.cli import main

    for k in range(2):
        (tmp_path / f"broken{k}.mna").write_text("resistor R1 a -> gnd 1 F\nsimulate dc\n")
    import contextlib
    import io

    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        code = main(["check", str(tmp_path), "--jobs", "1"])
    assert code == 2
    assert out.getvalue().splitlines()[-1] == "0 passed, 0 failed, 2 files with errors"
