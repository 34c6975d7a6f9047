"""The plugin protocol of DEVELOPERS.md, run as written: its worked example
(a transconductor, a controlled source with a second port) is installed as
an outside package and checked against its closed form, with gnd on both
ports; a plugin that raises and a broken entry point are reported as the
plugin's fault.

Source: a voltage-controlled current source into a resistor, Ohm's law
and KCL (Nilsson & Riedel, *Electric Circuits*, ch. 2); tanh is the
example's own documented transfer law.
"""

from __future__ import annotations

import math
import re
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

import mna
from mna.elements import registry
from mna.errors import PluginError

DEVELOPERS = Path(__file__).resolve().parents[1] / "DEVELOPERS.md"


def worked_example() -> str:
    """The Python block of the worked example in DEVELOPERS.md."""
    text = DEVELOPERS.read_text(encoding="utf-8")
    section = text[text.index("### A worked example"):]
    return re.search(r"```python\n(.*?)```", section, re.S).group(1)


FAULTY = textwrap.dedent('''
    import numpy as np
    from mna import Arg, Branch, Element, NonlinearBatch
    from mna.elements import CONDUCTOR
    from mna.units import SIEMENS

    class FaultyBatch(NonlinearBatch):
        def __init__(self, elements, stamper):
            super().__init__(elements, stamper)
            self.f_rows = np.array([stamper.node(e.nodes["a"]) for e in elements])

        def evaluate(self, x, t):
            return 1 / 0, self.empty, self.empty, self.empty

    class Faulty(Element):
        keyword = "faulty"
        main = "g"
        arguments = (Arg("g", SIEMENS),)
        Batch = FaultyBatch

        def branches(self):
            return [Branch(self.nodes["a"], self.nodes["b"], CONDUCTOR)]
''')


def install(tmp_path, monkeypatch, module: str, source: str | None, points: dict[str, str]) -> None:
    if source is not None:
        (tmp_path / f"{module}.py").write_text(source)
    dist = tmp_path / f"{module}-1.0.dist-info"
    dist.mkdir()
    (dist / "METADATA").write_text(f"Metadata-Version: 2.1\nName: {module}\nVersion: 1.0\n")
    lines = "".join(f"{name} = {target}\n" for name, target in points.items())
    (dist / "entry_points.txt").write_text("[mna.elements]\n" + lines)
    monkeypatch.syspath_prepend(str(tmp_path))
    registry.refresh()


@pytest.fixture
def plugins(tmp_path, monkeypatch):
    monkeypatch.setenv("MNA_CACHE_DIR", str(tmp_path / "cache"))
    install(tmp_path, monkeypatch, "mna_transconductor", worked_example(),
            {"transconductor": "mna_transconductor:Transconductor"})
    (tmp_path / "mna_faulty.py").write_text(FAULTY)
    (tmp_path / "more").mkdir()
    install(tmp_path / "more", monkeypatch, "mna_faulty", FAULTY, {"faulty": "mna_faulty:Faulty"})
    (tmp_path / "broken").mkdir()
    install(tmp_path / "broken", monkeypatch, "mna_broken", None, {"broken-kind": "mna_broken_missing:Kind"})
    yield
    for name in ("mna_transconductor", "mna_faulty"):
        sys.modules.pop(name, None)
    monkeypatch.undo()
    registry.refresh()


CIRCUIT = """\
voltage-source Vs sup -> gnd 10 V
resistor RL sup -> out 100 ohm
voltage-source Vc ctl -> gnd {control}
transconductor G1 ctl -> gnd, out -> gnd  gain=10 mS  limit=50 mA
record i(G1), vc(G1), v(out)
"""


def test_the_worked_example_against_its_closed_form(plugins):
    # i = 50 mA tanh(10 mS * 1 V / 50 mA) = 9.868 mA from out through G1 to
    # gnd; KCL at out: the load carries it, v(out) = 10 V - 100 ohm * i.
    op = mna.parse(CIRCUIT.format(control="1 V")).dc()
    i = 0.05 * math.tanh(0.2)
    # Newton's method converges to 1e-12 A (the current tolerance): 1e-9 relative.
    assert op["i(G1)"] == pytest.approx(i, rel=1e-9)
    assert op["vc(G1)"] == pytest.approx(1.0, rel=1e-12)
    assert op["v(out)"] == pytest.approx(10 - 100 * i, rel=1e-9)


def test_the_worked_example_in_a_transient_run(plugins):
    # A sine on the control port, large enough to reach the limit; the
    # element is memoryless, so every sample follows the closed form.
    c = mna.parse(CIRCUIT.format(control="sine(amplitude=20 V, frequency=1 kHz)"))
    res = c.transient(until=2e-3, step=10e-6, method="trapezoidal")
    vc = 20 * np.sin(2 * np.pi * 1e3 * res.time)
    expected = 0.05 * np.tanh(0.01 * vc / 0.05)
    np.testing.assert_allclose(res["i(G1)"], expected, rtol=0, atol=1e-9)
    assert np.max(res["i(G1)"]) > 0.049  # the limit is reached


def test_a_plugin_quantity_gets_a_did_you_mean(plugins):
    with pytest.raises(mna.InputError, match=r"did you mean vc\(G1\)"):
        mna.parse(CIRCUIT.format(control="1 V") + "record vx(G1)\n")


def test_a_plugin_that_raises_is_named(plugins, tmp_path, capsys):
    text = "voltage-source V1 a -> gnd 1 V\nresistor R1 a -> b 1 ohm\nfaulty F1 b -> gnd 1 S\nsimulate dc\n"
    with pytest.raises(ZeroDivisionError):  # from Python, the exception itself
        mna.parse(text).dc()
    path = tmp_path / "faulty.mna"
    path.write_text(text)
    from mna.cli import EXIT_PLUGIN, main

    code = main(["run", str(path), "--out", str(tmp_path / "out"), "--no-plot"])
    err = capsys.readouterr().err
    assert code == EXIT_PLUGIN == 5
    assert "plugin mna_faulty" in err and "'faulty'" in err and "ZeroDivisionError" in err
    assert "internal error" not in err
    from mna.batch import check_file

    result = check_file(path)
    assert result.status == "plugin" and "mna_faulty" in result.message


def test_a_broken_entry_point_is_named_when_used(plugins):
    with pytest.raises(PluginError, match=r"mna.elements:broken-kind \(mna_broken_missing:Kind\) fails to load"):
        mna.parse("broken-kind B1 a -> gnd\n")
    # Circuits that do not use it are not affected.
    assert mna.parse("resistor R1 a -> gnd 1 ohm\n").elements["R1"].keyword == "resistor"


def test_unknown_tolerance_reaches_newton():
    from mna.analyses.common import prepare
    from mna.elements.base import Unknown
    from mna.units import WEBER

    u = Unknown("flux", WEBER, "a winding's flux", tolerance=1e-10)
    assert u.tolerance == 1e-10
    system, _ = prepare(mna.parse("voltage-source V1 a -> gnd 1 V\ninductor L1 a -> gnd 1 mH\n"))
    # Built-in unknowns keep the tolerance of their dimension: 1 pA for a current.
    k = system.own_index[("L1", "i")]
    assert system.abstol[k] == 1e-12
