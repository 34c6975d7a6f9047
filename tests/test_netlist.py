"""The parser: every statement, the continuation rule, the fast path, syntax errors."""

import pytest

from mna import netlist as nl
from mna.errors import NetlistSyntaxError, UnitsError

EVERY_STATEMENT = """\
# a comment line
circuit relay "24 V relay"
let Lcoil = 10 mH
let f_ring = 1 / (2*pi*sqrt(Lcoil * 47 nF))     # trailing comment
voltage-source V1 sup -> gnd step(from=0 V, to=24 V, at=1 ms, rise=10 us)
resistor R1 sup -> a 100 ohm
inductor L1 a -> gnd Lcoil resistance=38 ohm
   initial=0 A
# a comment between a statement and its continuation

capacitor C1 a -> gnd 4.7uF initial=-2 V
current-source I1 a -> gnd -2 A
simulate transient until=4 ms  step=10 ns  method=backward-euler  start=dc
record v(a), i(L1), v(a -> sup)
measure t_half = crossing(v(a), 12 V)
check max(v(a)) < 60 V
check final(v(a)) within 2 % of 24 V
"""


def test_every_statement_kind_parses():
    statements = nl.parse_netlist(EVERY_STATEMENT).statements
    kinds = [type(s).__name__ for s in statements]
    assert kinds == [
        "CircuitStatement", "LetStatement", "LetStatement", "ElementStatement", "ElementStatement",
        "ElementStatement", "ElementStatement", "ElementStatement", "SimulateStatement",
        "RecordStatement", "MeasureStatement", "CheckStatement", "CheckStatement",
    ]


def test_statement_contents():
    st = nl.parse_netlist(EVERY_STATEMENT).statements
    assert st[0].name == "relay" and st[0].title == "24 V relay"
    inductor = st[5]
    assert inductor.kind == "inductor" and inductor.name == "L1"
    assert isinstance(inductor.operands[0], nl.NodePair)
    assert (inductor.operands[0].a, inductor.operands[0].b) == ("a", "gnd")
    assert isinstance(inductor.operands[1], nl.Node) and inductor.operands[1].name == "Lcoil"
    # The continuation line belongs to the inductor, across a comment line.
    assert [a.key for a in inductor.arguments] == ["resistance", "initial"]
    assert inductor.arguments[1].span.line == 8
    cap = st[6]
    assert cap.name == "C1" and cap.span.line == 11
    assert [a.key for a in cap.arguments] == ["initial"]
    source = st[7]
    assert source.operands[1].value.value == -2.0  # a signed main value
    sim = st[8]
    assert sim.analysis == "transient"
    assert [a.key for a in sim.arguments] == ["until", "step", "method", "start"]
    assert isinstance(sim.arguments[2].value, nl.Word) and sim.arguments[2].value.word == "backward-euler"
    record = st[9]
    assert [q.func for q in record.quantities] == ["v", "i", "v"]
    (across,) = record.quantities[2].args
    assert isinstance(across, nl.NodePair) and (across.a, across.b) == ("a", "sup")
    within = st[12]
    assert within.op == "within" and within.tolerance is not None


def test_waveform_call_named_and_pair_arguments():
    st = nl.parse_netlist(
        "voltage-source V2 x -> gnd piecewise(0 s: 0 V, 1 ms: 5 V)\n"
        "switch Q1 a -> b gate=schedule(closed, 2 ms: open)\n"
        "switch Q2 a -> b gate=v(g) > 2.5 V\n"
    ).statements
    pw = st[0].operands[1]
    assert pw.func == "piecewise" and all(isinstance(p, nl.Pair) for p in pw.args)
    gate = st[1].arguments[0].value
    assert gate.func == "schedule" and isinstance(gate.args[0], nl.Name) and isinstance(gate.args[1], nl.Pair)
    cmp = st[2].arguments[0].value
    assert isinstance(cmp, nl.Compare) and cmp.op == ">"


def test_units_inside_expressions_and_compound_units():
    st = nl.parse_netlist("inertia J1 rotor 2e-4 kg*m^2 initial=3000 rpm\nlet k = 0.05 V*s/rad\n").statements
    assert st[0].operands[1].value.value == pytest.approx(2e-4)
    assert st[1].value.value.value == pytest.approx(0.05)


FAST_PATH_LINES = [
    "resistor R1 a -> b 100 ohm",
    "inductor L1 a -> b 10 mH resistance=38 ohm initial=0 A",
    "capacitor C7 n3 -> gnd 4.7uF",
    "current-source I1 a -> gnd -2 A   # comment",
    "resistor Rx_2 in -> out 2.2 kΩ",
    "inductor Lb a->b 1e-3 H",
]


@pytest.mark.parametrize("line", FAST_PATH_LINES)
def test_fast_path_builds_what_the_grammar_builds(line):
    chunk = nl.split_statements(line)[0]
    fast = nl._fast_element(chunk, "f.mna", [line])
    assert fast is not None, "this line shape should take the fast path"
    tree = nl._parser().parse(line)
    slow = nl._Builder(chunk, "f.mna", [line]).transform(tree)
    assert fast == slow


def test_fast_path_declines_other_shapes():
    for line in ["resistor R1 a -> b (2 * Rload)", "let x = 3", "voltage-source V a -> b step(to=1 V)",
                 "coupling K1 L1 L2 0.9"]:
        chunk = nl.split_statements(line)[0]
        assert nl._fast_element(chunk, None, [line]) is None


def _error(text):
    with pytest.raises((NetlistSyntaxError, UnitsError)) as info:
        nl.parse_netlist(text, file="bad.mna")
    return info.value


def test_syntax_error_has_line_column_and_caret():
    err = _error("resistor R1 a -> b 10 ohm\nresistor R2 a -> -> b 10 ohm\n")
    assert (err.line, err.column) == (2, 18)
    text = str(err)
    assert text.startswith("bad.mna:2:18:")
    assert "resistor R2 a -> -> b 10 ohm" in text and "^" in text


def test_unclosed_parenthesis():
    err = _error("voltage-source V1 a -> gnd step(from=0 V, to=1 V\n")
    assert "unclosed parenthesis" in err.message
    assert err.line == 1


def test_dot_directive_is_rejected_with_a_plain_message():
    err = _error(".tran 1m\n")
    assert "not a dot" in err.message and (err.line, err.column) == (1, 1)


def test_indented_first_line_is_an_error():
    err = _error("   resistor R1 a -> b 1 ohm\n")
    assert err.line == 1 and "indented" in err.message


def test_bad_unit_points_at_the_unit():
    err = _error("resistor R1 a -> b 10 Ohm\n")
    assert isinstance(err, UnitsError)
    assert (err.line, err.column) == (1, 23)
    assert "did you mean 'ohm'" in err.message


def test_parse_speed_shape_large_file():
    # Not a timing test: a large generated netlist parses to the right count.
    lines = [f"resistor R{i} n{i} -> n{i + 1} 1 ohm" for i in range(5000)]
    assert len(nl.parse_netlist("\n".join(lines)).statements) == 5000


def test_bad_unit_inside_a_statement_the_grammar_parses():
    # Not the fast path: the quantity sits in a simulate line.
    err = _error("simulate transient until=60 msd step=5 us\n")
    assert isinstance(err, UnitsError)
    assert (err.line, err.column) == (1, 29) and "msd" in err.message
