"""Measurements in circuit files, against waveforms whose values are known.

Two kinds of test:

- closed-form waveforms sampled by the test and handed to
  :func:`mna.measure.evaluate_checks` directly, so the only error is the
  measurement's own (linear interpolation between samples, whose bound is
  given beside each tolerance);
- whole runs through the solver, where the integration method's error
  adds in and the tolerance says why it is what it is.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import brentq

import mna
from mna.measure import CheckReport, evaluate_checks, run_and_check
from mna.results import Waveforms


def measured(report: CheckReport, name: str) -> float:
    """The SI value of measurement ``name`` (which must have one)."""
    (m,) = [m for m in report.measurements if m.name == name]
    assert m.status == "ok", m.message
    return m.value


def on_samples(netlist: str, time: np.ndarray, signals: dict[str, np.ndarray]) -> CheckReport:
    """Evaluate the netlist's measure/check lines on the given samples instead of a run."""
    circuit = mna.parse(netlist)
    waves = Waveforms(time=np.asarray(time, float), signals={k: np.asarray(v, float) for k, v in signals.items()},
                      units={k: "" for k in signals})
    return evaluate_checks(circuit, [waves])


def run(netlist: str) -> CheckReport:
    outcome = run_and_check(mna.parse(netlist))
    assert outcome.failure is None
    return outcome.report


# --------------------------------------------------------------------------
# rms, mean, peak of a sine (sampled closed form)

SINE_NET = """
voltage-source V1 in -> gnd sine(amplitude=170 V, frequency=50 Hz)
resistor R1 in -> gnd 1 kohm
simulate transient until=40 ms method=backward-euler
measure r = rms(v(in))
measure m = mean(v(in))
measure pk = peak(v(in))
measure lo = min(v(in), from=10 ms, to=20 ms)
measure half = rms(v(in), from=5 ms, to=15 ms)
"""


def test_rms_mean_and_peak_of_a_sine():
    # RMS of A*sin(wt) over whole periods is A/sqrt(2); its mean is 0; its peak
    # is A (definition of the effective value, e.g. Alexander & Sadiku ch. 11,
    # "Effective or RMS Value").
    amplitude, f, h = 170.0, 50.0, 10e-6
    t = np.arange(0, 40e-3 + h / 2, h)
    v = amplitude * np.sin(2 * np.pi * f * t)
    report = on_samples(SINE_NET, t, {"v(in)": v})
    # Linear interpolation between samples is off by at most h^2/8*max|v''|
    # = A*(w*h)^2/8, so every value below is within that (relative).
    rel = (2 * np.pi * f * h) ** 2 / 8
    assert measured(report, "r") == pytest.approx(amplitude / math.sqrt(2), rel=rel)
    assert measured(report, "half") == pytest.approx(amplitude / math.sqrt(2), rel=rel)  # a whole period too
    assert measured(report, "pk") == pytest.approx(amplitude, rel=rel)
    assert measured(report, "lo") == pytest.approx(-amplitude, rel=rel)
    assert abs(measured(report, "m")) < amplitude * rel


def test_rms_of_a_sine_through_the_solver():
    # Same definition as above; the source voltage is the waveform itself at
    # the solver's points, so only the measurement's interpolation error
    # remains: step until/1000 = 40 us, (w*h)^2/8 = 2e-5 relative.
    report = run(SINE_NET)
    h = 40e-3 / 1000
    assert measured(report, "r") == pytest.approx(170 / math.sqrt(2), rel=(2 * np.pi * 50 * h) ** 2 / 8)


# --------------------------------------------------------------------------
# mean of a PWM wave


PWM_NET = """
voltage-source V1 in -> gnd pwm(low=0 V, high=12 V, frequency=20 kHz, duty=30 %, rise={edge}, fall={edge})
resistor R1 in -> gnd 10 ohm
simulate transient until=1 ms step=1 us
measure m = mean(v(in))
measure m_late = mean(v(in), from=0.5 ms, to=0.75 ms)
measure p_avg = mean(p(R1))
"""


@pytest.mark.parametrize("edge", ["200 ns", "2 us"])
def test_mean_of_a_pwm_wave_is_duty_times_high(edge):
    # The average (DC term of the Fourier series) of a pulse train that is
    # `high` for a fraction `duty` of each period and 0 otherwise is
    # duty*high (e.g. Oppenheim & Willsky, Signals and Systems, ch. 3). With
    # equal linear rise and fall the areas of the two edges add up to one
    # edge time at full height, so the average stays duty*high. The solver
    # lands on every corner and the trapezoidal rule is exact for a
    # piecewise-linear wave, so only rounding remains (1e-9).
    high, duty = 12.0, 0.3
    report = run(PWM_NET.format(edge=edge))
    assert measured(report, "m") == pytest.approx(duty * high, rel=1e-9)
    assert measured(report, "m_late") == pytest.approx(duty * high, rel=1e-9)


def test_mean_of_a_pwm_wave_with_ideal_edges():
    # With zero-time edges the run holds one sample per edge, and the signal
    # is taken as linear from the sample before: each edge can add or drop
    # at most h*high/2 of area, two edges per period T, so the mean is
    # within h*high/T of duty*high (same source as above), and the average
    # power of the square wave (duty*high^2/R, Joule's law per interval)
    # within h*high^2/(R*T).
    high, duty, h, period, resistance = 12.0, 0.3, 1e-6, 50e-6, 10.0
    report = run(PWM_NET.format(edge="0 s"))
    assert measured(report, "m") == pytest.approx(duty * high, abs=h * high / period)
    assert measured(report, "p_avg") == pytest.approx(duty * high**2 / resistance,
                                                       abs=h * high**2 / (resistance * period))


# --------------------------------------------------------------------------
# energy of a resistor with a known current


def test_energy_of_a_resistor_with_a_constant_current():
    # Joule's law: a constant current I through R for a time t turns
    # I^2*R*t into heat; the average power is I^2*R and the charge passed
    # I*t. The current source fixes the current exactly, so only rounding
    # remains.
    current, resistance, until = 2.0, 5.0, 10e-3
    report = run("""
current-source I1 gnd -> a 2 A
resistor R1 a -> gnd 5 ohm
simulate transient until=10 ms step=10 us
measure e = energy(R1)
measure e_late = energy(R1, from=4 ms)
measure p = mean(p(R1))
measure q = integral(i(R1))
check e within 0.1 % of 0.2 J
""")
    assert measured(report, "e") == pytest.approx(current**2 * resistance * until, rel=1e-9)
    assert measured(report, "e_late") == pytest.approx(current**2 * resistance * (until - 4e-3), rel=1e-9)
    assert measured(report, "p") == pytest.approx(current**2 * resistance, rel=1e-9)
    assert measured(report, "q") == pytest.approx(current * until, rel=1e-9)
    assert report.checks[0].status == "pass"


def test_energy_of_a_resistor_with_a_sine_current():
    # A sine current of peak Ipk dissipates (Ipk^2/2)*R*t over whole periods
    # (Joule's law with the RMS value Ipk/sqrt(2)). The instantaneous power
    # is a sine at twice the frequency, which the trapezoidal rule on
    # piecewise-linear samples integrates with relative error at most
    # (2*w*h)^2/8 (interpolation bound at the doubled frequency).
    peak, f, resistance, until, h = 3.0, 50.0, 4.0, 100e-3, 20e-6
    report = run("""
current-source I1 gnd -> a sine(amplitude=3 A, frequency=50 Hz)
resistor R1 a -> gnd 4 ohm
simulate transient until=100 ms step=20 us
measure e = energy(R1)
""")
    expected = peak**2 / 2 * resistance * until
    assert measured(report, "e") == pytest.approx(expected, rel=(2 * 2 * np.pi * f * h) ** 2 / 8)


# --------------------------------------------------------------------------
# overshoot and settling of a second-order step

# Series RLC driven by a 1 V step, vC(0) = 0, i(0) = 0 (
# Nilsson & Riedel ch. 8; Nise, Control Systems Engineering, ch. 4 for %OS,
# chapter from memory).
V, R, L, C = 1.0, 10.0, 1e-3, 1e-6
ALPHA = R / (2 * L)
W0 = 1 / math.sqrt(L * C)
ZETA = ALPHA / W0
WD = W0 * math.sqrt(1 - ZETA**2)


def v_cap(t):
    """Underdamped series-RLC capacitor voltage after a step of V at t = 0."""
    return V * (1 - np.exp(-ALPHA * t) * (np.cos(WD * t) + ALPHA / WD * np.sin(WD * t)))


def exact_settling(band: float, t_end: float) -> float:
    """Last time |vC - vC(t_end)| = band, from the closed form: scan finely, then brentq.

    The measurement settles on the window's own final value vC(t_end), which
    at 2 ms is still exp(-alpha*t) = 4.5e-5 away from V; the reference does
    the same.
    """
    final = v_cap(t_end)
    t = np.linspace(0, t_end, 2_000_001)  # 1 ns apart for t_end = 2 ms
    outside = np.flatnonzero(np.abs(v_cap(t) - final) > band)
    k = outside[-1]
    return brentq(lambda s: abs(v_cap(s) - final) - band, t[k], t[k + 1], xtol=1e-15)


def expected_overshoot(t_end: float) -> float:
    """Overshoot as the measurement defines it, (max - final)/(final - initial), from the
    closed forms: the peak V*(1 + exp(-zeta*pi/sqrt(1 - zeta^2))) (Nise ch. 4) and the
    final value vC(t_end) of the window."""
    peak = V * (1 + math.exp(-ZETA * math.pi / math.sqrt(1 - ZETA**2)))
    final = v_cap(t_end)
    return (peak - final) / final


RLC_NET = """
voltage-source V1 in -> gnd step(from=0 V, to=1 V, at=0 s)
resistor R1 in -> a 10 ohm
inductor L1 a -> b 1 mH
capacitor C1 b -> gnd 1 uF
simulate transient until=2 ms step=20 ns method=trapezoidal start=rest
measure os = overshoot(v(b))
measure ts = settling(v(b), 2 %)
measure ts_abs = settling(v(b), 20 mV)
measure tp = crossing(v(b), max(v(b)))
check overshoot(v(b)) < 65 %
"""


def test_overshoot_and_settling_of_a_second_order_step_on_closed_form_samples():
    h, t_end = 20e-9, 2e-3
    t = np.arange(0, t_end + h / 2, h)
    report = on_samples(RLC_NET, t, {"v(b)": v_cap(t)})
    # Percent overshoot (see expected_overshoot). The sampled peak misses the
    # true one by at most h^2/8*max|v''| <= (w0*h)^2/8*(1 + OS) relative,
    # so (w0*h)^2 is a safe tolerance. The textbook figure itself, with the
    # final value V, differs by 1e-4 here because the run stops at 2 ms.
    assert measured(report, "os") == pytest.approx(expected_overshoot(t_end), rel=(W0 * h) ** 2)
    assert measured(report, "os") == pytest.approx(math.exp(-ZETA * math.pi / math.sqrt(1 - ZETA**2)), rel=2e-4)
    # 2 % settling: the exact last exit from the band, from the closed form.
    # The measurement interpolates linearly between the two samples around
    # it, so it cannot be off by more than one sample interval h.
    final = v_cap(t_end)
    assert measured(report, "ts") == pytest.approx(exact_settling(0.02 * final, t_end), abs=h)
    assert measured(report, "ts_abs") == pytest.approx(exact_settling(0.02, t_end), abs=h)  # 20 mV
    expected_ts = exact_settling(0.02 * V, t_end)
    # The exponential envelope bound for the 2 % settling time (Nise ch. 4):
    # the response stays inside the band after -ln(0.02*sqrt(1 - zeta^2))/(zeta*w0).
    assert expected_ts <= -math.log(0.02 * math.sqrt(1 - ZETA**2)) / (ZETA * W0)
    # Peak time pi/wd (Nise ch. 4): the first time the response reaches its maximum.
    assert measured(report, "tp") == pytest.approx(math.pi / WD, abs=h)
    assert report.checks[0].status == "pass"


def test_overshoot_of_a_second_order_step_through_the_solver():
    # The same closed forms through the trapezoidal rule at h = 100 ns. Its
    # phase error in an oscillation is (w0*h)^2/12 per radian (from its
    # amplification factor, Hairer & Wanner, from memory), about 3 radians up
    # to the peak, and sampling the peak adds (w0*h)^2/8: (w0*h)^2 = 1e-4
    # bounds the overshoot's relative error. The settling time is a crossing
    # between two samples: within one step, plus a phase error of
    # t*(w0*h)^2/12 = 1e-9 s at most.
    h = 100e-9
    report = run(RLC_NET.replace("step=20 ns", "step=100 ns"))
    assert measured(report, "os") == pytest.approx(expected_overshoot(2e-3), rel=(W0 * h) ** 2)
    assert measured(report, "ts") == pytest.approx(exact_settling(0.02 * v_cap(2e-3), 2e-3), abs=h + 1e-9)
    (check,) = report.checks
    assert check.status == "pass"
    assert check.shown_value.endswith("%") and check.shown_limit == "< 65 %"


# --------------------------------------------------------------------------
# crossing of an RC charge

RC_NET = """
voltage-source V1 in -> gnd 5 V
resistor R1 in -> out 1 kohm
capacitor C1 out -> gnd 1 uF
simulate transient until=10 ms step={step} method=trapezoidal start=rest
measure t_level = crossing(v(out), {level} V)
measure v_tau = at(v(out), 1 ms)
measure v_end = final(v(out))
"""


@pytest.mark.parametrize("level", [1.0, 2.5, 4.5])
def test_crossing_of_an_rc_charge_on_closed_form_samples(level):
    # vC = V*(1 - exp(-t/RC)) reaches `level` at -RC*ln(1 - level/V)
    # (Nilsson & Riedel ch. 7). Linear
    # interpolation of this concave curve puts the crossing late by at most
    # (h^2/8)*|v''|/|v'| = h^2/(8*RC).
    vs, tau, h = 5.0, 1e-3, 10e-6
    t = np.arange(0, 10e-3 + h / 2, h)
    report = on_samples(RC_NET.format(step="10 us", level=level), t, {"v(out)": vs * (1 - np.exp(-t / tau))})
    expected = -tau * math.log(1 - level / vs)
    got = measured(report, "t_level")
    assert expected <= got <= expected + h**2 / (8 * tau) * (1 + 1e-6)
    assert measured(report, "v_tau") == pytest.approx(vs * (1 - math.exp(-1)), rel=1e-12)  # 1 ms is a sample


@pytest.mark.parametrize("level", [1.0, 2.5, 4.5])
def test_crossing_of_an_rc_charge_through_the_solver(level):
    # Same closed form through the trapezoidal rule at h = 1 us. Both the
    # method's global error (about t*(h/RC)^2/12) and the interpolation
    # (h^2/(8*RC)) are second order in h; for RC = 1 ms they are below
    # 1e-9 s, and 2*h^2/RC = 2e-9 s bounds their sum.
    vs, tau, h = 5.0, 1e-3, 1e-6
    report = run(RC_NET.format(step="1 us", level=level))
    expected = -tau * math.log(1 - level / vs)
    assert measured(report, "t_level") == pytest.approx(expected, abs=2 * h**2 / tau)
    assert measured(report, "v_end") == pytest.approx(vs * (1 - math.exp(-10)), rel=1e-6)


# --------------------------------------------------------------------------
# what a measurement gives when the waveform never does the thing


def test_a_level_never_reached_gives_no_value_and_the_check_fails():
    report = run("""
voltage-source V1 in -> gnd 5 V
resistor R1 in -> out 1 kohm
capacitor C1 out -> gnd 1 uF
simulate transient until=1 ms step=10 us start=rest
measure t6 = crossing(v(out), 6 V)
check t6 < 5 ms
check crossing(v(out), 7 V) < 5 ms
check max(v(out)) < 6 V
""")
    (m,) = report.measurements
    assert m.status == "none" and m.value is None
    assert "never reaches 6 V" in m.message
    assert [c.status for c in report.checks] == ["fail", "fail", "pass"]
    assert "t6 has no value" in report.checks[0].message
    assert "never reaches 7 V" in report.checks[1].message
    assert report.exit_code == 1


def test_overshoot_of_a_flat_waveform_has_no_value():
    report = run("""
voltage-source V1 in -> gnd 5 V
resistor R1 in -> gnd 1 kohm
simulate transient until=1 ms step=10 us
check overshoot(v(in)) < 5 %
""")
    (check,) = report.checks
    assert check.status == "fail"
    assert "no step" in check.message


# --------------------------------------------------------------------------
# The voltage between two nodes: v(a -> b), evaluated (not only parsed).


DIVIDER = """\
voltage-source V1 in -> gnd 12 V
resistor R1 in -> mid 1 kohm
resistor R2 mid -> gnd 2 kohm
"""


def test_voltage_between_nodes_and_across_an_element_are_evaluated():
    # Voltage divider (Ohm's law): v(mid) = 12 V * 2k/(1k+2k) = 8 V, so
    # v(in -> mid) = 4 V and v(R1) (a minus b of R1) = 4 V as well; the
    # reversed arrow flips the sign. Exact up to round-off (1e-12 relative).
    c = mna.parse(DIVIDER + "simulate dc\nrecord v(in -> mid), v(mid -> in), v(R1), v(mid)\n")
    op = c.dc()
    assert op["v(in -> mid)"] == pytest.approx(4.0, rel=1e-12)
    assert op["v(mid -> in)"] == pytest.approx(-4.0, rel=1e-12)
    assert op["v(R1)"] == pytest.approx(4.0, rel=1e-12)
    assert op["v(in->mid)"] == op["v(in -> mid)"]  # spacing inside a label does not matter
    res = c.transient(until=1e-3, step=1e-4, record=["v(in -> mid)"])
    assert np.allclose(res["v(in -> mid)"], 4.0, rtol=1e-12)


def test_voltage_between_nodes_in_checks_and_csv(tmp_path):
    c = mna.parse(DIVIDER + "simulate transient until=1 ms step=100 us\nrecord v(in -> mid)\n"
                  "check final(v(in -> mid)) within 1 mV of 4 V\n")
    outcome = run_and_check(c)
    assert outcome.report.checks[0].status == "pass"
    csv_path = outcome.results[0].to_csv(tmp_path / "w.csv")
    assert csv_path.read_text().splitlines()[0] == "time,v(in -> mid)"


@pytest.mark.parametrize("line", ["record v(in, mid)", "check final(v(in, mid)) < 5 V",
                                  "switch Q1 in -> gnd gate=v(in, mid) > 1 V"])
def test_the_comma_form_is_refused_with_the_arrow_spelling(line):
    text = DIVIDER + "simulate transient until=1 ms step=100 us\n" + line + "\n"
    with pytest.raises(mna.InputError, match=r"v\(in -> mid\)") as info:
        mna.parse(text)
    assert info.value.span is not None and info.value.span.line == 5


def test_results_lookup_of_the_comma_form_suggests_the_arrow():
    op = mna.parse(DIVIDER + "record v(in -> mid)\n").dc()
    with pytest.raises(KeyError, match=r"did you mean v\(in -> mid\)"):
        op["v(in, mid)"]


def test_time_of_the_peak_of_an_rlc_step():
    # Series RLC step, underdamped: the capacitor voltage peaks at
    # tp = pi/wd and the current at atan(wd/alpha)/wd (the zero of
    # d/dt e^-at sin(wd t)); Nise, *Control Systems Engineering*, ch. 4,
    # and Nilsson & Riedel ch. 8.
    R, L, C = 10.0, 1e-3, 1e-6
    alpha, w0 = R / (2 * L), 1 / math.sqrt(L * C)
    wd = math.sqrt(w0**2 - alpha**2)
    c = mna.parse(
        "voltage-source V1 in -> gnd step(from=0 V, to=1 V, at=0 s)\n"
        f"resistor R1 in -> a {R} ohm\ninductor L1 a -> b {L} H\ncapacitor C1 b -> gnd {C} F\n"
        "simulate transient until=300 us step=50 ns method=trapezoidal\n"
        "measure tp = time_of_max(v(b))\nmeasure ti = time_of_max(i(L1))\n"
        "measure tlow = time_of_min(v(b), from=tp)\n"
    )
    values = {m.name: m.value for m in run_and_check(c).report.measurements}
    # The sample grid is 50 ns: the sampled maximum lies within one step of
    # the true one (the peak is flat, so rounding of the trapezoidal rule,
    # (h w0)^2/12 ~ 2e-7 in phase, does not move it by a step).
    assert values["tp"] == pytest.approx(math.pi / wd, abs=50e-9)
    assert values["ti"] == pytest.approx(math.atan(wd / alpha) / wd, abs=50e-9)
    # The first minimum after the peak is half a damped period later.
    assert values["tlow"] == pytest.approx(2 * math.pi / wd, abs=50e-9)
