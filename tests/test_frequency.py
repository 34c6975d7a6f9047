"""Small-signal frequency response against closed forms of phasor analysis.

Every reference below is an impedance or a transfer function written from
the circuit's phasor equations, evaluated with numpy at the same
frequencies; the source of each form is named beside it. The analysis
solves the same equations by LU in double precision, so agreement to
1e-9 relative is expected; a wrong stamp, sign or factor of jw gives
errors of order 1. Values are invented for the tests.
"""

import math
import textwrap

import numpy as np
import pytest
from scipy.optimize import brentq

import mna
from mna.errors import InputError

# Tight agreement of two double-precision evaluations of one linear phasor
# equation (the LU solve loses a few digits to the condition number).
TIGHT = 1e-9


def close(actual, expected, tol=TIGHT):
    actual, expected = np.asarray(actual), np.asarray(expected)
    err = np.max(np.abs(actual - expected) / np.abs(expected))
    assert err < tol, f"largest relative error {err:.3g} (allowed {tol:g})"


def parse(text):
    return mna.parse(textwrap.dedent(text))


def sweep(text, low="10 Hz", high="1 MHz", per_decade=20, record=()):
    return parse(text).frequency(low, high, per_decade=per_decade, record=list(record))


def omega(res):
    return 2 * np.pi * res.frequency


# --- series and parallel RLC ---------------------------------------------------
# Nilsson & Riedel, Electric Circuits, ch. 14 (series and parallel RLC
# band-pass): series Z = R + jwL + 1/(jwC), resonance w0 = 1/sqrt(LC), the
# current at w0 is V/R; parallel Z = 1/(1/R + jwC + 1/(jwL)), |Z(w0)| = R.

SERIES = """
voltage-source V1 in -> gnd 0 V stimulus=1 V
resistor  R1 in -> a 10 ohm
inductor  L1 a -> b 1 mH
capacitor C1 b -> gnd 1 uF
"""


def test_series_rlc_current_and_impedance():
    res = sweep(SERIES, record=["i(L1)", "z(in -> gnd)", "v(b) / v(in)"])
    w = omega(res)
    z = 10 + 1j * w * 1e-3 + 1 / (1j * w * 1e-6)
    close(res["i(L1)"], 1 / z)  # 1 V stimulus: I = V / Z
    # z(in -> gnd) looks into the node with the source killed (shorted): zero.
    assert np.max(np.abs(res["z(in -> gnd)"])) < 1e-12
    close(res["v(b) / v(in)"], (1 / (1j * w * 1e-6)) / z)


def test_series_rlc_current_peaks_at_resonance():
    f0 = 1 / (2 * math.pi * math.sqrt(1e-3 * 1e-6))
    res = parse(SERIES).frequency(at=[f0 / 2, f0, 2 * f0], record=["i(R1)"])
    i = res["i(R1)"]
    assert abs(i[1]) == pytest.approx(1 / 10, rel=1e-9)  # V/R at w0
    assert abs(np.angle(i[1])) < 1e-9  # in phase with the source at w0
    assert abs(i[0]) < abs(i[1]) and abs(i[2]) < abs(i[1])


PARALLEL = """
current-source I1 gnd -> top 0 A stimulus=1 A
resistor  R1 top -> gnd 50 ohm
inductor  L1 top -> gnd 100 uH
capacitor C1 top -> gnd 10 uF
"""


def test_parallel_rlc_impedance():
    res = sweep(PARALLEL, record=["z(top -> gnd)", "v(top)", "i(C1)"])
    w = omega(res)
    z = 1 / (1 / 50 + 1j * w * 10e-6 + 1 / (1j * w * 100e-6))
    close(res["z(top -> gnd)"], z)
    close(res["v(top)"], z)  # 1 A stimulus into top
    close(res["i(C1)"], 1j * w * 10e-6 * z)


# --- a choke with winding resistance and winding capacitance -------------------
# (R + jwL) in parallel with the winding capacitance C (the usual equivalent
# circuit of a wound component, e.g. Kazimierczuk, High-Frequency Magnetic
# Components, ch. 9): |Z| peaks near the self-resonant frequency
# 1/(2*pi*sqrt(LC)) at about Q^2 * R with Q = w0*L/R.

CHOKE = """
inductor  L1 a -> gnd 470 uH resistance=2 ohm
capacitor Cw a -> gnd 15 pF
"""


def test_choke_self_resonance():
    L, C, R = 470e-6, 15e-12, 2.0
    f_srf = 1 / (2 * math.pi * math.sqrt(L * C))  # 1.895 MHz
    res = parse(CHOKE).frequency("100 kHz", "10 MHz", per_decade=50, record=["z(a -> gnd)"])
    w = omega(res)
    zl = R + 1j * w * L
    close(res["z(a -> gnd)"], zl / (1 + 1j * w * C * zl))
    # Q = w0 L / R = 2800: the peak is 0.036 % wide, so look closely around it
    # (spacing 0.0115 %) and at w0 itself, where Z = 1/(jw0C) + L/(CR) exactly.
    near = parse(CHOKE).frequency(0.99 * f_srf, 1.01 * f_srf, per_decade=20000, record=["z(a -> gnd)"])
    f_peak = near.frequency[np.argmax(np.abs(near["z(a -> gnd)"]))]
    assert f_peak == pytest.approx(f_srf, rel=2e-4)
    at = parse(CHOKE).frequency(at=[f_srf], record=["z(a -> gnd)"])["z(a -> gnd)"][0]
    w0 = 2 * math.pi * f_srf
    assert at == pytest.approx(L / (C * R) + 1 / (1j * w0 * C), rel=1e-7)
    assert abs(at) > 0.99 * (w0 * L / R) ** 2 * R  # about Q^2 R


def test_saturating_choke_at_its_bias_current():
    # The incremental inductance d(phi)/di at the bias current, not L0: a
    # choke biased into saturation shows a smaller reactance.
    text = """
    voltage-source Vb v -> gnd 6 V
    resistor Rb v -> a 1 ohm
    choke L1 a -> gnd 100 uH saturation-current=5 A saturated-inductance=10 uH resistance=20 mohm
    """
    c = parse(text)
    res = c.frequency(at=[1e3, 1e4, 1e5], record=["z(a -> gnd)"])
    bias = 6 / 1.02  # A, through Rb and the winding resistance at DC
    choke = c.elements["L1"]
    h = 1e-6
    phi_plus, _ = choke.curve(np.array([bias + h]))
    phi_minus, _ = choke.curve(np.array([bias - h]))
    l_inc = float(phi_plus[0] - phi_minus[0]) / (2 * h)  # slope of the flux curve at the bias
    assert 10e-6 < l_inc < 0.7 * 100e-6  # past the saturation current: below 70 % of L0
    zl = 0.02 + 1j * omega(res) * l_inc
    close(res["z(a -> gnd)"], zl * 1.0 / (zl + 1.0), tol=1e-6)  # in parallel with Rb


# --- RC low-pass, LC filter with a damping leg --------------------------------
# Hayt & Kemmerly, Engineering Circuit Analysis, ch. 16 (frequency response):
# H = 1/(1 + jwRC); at f_c = 1/(2 pi R C), |H| = 1/sqrt(2) and the phase is -45 deg.

RC = """
voltage-source V1 in -> gnd 12 V stimulus=2 V stimulus-phase=30 deg
resistor  R1 in -> out 1 kohm
capacitor C1 out -> gnd 100 nF
"""


def test_rc_low_pass_at_its_corner():
    fc = 1 / (2 * math.pi * 1e3 * 100e-9)
    res = parse(RC).frequency(at=[fc / 10, fc, 10 * fc], record=["v(out) / v(in)", "v(out)"])
    h = res["v(out) / v(in)"]
    assert abs(h[1]) == pytest.approx(1 / math.sqrt(2), rel=1e-9)
    assert math.degrees(np.angle(h[1])) == pytest.approx(-45.0, abs=1e-7)
    assert abs(h[0]) == pytest.approx(1 / math.sqrt(1.01), rel=1e-9)
    assert abs(h[2]) == pytest.approx(1 / math.sqrt(101), rel=1e-9)
    # The stimulus is 2 V at 30 degrees: v(out) carries both.
    assert abs(res["v(out)"][1]) == pytest.approx(2 / math.sqrt(2), rel=1e-9)
    assert math.degrees(np.angle(res["v(out)"][1])) == pytest.approx(30 - 45, abs=1e-7)


# An LC input filter with a parallel damping leg Rd + Cd across C
# (Middlebrook, "Input filter considerations in design and application of
# switching regulators", IEEE IAS 1976; Erickson & Maksimovic, Fundamentals
# of Power Electronics, ch. 10): H = Zs/(jwL + Zs), Zout = jwL || Zs, with
# Zs = (1/(jwC)) || (Rd + 1/(jwCd)).

LC_DAMPED = """
voltage-source Vin in -> gnd 48 V stimulus=1 V
inductor  Lf in -> out 10 uH resistance=5 mohm
capacitor Cf out -> gnd 10 uF
resistor  Rd out -> d 1.5 ohm
capacitor Cd d -> gnd 40 uF
"""


def test_damped_lc_filter_transfer_and_output_impedance():
    res = sweep(LC_DAMPED, "1 kHz", "1 MHz", record=["v(out) / v(in)", "z(out -> gnd)"])
    w = omega(res)
    zc = 1 / (1j * w * 10e-6)
    zd = 1.5 + 1 / (1j * w * 40e-6)
    zs = zc * zd / (zc + zd)
    zl = 5e-3 + 1j * w * 10e-6
    close(res["v(out) / v(in)"], zs / (zl + zs))
    close(res["z(out -> gnd)"], zl * zs / (zl + zs))
    # Magnitude and phase at chosen frequencies, from the same closed form.
    picks = [2e3, 15.9e3, 100e3]
    at = parse(LC_DAMPED).frequency(at=picks, record=["v(out) / v(in)"])["v(out) / v(in)"]
    w = 2 * np.pi * np.array(picks)
    zc, zd = 1 / (1j * w * 10e-6), 1.5 + 1 / (1j * w * 40e-6)
    zs = zc * zd / (zc + zd)
    h = zs / (5e-3 + 1j * w * 10e-6 + zs)
    np.testing.assert_allclose(np.abs(at), np.abs(h), rtol=1e-9)
    np.testing.assert_allclose(np.angle(at, deg=True), np.angle(h, deg=True), atol=1e-7)


# --- coupled windings -----------------------------------------------------------
# Nilsson & Riedel, Electric Circuits, ch. 9 (the linear transformer): with the
# secondary loaded by Z22 = R2 + RL + jwL2 the primary sees
# Zin = R1 + jwL1 + (wM)^2 / Z22, and V2/I1 = jwM*RL/Z22 (dots on the first
# terminals; the load current leaves the dotted end).

COUPLED = """
voltage-source Vs v -> gnd 0 V stimulus=1 V
resistor Rs v -> p 1 ohm
inductor L1 p -> gnd 2 mH resistance=0.3 ohm
inductor L2 s -> gnd 0.5 mH resistance=0.1 ohm
coupling K1 L1 L2 0.95
resistor RL s -> gnd 8 ohm
"""


def test_coupled_windings_input_impedance_and_voltage_ratio():
    res = sweep(COUPLED, record=["z(p -> gnd)", "v(s) / v(p)", "i(L1)"])
    w = omega(res)
    m = 0.95 * math.sqrt(2e-3 * 0.5e-3)
    z22 = 0.1 + 8 + 1j * w * 0.5e-3
    zin = 0.3 + 1j * w * 2e-3 + (w * m) ** 2 / z22
    close(res["z(p -> gnd)"], zin * 1.0 / (zin + 1.0))  # Zin in parallel with Rs (the source shorted)
    close(res["i(L1)"], 1 / (1 + zin))
    close(res["v(s) / v(p)"], (1j * w * m * 8 / z22) / zin)


# The transformer element against its equivalent T circuit built from its
# data (Nilsson & Riedel ch. 9, the equivalent circuit of a linear transformer):
# Ll/2 + R1 in series, then Lm in parallel with the referred secondary
# Ll/2 + n^2 (R2 + RL).

def test_transformer_against_its_t_circuit():
    text = """
    voltage-source Vs v -> gnd 0 V stimulus=1 V
    resistor Rs v -> p 1 ohm
    transformer T1 p -> gnd, s -> gnd ratio=4 magnetising=3 mH leakage=40 uH primary-resistance=0.2 ohm secondary-resistance=15 mohm
    resistor RL s -> gnd 2 ohm
    """
    res = sweep(text, record=["z(p -> gnd)", "v(s) / v(p)"])
    w = omega(res)
    n, lm, ll = 4.0, 3e-3, 40e-6
    branch = 1j * w * ll / 2 + n * n * (0.015 + 2)
    zm = 1j * w * lm
    zin = 0.2 + 1j * w * ll / 2 + zm * branch / (zm + branch)
    close(res["z(p -> gnd)"], zin / (zin + 1.0))  # in parallel with Rs
    v_mid = zm * branch / (zm + branch)  # across Lm per ampere
    v2 = v_mid * (n * n * 2 / branch) / n  # referred load voltage, back to the secondary
    close(res["v(s) / v(p)"], v2 / zin)


# --- a DC machine seen from its terminals ---------------------------------------
# From the machine equations v = R i + L di/dt + k w and J dw/dt + B w = k i
# (Fitzgerald, Kingsley & Umans, Electric Machinery, ch. 7): the terminal
# impedance is Z = R + jwL + k^2/(B + jwJ); the motional part peaks at low
# frequency at k^2/B, and the mechanical and electrical resonances show.

MACHINE = """
voltage-source Vb v -> gnd 24 V
resistor Rb v -> a 10 ohm
dc-machine M1 a -> gnd shaft=rotor resistance=0.8 ohm inductance=1.2 mH constant=0.05 V*s/rad
inertia  J1 rotor 2e-4 kg*m^2
friction B1 rotor -> frame 1e-4 N*m*s/rad
"""


def machine_impedance(w):
    return 0.8 + 1j * w * 1.2e-3 + 0.05**2 / (1e-4 + 1j * w * 2e-4)


def test_dc_machine_terminal_impedance():
    res = sweep(MACHINE, "0.01 Hz", "10 kHz", record=["z(a -> gnd)"])
    zm = machine_impedance(omega(res))
    close(res["z(a -> gnd)"], zm * 10 / (zm + 10))  # in parallel with the bias resistor


def test_dc_machine_speed_and_torque_under_a_voltage_stimulus():
    text = MACHINE.replace("24 V\n", "24 V stimulus=1 V\n")
    res = sweep(text, "0.1 Hz", "1 kHz", record=["w(rotor)", "torque(M1)", "emf(M1)", "i(M1)"])
    w = omega(res)
    i = 1 / (10 + machine_impedance(w))
    speed = 0.05 * i / (1e-4 + 1j * w * 2e-4)  # rad/s
    close(res["i(M1)"], i)
    close(res["w(rotor)"], speed)
    close(res["torque(M1)"], 0.05 * i)
    close(res["emf(M1)"], 0.05 * speed)


def test_machine_with_brush_drop_far_past_its_band():
    # Biased at about 2 A, far past the 10 mA brush band: the drop is a
    # constant Vb there and has no small-signal part.
    text = MACHINE.replace("constant=0.05 V*s/rad", "constant=0.05 V*s/rad brush-drop=1 V")
    res = sweep(text, "1 Hz", "1 kHz", record=["z(a -> gnd)"])
    zm = machine_impedance(omega(res))
    close(res["z(a -> gnd)"], zm * 10 / (zm + 10))


# --- a diode at its operating point ---------------------------------------------
# Sedra & Smith, Microelectronic Circuits, ch. 4 (the small-signal model):
# r_d = n*Vt/I_D; exactly, for the Shockley law, 1/r_d = (I_D + Is)/(n*Vt),
# plus the 1e-12 S leakage floor of the model (grammar/README.md).

@pytest.mark.parametrize("bias, ideality", [(1e-3, 1.0), (10e-3, 1.8), (0.5, 1.0)])
def test_diode_small_signal_resistance(bias, ideality):
    text = f"""
    current-source Ib gnd -> a {bias} A stimulus=1 uA
    diode D1 a -> gnd saturation-current=1e-14 A ideality={ideality} temperature=300.15 K
    """
    res = parse(text).frequency(at=[1e3], record=["z(a -> gnd)", "v(a)", "i(D1)"])
    vt = 1.380649e-23 * 300.15 / 1.602176634e-19  # CODATA k and q at the temperature= given, 27 deg C
    g = (bias + 1e-14) / (ideality * vt) + 1e-12
    assert res["z(a -> gnd)"][0].real == pytest.approx(1 / g, rel=1e-9)
    assert abs(res["z(a -> gnd)"][0].imag) < 1e-12
    assert res["v(a)"][0].real == pytest.approx(1e-6 / g, rel=1e-9)
    # The diode's own current output, linearised: the whole stimulus flows in it.
    assert res["i(D1)"][0].real == pytest.approx(1e-6 * (1 - 1e-12 / g), rel=1e-6)


def test_diode_with_series_resistance_and_capacitance():
    text = """
    current-source Ib gnd -> a 5 mA stimulus=1 mA
    diode D1 a -> gnd resistance=2 ohm capacitance=1 nF temperature=300.15 K
    """
    res = sweep(text, "1 kHz", "100 MHz", record=["z(a -> gnd)", "i(D1)"])
    vt = 1.380649e-23 * 300.15 / 1.602176634e-19
    g = (5e-3 + 1e-14) / vt + 1e-12
    w = omega(res)
    z = 2 + 1 / (g + 1j * w * 1e-9)
    close(res["z(a -> gnd)"], z)
    close(res["i(D1)"], np.full_like(w, 1e-3), tol=1e-6)


# --- a switch in its DC state ------------------------------------------------------

def test_switch_takes_its_state_at_the_operating_point():
    text = """
    current-source I1 gnd -> a 1 A stimulus=1 A
    switch S1 a -> gnd on=50 mohm off=1 Mohm gate=schedule(closed, 1 ms: open)
    switch S2 a -> gnd on=50 mohm off=2 Mohm gate=schedule(open, 1 ms: closed)
    """
    res = parse(text).frequency(at=[1e3], record=["z(a -> gnd)", "i(S1)"])
    z = 1 / (1 / 0.05 + 1 / 2e6)
    assert res["z(a -> gnd)"][0].real == pytest.approx(z, rel=1e-9)
    assert res["i(S1)"][0].real == pytest.approx(z / 0.05, rel=1e-6)


# --- large circuits: sparse solves with one column order ---------------------------
# A ladder's input impedance by the continued fraction
# Z_k = R + jwL + (1/(jwC)) || Z_(k+1) (Hayt & Kemmerly, ladder networks),
# evaluated from the load back to the input.

def test_sparse_ladder_against_its_continued_fraction():
    sections = 150
    lines = ["resistor Rp n0 -> gnd 1 kohm"]
    for k in range(sections):
        lines.append(f"resistor R{k} n{k} -> m{k} 0.1 ohm")
        lines.append(f"inductor L{k} m{k} -> n{k + 1} 1 uH")
        lines.append(f"capacitor C{k} n{k + 1} -> gnd 1 uF")
    lines.append(f"resistor RL n{sections} -> gnd 1 ohm")
    res = parse("\n".join(lines)).frequency("100 Hz", "1 MHz", per_decade=10, record=["z(n0 -> gnd)"])
    assert res.statistics["solver"] == "sparse"
    w = omega(res)
    z = np.full(w.shape, 1.0 + 0j)
    for _ in range(sections):
        zc = 1 / (1j * w * 1e-6)
        z = 0.1 + 1j * w * 1e-6 + zc * z / (zc + z)
    close(res["z(n0 -> gnd)"], z * 1e3 / (z + 1e3), tol=1e-8)


# --- errors -----------------------------------------------------------------------

def test_no_stimulus_is_an_input_error():
    c = parse("voltage-source V1 a -> gnd 5 V\nresistor R1 a -> gnd 1 ohm")
    with pytest.raises(InputError, match="stimulus="):
        c.frequency("1 Hz", "1 kHz", record=["v(a)"])


def test_impedance_between_unknown_nodes_is_an_input_error():
    c = parse("voltage-source V1 a -> gnd 5 V\nresistor R1 a -> gnd 1 ohm")
    with pytest.raises(InputError, match="nosuch"):
        c.frequency("1 Hz", "1 kHz", record=["z(nosuch -> gnd)"])


def test_bad_frequency_settings():
    c = parse("voltage-source V1 a -> gnd 5 V stimulus=1 V\nresistor R1 a -> gnd 1 ohm")
    with pytest.raises(InputError, match="low < high"):
        c.frequency("1 kHz", "1 Hz")
    with pytest.raises(InputError, match="angular speed"):
        c.frequency("10 rad/s", "1 kHz")
    with pytest.raises(InputError, match="increasing"):
        c.frequency(at=[100, 10])


# --- the frequency analysis against a transient sine run ----------------------------
# The steady state of a linear circuit driven by a sine is the phasor
# solution (Nilsson & Riedel, Electric Circuits, ch. 9): the amplitude and
# phase of v(out), fitted by least squares to sin, cos and a constant over
# the last two periods of a transient run, must equal |H| and arg H. The
# transient is run with the trapezoidal rule and a tight tolerance set here
# (not the defaults), long enough for the filter's natural response
# (time constant about 30 us) to decay below 1e-6 of the drive.

SINE_FILTER = """
voltage-source Vin in -> gnd sine(amplitude=1 V, frequency={f} Hz) stimulus=1 V
inductor  Lf in -> out 10 uH resistance=5 mohm
capacitor Cf out -> gnd 10 uF
resistor  Rd out -> d 1.5 ohm
capacitor Cd d -> gnd 40 uF
resistor  Rl out -> gnd 2 ohm
"""


@pytest.mark.parametrize("f", [3e3, 16e3, 60e3])
def test_frequency_response_matches_a_transient_sine_run(f):
    c = parse(SINE_FILTER.format(f=f))
    phasor = c.frequency(at=[f], record=["v(out)"])["v(out)"][0]
    period = 1 / f
    until = max(8 * period, 0.5e-3)
    res = c.transient(until=until, method="trapezoidal", tolerance=1e-6, max_step=period / 100,
                      record=["v(out)"])
    t, v = res.time, res["v(out)"]
    last = t >= until - 2 * period
    basis = np.column_stack([np.sin(2 * np.pi * f * t[last]), np.cos(2 * np.pi * f * t[last]),
                             np.ones(last.sum())])
    a, b, _ = np.linalg.lstsq(basis, v[last], rcond=None)[0]
    fitted = a + 1j * b  # |X| sin(wt + phi) = |X| cos(phi) sin(wt) + |X| sin(phi) cos(wt)
    # Measured: amplitude within 1.3e-4, phase within 0.003 deg (the
    # transient's own error at tolerance 1e-6); a wrong sign of jw or a
    # missing stamp is off by far more.
    assert abs(fitted) == pytest.approx(abs(phasor), rel=1e-3)
    assert math.degrees(np.angle(fitted / phasor)) == pytest.approx(0.0, abs=0.03)


# --- the command line --------------------------------------------------------------

def test_mna_run_writes_the_frequency_csv_bode_plot_and_summary(tmp_path):
    import csv
    import json

    from mna.cli import main

    path = tmp_path / "rc.mna"
    path.write_text(textwrap.dedent(RC) + "simulate frequency from=10 Hz to=100 kHz per-decade=10\n"
                    "record v(out) / v(in), z(out -> gnd)\n", encoding="utf-8")
    out = tmp_path / "out"
    assert main(["run", str(path), "--out", str(out), "--quiet"]) == 0
    rows = list(csv.reader((out / "frequency.csv").open(encoding="utf-8")))
    assert rows[0] == ["frequency", "|v(out)/v(in)|", "dB v(out)/v(in)", "deg v(out)/v(in)",
                       "|z(out -> gnd)|", "dB z(out -> gnd)", "deg z(out -> gnd)"]
    assert len(rows) == 1 + 41
    fc = 1 / (2 * math.pi * 1e3 * 100e-9)
    f, mag, db, deg = (float(x) for x in rows[1][:4])
    assert mag == pytest.approx(1 / math.sqrt(1 + (f / fc) ** 2), rel=1e-8)  # 10 significant digits written
    assert db == pytest.approx(20 * math.log10(mag), abs=1e-7)
    assert deg == pytest.approx(-math.degrees(math.atan(f / fc)), abs=1e-7)
    assert (out / "bode.png").stat().st_size > 10_000
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert summary["analyses"][0]["analysis"] == "frequency"
    assert summary["analyses"][0]["signals"] == {"v(out)/v(in)": "", "z(out -> gnd)": "ohm"}


def test_netlist_errors_of_simulate_frequency():
    base = "voltage-source V1 a -> gnd 1 V stimulus=1 V\nresistor R1 a -> gnd 1 ohm\n"
    cases = {
        "simulate frequency per-decade=10\n": "needs from= and to=",
        "simulate frequency from=1 kHz to=10 Hz\n": "must lie above",
        "simulate frequency from=10 rad/s to=1 kHz\n": "angular speed",
        "simulate frequency at=list(1 kHz, 100 Hz)\n": "must increase",
        "simulate frequency at=1 kHz\n": "list of frequencies",
        "simulate frequency from=1 Hz to=1 kHz at=list(1 kHz)\n": "not both",
        "simulate frequency from=1 Hz to=1 GHz per-decade=1e5\n": "at most",
    }
    for line, message in cases.items():
        with pytest.raises(InputError, match=message) as info:
            mna.parse(base + line)
        assert info.value.span is not None and info.value.span.line == 3, line


def test_small_signal_records_need_a_frequency_analysis():
    with pytest.raises(InputError, match="only 'simulate frequency'"):
        mna.parse("voltage-source V1 a -> gnd 1 V\nresistor R1 a -> gnd 1 ohm\nsimulate dc\nrecord z(a -> gnd)\n")


def test_transient_and_frequency_in_one_file():
    text = textwrap.dedent(RC) + ("simulate transient until=1 ms\nsimulate frequency at=list(1 kHz)\n"
                                  "record v(out), z(out -> gnd)\ncheck max(v(out)) < 13 V\n"
                                  "check magnitude(z(out -> gnd), 1 kHz) < 1 kohm\n")
    from mna.measure import run_and_check

    outcome = run_and_check(mna.parse(text))
    assert outcome.failure is None and outcome.report.count("pass") == 2
    waves, response = outcome.results
    assert "z(out -> gnd)" not in waves and "z(out -> gnd)" in response


def test_a_ratio_over_a_quantity_with_no_small_signal_part():
    from mna.errors import SimulationError

    c = parse("""
    voltage-source V1 in -> gnd 0 V stimulus=1 V
    voltage-source V2 b -> gnd 5 V
    resistor R1 in -> b 1 ohm
    """)
    with pytest.raises(SimulationError, match="v\\(b\\) has no small-signal part"):
        c.frequency(at=[1e3], record=["v(in) / v(b)"])


def test_shaft_speed_in_rpm_and_angle_as_phasors():
    text = MACHINE.replace("24 V\n", "24 V stimulus=1 V\n")
    res = sweep(text, "1 Hz", "100 Hz", per_decade=5, record=["w(rotor)", "rpm(rotor)", "angle(rotor)"])
    w = omega(res)
    close(res["rpm(rotor)"], res["w(rotor)"] * 60 / (2 * math.pi))
    close(res["angle(rotor)"], res["w(rotor)"] / (1j * w))  # the angle integrates the speed


def test_dc_machine_with_a_fan_load_at_its_operating_speed():
    # A fan takes c*w*|w|: at the operating speed w0 it adds the incremental
    # friction d(c w^2)/dw = 2*c*w0 to B in the motional term. w0 solves the
    # DC equations 24 V = (Rb + R) i + k w0 and k i = B w0 + c w0^2 (brentq).
    c_fan = 2e-7
    text = MACHINE + f"load F1 rotor fan={c_fan} N*m*s^2\n"
    k, r, b = 0.05, 0.8, 1e-4
    w0 = brentq(lambda w: (10 + r) * (b * w + c_fan * w * w) / k + k * w - 24, 0, 24 / k)
    res = sweep(text, "0.1 Hz", "1 kHz", per_decade=10, record=["z(a -> gnd)"])
    w = omega(res)
    zm = r + 1j * w * 1.2e-3 + k**2 / (b + 2 * c_fan * w0 + 1j * w * 2e-4)
    close(res["z(a -> gnd)"], zm * 10 / (zm + 10), tol=1e-7)  # w0 from brentq to 1e-12 rad/s


def test_transient_checks_do_not_ask_the_frequency_analysis_for_their_quantities():
    # No stimulus anywhere: the frequency analysis computes only the impedance
    # its measurement reads, while the transient check reads v(out) over time.
    text = """
    voltage-source V1 in -> gnd 12 V
    resistor  R1 in -> out 1 kohm
    capacitor C1 out -> gnd 100 nF
    simulate transient until=1 ms
    simulate frequency from=10 Hz to=100 kHz per-decade=10
    check max(v(out)) < 13 V
    check largest(z(out -> gnd)) within 1e-6 % of 1 kohm / sqrt(1 + (2*pi*10 Hz * 100 us)^2)
    """
    from mna.measure import run_and_check

    outcome = run_and_check(parse(text))
    assert outcome.failure is None
    assert [c.status for c in outcome.report.checks] == ["pass", "pass"]
    assert outcome.results[1].labels() == ["z(out -> gnd)"]
