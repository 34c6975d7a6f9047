"""Reusable blocks: definitions, part files, hierarchical names, errors.

A block is expanded into ordinary elements when the circuit is elaborated,
so the reference for most checks is the same circuit written out by hand;
the physics checks use closed forms named beside them.
"""

import numpy as np
import pytest

import mna
from mna.errors import InputError, NetlistSyntaxError, UnitsError, UnknownNameError

CLAMP = """\
block rcd-clamp  a -> k
    parameter resistance  = 10 kohm
    parameter capacitance = 100 nF
    diode     D  a -> top  saturation-current=1 nA
    capacitor C  top -> k  capacitance
    resistor  R  top -> k  resistance
"""

DRIVER_WITH_BLOCK = """\
voltage-source Vbus bus -> gnd 24 V
inductor Lcoil bus -> drain 10 mH resistance=38 ohm
switch   Q1 drain -> gnd  gate=pwm(frequency=1 kHz, duty=40 %)
rcd-clamp S1 drain -> bus  resistance=4.7 kohm
simulate transient until=3 ms step=1 us
""" + CLAMP

DRIVER_BY_HAND = """\
voltage-source Vbus bus -> gnd 24 V
inductor Lcoil bus -> drain 10 mH resistance=38 ohm
switch   Q1 drain -> gnd  gate=pwm(frequency=1 kHz, duty=40 %)
diode     S1_D  drain -> S1_top  saturation-current=1 nA
capacitor S1_C  S1_top -> bus  100 nF
resistor  S1_R  S1_top -> bus  4.7 kohm
simulate transient until=3 ms step=1 us
"""


def test_a_block_gives_the_waveforms_of_the_same_circuit_written_by_hand():
    block = mna.parse(DRIVER_WITH_BLOCK).run()[-1]
    hand = mna.parse(DRIVER_BY_HAND).run()[-1]
    assert np.array_equal(block.time, hand.time)
    # Same elements, same steps: only the order of the unknowns can differ, so
    # the waveforms agree to round-off (1e-9 of their peak is far below any
    # modelling error and far above double-precision round-off on 3000 steps).
    pairs = [("v(drain)", "v(drain)"), ("i(Lcoil)", "i(Lcoil)"), ("i(S1.D)", "i(S1_D)"),
             ("v(S1.top)", "v(S1_top)"), ("i(S1.R)", "i(S1_R)")]
    for ours, theirs in pairs:
        a, b = block[ours], hand[theirs]
        assert np.max(np.abs(a - b)) <= 1e-9 * np.max(np.abs(b)), ours
    # The clamp did clamp: the drain went above the bus when the switch opened.
    assert block["v(drain)"].max() > 24.5


def test_hierarchical_names_in_record_measure_check_and_csv(tmp_path):
    text = DRIVER_WITH_BLOCK + """\
record v(drain), i(S1.D), v(S1.top), p(S1.R)
measure peak_clamp = max(v(S1.top))
check peak_clamp < 200 V
check mean(p(S1.R), from=1 ms) > 0 W
"""
    path = tmp_path / "drive.mna"
    path.write_text(text, encoding="utf-8")
    from mna.cli import main

    assert main(["run", str(path), "--out", str(tmp_path / "out"), "--no-plot", "--quiet"]) == 0
    header = (tmp_path / "out" / "waveforms.csv").read_text().splitlines()[0]
    for label in ("v(drain)", "i(S1.D)", "v(S1.top)", "p(S1.R)"):
        assert label in header


def test_an_unknown_name_inside_an_instance_gets_a_hint():
    with pytest.raises(UnknownNameError) as err:
        mna.parse(DRIVER_WITH_BLOCK + "record i(S1.Dx)\n")
    assert err.value.hint == "did you mean 'S1.D'?"


def test_nested_three_deep_has_the_resistance_of_its_eight_resistors():
    # Four levels of names (T.H.Q.R): a chain of 2*2*2 resistors of 10 ohm in
    # series; by Ohm's law 1 A through them gives 80 V.
    text = """\
block unit a -> b
    parameter r = 10 ohm
    resistor R a -> b r
block pair a -> b
    parameter r = 10 ohm
    unit P a -> m r=r
    unit Q m -> b r=r
block quad a -> b
    pair H a -> m
    pair L m -> b
block octet a -> b
    quad T a -> m
    quad U m -> b
current-source I1 gnd -> top 1 A
octet X top -> gnd
simulate dc
"""
    circuit = mna.parse(text)
    resistors = [n for n in circuit.elements if n.endswith(".R")]
    assert len(resistors) == 8 and "X.T.H.P.R" in resistors and "X.U.L.Q.R" in resistors
    op = circuit.dc()
    assert op["v(top)"] == pytest.approx(80.0, rel=1e-9)
    assert op["v(X.m)"] == pytest.approx(40.0, rel=1e-9)
    assert op["v(X.T.H.m)"] == pytest.approx(70.0, rel=1e-9)


def test_the_same_block_ten_times_in_parallel():
    # Ten R-C branches straight across a 10 V step: each draws
    # (V/R)*exp(-t/(R*C)) (first-order step response; Hayt & Kemmerly,
    # Engineering Circuit Analysis, ch. 8), so the source delivers ten times that.
    uses = "\n".join(f"rc-branch B{k} in -> gnd" for k in range(10))
    text = f"""\
block rc-branch a -> b
    parameter resistance  = 100 ohm
    parameter capacitance = 1 uF
    resistor  R a -> mid  resistance
    capacitor C mid -> b  capacitance
voltage-source V1 in -> gnd step(from=0 V, to=10 V, at=0 s)
{uses}
simulate transient until=500 us step=50 ns method=trapezoidal
"""
    circuit = mna.parse(text)
    assert len(circuit.elements) == 21
    res = circuit.run()[-1]
    t = res.time
    after = t > 1e-6
    expected = -10 * (10.0 / 100.0) * np.exp(-t[after] / 100e-6)
    # Trapezoidal rule at h = tau/2000: local error ~ (h/tau)^3/12 per step,
    # well under 1e-6 of the peak over the run; 1e-4 catches any wrong element.
    assert np.max(np.abs(res["i(V1)"][after] - expected)) < 1e-4 * 1.0
    for k in range(10):
        assert res[f"i(B{k}.R)"][-1] == pytest.approx(res["i(B0.R)"][-1], rel=1e-12)


# --------------------------------------------------------------------------
# Parameters: defaults, values at the use, overrides by hierarchical name.

SNUBBER = """\
block rc-snubber a -> b
    parameter resistance  = 10 ohm
    parameter capacitance = 47 nF
    let tau = resistance * capacitance
    parameter ring-damping = tau / (1 us)        # a default computed from others
    resistor  R a -> mid  resistance
    capacitor C mid -> b  capacitance
"""


def test_parameters_take_defaults_values_from_the_use_and_overrides():
    text = SNUBBER + """\
voltage-source V1 in -> gnd 1 V
rc-snubber S1 in -> gnd
rc-snubber S2 in -> gnd resistance=22 ohm
rc-snubber S3 in -> gnd capacitance=(2 * 47 nF)
"""
    circuit = mna.parse(text)
    p = circuit.block_parameters
    assert p["S1.resistance"].value == 10.0 and circuit.elements["S1.R"].params["resistance"] == 10.0
    assert circuit.elements["S2.R"].params["resistance"] == 22.0
    assert circuit.elements["S3.C"].params["capacitance"] == pytest.approx(94e-9)
    # The computed default follows the values given at the use: 22 ohm * 47 nF / 1 us.
    assert p["S2.ring-damping"].value == pytest.approx(22 * 47e-9 / 1e-6)
    assert p["S1.ring-damping"].value == pytest.approx(10 * 47e-9 / 1e-6)


def test_an_override_by_hierarchical_name_reaches_one_instance():
    from mna.netlist import parse_netlist
    from mna.units import Quantity, parse_quantity

    text = SNUBBER + "voltage-source V1 in -> gnd 1 V\nrc-snubber S1 in -> gnd\nrc-snubber S2 in -> gnd\n"
    netlist = parse_netlist(text)
    circuit = mna.circuit.elaborate(netlist, block_overrides={"S2.resistance": parse_quantity("33 ohm")})
    assert circuit.elements["S1.R"].params["resistance"] == 10.0
    assert circuit.elements["S2.R"].params["resistance"] == 33.0
    with pytest.raises(UnitsError, match="S2.resistance needs ohms"):
        mna.circuit.elaborate(netlist, block_overrides={"S2.resistance": Quantity(1.0)})
    with pytest.raises(UnknownNameError, match="no block parameter 'S2.resistnce'") as err:
        mna.circuit.elaborate(netlist, block_overrides={"S2.resistnce": parse_quantity("33 ohm")})
    assert "S2.resistance" in err.value.hint


def test_a_unit_error_at_the_use_points_at_the_use():
    with pytest.raises(UnitsError) as err:
        mna.parse(SNUBBER + "rc-snubber S1 in -> gnd resistance=22 nF\n", "drive.mna")
    e = err.value
    assert (e.span.file, e.line, e.column) == ("drive.mna", 8, 36)
    assert "resistance of rc-snubber S1 needs ohms (ohm), got 22 nF" in e.message
    assert not e.chain


def test_an_unknown_argument_of_a_block_gets_a_did_you_mean():
    with pytest.raises(UnknownNameError) as err:
        mna.parse(SNUBBER + "rc-snubber S1 in -> gnd capacitence=1 nF\n")
    assert err.value.hint == "did you mean capacitance=?"
    with pytest.raises(UnknownNameError) as err:
        mna.parse(SNUBBER + "rc-snuber S1 in -> gnd\n")
    assert err.value.hint == "did you mean 'rc-snubber'?"


def test_hyphenated_parameters_are_read_inside_the_body():
    text = """\
block zener-clamp a -> k
    parameter clamp-voltage = 24 V
    diode D a -> k breakdown=clamp-voltage breakdown-current=5 mA
    resistor R a -> k (2 * clamp-voltage / 1 mA)
voltage-source V1 a -> gnd 1 V
zener-clamp Z1 gnd -> a clamp-voltage=33 V
"""
    circuit = mna.parse(text)
    assert circuit.elements["Z1.D"].params["breakdown"] == 33.0
    assert circuit.elements["Z1.R"].params["resistance"] == pytest.approx(66e3)


def test_a_switch_gate_inside_a_block_reads_the_instance_nodes():
    # A comparator block: the switch closes while v(sense) > threshold.
    text = """\
block comparator-load in -> out
    parameter threshold = 5 V
    resistor Rtop in -> sense 1 kohm
    resistor Rbot sense -> gnd 1 kohm
    switch   Q out -> gnd gate=v(sense) > threshold on=1 ohm off=1 Gohm
voltage-source V1 in -> gnd 12 V
resistor RL in -> out 99 ohm
comparator-load C1 in -> out
comparator-load C2 in -> out threshold=8 V
simulate dc
"""
    circuit = mna.parse(text)
    op = circuit.dc()
    # C1: v(sense) = 6 V > 5 V, closed (1 ohm); C2: 6 V < 8 V, open.
    # Divider 99 ohm over 1 ohm: v(out) = 12 V * 1/100 (Ohm's law), to 1e-6.
    assert op["v(out)"] == pytest.approx(0.12, rel=1e-6)


# --------------------------------------------------------------------------
# Errors inside a block show the chain of uses.


def test_an_error_inside_a_block_shows_the_use_then_the_line_inside(tmp_path):
    parts = tmp_path / "parts"
    parts.mkdir()
    (parts / "clamps.mna").write_text("""\
# clamp parts
block zener-clamp a -> k
    parameter clamp-voltage = 24 V
    diode D a -> mid
    diode Z k -> mid breakdown=clamp-voltage resistance=1 uF
""", encoding="utf-8")
    main = tmp_path / "drive.mna"
    main.write_text('blocks from "parts/clamps.mna"\nvoltage-source V1 in -> gnd 24 V\n'
                    "zener-clamp Z1 in -> gnd\n", encoding="utf-8")
    with pytest.raises(UnitsError) as err:
        mna.load(main)
    e = err.value
    assert e.span.file == str(parts / "clamps.mna") and (e.line, e.column) == (5, 57)
    assert [(what, span.line) for what, span in e.chain] == [("zener-clamp Z1", 3)]
    text = str(e)
    use = text.index(f"{main}:3:1: in zener-clamp Z1")
    inside = text.index(f"{parts / 'clamps.mna'}:5:57: resistance of diode Z1.Z needs ohms")
    assert use < inside
    assert text.count("^") >= 2 + 4  # a caret under the use and under "1 uF"


def test_errors_two_blocks_deep_list_both_uses():
    text = """\
block inner a -> b
    resistor R a -> b 1 H
block outer a -> b
    inner I a -> b
outer O x -> gnd
"""
    with pytest.raises(UnitsError) as err:
        mna.parse(text)
    assert [(what, span.line) for what, span in err.value.chain] == [("outer O", 5), ("inner O.I", 4)]
    assert err.value.line == 2


def test_a_wrong_default_is_reported_in_the_part_file_through_the_chain(tmp_path):
    (tmp_path / "bad.mna").write_text("block bad a -> b\n    parameter r = 10 ohm\n"
                                      "    parameter c = r * 2 F + 1 ohm\n    resistor R a -> b r\n")
    (tmp_path / "main.mna").write_text('blocks from "bad.mna"\n')
    with pytest.raises(UnitsError) as err:
        mna.load(tmp_path / "main.mna")
    assert err.value.span.file == str(tmp_path / "bad.mna") and err.value.line == 3
    assert err.value.chain[0][0] == 'blocks from "bad.mna"'


# --------------------------------------------------------------------------
# Part files.


def test_a_part_file_gives_its_definitions_only(tmp_path):
    (tmp_path / "parts").mkdir()
    (tmp_path / "parts" / "snubber.mna").write_text(SNUBBER + """\
# The part's own test bench: never run or checked from a file that uses the part.
voltage-source Vtest t -> gnd 1 V
rc-snubber Stest t -> gnd
simulate dc
check v(t) > 2 V
""")
    (tmp_path / "main.mna").write_text('blocks from "parts/snubber.mna"\n'
                                       "voltage-source V1 in -> gnd 1 V\nrc-snubber S1 in -> gnd\n")
    circuit = mna.load(tmp_path / "main.mna")
    assert set(circuit.elements) == {"V1", "S1.R", "S1.C"}
    assert not circuit.analyses and not circuit.checks


def test_part_files_brought_twice_by_two_paths_are_read_once(tmp_path):
    (tmp_path / "base.mna").write_text(SNUBBER)
    (tmp_path / "a.mna").write_text('blocks from "base.mna"\n')
    (tmp_path / "b.mna").write_text('blocks from "base.mna"\n')
    (tmp_path / "main.mna").write_text('blocks from "a.mna"\nblocks from "b.mna"\n'
                                       "voltage-source V1 in -> gnd 1 V\nrc-snubber S1 in -> gnd\n")
    assert "S1.R" in mna.load(tmp_path / "main.mna").elements


def test_an_include_loop_names_the_chain(tmp_path):
    (tmp_path / "a.mna").write_text('blocks from "b.mna"\n')
    (tmp_path / "b.mna").write_text('# b\nblocks from "c.mna"\n')
    (tmp_path / "c.mna").write_text('blocks from "a.mna"\n')
    with pytest.raises(InputError) as err:
        mna.load(tmp_path / "a.mna")
    e = err.value
    assert "loop" in e.message and e.message.endswith("a.mna -> " + str(tmp_path / "b.mna") + " -> "
                                                       + str(tmp_path / "c.mna") + " -> " + str(tmp_path / "a.mna"))
    assert [span.line for _, span in e.chain] == [1, 2]
    assert e.span.file == str(tmp_path / "c.mna")


def test_a_missing_part_file_names_the_chain(tmp_path):
    (tmp_path / "a.mna").write_text('\nblocks from "lib/b.mna"\n')
    (tmp_path / "lib").mkdir()
    (tmp_path / "lib" / "b.mna").write_text('blocks from "nope.mna"\n')
    with pytest.raises(InputError) as err:
        mna.load(tmp_path / "a.mna")
    e = err.value
    assert "no file" in e.message and str(tmp_path / "lib" / "nope.mna") in e.message
    assert e.chain[0][1].line == 2 and e.chain[0][1].file == str(tmp_path / "a.mna")
    assert e.span.file == str(tmp_path / "lib" / "b.mna")


def test_a_block_used_above_its_definition_and_twice_defined():
    text = "voltage-source V1 in -> gnd 1 V\nrc-snubber S1 in -> gnd\n" + SNUBBER
    assert "S1.C" in mna.parse(text).elements
    with pytest.raises(InputError, match="block rc-snubber is defined twice: first at line 1"):
        mna.parse(SNUBBER + SNUBBER)


# --------------------------------------------------------------------------
# Mistakes in definitions.


@pytest.mark.parametrize("text, error, message, line", [
    ("block resistor a -> b\n    resistor R a -> b 1 ohm\n", InputError, "built-in element kind", 1),
    ("block x a -> b\nresistor R a -> b 1 ohm\n", InputError, "has no body", 1),
    ("block x a -> b\n    resistor R a -> b 1 ohm\n  resistor R2 a -> b 1 ohm\n", NetlistSyntaxError,
     "indented differently", 3),
    ("block x a -> b\n    block y c -> d\n", NetlistSyntaxError, "cannot be defined inside another block", 2),
    ("block x a -> b\n    resistor R a -> b 1 ohm\n    simulate dc\n", InputError, "'simulate' line cannot be inside", 3),
    ("block x a -> b\n    parameter Rs = 1 ohm\n    resistor R a -> b 1 ohm\n", InputError, "lower-case words", 2),
    ("block x a -> b\n    parameter gain-2 = 1\n    resistor R a -> b 1 ohm\n", InputError, "each word starting", 2),
    ("block x a -> gnd\n    resistor R a -> gnd 1 ohm\n", InputError, "reference and cannot be a terminal", 1),
    ("block x a -> a\n    resistor R a -> gnd 1 ohm\n", InputError, "listed twice", 1),
    ("parameter r = 1 ohm\n", InputError, "belongs inside a block", 1),
    ("resistor R.x a -> gnd 1 ohm\n", InputError, "cannot contain '.'", 1),
    ("let S1.r = 1 ohm\n", InputError, "cannot contain '.'", 1),
])
def test_mistakes_in_definitions(text, error, message, line):
    with pytest.raises(error, match=message) as err:
        mna.parse(text)
    assert err.value.line == line


def test_a_block_that_uses_itself_is_refused():
    text = "block a-loop p -> q\n    b-loop X p -> q\nblock b-loop p -> q\n    a-loop Y p -> q\na-loop Z n -> gnd\n"
    with pytest.raises(InputError, match=r"block a-loop uses itself \(a-loop -> b-loop -> a-loop\)"):
        mna.parse(text)


def test_a_shaft_terminal_needs_a_shaft_node():
    text = """\
block flywheel shaft s
    parameter inertia = 0.01 kg*m^2
    inertia J s (inertia)
    friction B s -> frame 1 mN*m*s/rad
voltage-source V1 e -> gnd 1 V
resistor R1 e -> gnd 1 ohm
flywheel F1 e
"""
    with pytest.raises(InputError, match="terminal s is a shaft terminal, but 'e' is an electrical node") as err:
        mna.parse(text)
    assert err.value.line == 7


def test_connecting_to_a_node_inside_an_instance_is_refused():
    with pytest.raises(InputError, match="inside block instance S1"):
        mna.parse(SNUBBER + "voltage-source V1 in -> gnd 1 V\nrc-snubber S1 in -> gnd\nresistor R S1.mid -> gnd 1 ohm\n")


# --------------------------------------------------------------------------
# Python, without text.


def test_a_block_built_in_python_equals_the_netlist_block():
    snubber = mna.Block("rc-snubber", "a -> b", resistance="10 ohm", capacitance="47 nF")
    snubber.add("resistor", "R", "a", "mid", "resistance")
    snubber.add("capacitor", "C", "mid", "b", "capacitance")
    py = mna.Circuit("py")
    py.define(snubber)
    py.add("voltage-source", "V1", "in", "gnd", 10)
    py.add("resistor", "R1", "in", "sw", "100 ohm")
    py.add("inductor", "L1", "sw", "gnd", "1 mH")
    py.add("rc-snubber", "S1", "sw", "gnd", resistance="22 ohm")
    text = mna.parse(SNUBBER + """\
voltage-source V1 in -> gnd 10 V
resistor R1 in -> sw 100 ohm
inductor L1 sw -> gnd 1 mH
rc-snubber S1 sw -> gnd resistance=22 ohm
""")
    assert set(py.elements) == set(text.elements)
    a = py.transient(until="50 us", step="10 ns", start="rest")
    b = text.transient(until="50 us", step="10 ns", start="rest")
    for label in ("v(sw)", "i(S1.R)", "v(S1.mid)"):
        assert np.max(np.abs(a[label] - b[label])) <= 1e-12 * np.max(np.abs(b[label])), label


def test_python_blocks_nest_and_take_si_numbers():
    unit = mna.Block("unit", "a -> b", r="10 ohm").add("resistor", "R", "a", "b", "r")
    pair = mna.Block("pair", "a -> b").add("unit", "P", "a", "m", r="2 * 10 ohm").add("unit", "Q", "m", "b")
    c = mna.Circuit()
    c.define(unit)
    c.define(pair)
    c.add("current-source", "I1", "gnd", "top", 1.0)
    c.add("pair", "X", "top", "gnd")
    c.add("unit", "Y", "top", "gnd", r=30.0)  # SI: 30 ohm
    # 20 + 10 ohm in series, in parallel with 30 ohm: 15 ohm, so 15 V at 1 A.
    assert c.dc()["v(top)"] == pytest.approx(15.0, rel=1e-9)
    with pytest.raises(UnitsError, match="needs ohms"):
        c.add("unit", "Z", "top", "gnd", r="1 F")


def test_a_speed_in_hertz_is_refused_through_a_block_parameter():
    # rpm default: the parameter is an angular speed; 50 Hz at the use is ambiguous.
    rpm_block = "block spinner shaft s\n    parameter speed = 100 rpm\n    speed-source W s speed\n"
    with pytest.raises(UnitsError, match="angular speed") as err:
        mna.parse(rpm_block + "spinner S1 x speed=50 Hz\n")
    assert err.value.line == 4 and not err.value.chain
    # A default written in hertz reaches the speed source inside: refused there.
    hz_block = "block spinner shaft s\n    parameter speed = 100 Hz\n    speed-source W s speed\n"
    with pytest.raises(UnitsError, match="got speed = 100 Hz") as err:
        mna.parse(hz_block + "spinner S1 x\n")
    assert err.value.line == 3 and err.value.chain[0][1].line == 4


def test_mna_kinds_lists_the_blocks_of_a_file(capsys):
    from pathlib import Path

    from mna.cli import main

    family = Path(__file__).resolve().parent.parent / "circuits" / "valve_driver_family.mna"
    assert main(["kinds", str(family)]) == 0
    out = capsys.readouterr().out
    assert "zener-clamp NAME a -> k" in out and "valve-channel NAME bus" in out
    assert "    clamp-voltage=  volts (V); default 24 V" in out


def test_with_parameters_reaches_one_block_instance_by_its_hierarchical_name():
    circuit = mna.parse(SNUBBER + "voltage-source V1 in -> gnd 1 V\nrc-snubber S1 in -> gnd\n"
                        "rc-snubber S2 in -> gnd\n")
    for value in ("33 ohm", 33.0):  # quantity text, or SI
        changed = circuit.with_parameters({"S2.resistance": value})
        assert changed.elements["S2.R"].params["resistance"] == 33.0
        assert changed.elements["S1.R"].params["resistance"] == 10.0
        # A default computed from the overridden parameter follows it.
        assert changed.block_parameters["S2.ring-damping"].value == pytest.approx(33 * 47e-9 / 1e-6)
    assert circuit.elements["S2.R"].params["resistance"] == 10.0  # the original is unchanged
    with pytest.raises(UnitsError, match="S2.resistance needs ohms"):
        circuit.with_parameters({"S2.resistance": "1 uF"})
    with pytest.raises(UnknownNameError) as err:
        circuit.with_parameters({"S2.resistanc": "1 ohm"})
    assert err.value.hint == "did you mean 'S2.resistance'?"


def test_with_parameters_reaches_a_block_built_in_python():
    unit = mna.Block("unit", "a -> b", r="10 ohm").add("resistor", "R", "a", "b", "r")
    c = mna.Circuit()
    c.define(unit)
    c.add("current-source", "I1", "gnd", "top", 1.0)
    c.add("unit", "X", "top", "gnd")
    assert c.with_parameters({"X.r": "25 ohm"}).dc()["v(top)"] == pytest.approx(25.0, rel=1e-9)  # Ohm's law
    with pytest.raises(UnknownNameError, match="X.q"):
        c.with_parameters({"X.q": 1.0})


def test_a_body_does_not_see_the_lets_of_the_file():
    text = "let Rload = 5 ohm\nblock load-r a -> b\n    resistor R a -> b Rload\nload-r X in -> gnd\n"
    with pytest.raises(UnknownNameError, match="unknown parameter 'Rload'") as err:
        mna.parse(text)
    assert err.value.line == 3 and "sees only its own parameters" in err.value.hint


def test_a_block_with_a_thermal_terminal():
    # A heatsink part: steady-state temperature rises are heat flow times
    # thermal resistance (the thermal analogue of Ohm's law).
    text = """\
block heatsink thermal case
    parameter pad  = 0.5 K/W
    parameter sink = 2 K/W
    thermal-resistance Rpad  case -> fins  pad
    thermal-resistance Rsink fins -> ambient  sink
    thermal-capacitance C   fins -> ambient 40 J/K
heat-source P1 junction 10 W
thermal-resistance Rjc junction -> case 1 K/W
heatsink H1 case sink=3 K/W
simulate dc
"""
    op = mna.parse(text).dc()
    assert op["T(junction)"] - op["T(H1.fins)"] == pytest.approx(10 * 1.5, rel=1e-9)
    assert op["T(case)"] - op["T(H1.fins)"] == pytest.approx(10 * 0.5, rel=1e-9)
    with pytest.raises(InputError, match="terminal case is a thermal terminal"):
        mna.parse(text.replace("heatsink H1 case", "resistor Rx e -> gnd 1 ohm\nheatsink H1 e"))


def test_blocks_nested_past_the_depth_limit_are_an_input_error():
    from mna.blocks import MAX_DEPTH

    levels = ["block b0 a -> b\n    resistor R a -> b 1 ohm\n"]
    levels += [f"block b{k} a -> b\n    b{k - 1} X a -> b\n" for k in range(1, MAX_DEPTH + 5)]
    text = "".join(levels) + f"b{MAX_DEPTH + 4} Top x -> gnd\n"
    with pytest.raises(InputError, match=f"nested more than {MAX_DEPTH} deep"):
        mna.parse(text)
    ok = "".join(levels[:MAX_DEPTH]) + f"b{MAX_DEPTH - 1} Top x -> gnd\n"
    assert len(mna.parse(ok).elements) == 1


REQUIRED = """\
block valve a -> b
    parameter coil-resistance in ohm         # no default: every use gives it
    parameter tau = 2 ms
    parameter coil-inductance = coil-resistance * tau
    inductor L a -> b  inductance=coil-inductance  resistance=coil-resistance
voltage-source V in -> gnd 24 V
"""


def test_a_parameter_without_a_default_must_be_given_in_its_unit():
    circuit = mna.parse(REQUIRED + "valve K1 in -> gnd coil-resistance=24 ohm\n")
    assert circuit.elements["K1.L"].params["inductance"] == pytest.approx(48e-3)
    with pytest.raises(InputError, match=r"valve K2 needs its coil-resistance \(as coil-resistance=...\)") as err:
        mna.parse(REQUIRED + "valve K2 in -> gnd\n")
    assert err.value.line == 7
    with pytest.raises(UnitsError, match="coil-resistance of valve K3 needs ohms"):
        mna.parse(REQUIRED + "valve K3 in -> gnd coil-resistance=24 V\n")
    with pytest.raises(UnitsError, match="'ohmz' is not a unit") as err:
        mna.parse(REQUIRED.replace("in ohm", "in ohmz") + "valve K1 in -> gnd coil-resistance=1 ohm\n")
    assert (err.value.line, err.value.column) == (2, 34)
