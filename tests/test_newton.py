"""Newton's method and its safeguards: limiting, damping, leak stepping and source ramping, failure.

Sources:
- Damped Newton and continuation (leak stepping, source ramping):
  Vlach & Singhal, *Computer Methods for Circuit Analysis and Design*
  (1994), and Chua & Lin (1975), from memory.
- Newton's method on atan diverges from |x0 - root| > 1.39 (a textbook
  example of Newton's failure; e.g. Burden & Faires, *Numerical Analysis*,
  from memory): the case damping exists for.
- Diode with series resistor: Banwell & Jayakumar (2000),
  section 8.

Two test-only element kinds stand for ill-posed physics: an "offset atan"
conductor (Newton diverges without damping) and a "square-law" conductor
whose Jacobian vanishes at the starting point or which has no solution at
all. They are registered for these tests only.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.special import wrightomega

import mna
from mna import Arg, Branch, Element, NonlinearBatch
from mna.analyses.common import dc_leak, prepare
from mna.analyses.dc import leak_stepping, source_ramping
from mna.cli import main as cli_main
from mna.elements import CONDUCTOR
from mna.elements.registry import _extra
from mna.runstate import DiscreteStates
from mna.solver import Factorizer, newton
from mna.units import DIMENSIONLESS, VOLT

K_BOLTZMANN = 1.380649e-23  # J/K, exact (SI 2019)
Q_ELECTRON = 1.602176634e-19  # C, exact (SI 2019)


class _OneNodeBatch(NonlinearBatch):
    """i = law(v) from node a to the reference, one row per instance."""

    def __init__(self, elements, stamper):
        super().__init__(elements, stamper)
        self.rows = np.array([e._a for e in elements], dtype=np.int64)
        self.param = np.array([e.params["offset"] for e in elements])
        self.f_rows = self.jf_rows = self.jf_cols = self.rows

    def evaluate(self, x, t):
        i, g = self.law(x[self.rows], self.param)
        return i, g, self.empty, self.empty


class _OneNode(Element):
    ports = (mna.Port(("a",)),)
    arguments = (Arg("offset", DIMENSIONLESS, default=0.0),)
    outputs = {"v": VOLT}

    def output(self, quantity, probe):
        return probe.node(self.nodes["a"])

    def branches(self):
        return [Branch(self.nodes["a"], "gnd", CONDUCTOR)]

    def stamp(self, s):
        self._a = s.node(self.nodes["a"])


class AtanBatch(_OneNodeBatch):
    @staticmethod
    def law(v, offset):
        return np.arctan(v - offset), 1.0 / (1.0 + (v - offset) ** 2)


class AtanConductor(_OneNode):
    """test-atan X a offset=3: i = atan(v - offset) amperes (v in volts)."""

    keyword = "test-atan"
    Batch = AtanBatch


class SquareBatch(_OneNodeBatch):
    @staticmethod
    def law(v, offset):
        # i = 1 mS/V * (v^2 + offset) : no root when offset > 0, a zero
        # Jacobian at v = 0 whatever the offset.
        return 1e-3 * (v * v + offset), 2e-3 * v


class SquareConductor(_OneNode):
    """test-square X a offset=-1: i = 1e-3 (v^2 + offset) amperes."""

    keyword = "test-square"
    Batch = SquareBatch


@pytest.fixture(autouse=True)
def test_kinds():
    for cls in (AtanConductor, SquareConductor):
        mna.register(cls)
    yield
    for cls in (AtanConductor, SquareConductor):
        _extra.pop(cls.keyword, None)


def test_damping_rescues_newton_where_plain_newton_diverges():
    # atan(v - 3) = 0 from v = 0: plain Newton overshoots further each step.
    c = mna.parse("test-atan X a offset=3\nresistor R1 a -> gnd 1 Gohm\n")
    system, report = prepare(c)
    fz = Factorizer(system)
    plain = newton(system, fz, np.zeros(system.n), 0.0, 0.0, None, max_iterations=30)
    assert not plain.converged
    damped = newton(system, fz, np.zeros(system.n), 0.0, 0.0, None, max_iterations=60, damping=True)
    assert damped.converged
    # Root of atan(v - 3) + v/1e9 = 0: v = 3 - 3e-9 (to first order).
    assert damped.x[0] == pytest.approx(3.0 - 3e-9, abs=1e-12)
    op = c.dc()
    assert op.statistics["dc_method"] == "damped newton"


def test_leak_stepping_starts_where_the_jacobian_vanishes():
    # i = 1e-3 (v^2 - 1) has roots at +-1 V but a zero Jacobian at v = 0, so
    # Newton from zero cannot take a first step; a conductance to the
    # reference gives it one, and is then stepped away.
    c = mna.parse("test-square X a offset=-1\ncurrent-source I1 gnd -> a 0 A\n")
    op = c.dc()
    assert op.statistics["dc_method"] == "leak stepping"
    assert abs(op["v(a)"]) == pytest.approx(1.0, abs=1e-9)


def test_source_ramping_reaches_the_lambert_w_operating_point():
    vs, r, isat = 5.0, 1e3, 1e-14
    c = mna.parse(f"voltage-source V1 in -> gnd {vs} V\nresistor R1 in -> x {r} ohm\n"
                  f"diode D1 x -> gnd saturation-current={isat} A\n")
    system, report = prepare(c)
    fz = Factorizer(system)
    x, iterations = source_ramping(system, fz, dc_leak(system, report), 0.0, np.zeros(system.n))
    nvt = K_BOLTZMANN * 298.15 / Q_ELECTRON
    expected = nvt / r * float(wrightomega(math.log(isat * r / nvt) + (vs + isat * r) / nvt).real) - isat
    assert (vs - x[system.node_index["x"]]) / r == pytest.approx(expected, rel=1e-8)
    x2, _ = leak_stepping(system, fz, dc_leak(system, report), 0.0, np.zeros(system.n))
    assert np.allclose(x2, x, rtol=1e-8)


def test_newton_does_not_refactor_an_unchanged_matrix():
    # A closed switch and a reverse-biased diode (its conductance is the
    # constant junction floor): the matrix is the same at every iterate, so
    # Newton factors once, however many iterations it takes.
    c = mna.parse(
        "voltage-source V1 s -> gnd 12 V\n"
        "resistor R1 s -> a 100 ohm\n"
        "switch Q1 a -> gnd on=1 ohm gate=schedule(closed)\n"
        "diode D1 a -> s\n"
    )
    system, _ = prepare(c)
    assert not system.is_piecewise_linear
    fz = Factorizer(system)
    x0 = np.zeros(system.n)
    x0[system.node_index["s"]] = 12.0
    result = newton(system, fz, x0, 0.0, 0.0, None, states=DiscreteStates(system, 0.0))
    assert result.converged and result.iterations >= 2
    assert fz.factorizations == 1


def test_no_solution_is_reported_with_the_unknowns_and_exit_status_3(tmp_path, capsys):
    # i = 1e-3 (v^2 + 1) > 0 can never balance KCL at node a: no operating
    # point exists. Every stage of the ladder must give up in bounded time
    # and say which unknown would not settle.
    text = "test-square X a offset=1\nresistor R1 a -> b 1 kohm\nresistor R2 b -> gnd 1 kohm\n"
    with pytest.raises(mna.SimulationError, match=r"no convergence by Newton.*source ramping.*v\(") as info:
        mna.parse(text).dc()
    assert info.value.unknowns
    path = tmp_path / "nosolution.mna"
    path.write_text(text + "simulate dc\n")
    assert cli_main(["run", str(path), "--out", str(tmp_path / "out"), "--no-plot", "--quiet"]) == 3
    err = capsys.readouterr().err
    assert "simulation failed" in err and "v(a)" in err


def test_transient_that_cannot_go_on_keeps_the_waveforms(tmp_path, capsys):
    # i = 1e-3 v^2 (offset 0) can only take current in. A source feeds it
    # +1 mA (v = 1 V) until 1 ms, then pulls 1 mA out: from then on KCL has
    # no solution. The run stops (after retrying smaller steps), names the
    # time, and keeps the samples before it.
    text = ("current-source I1 gnd -> b step(from=1 mA, to=-1 mA, at=1 ms)\n"
            "resistor R1 b -> gnd 1 Mohm\n"
            "test-square X b offset=0\n"
            "simulate transient until=2 ms step=10 us\n")
    c = mna.parse(text)
    with pytest.raises(mna.SimulationError) as info:
        c.transient(until=2e-3, step=10e-6, start="rest")
    exc = info.value
    assert exc.time == pytest.approx(1e-3, rel=1e-6)
    assert "v(b)" in exc.unknowns
    assert exc.partial is not None and exc.partial.time[-1] <= exc.time
    assert exc.partial.time.size >= 100  # the first millisecond
    path = tmp_path / "fails.mna"
    path.write_text(text.replace("step=10 us", "step=10 us start=rest"))
    assert cli_main(["run", str(path), "--out", str(tmp_path / "out"), "--no-plot", "--quiet"]) == 3
    assert (tmp_path / "out" / "waveforms.csv").exists()
