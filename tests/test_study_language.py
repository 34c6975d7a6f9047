"""The language of many runs: sweep, spread, monte-carlo, corners, required-yield.

Planning only (what runs, with which values) and the errors, with their
lines and columns; nothing here simulates except the ``--set`` runs.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from mna.analyses.sweep import build_study, monte_carlo_deviations
from mna.errors import InputError, UnitsError, UnknownNameError
from mna.netlist import parse_netlist
from mna.study_report import circuit_with_settings

BASE = """\
let Rv = 1 kohm
let Cv = 1 uF
let Vin = 12 V
voltage-source V1 in -> gnd Vin
resistor R1 in -> out Rv
capacitor C1 out -> gnd Cv
inductor L1 out -> x 1 mH resistance=2 ohm
resistor R2 x -> gnd (2 * Rv)
simulate dc
"""


def study(extra: str):
    return build_study(parse_netlist(BASE + extra, "f.mna"))


def values(s, label):
    """The SI value each run gives ``label`` (read back from the elaborated circuit)."""
    var = s.variable(label)
    return [s.circuit_for(r.overrides).params[var.parameter].value for r in s.runs]


def test_sweep_list_linear_and_logarithmic_values():
    s = study("sweep Rv = 1 kohm, 2.2 kohm, 4.7 kohm\n")
    assert values(s, "Rv") == pytest.approx([1e3, 2.2e3, 4.7e3], rel=1e-12)
    s = study("sweep Rv = linear(from=1 kohm, to=2 kohm, count=5)\n")
    assert values(s, "Rv") == pytest.approx([1000, 1250, 1500, 1750, 2000], rel=1e-12)
    s = study("sweep Rv = linear(from=1 kohm, to=2 kohm, step=0.5 kohm)\n")
    assert values(s, "Rv") == pytest.approx([1000, 1500, 2000], rel=1e-12)
    s = study("sweep Cv = logarithmic(from=1 nF, to=1 uF, count=4)\n")
    assert values(s, "Cv") == pytest.approx([1e-9, 1e-8, 1e-7, 1e-6], rel=1e-12)
    s = study("sweep Cv = logarithmic(from=1 nF, to=100 nF, per-decade=3)\n")
    assert len(s.runs) == 7 and values(s, "Cv")[3] == pytest.approx(1e-8, rel=1e-12)
    assert s.sweep_scales == ("log",)


def test_a_sweep_reaches_every_value_that_depends_on_it():
    s = study("sweep Rv = 1 kohm, 3 kohm\n")
    circuits = [s.circuit_for(r.overrides) for r in s.runs]
    assert [c.elements["R2"].params["resistance"] for c in circuits] == pytest.approx([2e3, 6e3])


def test_two_sweep_lines_make_a_grid_and_and_steps_together():
    s = study("sweep Rv = 1 kohm, 2 kohm, 3 kohm\nsweep Cv = 1 uF, 2 uF\n")
    assert len(s.runs) == 6 and s.sweep_shape == (3, 2)
    assert values(s, "Rv") == pytest.approx([1e3, 1e3, 2e3, 2e3, 3e3, 3e3])
    assert values(s, "Cv") == pytest.approx([1e-6, 2e-6] * 3)
    s = study("sweep Rv = 1 kohm, 2 kohm, 3 kohm and Cv = 3 uF, 2 uF, 1 uF\n")
    assert len(s.runs) == 3 and s.sweep_labels == (("Rv", "Cv"),)
    assert values(s, "Cv") == pytest.approx([3e-6, 2e-6, 1e-6])


def test_spread_targets_parameters_element_values_and_arguments():
    s = study("spread Vin uniform 10 %\nspread C1 normal 2 % clip=6 %\nspread resistance(L1) uniform 0.5 ohm\n"
              "monte-carlo runs=40 seed=5\n")
    vin, c1, rl = (np.array(values(s, k)) for k in ("Vin", "C1", "resistance(L1)"))
    assert np.all(np.abs(vin / 12 - 1) <= 0.1) and np.all(np.abs(c1 / 1e-6 - 1) <= 0.06 + 1e-12)
    assert np.all(np.abs(rl - 2) <= 0.5)
    assert np.std(vin) > 0 and np.std(c1) > 0 and np.std(rl) > 0
    c = s.circuit_for(s.runs[0].overrides)
    assert c.elements["V1"].params["voltage"].level == pytest.approx(vin[0])
    assert c.elements["C1"].params["capacitance"] == pytest.approx(c1[0])
    assert c.elements["L1"].params["resistance"] == pytest.approx(rl[0])


def test_a_swept_parameter_may_also_be_spread_around_each_swept_nominal():
    s = study("sweep Rv = 1 kohm, 10 kohm\nspread Rv uniform 5 %\nmonte-carlo runs=3 seed=1\n")
    nominal, actual = np.array(values(s, "nominal(Rv)")), np.array(values(s, "Rv"))
    assert list(nominal) == pytest.approx([1e3] * 3 + [1e4] * 3)
    # Common random numbers: sample k draws the same deviation at every sweep point.
    assert actual[:3] / 1e3 == pytest.approx(actual[3:] / 1e4, rel=1e-12)
    assert np.all(np.abs(actual / nominal - 1) <= 0.05)


def test_monte_carlo_draws_depend_on_the_sample_index_only():
    s = study("spread Rv uniform 10 %\nspread Cv normal 5 %\nmonte-carlo runs=50 seed=11\n")
    few = study("spread Rv uniform 10 %\nspread Cv normal 5 %\nmonte-carlo runs=10 seed=11\n")
    assert [r.overrides for r in few.runs] == [r.overrides for r in s.runs[:10]]
    other = study("spread Rv uniform 10 %\nspread Cv normal 5 %\nmonte-carlo runs=10 seed=12\n")
    assert [r.overrides for r in other.runs] != [r.overrides for r in few.runs]


def test_normal_spread_clipped_is_a_truncated_normal():
    from mna.analyses.sweep import Spread

    sp = Spread("x", "normal", 0.05, True, clip=0.05)
    d = np.array(monte_carlo_deviations([sp], 4000, 3))[:, 0]
    assert np.abs(d).max() <= 0.05
    # A normal cut at +-1 sigma has standard deviation 0.5376 sigma
    # (Johnson, Kotz & Balakrishnan, Continuous Univariate Distributions vol. 1,
    # ch. 13: var = 1 - 2*phi(1)/(2*Phi(1) - 1) = 0.2911). 4000 samples: relative
    # standard error of a standard deviation about 1/sqrt(2*4000) = 1.1 %; allow 5 %.
    assert d.std() == pytest.approx(0.05 * math.sqrt(0.2911), rel=0.05)


def test_corners_take_every_combination_of_limits():
    s = study("spread Rv uniform 10 %\nspread Cv normal 5 % clip=15 %\nspread Vin uniform 1 V\ncorners\n")
    assert len(s.runs) == 8
    got = {(round(a), round(b * 1e9), round(c, 6)) for a, b, c in
           zip(values(s, "Rv"), values(s, "Cv"), values(s, "Vin"))}
    assert got == {(r, c, v) for r in (900, 1100) for c in (850, 1150) for v in (11.0, 13.0)}
    s = study("spread Rv uniform 10 %\nspread Cv uniform 5 %\ncorners Cv\n")
    assert len(s.runs) == 2 and values(s, "Rv") == pytest.approx([1e3, 1e3])


@pytest.mark.parametrize("extra, message, line, column", [
    ("sweep Rx = 1 ohm, 2 ohm\n", "no parameter named 'Rx'", 10, 7),
    ("sweep Rv = 1 kohm, 2 uF\n", "Rv is in ohms", 10, 20),
    ("sweep Rv = 1 kohm, 2 kohm and Cv = 1 uF\n", "names joined by 'and' step together", 10, 31),
    ("sweep Rv = linear(from=1 kohm, to=2 kohm)\n", "needs exactly one of count=", 10, 12),
    ("sweep Rv = logarithmic(from=0 ohm, to=2 kohm, count=3)\n", "both above zero", 10, 12),
    ("spread Rv uniform 10 %\n", "need a 'monte-carlo runs=N seed=S' line", 10, 8),
    ("monte-carlo runs=10\n", "needs at least one spread line", 10, 1),
    ("spread Rv gaussian 10 %\nmonte-carlo runs=3\n", "unknown distribution 'gaussian'", 10, 11),
    ("spread Rv uniform 2 V\nmonte-carlo runs=3\n", "a percentage or a value in ohms", 10, 19),
    ("spread Rv uniform 10\nmonte-carlo runs=3\n", "10 has no unit; write 10 % for a share", 10, 19),
    ("spread Rv uniform 10 % clip=20 %\nmonte-carlo runs=3\n", "clip= applies to a normal spread only", 10, 24),
    ("spread Rv normal 10 %\ncorners\n", "normal without clip=", 10, 8),
    ("spread Rq uniform 10 %\nmonte-carlo runs=3\n", "no parameter or element named 'Rq'", 10, 8),
    ("spread V1 uniform 10 %\nmonte-carlo runs=3\n", None, None, None),
    ("voltage-source V2 in -> y step(to=1 V)\nspread V2 uniform 10 %\nmonte-carlo runs=3\n",
     "the value of V2 is a waveform", 11, 8),
    ("spread tol(L1) uniform 10 %\nmonte-carlo runs=3\n", "inductor has no argument 'tol'", 10, 8),
    ("spread Rv uniform 10 %\nmonte-carlo runs=0\n", "runs= needs a whole number", 11, 18),
    ("spread Rv uniform 10 %\nmonte-carlo runs=3\ncorners\n", "either monte-carlo or corners", 12, 1),
    ("required-yield 120 %\n", "above 0 % and up to 100 %", 10, 16),
])
def test_errors_say_where(extra, message, line, column):
    if message is None:  # a constant source value is a value like any other
        study(extra)
        return
    with pytest.raises(InputError) as info:
        study(extra)
    err = info.value
    assert message in str(err)
    assert (err.span.line, err.span.column) == (line, column), str(err)


def test_set_overrides_one_run_with_units_checked():
    netlist = parse_netlist(BASE, "f.mna")
    c = circuit_with_settings(netlist, {"Rv": "2.2 kohm"})
    assert c.elements["R2"].params["resistance"] == pytest.approx(4.4e3)
    with pytest.raises(UnitsError, match="Rv needs ohms"):
        circuit_with_settings(netlist, {"Rv": "2.2 uF"})
    with pytest.raises(UnitsError, match="give the unit"):
        circuit_with_settings(netlist, {"Rv": "2200"})
    with pytest.raises(UnknownNameError, match="no parameter named 'Rz'"):
        circuit_with_settings(netlist, {"Rz": "1 ohm"})


def test_set_reaches_spread_element_values_by_their_label():
    netlist = parse_netlist(BASE + "spread C1 uniform 10 %\nspread resistance(L1) uniform 1 ohm\n"
                            "monte-carlo runs=5\n", "f.mna")
    c = circuit_with_settings(netlist, {"C1": "4.7 uF", "resistance(L1)": "0.25 ohm"})
    assert c.elements["C1"].params["capacitance"] == pytest.approx(4.7e-6)
    assert c.elements["L1"].params["resistance"] == pytest.approx(0.25)
    nominal = circuit_with_settings(netlist, {"Vin": "10 V"})  # spreads stay at nominal
    assert nominal.elements["C1"].params["capacitance"] == pytest.approx(1e-6)


BLOCK = """\
block rc-leg  a -> b
    parameter resistance  = 10 ohm
    parameter capacitance = 47 nF
    resistor  R  a -> mid  resistance
    capacitor C  mid -> b  capacitance
let Rs = 22 ohm
voltage-source V1 in -> gnd 1 V
rc-leg S1 in -> gnd  resistance=Rs  capacitance=100 nF
simulate dc
"""


def test_block_parameters_can_be_swept_and_spread_by_their_hierarchical_names():
    s = build_study(parse_netlist(BLOCK + "sweep S1.resistance = 10 ohm, 33 ohm\n", "b.mna"))
    circuits = [s.circuit_for(r.overrides) for r in s.runs]
    assert [c.elements["S1.R"].params["resistance"] for c in circuits] == pytest.approx([10.0, 33.0])
    s = build_study(parse_netlist(BLOCK + "sweep Rs = 22 ohm, 47 ohm\nspread S1.capacitance uniform 10 %\n"
                                  "spread S1.resistance uniform 1 ohm\nmonte-carlo runs=4 seed=2\n", "b.mna"))
    assert len(s.runs) == 8
    for plan in s.runs:
        c = s.circuit_for(plan.overrides)
        cap, res = c.elements["S1.C"].params["capacitance"], c.elements["S1.R"].params["resistance"]
        nominal_r = c.params["Rs"].value  # the swept value the spread varies around
        assert abs(cap / 100e-9 - 1) <= 0.1 and abs(res - nominal_r) <= 1.0
    # Sample k draws the same deviation at both sweep points.
    first = [s.circuit_for(p.overrides).elements["S1.C"].params["capacitance"] for p in s.runs]
    assert first[:4] == pytest.approx(first[4:], rel=1e-12)
    with pytest.raises(UnknownNameError, match="no parameter or element named 'S1.C'"):
        build_study(parse_netlist(BLOCK + "spread S1.C uniform 10 %\nmonte-carlo runs=2\n", "b.mna"))
