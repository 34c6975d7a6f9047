"""Measurements of waveform expressions: the Joule integral I^2*t and friends."""

import math

import pytest

import mna
from mna.errors import InputError, UnitsError
from mna.measure import run_and_check

RL = """
voltage-source V1 a -> gnd step(from=0 V, to=10 V, at=1 ms)
resistor R1 a -> b 2 ohm
inductor L1 b -> gnd 4 mH
simulate transient until=20 ms step=5 us method=trapezoidal
record i(L1)
"""


def measured(text):
    outcome = run_and_check(mna.parse(RL + text))
    return {m.name: m.value for m in outcome.report.measurements}, outcome


def test_joule_integral_of_an_rl_step():
    # i = I (1 - exp(-t/tau)) from the step at 1 ms, I = 5 A, tau = L/R = 2 ms
    # (Nilsson & Riedel ch. 7). Integrating i^2 over T = 19 ms:
    # I^2 [T - 2 tau (1 - e^{-T/tau}) + tau/2 (1 - e^{-2T/tau})]. This is the
    # I^2*t a fuse sees (the Joule integral; fuse makers' glossaries, common practice).
    values, _ = measured("measure i2t = integral(i(L1)^2)\nmeasure e_r = energy(R1)\n")
    I, tau, T = 5.0, 2e-3, 19e-3
    exact = I**2 * (T - 2 * tau * (1 - math.exp(-T / tau)) + tau / 2 * (1 - math.exp(-2 * T / tau)))
    assert values["i2t"] == pytest.approx(exact, rel=1e-4)
    # The resistor's energy is R times the same integral (Joule's law).
    assert values["e_r"] == pytest.approx(2.0 * values["i2t"], rel=1e-6)


def test_expression_with_units_in_checks():
    # Closed forms of the RL step above (i = I (1 - exp(-(t - 1 ms)/tau)),
    # I = 5 A, tau = 2 ms, v(a) = 10 V after the step; Nilsson & Riedel ch. 7):
    # - max |i - 5 A| = 5 A, before the step (i = 0);
    # - the integral of i^2 from 1 ms to 20 ms is the Joule integral above;
    # - mean(v(a) i) over 10..20 ms = 50 W (1 - (tau/10 ms)(e^-4.5 - e^-9.5)).
    I, tau = 5.0, 2e-3
    joule = I**2 * (19e-3 - 2 * tau * (1 - math.exp(-19e-3 / tau)) + tau / 2 * (1 - math.exp(-38e-3 / tau)))
    power = 10 * I * (1 - tau / 10e-3 * (math.exp(-4.5) - math.exp(-9.5)))
    values, outcome = measured(
        "measure dev = max(abs(i(L1) - 5 A))\n"
        "measure i2t = integral(i(L1)^2, from=1 ms)\n"
        "measure pin = mean(v(a) * i(L1), from=10 ms)\n"
        f"check dev within 1 % of 5 A\n"
        f"check i2t within 1 % of {joule!r} A^2*s\n"
        f"check pin within 1 % of {power!r} W\n"
    )
    assert [c.status for c in outcome.report.checks] == ["pass", "pass", "pass"]
    # The measured values themselves, tighter than the checks: trapezoidal at
    # 5 us on tau = 2 ms is within (h/tau)^2/12 = 5e-7 of each change, the
    # trapezoid integral of the samples within 1e-6 (see the Joule test above).
    assert values["dev"] == pytest.approx(5.0, rel=1e-9)
    assert values["i2t"] == pytest.approx(joule, rel=1e-4)
    assert values["pin"] == pytest.approx(power, rel=1e-4)


def test_unit_errors_in_waveform_expressions():
    with pytest.raises(UnitsError, match="cannot add"):
        mna.parse(RL + "measure x = max(i(L1) + v(a))\n")
    with pytest.raises(UnitsError, match="check compares"):
        mna.parse(RL + "check integral(i(L1)^2) < 1 A*s\n")


def test_nested_measurement_is_refused():
    with pytest.raises(InputError, match="measure it on its own line"):
        mna.parse(RL + "measure x = max(i(L1) - final(i(L1)))\n")
