"""The stepper protocol and the integration methods behind it (mna.methods)."""

import math

import numpy as np
import pytest

import mna
from mna.errors import InputError
from mna.methods import METHODS, Radau, StepperDone, get_method
from mna.methods.radau import A, MU_COMPLEX, MU_REAL, NODES, TI, T, W

RLC = """
voltage-source V1 in -> gnd step(from=0 V, to=10 V, at=0 s)
resistor R1 in -> a 10 ohm
inductor L1 a -> b 1 mH
capacitor C1 b -> gnd 1 uF
"""


def rlc_vc(t, V=10.0, R=10.0, L=1e-3, C=1e-6):
    # Series RLC step, underdamped: Nilsson & Riedel, Electric Circuits, ch. 8.
    a, w0 = R / (2 * L), 1 / math.sqrt(L * C)
    wd = math.sqrt(w0 ** 2 - a ** 2)
    return V * (1 - np.exp(-a * t) * (np.cos(wd * t) + a / wd * np.sin(wd * t)))


def test_the_netlist_method_names_are_the_registry_of_stepper_classes():
    assert {"backward-euler", "trapezoidal", "bdf2", "radau"} <= set(METHODS)
    assert get_method("radau") is Radau
    with pytest.raises(InputError, match="choose one of .*radau"):
        get_method("runge-kutta")
    res = mna.parse(RLC + "simulate transient until=1 ms method=radau\n").run()[0]
    assert res.statistics["method"] == "radau"


def test_radau_iia_tableau_and_its_eigen_split():
    # Hairer & Wanner II, Table 5.6: nodes (4 -+ sqrt 6)/10, 1; row sums of A are
    # the nodes; the last row is the weights (stiffly accurate).
    assert A.sum(axis=1) == pytest.approx(NODES, rel=1e-14)
    assert A[2] @ np.ones(3) == pytest.approx(1.0)
    # A^-1 has one real eigenvalue and a complex pair (H&W II §IV.8):
    # 3 + 3^(2/3) - 3^(1/3) and 3 + (3^(1/3) - 3^(2/3))/2 +- i (3^(5/6) + 3^(7/6))/2.
    assert MU_REAL == pytest.approx(3 + 3 ** (2 / 3) - 3 ** (1 / 3), rel=1e-12)
    assert MU_COMPLEX.real == pytest.approx(3 + 0.5 * (3 ** (1 / 3) - 3 ** (2 / 3)), rel=1e-12)
    assert abs(MU_COMPLEX.imag) == pytest.approx(0.5 * (3 ** (5 / 6) + 3 ** (7 / 6)), rel=1e-12)
    block = TI @ W @ T
    assert block[0, 1:] == pytest.approx([0, 0], abs=1e-12)
    assert block[1, 1] == pytest.approx(block[2, 2]) and block[1, 2] == pytest.approx(-block[2, 1])


def test_radau_is_fifth_order_at_the_step_points():
    # Radau IIA with 3 stages has classical order 2s - 1 = 5 (H&W II §IV.5):
    # halving a fixed step divides the error at a step point by 2^5 = 32.
    # h = 10 us and 5 us against w0 = 31.6 krad/s (w0 h = 0.32, 0.16): the
    # error is well above round-off and in the asymptotic range (+-25 %).
    errors = []
    for h in (10e-6, 5e-6):
        res = mna.parse(RLC).transient(until=400e-6, step=h, method="radau")
        errors.append(abs(res["v(b)"][-1] - rlc_vc(400e-6)))
    assert errors[0] / errors[1] == pytest.approx(32.0, rel=0.25)


def test_radau_dense_output_is_third_order_between_the_steps():
    # The collocation polynomial (a cubic) is accurate to O(h^4) locally
    # (H&W II §IV.5, collocation): halving h divides the error in the middle
    # of the steps by 8 or more; and it is far better than the chord.
    def worst_inside(h):
        res = mna.parse(RLC).transient(until=400e-6, step=h, method="radau")
        mid = res.time[:-1] + 0.5 * np.diff(res.time)
        return np.max(np.abs(res.interpolate("v(b)", mid) - rlc_vc(mid)))
    e1, e2 = worst_inside(10e-6), worst_inside(5e-6)
    assert e1 / e2 > 7.0
    assert e1 < 2e-3  # of a 16 V peak; the chord misses by (w0 h)^2/8 * 10 V ~ 0.1 V


def test_a_finished_stepper_refuses_another_step():
    circuit = mna.parse(RLC)
    res = circuit.transient(until=1e-4, method="radau")
    assert res.status == "ok"
    from mna.analyses.transient import _Run, _Settings
    from mna.analyses.common import prepare
    system, report = prepare(circuit)
    run = _Run(system, _Settings({"until": 1e-4, "method": "radau"}), [0], [], report)
    run.execute()
    assert run.stepper.status == "finished"
    with pytest.raises(StepperDone, match="radau stepper has finished"):
        run.stepper.attempt(2e-4)


@pytest.mark.parametrize("method", ["trapezoidal", "bdf2", "radau"])
def test_higher_order_methods_meet_their_tolerance_on_the_series_rlc_step(method):
    # Error-controlled runs at tolerance 1e-5 (local, relative): the global
    # error of the ringing RLC (Q = 3.2) stays within 100x the tolerance of the
    # 16 V range (global error accumulates over ~10 cycles). Backward Euler
    # is first order: its global error is not bounded this way (README table).
    res = mna.parse(RLC).transient(until=2e-3, method=method, tolerance=1e-5)
    err = np.max(np.abs(res["v(b)"] - rlc_vc(res.time)))
    assert err < 100 * 1e-5 * 16.0


def test_radau_carries_a_freewheel_diode_over_hard_switching():
    # A hysteretic current regulator (switch closed while i(L1) < 1 A, band
    # 0.2 A; a diode freewheels the coil when it opens) at a fixed 0.2 us
    # step: at each opening the diode's exponential switches hard inside a
    # step, where the stage iteration with the step's starting Jacobian
    # stalls. The ripple must stay between the band edges 0.9 and 1.1 A
    # within di/dt * h = 24 V / 1 mH * 0.2 us = 5 mA (as for the other
    # methods in tests/test_switch.py).
    c = mna.parse(
        "voltage-source V1 s -> gnd 24 V\n"
        "switch Q1 s -> x on=10 mohm off=10 Mohm gate=i(L1) < 1 A hysteresis=0.2 A\n"
        "diode D1 gnd -> x\n"
        "inductor L1 x -> gnd 1 mH resistance=2 ohm\n"
        "record i(L1)\n")
    res = c.transient(until=2e-3, step=0.2e-6, start="rest", method="radau")
    i = res["i(L1)"][res.time > 0.3e-3]
    assert i.max() == pytest.approx(1.1, abs=5e-3)
    assert i.min() == pytest.approx(0.9, abs=5e-3)
