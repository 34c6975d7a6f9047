"""The diode kind against closed forms.

Sources:
- Shockley equation I = Is (exp(V/(n Vt)) - 1), e.g. Sedra & Smith,
  *Microelectronic Circuits* (from memory).
- Vt = k T / q with the exact SI 2019 values of k and q (BIPM, *The
  International System of Units*, 9th ed., 2019, table 1).
- T. C. Banwell & A. Jayakumar, "Exact analytical solution for current flow
  through diode with series resistance", Electronics Letters 36(4):291-292
  (2000): I = (n Vt / R) W0[(Is R / (n Vt)) exp((Vs + Is R)/(n Vt))] - Is.
- A series RL loop with a constant voltage drop: standard first-order
  circuit theory (Nilsson & Riedel, *Electric Circuits*, ch. 7).

Tolerances: Newton stops once a step is below 1e-6 of the value and
converges quadratically, so the solution is far closer than that; the
1e-12 S junction leakage floor shifts a milliamp current by ~1e-9 A at most.
Hence rel=1e-8 on DC currents.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.special import lambertw, wrightomega

import mna
from mna.elements.semiconductors import critical_voltage, limit_junction, thermal_voltage

K_BOLTZMANN = 1.380649e-23  # J/K, exact by definition of the SI (2019)
Q_ELECTRON = 1.602176634e-19  # C, exact by definition of the SI (2019)


def lambert_current(vs: float, r: float, isat: float, nvt: float) -> float:
    """Banwell & Jayakumar (2000) with scipy's principal-branch Lambert W."""
    arg = isat * r / nvt * math.exp((vs + isat * r) / nvt)
    return nvt / r * float(lambertw(arg).real) - isat


def omega_current(vs: float, r: float, isat: float, nvt: float) -> float:
    """The same through the Wright omega function, which cannot overflow."""
    x = math.log(isat * r / nvt) + (vs + isat * r) / nvt
    return nvt / r * float(wrightomega(x).real) - isat


@pytest.mark.parametrize("temperature", [298.15, 300.0, 350.0])
def test_thermal_voltage_from_the_si_constants(temperature):
    assert thermal_voltage(temperature) == pytest.approx(K_BOLTZMANN * temperature / Q_ELECTRON, rel=1e-15)


@pytest.mark.parametrize(
    "vs, r, isat, n",
    [
        (5.0, 1e3, 1e-14, 1.0),  # Banwell & Jayakumar (2000), their closed form for 5 V, 1 kohm, Is = 1e-14 A
        (1.0, 100.0, 1e-12, 1.8),  # second case: ideality 1.8
        (12.0, 47.0, 2e-9, 1.3),  # a Schottky-like junction
    ],
)
def test_diode_and_resistor_at_dc_against_lambert_w(vs, r, isat, n):
    c = mna.parse(
        f"voltage-source V1 in -> gnd {vs} V\n"
        f"resistor R1 in -> x {r} ohm\n"
        f"diode D1 x -> gnd saturation-current={isat} A ideality={n}\n"
    )
    op = c.dc()
    nvt = n * K_BOLTZMANN * 298.15 / Q_ELECTRON  # default temperature 298.15 K
    expected = lambert_current(vs, r, isat, nvt)
    assert op["i(D1)"] == pytest.approx(expected, rel=1e-8)
    assert op["i(R1)"] == pytest.approx(expected, rel=1e-8)
    assert op["v(x)"] == pytest.approx(vs - r * expected, rel=1e-8)


def test_series_resistance_inside_the_diode_is_the_same_as_outside():
    # Banwell & Jayakumar's formula is for a diode with series resistance R:
    # the internal node must give the same current as an external resistor.
    c = mna.parse(
        "voltage-source V1 in -> gnd 3 V\n"
        "diode D1 in -> gnd saturation-current=1e-12 A ideality=1.5 resistance=2 ohm\n"
    )
    op = c.dc()
    nvt = 1.5 * K_BOLTZMANN * 298.15 / Q_ELECTRON
    assert op["i(D1)"] == pytest.approx(omega_current(3.0, 2.0, 1e-12, nvt), rel=1e-8)


def test_temperature_enters_through_the_thermal_voltage():
    c = mna.parse(
        "voltage-source V1 in -> gnd 5 V\n"
        "resistor R1 in -> x 1 kohm\n"
        "diode D1 x -> gnd temperature=350 K\n"
    )
    nvt = K_BOLTZMANN * 350.0 / Q_ELECTRON
    assert c.dc()["i(D1)"] == pytest.approx(lambert_current(5.0, 1e3, 1e-14, nvt), rel=1e-8)


def test_hard_forward_bias_converges_through_junction_limiting():
    # 100 V straight into a diode through 1 ohm: exp(V/nVt) overflows any
    # float without limiting. Closed form via Wright omega (Banwell & Jayakumar, Electronics Letters 36(4):291-292 (2000)).
    c = mna.parse(
        "voltage-source V1 in -> gnd 100 V\n"
        "resistor R1 in -> x 1 ohm\n"
        "diode D1 x -> gnd\n"
    )
    op = c.dc()
    nvt = K_BOLTZMANN * 298.15 / Q_ELECTRON
    assert op["i(D1)"] == pytest.approx(omega_current(100.0, 1.0, 1e-14, nvt), rel=1e-8)
    assert op.statistics["dc_method"] == "newton"


def test_zener_breakdown_against_lambert_w():
    # Reverse breakdown I = -Ibr exp(-(V + Vbr)/(nbr Vt)); fed from 30 V
    # through 1 kohm it is the same Lambert-W problem with Isat -> Ibr exp(-Vbr/nVt)
    # (the forward term, -Is, and the 1e-12 S floor are below 1e-9 relative).
    bv, izt, vs, r = 12.0, 5e-3, 30.0, 1e3
    c = mna.parse(
        f"voltage-source V1 in -> gnd {vs} V\n"
        f"resistor R1 in -> k {r} ohm\n"
        f"diode Z1 gnd -> k breakdown={bv} V breakdown-current={izt} A\n"
    )
    op = c.dc()
    nvt = K_BOLTZMANN * 298.15 / Q_ELECTRON
    x = math.log(izt * r / nvt) + (vs - bv) / nvt
    expected = nvt / r * float(wrightomega(x).real)
    assert -op["i(Z1)"] == pytest.approx(expected, rel=1e-7)
    # At the test current the Zener voltage is Vbr: check the definition.
    c2 = mna.parse(f"current-source I1 gnd -> k {izt} A\ndiode Z1 gnd -> k breakdown={bv} V "
                   f"breakdown-current={izt} A\n")
    assert c2.dc()["v(k)"] == pytest.approx(bv, abs=1e-6)


def test_junction_capacitance_charges_like_an_rc():
    # A reverse-biased junction carries only the 1e-12 S junction leakage: with capacitance=
    # it is a capacitor, so a step through R charges it as an RC
    # (vC = V (1 - exp(-t/RC)), Nilsson & Riedel ch. 7), up to the leakage
    # 1e-12 S * 5 V against 5 mA-scale currents.
    c = mna.parse(
        "voltage-source V1 in -> gnd step(from=0 V, to=-5 V, at=0 s)\n"
        "resistor R1 in -> x 1 kohm\n"
        "diode D1 x -> gnd capacitance=1 nF\n"
        "record v(x), i(D1)\n"
    )
    res = c.transient(until=5e-6, step=5e-9, method="trapezoidal", start="rest")
    tau = 1e3 * 1e-9
    t = res.time
    expected = -5.0 * (1 - np.exp(-t / tau))
    # Trapezoidal at h = tau/200: (h/tau)^2/12 * 5 V ~ 1e-5 V, plus the two
    # backward-Euler steps the engine takes after a start (each ~h^2/2 * v''
    # = 6e-5 V, then decaying): 2e-4 V.
    assert np.allclose(res["v(x)"][2:], expected[2:], atol=2e-4)
    # i(D1) includes the capacitive current C dv/dt.
    # (current scale 5 mA; the same relative bound)
    assert np.allclose(res["i(D1)"][5:], -5.0 / 1e3 * np.exp(-t[5:] / tau), atol=2e-7)


def test_junction_limiting_follows_the_logarithmic_rule():
    # Nagel (1975): above Vcrit a step longer than 2 nVt is replaced by
    # v_old + nVt ln(1 + dv/nVt) from forward bias, nVt ln(v_new/nVt) from
    # reverse bias; short steps and steps below Vcrit pass unchanged.
    nvt = np.full(4, 0.025)
    isat = np.full(4, 1e-14)
    vcrit = critical_voltage(isat, nvt)
    assert vcrit[0] == pytest.approx(0.025 * math.log(0.025 / (math.sqrt(2) * 1e-14)))
    v_old = np.array([0.6, -5.0, 0.7, 0.1])
    v_new = np.array([5.0, 5.0, 0.72, 0.3])
    out = limit_junction(v_new, v_old, nvt, vcrit)
    assert out[0] == pytest.approx(0.6 + 0.025 * math.log(1 + 4.4 / 0.025))
    assert out[1] == pytest.approx(0.025 * math.log(5.0 / 0.025))
    assert out[2] == 0.72  # shorter than 2 nVt
    assert out[3] == 0.3  # below Vcrit


def test_freewheeling_diode_clamp_and_decay():
    # A 12 V coil (10 mH, 24 ohm) switched off at 1 ms with a diode across it.
    # At the opening the whole coil current I0 = 0.5 A flows in the diode,
    # so the switch node sits one diode drop above the supply:
    # Vd = n Vt ln(1 + I0/Is) (Shockley). Then L di/dt = -(R i + Vd(i)).
    vs, rc, lc, isat = 12.0, 24.0, 10e-3, 1e-14
    c = mna.parse(
        f"voltage-source V1 sup -> gnd {vs} V\n"
        f"inductor Lc sup -> sw {lc} H resistance={rc} ohm\n"
        "switch Q1 sw -> gnd on=1 uohm off=1 Gohm gate=schedule(closed, 1 ms: open)\n"
        f"diode D1 sw -> sup saturation-current={isat} A\n"
        "record v(sw), i(Lc), i(D1)\n"
    )
    res = c.transient(until=1.9e-3, step=5e-7, method="trapezoidal")
    nvt = K_BOLTZMANN * 298.15 / Q_ELECTRON
    i0 = vs / (rc + 1e-6)
    clamp = nvt * math.log1p(i0 / isat)
    # The first sample after the opening carries I0 less a 1 Gohm leak.
    assert res["v(sw)"].max() - vs == pytest.approx(clamp, rel=1e-5)

    # Reference: the same loop equation solved by scipy at rtol 1e-11.
    def rhs(t, i):
        # Diode drop at current i (the 1e-12 S floor is negligible here).
        return [-(rc * i[0] + nvt * math.log1p(i[0] / isat)) / lc]

    after = res.time >= 1e-3
    t_after = res.time[after]
    t_after = t_after[1:]  # the first sample at 1 ms is before the opening
    # (The current reaches zero near 2.2 ms; the run stops before, at 1.9 ms.)
    ref = solve_ivp(rhs, (1e-3, 1.9e-3), [i0], t_eval=t_after, rtol=1e-11, atol=1e-14, method="LSODA")
    sim = res["i(Lc)"][after][1:]
    # Trapezoidal global error at h = 0.5 us against tau = 0.42 ms is about
    # (h/tau)^2/12 * I0 ~ 6e-8 A; the first step after the opening is a
    # backward-Euler step (error ~ h^2/2 * i'' ~ 3e-7 A). 2e-6 A covers both.
    assert np.allclose(sim, ref.y[0], atol=2e-6)

    # Time constant L/R: with a nearly constant drop Vd, i + Vd/R decays as
    # exp(-t R/L). Vd changes by only n Vt per e-fold of current (26 mV against
    # R i ~ 12 V), so the fitted time constant is within 1 % of L/R.
    i_plus = sim + clamp / rc
    window = (t_after > 1.2e-3) & (t_after < 1.6e-3)
    slope = np.polyfit(t_after[window], np.log(i_plus[window]), 1)[0]
    assert -1.0 / slope == pytest.approx(lc / rc, rel=0.01)


def test_diode_argument_checks():
    with pytest.raises(mna.InputError, match="ideality"):
        mna.parse("diode D1 a -> gnd ideality=20\nresistor R1 a -> gnd 1 ohm\n")
    with pytest.raises(mna.InputError, match="saturation-current"):
        mna.parse("diode D1 a -> gnd saturation-current=2 V\n")
