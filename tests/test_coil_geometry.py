"""Solenoid inductance from geometry: Nagaoka's coefficient and the solenoid kind.

Sources:
- H. Nagaoka, "The inductance coefficients of solenoids", J. Coll. Sci.
  Imp. Univ. Tokyo 27 (1909): the closed form and its table.
- E. B. Rosa & F. W. Grover, Bull. Bureau of Standards 8(1) (1912), and
  F. W. Grover, *Inductance Calculations* (1946): Maxwell's mutual
  inductance of two coaxial circles, and the long-coil series.
- H. A. Wheeler, "Simple inductance formulas for radio coils", Proc. IRE
  (1928): L[uH] = r^2 N^2 / (9 r + 10 l), inches, within about 1 % for l > 0.8 r.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.constants import mu_0
from scipy.integrate import quad
from scipy.special import ellipe, ellipkm1

import mna
from mna.coil_geometry import long_solenoid_inductance, nagaoka, solenoid_inductance

# Nagaoka's 1909 table, as published (Nagaoka 1909, the coefficient table):
# (d/l, K). The table agrees with the closed form to 1e-6 up to d/l = 3.5;
# at d/l = 10 the table reads 0.203315 against 0.203324 computed.
NAGAOKA_TABLE = [(0.25, 0.901649), (0.5, 0.818136), (1.0, 0.688423), (2.0, 0.525510), (5.0, 0.319825)]


@pytest.mark.parametrize("ratio, tabulated", NAGAOKA_TABLE)
def test_nagaoka_coefficient_against_the_published_table(ratio, tabulated):
    # Table values carry six decimals: agreement to one unit in the last place.
    assert nagaoka(ratio) == pytest.approx(tabulated, abs=1.5e-6)


def test_nagaoka_at_a_flat_coil_against_the_table_entry():
    # Nagaoka (1909), d/l = 10: table 0.203315; the table
    # itself is 9e-6 off the closed form there, so the bound is 1.5e-5.
    assert nagaoka(10.0) == pytest.approx(0.203315, abs=1.5e-5)


def _coaxial_mutual(u: float, r: float) -> float:
    """Maxwell's mutual inductance (H) of two coaxial circles of radius r, u apart.

    M = mu0 r [(2/k - k) K(k) - (2/k) E(k)], k^2 = 4 r^2 / (4 r^2 + u^2)
    (Grover 1946; Rosa & Grover 1912). ellipkm1 keeps K accurate as k -> 1.
    """
    m = 4 * r * r / (4 * r * r + u * u)
    k = math.sqrt(m)
    return mu_0 * r * ((2 / k - k) * ellipkm1(u * u / (4 * r * r + u * u)) - (2 / k) * ellipe(m))


def _current_sheet_inductance(turns: float, r: float, length: float) -> float:
    """Self-inductance of a uniform current sheet by integrating Maxwell's formula.

    L = (N/l)^2 * 2 * integral_0^l (l - u) M(u) du. The integrand has a
    logarithmic singularity at u = 0, so the range is split geometrically.
    """
    edges = [0.0] + list(length * np.logspace(-12, 0, 40))
    total = 0.0
    for a, b in zip(edges[:-1], edges[1:]):
        value, _ = quad(lambda u: (length - u) * _coaxial_mutual(u, r), a, b, limit=200)
        total += value
    return (turns / length) ** 2 * 2 * total


@pytest.mark.parametrize("ratio", [0.25, 1.0, 5.0])
def test_nagaoka_formula_against_direct_integration_of_maxwells_formula(ratio):
    r, turns = 0.01, 100
    length = 2 * r / ratio
    expected = _current_sheet_inductance(turns, r, length)
    # Both are exact for a current sheet; quad's error estimate is below 1e-11.
    assert solenoid_inductance(turns, 2 * r, length) == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize("ratio", [0.05, 2e-2, 1e-2, 2e-3, 1e-5])
def test_long_coil_limit(ratio):
    # Rosa's series for a long coil (Rosa & Grover 1912, from memory):
    # K = 1 - 4/(3 pi) (d/l) + (d/l)^2/8 - (d/l)^4/64 + O((d/l)^6).
    # From d/l = 0.02 up this checks the elliptic closed form, below it the
    # series branch; the bound covers the O(x^6) remainder and the closed
    # form's rounding near its lower end (about 1e-12 from cancellation).
    series = 1 - 4 / (3 * math.pi) * ratio + ratio**2 / 8 - ratio**4 / 64
    assert nagaoka(ratio) == pytest.approx(series, abs=ratio**6 + 2e-12)
    # ...so the finite coil tends to the long-solenoid formula mu0 N^2 A / l.
    d = 0.01
    ratio_l = solenoid_inductance(50, d, d / ratio) / long_solenoid_inductance(50, d, d / ratio)
    assert ratio_l == pytest.approx(1.0, abs=0.5 * ratio)


def test_long_solenoid_formula():
    # L = mu0 N^2 A / l (any physics text, e.g. Halliday, Resnick & Walker).
    n, d, l, mu_r = 200, 0.02, 0.5, 3.0
    assert long_solenoid_inductance(n, d, l, mu_r) == pytest.approx(
        mu_0 * mu_r * n * n * math.pi * d * d / 4 / l, rel=1e-15)


@pytest.mark.parametrize("ratio", [0.5, 1.0, 2.0])
def test_wheelers_formula_agrees_within_its_stated_one_percent(ratio):
    r_m, turns = 0.01, 100
    l_m = 2 * r_m / ratio  # l > 0.8 r for these ratios, Wheeler's stated range
    inch = 0.0254
    r_in, l_in = r_m / inch, l_m / inch
    wheeler = r_in**2 * turns**2 / (9 * r_in + 10 * l_in) * 1e-6
    assert solenoid_inductance(turns, 2 * r_m, l_m) == pytest.approx(wheeler, rel=0.01)


def test_geometry_must_be_positive():
    with pytest.raises(ValueError, match="length must be positive"):
        solenoid_inductance(10, 0.01, 0.0)
    with pytest.raises(ValueError, match="positive"):
        nagaoka(-1.0)


def test_solenoid_kind_uses_the_geometry_and_behaves_as_an_inductor():
    c = mna.parse(
        "voltage-source V1 in -> gnd 10 V\n"
        "resistor R1 in -> x 5 ohm\n"
        "solenoid L1 x -> gnd turns=120 diameter=16 mm length=40 mm\n"
        "record i(L1), inductance(L1)\n"
    )
    expected_l = solenoid_inductance(120, 0.016, 0.040)
    res = c.transient(until=5 * expected_l / 5.0, step=expected_l / 5.0 / 2000, start="rest",
                      method="trapezoidal")
    assert res["inductance(L1)"][0] == pytest.approx(expected_l, rel=1e-15)
    tau = expected_l / 5.0
    # RL step i = (V/R)(1 - exp(-t/tau)), Nilsson & Riedel ch. 7. Trapezoidal
    # error at h = tau/2000 is of order (h/tau)^2/12 ~ 2e-8; 1e-6 leaves margin.
    t = res.time
    assert np.allclose(res["i(L1)"], 2.0 * (1 - np.exp(-t / tau)), atol=1e-6 * 2.0)


def test_solenoid_with_a_core():
    c = mna.parse("solenoid L1 x -> gnd turns=50 diameter=8 mm length=30 mm permeability=40\n"
                  "resistor R1 x -> gnd 1 ohm\n")
    assert c.elements["L1"].params["inductance"] == pytest.approx(
        40 * solenoid_inductance(50, 0.008, 0.030), rel=1e-15)
