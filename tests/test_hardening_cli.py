"""Command-line defects found by fuzzing: exit statuses, output files, time limits, escapes."""

import json
import os
import stat
from xml.etree import ElementTree as ET

import pytest

from mna.batch import check_files
from mna.cli import main
from mna.outputs import folder_name

RL = """\
circuit rl "RL step"
voltage-source V1 in -> gnd step(from=0 V, to=10 V, at=1 ms)
resistor R1 in -> x 5 ohm
inductor L1 x -> gnd 10 mH
simulate transient until=5 ms step=50 us
record v(x), i(L1)
"""


def run(args, capsys):
    code = main(args)
    out = capsys.readouterr()
    return code, out.out, out.err


def test_a_file_that_cannot_be_read_is_an_input_error(tmp_netlist, capsys, monkeypatch):
    path = tmp_netlist(RL)

    def refuse(self, *args, **kwargs):
        raise PermissionError(13, "Permission denied", str(self))

    monkeypatch.setattr(type(path), "read_text", refuse)
    code, _, err = run(["run", str(path), "--no-plot", "--quiet"], capsys)
    assert code == 2, err
    assert "cannot read the file: Permission denied" in err and "internal error" not in err


@pytest.mark.skipif(os.geteuid() == 0, reason="root reads any file")
def test_an_unreadable_input_file_is_an_input_error(tmp_netlist, capsys):
    path = tmp_netlist(RL)
    path.chmod(0)
    try:
        code, _, err = run(["run", str(path), "--no-plot", "--quiet"], capsys)
    finally:
        path.chmod(0o644)
    assert code == 2, err
    assert "cannot read" in err and "internal error" not in err


def test_output_files_follow_the_umask(tmp_netlist, tmp_path, capsys):
    path = tmp_netlist(RL)
    old = os.umask(0o027)
    try:
        code, _, err = run(["run", str(path), "--out", str(tmp_path / "out"), "--no-plot", "--quiet"], capsys)
    finally:
        os.umask(old)
    assert code == 0, err
    for name in ("waveforms.csv", "summary.json"):
        assert stat.S_IMODE((tmp_path / "out" / name).stat().st_mode) == 0o640  # 0666 & ~0027
    assert stat.S_IMODE((tmp_path / "out").stat().st_mode) == 0o750


def test_a_new_run_replaces_the_whole_folder_and_an_input_error_marks_it(tmp_netlist, tmp_path, capsys):
    out = tmp_path / "out"
    two = RL.replace("simulate transient until=5 ms step=50 us",
                     "simulate transient until=5 ms step=50 us\nsimulate transient until=2 ms step=50 us")
    path = tmp_netlist(two)
    assert run(["run", str(path), "--out", str(out), "--no-plot", "--quiet"], capsys)[0] == 0
    assert {p.name for p in out.iterdir()} == {"waveforms-1.csv", "waveforms-2.csv", "summary.json"}
    path.write_text(RL, encoding="utf-8")
    assert run(["run", str(path), "--out", str(out), "--no-plot", "--quiet"], capsys)[0] == 0
    # Nothing of the previous run is left beside the new one.
    assert {p.name for p in out.iterdir()} == {"waveforms.csv", "summary.json"}
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".out.")]  # no staging left over
    path.write_text(RL.replace("resistor R1", "resistr R1"), encoding="utf-8")
    assert run(["run", str(path), "--out", str(out), "--no-plot", "--quiet"], capsys)[0] == 2
    assert {p.name for p in out.iterdir()} == {"summary.json"}
    summary = json.loads((out / "summary.json").read_text())
    assert summary["status"] == "input error" and "resistr" in summary["error"]


def test_a_folder_with_other_files_keeps_them_and_gets_a_summary_last(tmp_netlist, tmp_path, capsys):
    out = tmp_path / "mine"
    out.mkdir()
    (out / "notes.txt").write_text("keep me")
    path = tmp_netlist(RL)
    assert run(["run", str(path), "--out", str(out), "--no-plot", "--quiet"], capsys)[0] == 0
    assert {p.name for p in out.iterdir()} == {"notes.txt", "waveforms.csv", "summary.json"}


def test_an_interrupted_run_leaves_the_previous_results_whole(tmp_netlist, tmp_path, capsys, monkeypatch):
    out = tmp_path / "out"
    path = tmp_netlist(RL)
    assert run(["run", str(path), "--out", str(out), "--no-plot", "--quiet"], capsys)[0] == 0
    before = {p.name: p.read_bytes() for p in out.iterdir()}

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr("mna.report.write_json", interrupted)  # just after the CSV is written
    path.write_text(RL.replace("10 V", "20 V"), encoding="utf-8")
    assert main(["run", str(path), "--out", str(out), "--no-plot", "--quiet"]) == 130
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before


@pytest.mark.parametrize("stem, name", [("..", "circuit"), (".", "circuit"), (".hidden", "hidden"),
                                        ("valve", "valve"), ("a\x1bb", "a_b")])
def test_a_results_folder_name_never_leaves_results(stem, name):
    assert folder_name(stem) == name


def test_an_input_named_dots_mna_writes_inside_results(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "...mna").write_text(RL, encoding="utf-8")
    assert run(["run", "...mna", "--no-plot", "--quiet"], capsys)[0] == 0
    assert not (tmp_path / "summary.json").exists()
    assert (tmp_path / "results" / "circuit" / "summary.json").exists()


def test_control_characters_are_escaped_on_the_console_and_in_junit(tmp_path, capsys):
    folder = tmp_path / "c"
    folder.mkdir()
    (folder / "title.mna").write_text(RL.replace('"RL step"', '"\x1b]0;owned\x07\x1b[2J"'), encoding="utf-8")
    (folder / "bad.mna").write_text("resistr R1 a -> gnd 1 ohm # \x1b[31m\x00\n", encoding="utf-8")
    code, out, err = run(["run", str(folder / "title.mna"), "--out", str(tmp_path / "o"), "--no-plot"], capsys)
    assert code == 0 and "\x1b" not in out + err and "\\x1b]0;owned" in out
    report = tmp_path / "report.xml"
    code, out, err = run(["check", str(folder), "--jobs", "1", "--junit", str(report)], capsys)
    assert code == 2 and "\x1b" not in out + err and "\x00" not in out + err
    root = ET.parse(report).getroot()  # well-formed XML
    assert "\\x1b[31m" in ET.tostring(root, encoding="unicode")


def test_check_stops_a_file_at_the_time_limit_and_goes_on(tmp_path):
    slow = tmp_path / "slow.mna"
    slow.write_text("voltage-source V1 in -> gnd 10 V\nresistor R1 in -> x 1 ohm\ninductor L1 x -> gnd 1 mH\n"
                    "simulate transient until=100 s step=1 us step-limit=1e9 point-limit=1e9 "
                    "memory-limit=1e6\n", encoding="utf-8")
    quick = tmp_path / "quick.mna"
    # RL step response 4 ms = 2 L/R after the step: i = V/R*(1 - exp(-2)); 1 % covers
    # backward Euler's error at L/R = 40 steps (about 0.4 %).
    quick.write_text(RL + "check final(i(L1)) within 1 % of 2 A * (1 - exp(-2))\n", encoding="utf-8")
    results = check_files([quick, slow], jobs=1, time_limit=3)
    assert [r.status for r in results] == ["ok", "simulation"]
    assert "time limit" in results[1].message and results[1].seconds >= 3


def test_check_refuses_a_negative_time_limit(tmp_netlist, capsys):
    code, out, err = run(["check", str(tmp_netlist(RL)), "--time-limit", "-1"], capsys)
    assert code == 2 and "--time-limit" in err
