"""The parts library in circuits/parts/: each part used from another file.

Every part file carries its own test bench (checked by ``mna check
circuits/``); here each part is brought into a new circuit with
``blocks from``, at values other than its defaults, and compared with a
closed form named beside the check.
"""

import math
from pathlib import Path

import numpy as np
import pytest

import mna
from mna.measure import run_and_check

PARTS = Path(__file__).resolve().parent.parent / "circuits" / "parts"


def use(tmp_path, text: str) -> mna.Circuit:
    """A circuit in a temporary folder that brings parts by absolute path."""
    path = tmp_path / "use.mna"
    path.write_text(text.replace("PARTS", str(PARTS)), encoding="utf-8")
    return mna.load(path)


@pytest.mark.parametrize("part", sorted(p.name for p in PARTS.glob("*.mna")))
def test_each_part_file_passes_its_own_test_bench(part):
    outcome = run_and_check(mna.load(PARTS / part))
    assert outcome.failure is None
    assert outcome.report.checks and all(c.status == "pass" for c in outcome.report.checks), \
        [(c.text, c.status, c.message) for c in outcome.report.checks]


def test_rc_snubber_step_response(tmp_path):
    # Series RC across a step: i(t) = (V/R)*exp(-t/(R*C)) (Hayt & Kemmerly,
    # Engineering Circuit Analysis, ch. 8), here at 33 ohm and 22 nF.
    c = use(tmp_path, 'blocks from "PARTS/rc_snubber.mna"\n'
                      "voltage-source V1 in -> gnd step(from=0 V, to=5 V, at=0 s)\n"
                      "rc-snubber S1 in -> gnd resistance=33 ohm capacitance=22 nF\n")
    tau = 33 * 22e-9
    res = c.transient(until=5 * tau, step=tau / 400, method="trapezoidal", record=["i(S1.R)"])
    after = res.time > 0
    expected = 5 / 33 * np.exp(-res.time[after] / tau)
    # Trapezoidal rule at h = tau/400: error well under 1e-4 of the peak.
    assert np.max(np.abs(res["i(S1.R)"][after] - expected)) < 1e-4 * 5 / 33


def test_rcd_clamp_takes_the_coil_energy(tmp_path):
    # Energy balance after the switch opens: L*I0^2/2 goes into the winding
    # resistance, the diode and the bleed resistor (the supply is outside
    # the loop coil -> clamp).
    c = use(tmp_path, 'blocks from "PARTS/rcd_clamp.mna"\n' + """\
voltage-source Vbus bus -> gnd 12 V
resistor  Rcoil bus -> x 12 ohm
inductor  L1 x -> drain 4 mH
switch    Q1 drain -> gnd on=10 mohm off=100 Mohm gate=schedule(closed, 0.5 ms: open)
rcd-clamp S1 drain -> bus resistance=470 ohm capacitance=220 nF
""")
    res = c.transient(until=3e-3, method="trapezoidal", tolerance=1e-4, max_step=1e-5,
                      record=["i(L1)", "p(S1.R)", "p(S1.D)", "p(Rcoil)"])
    t = res.time
    i0 = np.interp(0.5e-3, t, res["i(L1)"])
    late = t >= 0.5e-3
    energy = sum(np.trapezoid(res[f"p({name})"][late], t[late]) for name in ("S1.R", "S1.D", "Rcoil"))
    assert i0 == pytest.approx(12 / 12.01, rel=1e-3)  # Ohm's law before the turn-off
    assert energy == pytest.approx(0.5 * 4e-3 * i0**2, rel=0.01)


def test_zener_clamp_holds_the_drain_at_the_zener_voltage(tmp_path):
    c = use(tmp_path, 'blocks from "PARTS/zener_clamp.mna"\n' + """\
voltage-source V1 bus -> gnd 24 V
inductor  L1 bus -> drain 20 mH resistance=48 ohm
switch    Q1 drain -> gnd on=50 mohm off=10 Mohm gate=schedule(closed, 0.2 ms: open)
diode     Dbody gnd -> drain capacitance=200 pF
resistor  Rsn drain -> sn 1 kohm
capacitor Csn sn -> gnd 4.7 nF
zener-clamp Z1 drain -> bus clamp-voltage=33 V
""")
    res = c.transient(until=0.6e-3, method="trapezoidal", tolerance=5e-4, max_step=1e-5,
                      record=["v(drain)", "i(L1)"])
    clamping = (res.time > 0.21e-3) & (res["i(L1)"] > 0.1)
    above = res["v(drain)"][clamping] - 24
    # 33 V Zener plus a diode drop (0.5 to 1 V) plus the Zener's 1 ohm at
    # up to 0.5 A: the clamp must sit between 33.5 V and 35 V.
    assert clamping.sum() > 5
    assert above.min() > 33.5 and above.max() < 35.0


def test_geared_drive_running_speed(tmp_path):
    # Steady state of a DC motor through an ideal gear (Chapman, Electric
    # Machinery Fundamentals, ch. 8): w_out = (n*k*V/R - T)/(n^2*k^2/R + B),
    # k = V_rated/w_noload, R = V_rated/I_stall; here n = 30, T = 3 N*m, B = 0.
    c = use(tmp_path, 'blocks from "PARTS/geared_motor.mna"\n' + """\
voltage-source V1 sup -> gnd 24 V
geared-drive D1 sup -> gnd out ratio=30 load-torque=3 N*m load-friction=1e-9 N*m*s/rad
""")
    res = c.transient(until=0.3, start="rest", max_step=1e-3, record=["w(out)", "i(D1.M)"])
    k = 24 / (3000 * 2 * math.pi / 60)
    R = 24 / 20
    w_out = (30 * k * 24 / R - 3) / (30**2 * k**2 / R + 1e-9)
    assert res["w(out)"][-1] == pytest.approx(w_out, rel=2e-3)  # settled: 20 mechanical time constants
    assert res["i(D1.M)"][-1] == pytest.approx(3 / (30 * k), rel=2e-3)  # torque balance n*k*i = T


def test_measured_choke_rings_at_its_self_resonance(tmp_path):
    # Parallel RLC: the ringing frequency is f_srf*sqrt(1 - 1/(4*Q^2))
    # (Hayt & Kemmerly, ch. 9); here f_srf = 2 MHz, Q = 50.
    c = use(tmp_path, 'blocks from "PARTS/measured_choke.mna"\n' + """\
current-source I1 gnd -> x step(from=0 A, to=5 mA, at=0 s)
measured-choke L1 x -> gnd inductance=100 uH saturation-current=2 A saturated-inductance=20 uH
    self-resonance=2 MHz quality=50
""")
    res = c.transient(until=2.2e-6, step=1e-9, method="trapezoidal", record=["v(x)"])
    v, t = res["v(x)"], res.time
    falling = np.nonzero((v[:-1] > 0) & (v[1:] <= 0))[0]
    crossings = t[falling] - v[falling] * (t[falling + 1] - t[falling]) / (v[falling + 1] - v[falling])
    period = np.mean(np.diff(crossings))
    expected = 1 / (2e6 * math.sqrt(1 - 1 / (4 * 50**2)))
    # Trapezoidal phase error at 500 points per period: (w*h)^2/12 ~ 1.3e-5.
    assert period == pytest.approx(expected, rel=1e-3)
