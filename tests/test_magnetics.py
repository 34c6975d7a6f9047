"""Coupled inductors, the transformer kind and the saturating choke.

Sources:
- Magnetically coupled circuits: Alexander & Sadiku, *Fundamentals of
  Electric Circuits*, ch. 13: M = k sqrt(L1 L2),
  v1 = L1 di1/dt + M di2/dt, v2 = M di1/dt + L2 di2/dt with the dots on the
  first terminals; open secondary v2/v1 = M/L1; shorted secondary input
  inductance L1 - M^2/L2; coupled inductors store energy but dissipate none.
- Linear ODEs x' = A x + b solved exactly with the matrix exponential
  (scipy.linalg.expm) as the reference.
- Phasor analysis of the sinusoidal steady state (Alexander & Sadiku ch. 9-10).
- The choke's flux curve is the project's own documented model
  (mna.elements.magnetics.flux_linkage); the checks are that the solver
  integrates it exactly: v = d(phi)/dt, so under a constant voltage
  phi(i(t)) = V t, and the energy taken in is the integral of i dphi.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.linalg import expm
from scipy.optimize import brentq

import mna
from mna.elements.magnetics import flux_linkage, saturation_scale, transformer_inductances


def amplitude(res, label: str, period: float) -> float:
    """Largest magnitude over the last whole period of a run."""
    window = res.time >= res.time[-1] - period
    return float(np.max(np.abs(res[label][window])))


# ---------------------------------------------------------------------------
# Coupled inductors


def test_coupled_rl_loops_step_response_against_the_matrix_exponential():
    l1, l2, k, r1, r2, v = 10e-3, 40e-3, 0.9, 2.0, 8.0, 10.0
    c = mna.parse(
        f"voltage-source V1 in -> gnd {v} V\n"
        f"resistor R1 in -> x {r1} ohm\n"
        f"inductor L1 x -> gnd {l1} H\n"
        f"inductor L2 y -> gnd {l2} H\n"
        f"resistor R2 y -> gnd {r2} ohm\n"
        f"coupling K1 L1 L2 {k}\n"
        "record i(L1), i(L2)\n"
    )
    res = c.transient(until=5e-3, step=1e-6, method="trapezoidal", start="rest")
    m = k * math.sqrt(l1 * l2)
    lmat = np.array([[l1, m], [m, l2]])
    # Loop 2 closes through R2 from gnd back to y: L2 di2/dt + M di1/dt = -R2 i2.
    a = -np.linalg.solve(lmat, np.diag([r1, r2]))
    b = np.linalg.solve(lmat, np.array([v, 0.0]))
    x_ss = -np.linalg.solve(a, b)
    for t in (1e-3, 5e-3):
        expected = x_ss + expm(a * t) @ (-x_ss)
        # Trapezoidal at h = 1 us against the fast pole 2000/s: (h lambda)^2/12
        # ~ 3e-7 relative, after two backward-Euler start steps (~1e-6 A).
        assert res.at("i(L1)", t) == pytest.approx(expected[0], abs=1e-5)
        assert res.at("i(L2)", t) == pytest.approx(expected[1], abs=1e-5)
    # The same matrix exponential evaluated once, for this case: i1(1 ms) = 2.41144273 A.
    assert res.at("i(L1)", 1e-3) == pytest.approx(2.41144273, abs=1e-5)


@pytest.mark.parametrize("reverse", [False, True])
def test_open_secondary_follows_the_dot_convention(reverse):
    # Open secondary: v2 = M di1/dt = (M/L1) v1 at every instant, with the
    # sign set by the dots (the first terminal of each winding).
    l1, l2, k = 2e-3, 8e-3, 0.7
    secondary = "gnd -> y" if reverse else "y -> gnd"
    c = mna.parse(
        "voltage-source V1 in -> gnd sine(amplitude=5 V, frequency=2 kHz)\n"
        "resistor R1 in -> x 3 ohm\n"
        f"inductor L1 x -> gnd {l1} H\n"
        f"inductor L2 {secondary} {l2} H\n"
        f"coupling K1 L1 L2 {k}\n"
        "record v(x), v(y)\n"
    )
    res = c.transient(until=2e-3, step=1e-6, method="trapezoidal", start="rest")
    ratio = k * math.sqrt(l1 * l2) / l1 * (-1 if reverse else 1)
    # Both windings see the same discrete di1/dt: equal to rounding.
    assert np.allclose(res["v(y)"], ratio * res["v(x)"], atol=1e-9)


def secondary_phasor_ratio(l1: float, l2: float, k: float, r: float, w: float) -> complex:
    """V2/V1 of coupled inductors with an ideal source on L1 and R across L2.

    From V1 = jw L1 I1 + jw M I2, 0 = jw M I1 + (R + jw L2) I2, V2 = -R I2:
    V2/V1 = (M/L1) / (1 + jw L2 (1 - k^2)/R).
    """
    m = k * math.sqrt(l1 * l2)
    return (m / l1) / (1 + 1j * w * l2 * (1 - k * k) / r)


@pytest.mark.parametrize("k", [0.99, 0.999, 0.9999])
def test_sine_driven_secondary_against_phasors_and_the_ideal_transformer_limit(k):
    l1, l2, r, f, vp = 10e-3, 1.0, 1e3, 1e3, 1.0
    n = math.sqrt(l2 / l1)  # turns ratio Ns/Np = 10 for windings on one core
    c = mna.parse(
        f"voltage-source V1 p -> gnd sine(amplitude={vp} V, frequency={f} Hz)\n"
        f"inductor L1 p -> gnd {l1} H\n"
        f"inductor L2 s -> gnd {l2} H\n"
        f"resistor RL s -> gnd {r} ohm\n"
        f"coupling K1 L1 L2 {k}\n"
        "record v(s), v(p), i(L1), i(RL)\n"
    )
    period = 1 / f
    # The secondary's transient decays with L2 (1 - k^2)/R <= 20 us: over by 4 ms.
    res = c.transient(until=5 * period, step=period / 2000, method="trapezoidal", start="rest")
    expected = abs(secondary_phasor_ratio(l1, l2, k, r, 2 * math.pi * f)) * vp
    # Sampling a sine 2000 times a period misses its peak by (2 pi/2000)^2/8 = 1.2e-6.
    assert amplitude(res, "v(s)", period) == pytest.approx(expected, rel=2e-5)
    # Ideal-transformer limit (Alexander & Sadiku ch. 13): v2/v1 -> n as k -> 1.
    # From the phasor ratio, |V2/V1| = k n / |1 + j x| with x = w L2 (1 - k^2)/R,
    # so the simulated gap below the ideal ratio is 1 - k/sqrt(1 + x^2): the
    # coupling's (1 - k) plus the leakage's x^2/2. The amplitude is within
    # 2e-5 of the phasor's (above), so the gap is within 2e-5 (absolute);
    # for k = 0.9999 a factor-of-two error in the leakage term moves it by 4e-7,
    # in (1 - k) by 1e-4.
    x = 2 * math.pi * f * l2 * (1 - k * k) / r
    gap = 1 - amplitude(res, "v(s)", period) / (n * vp)
    assert gap == pytest.approx(1 - k / math.sqrt(1 + x * x), abs=2e-5)
    # Coupled inductors dissipate nothing: mean power in equals mean power out.
    last = res.time >= res.time[-1] - period
    t = res.time[last]
    p_in = np.trapezoid(res["v(p)"][last] * res["i(L1)"][last], t)
    p_out = np.trapezoid(res["v(s)"][last] ** 2 / r, t)
    assert p_in == pytest.approx(p_out, rel=1e-4)


def test_three_windings_take_the_same_coefficient_pairwise():
    # Three open windings on one core, driven through the first: each open
    # winding sees (M_1j / L1) v1 with M_1j = k sqrt(L1 Lj).
    c = mna.parse(
        "voltage-source V1 in -> gnd sine(amplitude=1 V, frequency=1 kHz)\n"
        "resistor R1 in -> a 1 ohm\n"
        "inductor La a -> gnd 1 mH\n"
        "inductor Lb b -> gnd 4 mH\n"
        "inductor Lc c -> gnd 9 mH\n"
        "coupling K1 La Lb Lc 0.8\n"
        "record v(a), v(b), v(c)\n"
    )
    res = c.transient(until=1e-3, step=1e-6, method="trapezoidal", start="rest")
    assert np.allclose(res["v(b)"], 0.8 * 2 * res["v(a)"], atol=1e-9)
    assert np.allclose(res["v(c)"], 0.8 * 3 * res["v(a)"], atol=1e-9)


def test_initial_currents_include_the_mutual_flux():
    # Started at rest with i1(0) = 1 A and an open, coupled secondary: the
    # flux linkage of the secondary, M i1, must be conserved through the
    # start, so i2 jumps to 0 and stays: v2 = M di1/dt. With R1 the primary
    # current then decays as exp(-t R/L1).
    c = mna.parse(
        "resistor R1 x -> gnd 10 ohm\n"
        "inductor L1 x -> gnd 10 mH initial=1 A\n"
        "inductor L2 y -> gnd 10 mH initial=0 A\n"
        "resistor R2 y -> gnd 1 Mohm\n"
        "coupling K1 L1 L2 0.5\n"
        "record i(L1), i(L2)\n"
    )
    res = c.transient(until=2e-3, step=1e-6, method="trapezoidal", start="rest")
    # Loop 2 is a 1 Mohm resistor on 10 mH: its currents stay microamps.
    assert np.max(np.abs(res["i(L2)"])) < 1e-5
    tau = 10e-3 / 10
    assert res.at("i(L1)", 1e-3) == pytest.approx(math.exp(-1e-3 / tau), rel=1e-4)


def test_coupling_checks():
    base = "resistor R1 a -> gnd 1 ohm\ninductor L1 a -> gnd 1 mH\ninductor L2 b -> gnd 1 mH\n"
    with pytest.raises(mna.InputError, match="not below 1; perfect coupling"):
        mna.parse(base + "coupling K1 L1 L2 1\n")
    with pytest.raises(mna.InputError, match="must be positive"):
        mna.parse(base + "coupling K1 L1 L2 0\n")
    with pytest.raises(mna.InputError, match="more than once"):
        mna.parse(base + "coupling K1 L1 L1 0.5\n")
    with pytest.raises(mna.InputError, match="at least 2"):
        mna.parse(base + "coupling K1 L1 0.5\n")
    with pytest.raises(mna.InputError, match="R1 is a resistor"):
        mna.parse(base + "coupling K1 L1 R1 0.5\n").dc()
    with pytest.raises(mna.InputError, match="no element named 'L9'"):
        mna.parse(base + "coupling K1 L1 L9 0.5\n").dc()
    with pytest.raises(mna.InputError, match="already coupled by K1"):
        mna.parse(base + "coupling K1 L1 L2 0.5\ncoupling K2 L2 L1 0.5\n").dc()


# ---------------------------------------------------------------------------
# Transformer


def test_transformer_inductances_follow_the_t_equivalent():
    n, lm, ll = 4.0, 2e-3, 40e-6
    l1, l2, m = transformer_inductances(n, lm, ll)
    # T-equivalent: primary leakage Ll/2 + Lm on the primary; the secondary
    # referred by n^2; M = Lm/n (Alexander & Sadiku ch. 13, Fitzgerald et al.).
    assert (l1, l2, m) == pytest.approx((lm + ll / 2, (lm + ll / 2) / n**2, lm / n), rel=1e-15)
    # A shorted-secondary measurement gives L1 - M^2/L2, within Ll^2/(4 Lm)
    # of the leakage.
    assert l1 - m * m / l2 == pytest.approx(ll, abs=ll * ll / (4 * lm) * 1.01)


def test_transformer_matches_the_equivalent_coupled_inductors():
    n, lm, ll, rp, rs = 5.0, 3e-3, 60e-6, 0.2, 0.05
    l1, l2, m = transformer_inductances(n, lm, ll)
    k = m / math.sqrt(l1 * l2)
    drive = "voltage-source V1 in -> gnd sine(amplitude=50 V, frequency=20 kHz)\n"
    t = mna.parse(drive + f"transformer T1 in -> gnd, s -> gnd ratio={n} magnetising={lm} H "
                  f"leakage={ll} H primary-resistance={rp} ohm secondary-resistance={rs} ohm\n"
                  "resistor RL s -> gnd 2 ohm\nrecord v(s), i1(T1), i2(T1), p(T1)\n")
    cpl = mna.parse(drive + f"resistor Rp in -> x {rp} ohm\ninductor L1 x -> gnd {l1} H\n"
                    f"inductor L2 y -> gnd {l2} H\nresistor Rsec y -> s {rs} ohm\n"
                    f"coupling K1 L1 L2 {k}\nresistor RL s -> gnd 2 ohm\nrecord v(s), i(L1), i(L2)\n")
    kw = dict(until=200e-6, step=50e-9, method="trapezoidal", start="rest")
    a, b = t.transient(**kw), cpl.transient(**kw)
    assert np.allclose(a["v(s)"], b["v(s)"], atol=1e-9 * 50)
    assert np.allclose(a["i1(T1)"], b["i(L1)"], atol=1e-9)
    assert np.allclose(a["i2(T1)"], b["i(L2)"], atol=1e-9)
    # Against the phasor solution of the same coupled windings (Alexander &
    # Sadiku ch. 13, with the leakage in L1, L2 and M): mesh equations
    # (Rp + jwL1) I1 + jwM I2 = V, jwM I1 + (jwL2 + Rs + RL) I2 = 0, v(s) = -RL I2.
    w = 2 * math.pi * 20e3
    z = np.array([[rp + 1j * w * l1, 1j * w * m], [1j * w * m, 1j * w * l2 + rs + 2.0]])
    i1, i2 = np.linalg.solve(z, [50.0, 0.0])
    steady = abs(-2.0 * i2)
    # Tolerance: the run starts at rest, and the magnetising current's offset
    # decays with L1/Rp = 15 ms, far longer than the run; its voltage Rp*di/dt
    # and the leakage's share of it move the secondary by less than 0.2 %
    # (offset 50 V/(w L1) = 0.13 A at most, times Rp/n on the secondary side,
    # 5 mV of 9.5 V; measured 5e-4). A leakage left out (the ideal
    # 10 V * 2/(2 + rs + rp/n^2)) differs by 2.1 %.
    assert amplitude(a, "v(s)", 50e-6) == pytest.approx(steady, rel=2e-3)


def test_transformer_needs_positive_leakage():
    with pytest.raises(mna.InputError, match="leakage"):
        mna.parse("transformer T1 a -> gnd, b -> gnd ratio=2 magnetising=1 mH leakage=0 H\n")


# ---------------------------------------------------------------------------
# Saturating choke

L0, ISAT, LSAT, DROP = 100e-6, 5.0, 10e-6, 0.3


def choke_curve():
    scale = saturation_scale(L0, ISAT, LSAT, DROP)
    return lambda i: flux_linkage(np.asarray(i, dtype=float), L0, LSAT, scale)


def test_flux_curve_meets_the_datasheet_points():
    curve = choke_curve()
    # Incremental inductance by central differences of the flux (independent
    # of the closed-form derivative): L0 at zero current, L0 (1 - drop) at
    # the saturation current, tending to Lsat deep in saturation.
    d = 1e-4

    def incremental(i):
        return (curve(i + d)[0] - curve(i - d)[0]) / (2 * d)

    assert incremental(0.0) == pytest.approx(L0, rel=1e-7)
    assert incremental(ISAT) == pytest.approx(L0 * (1 - DROP), rel=1e-7)
    assert incremental(20 * ISAT) == pytest.approx(LSAT, rel=1e-6)
    # Strictly increasing flux (one current per flux): slope never below Lsat.
    big = np.linspace(-1e3, 1e3, 20001)
    assert np.all(np.diff(curve(big)[0]) > 0) and np.all(curve(big)[1] >= LSAT)


def test_choke_current_under_a_constant_voltage():
    # d(phi)/dt = V with phi(0) = 0, so phi(i(t)) = V t: the current is the
    # inverse of the flux curve at V t (the analytic integral of L(i) di).
    v = 10.0
    c = mna.parse(
        f"voltage-source V1 in -> gnd {v} V\n"
        f"choke L1 in -> gnd {L0} H saturation-current={ISAT} A saturated-inductance={LSAT} H\n"
        "record i(L1), flux(L1), p(L1), inductance(L1)\n"
    )
    res = c.transient(until=200e-6, step=0.2e-6, method="trapezoidal", start="rest")
    curve = choke_curve()
    t = res.time[1:]
    expected = np.array([brentq(lambda i, target=v * tt: curve(i)[0] - target, 0, 1e4, xtol=1e-14)
                         for tt in t])
    # With flux as the state, a constant voltage is integrated exactly by
    # either method; what remains is Newton's tolerance (1e-6 relative, then
    # one more quadratic step).
    assert np.allclose(res["i(L1)"][1:], expected, rtol=1e-8, atol=1e-10)
    # (The start at rest is solved with a step 1e-9 of the first one long,
    # during which the flux already moves by V h0 = 2e-15 Wb.)
    assert np.allclose(res["flux(L1)"], v * res.time, rtol=1e-9, atol=1e-13)
    # The current ramps at V/L0 first and at V/Lsat deep in saturation.
    assert res["inductance(L1)"][1] == pytest.approx(L0, rel=1e-3)
    assert res["inductance(L1)"][-1] == pytest.approx(LSAT, rel=1e-3)
    # Energy taken in: integral of i dphi = Lsat i^2/2
    #   + (L0 - Lsat) (I0 i tanh(i/I0) - I0^2 ln cosh(i/I0)).
    i_end = res["i(L1)"][-1]
    i0 = saturation_scale(L0, ISAT, LSAT, DROP)
    u = i_end / i0
    stored = LSAT * i_end**2 / 2 + (L0 - LSAT) * (i0 * i_end * math.tanh(u) - i0**2 * math.log(math.cosh(u)))
    taken = np.trapezoid(res["p(L1)"], res.time)
    # p = V i sampled every 0.2 us: trapezoidal quadrature error ~ h^2/12 * V i''.
    assert taken == pytest.approx(stored, rel=1e-5)


def test_choke_with_winding_resistance_against_quadrature():
    # V - R i = L(i) di/dt, so t(i) = integral_0^i L(u) / (V - R u) du.
    v, r = 12.0, 0.5
    c = mna.parse(
        f"voltage-source V1 in -> gnd {v} V\n"
        f"choke L1 in -> gnd {L0} H saturation-current={ISAT} A saturated-inductance={LSAT} H "
        f"resistance={r} ohm\n"
        "record i(L1)\n"
    )
    res = c.transient(until=100e-6, step=0.05e-6, method="trapezoidal", start="rest")
    curve = choke_curve()
    for i_level in (2.0, 5.0, 10.0, 15.0):  # 15 A is reached near 91 us
        t_level, _ = quad(lambda u: curve(u)[1] / (v - r * u), 0, i_level, epsabs=1e-15, epsrel=1e-12)
        k = np.searchsorted(res["i(L1)"], i_level)
        t_sim = np.interp(i_level, res["i(L1)"][k - 1:k + 1], res.time[k - 1:k + 1])
        # Trapezoidal at 50 ns and interpolation of the crossing: 1e-4 relative.
        assert t_sim == pytest.approx(t_level, rel=1e-4)


def test_choke_checks():
    with pytest.raises(mna.InputError, match="must be below the inductance at the saturation current"):
        mna.parse("choke L1 a -> gnd 100 uH saturation-current=5 A saturated-inductance=80 uH\n")
    with pytest.raises(mna.InputError, match="saturation-drop"):
        mna.parse("choke L1 a -> gnd 100 uH saturation-current=5 A saturated-inductance=10 uH "
                  "saturation-drop=120 %\n")


def test_couplings_that_ask_for_too_much_shared_flux_are_refused():
    # The inductance matrix [[1, .9, 0], [.9, 1, .9], [0, .9, 1]] (in units of L)
    # has eigenvalue 1 - 0.9*sqrt(2) < 0: no set of windings stores negative
    # energy (1/2 i'Li > 0), so this is an input error, though each k < 1.
    text = """
voltage-source V1 a -> gnd 1 V
inductor L1 a -> gnd 1 mH resistance=1 ohm
inductor L2 b -> gnd 1 mH resistance=1 ohm
inductor L3 c -> gnd 1 mH resistance=1 ohm
resistor R2 b -> gnd 1 ohm
resistor R3 c -> gnd 1 ohm
coupling K1 L1 L2 0.9
coupling K2 L2 L3 0.9
"""
    with pytest.raises(mna.InputError, match="not positive definite"):
        mna.parse(text).dc()
    # A third line joining L1 and L3 at 0.9 makes the matrix definite again
    # (eigenvalues 1 + 1.8, 0.1, 0.1).
    op = mna.parse(text + "coupling K3 L1 L3 0.9\n").dc()
    assert op["i(L1)"] == pytest.approx(1.0)
