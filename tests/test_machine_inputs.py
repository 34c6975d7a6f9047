"""Machines and shafts at the input: rating data, units, domains, topology, registration.

The rating-data checks simulate the datasheet tests themselves (no-load run,
locked rotor) and compare with the numbers given, using the steady-state DC
machine equations of Franklin, Powell & Emami-Naeini and Nise (ch. 2, from memory): at stall
I = (V - Vb)/R and T = k I; at no load V = R I_nl + (Vb) + k w_nl.
"""

from __future__ import annotations

import math
import tomllib
from pathlib import Path

import pytest

import mna
from mna.circuit import ANGULAR_TEXT
from mna.elements.base import REQUIRED
from mna.elements.registry import BUILTIN, element_kinds
from mna.errors import InputError, TopologyError, UnitsError
from mna.units import describe

RPM = 2 * math.pi / 60
ROOT = Path(__file__).resolve().parents[1]
MACHINE_KINDS = ("dc-machine", "coil-generator", "inertia", "friction", "load", "speed-source", "gear")


# --------------------------------------------------------------------------
# Rating data: reproduce the datasheet by simulating its tests.


def _no_load(spec: str, friction: float = 0.0) -> dict:
    text = (f"voltage-source V1 s -> gnd 24 V\ndc-machine M1 s -> gnd shaft=rotor inductance=1 mH {spec}\n"
            "inertia J1 rotor 1e-4 kg*m^2\n")
    if friction:
        text += f"friction B1 rotor -> frame {friction} N*m*s/rad\n"
    return mna.parse(text + "record i(M1)\n").dc().values


def _stall(spec: str) -> dict:
    text = (f"voltage-source V1 s -> gnd 24 V\ndc-machine M1 s -> gnd shaft=frame inductance=1 mH {spec}\n"
            "record i(M1), torque(M1)\n")
    return mna.parse(text).dc().values


@pytest.mark.parametrize("brush", [0.0, 2.0])
@pytest.mark.parametrize("given", [
    "no-load-speed=3000 rpm stall-current=20 A",
    "no-load-speed=3000 rpm stall-torque=1.4 N*m",
    "stall-current=20 A stall-torque=1.4 N*m",
    "resistance=1.2 ohm no-load-speed=3000 rpm",
])
def test_rating_data_reproduce_the_datasheet(given, brush):
    spec = f"rated-voltage=24 V {given} brush-drop={brush} V"
    stall = _stall(spec)
    if "stall-current" in given:
        assert stall["i(M1)"] == pytest.approx(20.0, rel=1e-9)
    if "stall-torque" in given:
        assert stall["torque(M1)"] == pytest.approx(1.4, rel=1e-9)
    if "resistance" in given:
        assert stall["i(M1)"] == pytest.approx((24 - brush) / 1.2, rel=1e-9)
    if "no-load-speed" in given:
        # No-load current not given: an ideal machine with no friction turns at
        # w_nl with no current (and so no brush drop).
        assert _no_load(spec)["w(rotor)"] == pytest.approx(3000 * RPM, rel=1e-6)


@pytest.mark.parametrize("given", [
    "no-load-speed=3000 rpm stall-current=20 A",
    "no-load-speed=3000 rpm stall-torque=1.4 N*m",
    "resistance=1.2 ohm no-load-speed=3000 rpm",
])
def test_no_load_current_is_reproduced_with_the_documented_friction(given):
    # The element's docstring: friction B = k I_nl / w_nl on the shaft
    # reproduces the no-load point (k I_nl = B w_nl, V' = R I_nl + k w_nl).
    spec = f"rated-voltage=24 V {given} no-load-current=0.3 A brush-drop=1 V"
    circuit = mna.parse(f"dc-machine M1 s -> gnd shaft=rotor {spec}\ninertia J1 rotor 1e-4 kg*m^2\n"
                        "voltage-source V1 s -> gnd 24 V\n")
    k = circuit.elements["M1"].constant
    op = _no_load(spec, friction=k * 0.3 / (3000 * RPM))
    assert op["w(rotor)"] == pytest.approx(3000 * RPM, rel=1e-9)
    assert op["i(M1)"] == pytest.approx(0.3, rel=1e-9)
    if "stall-current" in given:
        assert _stall(spec)["i(M1)"] == pytest.approx(20.0, rel=1e-9)
    if "stall-torque" in given:
        assert _stall(spec)["torque(M1)"] == pytest.approx(1.4, rel=1e-9)


def test_rating_formulas_as_documented():
    # grammar/README.md: R = V/I_stall, k = V/w_nl without no-load current.
    m = mna.parse("dc-machine M1 a -> gnd shaft=r rated-voltage=24 V no-load-speed=3000 rpm "
                  "stall-current=20 A\ninertia J r 1 kg*m^2\nvoltage-source V a -> gnd 1 V\n").elements["M1"]
    assert m.resistance == pytest.approx(24 / 20, rel=1e-15)
    assert m.constant == pytest.approx(24 / (3000 * RPM), rel=1e-15)


@pytest.mark.parametrize("spec, message", [
    ("rated-voltage=24 V no-load-speed=3000 rpm stall-current=20 A stall-torque=1 N*m", "exactly once"),
    ("rated-voltage=24 V no-load-speed=3000 rpm", "exactly once"),
    ("rated-voltage=24 V resistance=1 ohm stall-current=20 A", "exactly once"),
    ("no-load-speed=3000 rpm stall-current=20 A", "need rated-voltage="),
    ("rated-voltage=24 V constant=0.05 V*s/rad resistance=1 ohm", "constant= is derived"),
    ("rated-voltage=24 V stall-current=20 A stall-torque=1 N*m no-load-current=0.2 A", "needs no-load-speed="),
    ("rated-voltage=24 V no-load-speed=3000 rpm stall-current=2 A no-load-current=2.5 A", "must be positive"),
    ("rated-voltage=2 V no-load-speed=3000 rpm stall-current=2 A brush-drop=2 V", "brush drop"),
    ("resistance=1 ohm", "needs constant="),
    ("constant=0.05 V*s/rad", "needs resistance="),
])
def test_rating_data_that_do_not_fix_r_and_k_once_are_refused(spec, message):
    with pytest.raises(InputError, match=message) as err:
        mna.parse(f"dc-machine M1 a -> gnd shaft=r {spec}\n")
    assert err.value.line == 1 and err.value.column is not None


# --------------------------------------------------------------------------
# Units: every physical argument of every new kind refuses a wrong unit.

# Each kind: its terminals, its main value (or None) and its arguments, all valid.
VALID = {
    "dc-machine": ("a -> gnd shaft=r", None, {"resistance": "1 ohm", "constant": "0.05 V*s/rad"}),
    "coil-generator": ("a -> gnd shaft=r", None, {"turns": "10", "field": "0.5 T", "area": "10 cm^2"}),
    "inertia": ("r", "1e-4 kg*m^2", {}),
    "friction": ("r -> frame", "1e-5 N*m*s/rad", {}),
    "load": ("r", None, {"torque": "0.1 N*m"}),
    "speed-source": ("r", "100 rad/s", {}),
    "gear": ("r -> s", "3", {}),
}


def _line(keyword: str, replace: str | None = None, value: str = "") -> str:
    terminals, main, args = VALID[keyword]
    cls = element_kinds()[keyword]
    if replace is None:
        pass
    elif replace == cls.main and main is not None:
        main = value
    else:
        args = {**args, replace: value}
    parts = [keyword, "X", terminals] + ([main] if main else []) + [f"{k}={v}" for k, v in args.items()]
    return " ".join(parts)


def _unit_cases():
    for keyword in MACHINE_KINDS:
        cls = element_kinds()[keyword]
        for arg in cls.arguments:
            if arg.kind not in ("quantity", "waveform") or arg.dimension is None:
                continue
            wrong = "3 V" if arg.dimension != mna.units.VOLT else "3 A"
            expected = ANGULAR_TEXT if arg.angular else describe(arg.dimension)
            yield pytest.param(keyword, arg.name, wrong, expected, id=f"{keyword}-{arg.name}")


@pytest.mark.parametrize("keyword, argument, wrong, expected", list(_unit_cases()))
def test_every_argument_refuses_a_wrong_unit(keyword, argument, wrong, expected):
    line = _line(keyword, argument, wrong)
    column = line.index(wrong) + 1
    with pytest.raises(UnitsError) as err:
        mna.parse(line + "\n")
    message = str(err.value)
    assert f"{argument} of {keyword} X" in message
    assert expected in message
    assert (err.value.line, err.value.column) == (1, column)


def test_the_valid_lines_above_are_valid():
    # so that the wrong-unit cases fail for their unit alone
    for keyword in MACHINE_KINDS:
        assert keyword in [e.keyword for e in mna.parse(_line(keyword) + "\n").elements.values()]


def test_a_plain_number_argument_before_another_argument():
    # The parser's fast path must not read "10 field" as a number with the
    # unit "field" (the grammar: a unit is never followed by "=").
    st = mna.netlist.parse_netlist("coil-generator G1 a -> gnd turns=10 field=1 T area=1 cm^2\n").statements[0]
    assert [(a.key, a.value.text) for a in st.arguments] == [("turns", "10"), ("field", "1 T"), ("area", "1 cm^2")]


@pytest.mark.parametrize("line", [
    "speed-source W rotor 50 Hz",
    "speed-source W rotor step(from=0 rad/s, to=2 kHz, at=1 ms)",
    "speed-source W rotor piecewise(0 s: 0 rad/s, 1 s: 10 Hz)",
    "inertia J rotor 1e-4 kg*m^2 initial=(2 * 25 Hz)",
    "dc-machine M a -> gnd shaft=rotor rated-voltage=24 V no-load-speed=50 Hz stall-current=2 A",
    "load T rotor fan-torque=1 N*m fan-speed=40 Hz",
])
def test_angular_speeds_in_hertz_are_refused_as_ambiguous(line):
    with pytest.raises(UnitsError, match=r"hertz is ambiguous.*rad/s or rpm") as err:
        mna.parse(line + "\n")
    assert err.value.line == 1 and "Hz" in line[err.value.column - 1:]


def test_the_language_specification_examples_parse():
    # The rotating-machine lines of the core language specification, verbatim.
    text = """
voltage-source  V1   a -> b   24 V
resistor        R0   b -> gnd 1 ohm
dc-machine      M1   a -> b   shaft=rotor  resistance=0.8 ohm  inductance=1.2 mH  constant=0.05 V*s/rad
coil-generator  G1   a -> b   shaft=rotor  turns=200  field=0.5 T  area=40 cm^2
inertia         J1   rotor    2e-4 kg*m^2  initial=0 rpm
friction        B1   rotor -> frame   1e-5 N*m*s/rad
load            T1   rotor    torque=0.2 N*m
speed-source    W1   rotor    3000 rpm
record w(rotor), rpm(rotor), torque(M1), emf(M1), angle(rotor)
"""
    c = mna.parse(text)
    assert {e.keyword for e in c.elements.values()} >= set(MACHINE_KINDS) - {"gear"}
    assert c.elements["G1"].flux_linkage == pytest.approx(200 * 0.5 * 40e-4, rel=1e-12)


def test_a_sine_speed_keeps_its_frequency_in_hertz():
    # Only the speed values are angular speeds: sine()'s own frequency= is a frequency.
    c = mna.parse("speed-source W rotor sine(amplitude=10 rad/s, offset=100 rad/s, frequency=2 Hz)\n")
    assert c.elements["W"].waveform.value(0.125) == pytest.approx(110.0, rel=1e-12)  # quarter period


def test_hertz_is_refused_from_python_too():
    c = mna.Circuit()
    with pytest.raises(UnitsError, match="hertz is ambiguous"):
        c.add("speed-source", "W1", "rotor", "50 Hz")
    with pytest.raises(UnitsError, match="needs an angular speed in rad/s or rpm, got 5 V"):
        c.add("inertia", "J1", "rotor", "1 kg*m^2", initial="5 V")
    c.add("speed-source", "W1", "rotor", "3000 rpm")
    assert c.elements["W1"].waveform.value(0.0) == pytest.approx(3000 * RPM, rel=1e-15)


def test_machine_from_python_with_either_constant_unit():
    c = mna.Circuit("py")
    c.add("voltage-source", "V1", "s", "gnd", "12 V")
    c.add("dc-machine", "M1", "s", "gnd", shaft="rotor", resistance="1 ohm", inductance="0.5 mH",
          constant="0.05 N*m/A")
    c.add("inertia", "J1", "rotor", "1e-4 kg*m^2")
    assert c.dc()["w(rotor)"] == pytest.approx(12 / 0.05, rel=1e-9)  # no-load speed V/k (no friction)


# --------------------------------------------------------------------------
# Domains and topology.


@pytest.mark.parametrize("text, message, line, column", [
    # a shaft element on an electrical node
    ("voltage-source V1 a -> gnd 12 V\ninertia J1 a 1e-4 kg*m^2\n",
     "node 'a' is an electrical node .* inertia J1 connects it as a shaft node", 2, 12),
    # an electrical terminal on a shaft node
    ("inertia J1 rotor 1e-4 kg*m^2\nresistor R1 rotor -> gnd 1 ohm\n",
     "node 'rotor' is a shaft node .* resistor R1 connects it as an electrical node", 2, 13),
    # a machine's shaft on an electrical node
    ("voltage-source V1 a -> gnd 12 V\ndc-machine M1 a -> gnd shaft=a resistance=1 ohm constant=0.05 V*s/rad\n",
     "node 'a' is an electrical node", 2, 30),
    # the references of the two domains
    ("dc-machine M1 a -> gnd shaft=gnd resistance=1 ohm constant=0.05 V*s/rad\n",
     "'gnd' is the electrical reference; dc-machine M1 needs a shaft node", 1, 30),
    ("resistor R1 a -> frame 1 ohm\n", "'frame' is the shaft reference", 1, 18),
    # a machine without a shaft
    ("voltage-source V1 a -> gnd 12 V\ndc-machine M1 a -> gnd resistance=1 ohm constant=0.05 V*s/rad\n",
     "dc-machine M1 needs shaft=NODE", 2, 12),
    ("coil-generator G1 a -> gnd turns=10 field=1 T area=1 cm^2\n", "coil-generator G1 needs shaft=NODE", 1, 16),
    # shaft parts on the frame itself
    ("load T1 frame torque=1 N*m\n", "connected to 'frame'", 1, 9),
    ("inertia J1 frame 1 kg*m^2\n", "connected to 'frame'", 1, 12),
    ("gear G1 a -> frame 2\n", "a gear joins two shaft nodes", 1, 6),
    # argument combinations
    ("inertia J r 1 kg*m^2\nload T1 r\n", "needs a torque=", 2, 6),
    ("inertia J r 1 kg*m^2\nload T1 r fan-torque=1 N*m\n", "add fan-speed=", 2, 22),
    ("gear G1 a -> b 0\n", "ratio cannot be zero", 1, 16),
])
def test_domain_and_argument_errors_name_line_and_column(text, message, line, column):
    with pytest.raises(InputError, match=message) as err:
        mna.parse(text)
    assert (err.value.line, err.value.column) == (line, column)


@pytest.mark.parametrize("text, message", [
    ("voltage-source V1 a -> gnd 12 V\ndc-machine M1 a -> gnd shaft=r resistance=1 ohm constant=0.05 V*s/rad\n",
     "shaft node 'r' has nothing to hold it: only M1"),
    ("voltage-source V1 a -> gnd 1 V\nresistor R a -> gnd 1 ohm\n"
     "coil-generator G1 a -> gnd shaft=r turns=1 field=1 T area=1 m^2 resistance=1 ohm\n",
     "shaft node 'r' has nothing to hold it"),
    ("speed-source W1 a 10 rad/s\nspeed-source W2 b 10 rad/s\ngear G a -> b 2\n",
     "loop of speed constraints"),
    ("speed-source W1 a 10 rad/s\nspeed-source W2 a 20 rad/s\n", "loop of speed constraints"),
    ("inertia J1 a 1 kg*m^2\nfriction F1 b -> c 1 N*m*s/rad\n", "no connection to 'frame'"),
])
def test_shaft_topology_errors(text, message):
    with pytest.raises(TopologyError, match=message) as err:
        mna.parse(text).dc()
    if "frame" in message:
        assert "inertia, friction, a speed source" in str(err.value)


def test_a_shaft_held_only_by_inertia_solves_with_a_warning():
    # An inertia carries no torque at DC: the shaft gets the documented leak.
    c = mna.parse("inertia J1 r 1 kg*m^2\nload T1 r torque=1 N*m\n")
    assert c.dc()["w(r)"] == pytest.approx(0.0, abs=1e-9)
    assert any("leak" in w for w in c.warnings)


def test_shaft_outputs_resolve_and_refuse_unknown_quantities():
    c = mna.parse("speed-source W1 r 10 rad/s\ninertia J1 r 1 kg*m^2\nrecord torque(W1), pmech(W1), p(J1)\n")
    assert [r.label for r in c.records] == ["torque(W1)", "pmech(W1)", "p(J1)"]
    with pytest.raises(InputError, match="speed-source W1 has no quantity emf"):
        c.record("emf(W1)")


# --------------------------------------------------------------------------
# Registration: entry points and the built-in table agree.


def test_machine_kinds_are_registered_in_pyproject_and_builtin_alike():
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())
    points = project["project"]["entry-points"]["mna.elements"]
    for keyword in MACHINE_KINDS:
        assert points[keyword] == BUILTIN[keyword]
        cls = element_kinds()[keyword]
        assert cls.keyword == keyword
        assert f"{cls.__module__}:{cls.__name__}" == BUILTIN[keyword]
    assert set(points) == set(BUILTIN)


def test_required_arguments_are_marked():
    # coil-generator needs turns, field and area; the dc-machine's resistance
    # and constant may come from rating data instead, so they are optional.
    coil = element_kinds()["coil-generator"]
    assert {a.name for a in coil.arguments if a.default is REQUIRED} == {"turns", "field", "area"}
    machine = element_kinds()["dc-machine"]
    assert not [a.name for a in machine.arguments if a.default is REQUIRED]
