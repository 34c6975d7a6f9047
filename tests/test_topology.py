"""Topology checks run before any matrix is built."""

import pytest

import mna
from mna.errors import TopologyError


def topology_error(text):
    c = mna.parse(text, file="t.mna")
    with pytest.raises(TopologyError) as info:
        c.dc()
    return info.value


def test_island_not_connected_to_gnd():
    err = topology_error("""
voltage-source V1 a -> gnd 5 V
resistor R1 a -> gnd 1 kohm
resistor R2 x -> y 1 kohm
capacitor C1 y -> x 1 nF
""")
    assert "no connection to 'gnd'" in err.message
    assert "'x'" in err.message and "'y'" in err.message
    assert err.line == 4


def test_two_voltage_sources_in_parallel():
    err = topology_error("""
voltage-source V1 a -> gnd 5 V
voltage-source V2 a -> gnd 5 V
resistor R1 a -> gnd 1 kohm
""")
    assert "V1 and V2 form a loop of voltage sources" in err.message
    assert err.line == 3 and "internal resistance" in err.hint


def test_voltage_source_loop_through_several_nodes():
    err = topology_error("""
voltage-source V1 a -> gnd 5 V
voltage-source V2 a -> b 1 V
voltage-source V3 b -> gnd 4 V
resistor R1 b -> gnd 1 kohm
""")
    assert all(name in err.message for name in ("V1", "V2", "V3"))


def test_current_source_in_series_with_inductor():
    # Node m carries only I1 and L1: the source's current has no path but the
    # inductor, so v(m) = L dI/dt is undefined for a step (an index problem).
    err = topology_error("""
voltage-source V1 p -> gnd 1 V
resistor R3 p -> gnd 1 ohm
current-source I1 gnd -> m 1 A
inductor L1 m -> gnd 1 mH
""")
    assert "I1" in err.message and "L1" in err.message and "series" in err.message
    assert err.line == 4  # the current source's line


def test_two_current_sources_in_series():
    err = topology_error("""
current-source I1 gnd -> m 1 A
current-source I2 m -> gnd 1 A
""")
    assert "I1" in err.message and "I2" in err.message


def test_inductors_alone_in_series_are_fine():
    op = mna.parse("""
voltage-source V1 a -> gnd 10 V
resistor R1 a -> b 5 ohm
inductor L1 b -> m 1 mH
inductor L2 m -> gnd 2 mH
""").dc()
    assert op["i(L1)"] == pytest.approx(2.0) and op["i(L2)"] == pytest.approx(2.0)


def test_voltage_source_across_a_capacitor_is_fine():
    # A supply with a bulk capacitor across it is common; it is not a loop error.
    res = mna.parse("""
voltage-source V1 a -> gnd step(from=0 V, to=5 V, at=1 us)
capacitor C1 a -> gnd 10 uF
resistor R1 a -> gnd 1 kohm
""").transient(until=10e-6, step=0.1e-6)
    assert res["v(a)"][-1] == pytest.approx(5.0)
