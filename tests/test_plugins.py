"""Element kinds are plugins: one defined here, registered as an outside package would."""

import sys
import textwrap

import pytest

import mna
from mna.elements import registry


PLUGIN_SOURCE = textwrap.dedent('''
    from mna import Arg, Branch, Element
    from mna.elements import CONDUCTOR
    from mna.units import AMPERE, SIEMENS

    class Conductance(Element):
        """conductance G1 a -> b 10 mS: i = G v."""

        keyword = "conductance"
        main = "conductance"
        arguments = (Arg("conductance", SIEMENS, positive=True),)
        outputs = {"i": AMPERE}
        summary = "a conductance given in siemens"

        def branches(self):
            return [Branch(self.nodes["a"], self.nodes["b"], CONDUCTOR)]

        def stamp(self, s):
            s.conductance(s.node(self.nodes["a"]), s.node(self.nodes["b"]), self.params["conductance"])

        def output(self, name, probe):
            v = probe.node(self.nodes["a"]) - probe.node(self.nodes["b"])
            return v * self.params["conductance"]
''')


@pytest.fixture
def installed_plugin(tmp_path, monkeypatch):
    """A package 'mna_extra' with a dist-info declaring an mna.elements entry point."""
    (tmp_path / "mna_extra.py").write_text(PLUGIN_SOURCE)
    dist = tmp_path / "mna_extra-1.0.dist-info"
    dist.mkdir()
    (dist / "METADATA").write_text("Metadata-Version: 2.1\nName: mna-extra\nVersion: 1.0\n")
    (dist / "entry_points.txt").write_text("[mna.elements]\nconductance = mna_extra:Conductance\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    registry.refresh()
    yield
    sys.modules.pop("mna_extra", None)
    monkeypatch.undo()
    registry.refresh()


def test_plugin_kind_from_an_entry_point_works_in_a_netlist(installed_plugin):
    op = mna.parse("""
voltage-source V1 a -> gnd 10 V
conductance G1 a -> b 10 mS
resistor R1 b -> gnd 100 ohm
record i(G1), v(b)
""").dc()
    # Divider: 100 ohm (1/10 mS) over 100 ohm: i = 10 V / 200 ohm (Ohm's law).
    assert op["i(G1)"] == pytest.approx(0.05)
    assert op["v(b)"] == pytest.approx(5.0)


def test_plugin_arguments_are_unit_checked(installed_plugin):
    with pytest.raises(mna.InputError, match="siemens"):
        mna.parse("conductance G1 a -> gnd 10 ohm\n")


def test_plugin_is_listed_by_mna_kinds(installed_plugin, capsys):
    from mna.cli import main

    assert main(["kinds"]) == 0
    assert "conductance NAME a -> b [conductance]" in capsys.readouterr().out


def test_unknown_kind_without_the_plugin():
    registry.refresh()
    with pytest.raises(mna.InputError, match="unknown element kind 'conductance'"):
        mna.parse("conductance G1 a -> gnd 10 mS\n")


def test_builtin_table_matches_pyproject_entry_points():
    # The fallback table for uninstalled trees must list exactly the kinds
    # pyproject.toml registers.
    import tomllib
    from pathlib import Path

    pyproject = tomllib.loads((Path(__file__).parent.parent / "pyproject.toml").read_text())
    declared = pyproject["project"]["entry-points"]["mna.elements"]
    assert declared == registry.BUILTIN
    for keyword, target in declared.items():
        assert registry._load(target).keyword == keyword
