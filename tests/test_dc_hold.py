"""Stamper.hold_at_dc: a state with no steady state of its own is frozen at DC.

Checked with a minimal plugin kind, an integrator ``d theta/dt = v(node)``
(the shape of a coil generator's angle, but linear), on both of the
engine's paths: the linear one-solve path and Newton's method.
"""

from __future__ import annotations

import numpy as np
import pytest

import mna
from mna.elements.base import Element, Port, Unknown
from mna.units import DIMENSIONLESS


class Integrator(Element):
    """``integrator X node held=...``: theta(t) = held + integral of v(node) dt."""

    keyword = "test-integrator"
    ports = (Port(("n",)),)
    arguments = (mna.Arg("held", DIMENSIONLESS, default=0.0),)
    outputs = {"theta": DIMENSIONLESS}

    def unknowns(self):
        return (Unknown("theta", DIMENSIONLESS),)

    def stamp(self, s):
        theta = s.own("theta")
        s.c_entry(theta, theta, 1.0)
        s.g_entry(theta, s.node(self.nodes["n"]), -1.0)
        s.initial_charge(theta, self.params["held"])
        s.hold_at_dc(theta, self.params["held"])

    def output(self, quantity, probe):
        return probe.unknown(self, "theta")


@pytest.fixture(autouse=True)
def _registered():
    mna.register(Integrator)
    yield
    from mna.elements import registry

    registry._extra.pop(Integrator.keyword, None)


@pytest.mark.parametrize("nonlinear", [False, True], ids=["linear-path", "newton"])
def test_held_state_takes_its_value_at_dc_and_integrates_afterwards(nonlinear):
    # Without the hold, the integrator's DC row reads -v = 0 and theta is
    # undetermined (a singular matrix); with it theta = held. A fan load on
    # a separate shaft makes the circuit nonlinear without touching theta.
    extra = "inertia J s 1 kg*m^2\nload F s fan=1 N*m*s^2\n" if nonlinear else ""
    text = f"voltage-source V1 x -> gnd 2 V\ntest-integrator T1 x held=0.7\n{extra}record theta(T1)\n"
    circuit = mna.parse(text)
    assert circuit.dc()["theta(T1)"] == pytest.approx(0.7, rel=1e-12)
    res = circuit.transient(until=1.0, step=1e-2, start="dc", record=["theta(T1)"])
    # d theta/dt = 2 V (per second) from theta(0) = 0.7: exact for backward Euler at constant rate
    np.testing.assert_allclose(res["theta(T1)"], 0.7 + 2.0 * res.time, rtol=1e-12)
