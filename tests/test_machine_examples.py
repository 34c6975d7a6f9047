"""The example studies in circuits/ for motors and generators parse, run and make sense.

Each is run for a short stretch (the full runs belong to ``mna run``), with
its own method and step. Bounds come from the DC machine model of
REFERENCES.md §6 (stall current V/R bounds any start-up current).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

import mna

CIRCUITS = Path(__file__).resolve().parents[1] / "circuits"
EXAMPLES = ["conveyor_motor_start", "fan_gearbox", "hand_crank_generator", "coil_alternator_lamp"]


@pytest.mark.parametrize("name", EXAMPLES)
def test_example_parses_with_a_simulate_and_a_record_line(name):
    circuit = mna.load(CIRCUITS / f"{name}.mna")
    assert [a.analysis for a in circuit.analyses] == ["transient"]
    assert circuit.records, "an example records what an engineer looks at"
    assert not any(line.lstrip().startswith(".") for line in (CIRCUITS / f"{name}.mna").read_text().splitlines())


@pytest.mark.parametrize("name, fraction", [
    ("conveyor_motor_start", 0.1), ("fan_gearbox", 0.05), ("hand_crank_generator", 0.02),
    ("coil_alternator_lamp", 0.1),
])
def test_example_runs(name, fraction):
    circuit = mna.load(CIRCUITS / f"{name}.mna")
    settings = dict(circuit.analyses[0].settings)
    res = circuit.transient(until=settings["until"] * fraction, step=settings["step"],
                            method=settings["method"], start=settings["start"])
    assert res.status == "ok"
    assert all(np.all(np.isfinite(v)) for v in res.signals.values())


def test_conveyor_inrush_is_bounded_by_the_stall_current():
    # Back-EMF can only lower the current, so the across-the-line inrush
    # stays below the stall current V/(R + R_cable) (REFERENCES.md §6).
    circuit = mna.load(CIRCUITS / "conveyor_motor_start.mna")
    res = circuit.transient(until=0.06, step=50e-6, method="trapezoidal", start="rest", record=["i(MA)", "i(MB)"])
    r_total = circuit.elements["MA"].resistance + 40e-3
    peak_a, peak_b = res["i(MA)"].max(), res["i(MB)"].max()
    assert 0.5 * 24 / r_total < peak_a < 24 / r_total
    # through the 0.6 ohm start resistor the bound is V/(R + R_cable + R_start)
    assert peak_b < 24 / (r_total + 0.6)
