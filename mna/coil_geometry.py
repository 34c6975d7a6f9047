"""Inductance of a single-layer coil from its dimensions.

Plain functions on numbers (SI units throughout); the ``solenoid`` element
kind (:mod:`mna.elements.magnetics`) uses them so a netlist can size an
air-core or rod-core choke from turns, diameter and length.

Long-solenoid formula
    ``L = mu0 * mu_r * N^2 * A / l`` with ``A = pi * d^2 / 4``: exact for a
    current sheet much longer than its diameter.

Nagaoka's correction for finite length
    A real coil's field spreads out at its ends, so it has less inductance
    than the long-solenoid formula says. Nagaoka's coefficient ``K(d/l)``
    (between 0 and 1) is the exact ratio for a uniform current sheet::

        L = K * mu0 * mu_r * N^2 * pi * d^2 / (4 * l)

        k^2 = d^2 / (d^2 + l^2),   k' = sqrt(1 - k^2)
        K   = 4 / (3*pi*k') * [ (k'^2/k^2) * (K(k) - E(k)) + E(k) - k ]

    with the complete elliptic integrals K and E of modulus k.
    Source: H. Nagaoka, "The inductance coefficients of solenoids",
    J. Coll. Sci. Imp. Univ. Tokyo 27 (1909); the same formula and tables in
    E. B. Rosa & F. W. Grover, "Formulas and tables for the calculation of
    mutual and self-inductance", Bull. Bureau of Standards 8(1) (1912), and
    F. W. Grover, *Inductance Calculations* (1946).

    For a long coil ``K ~ 1 - 4/(3*pi)*(d/l) + (d/l)^2/8 - (d/l)^4/64``
    (Rosa's series, from memory; it matches the closed form to 1e-12 at
    d/l = 0.02), which this module uses below d/l = 0.02, where the elliptic
    form starts to lose digits to cancellation.

Relative permeability
    ``mu_r`` multiplies the air-core value. That is exact only for a core
    filling the whole flux path; for an open rod core pass the rod's
    *effective* permeability (from the core maker's data), which is far
    below the material's.

``mu0`` is ``scipy.constants.mu_0`` (the CODATA 2018 value,
1.25663706212e-6 H/m; it differs from 4*pi*1e-7 by about 1.3e-10 relative).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.constants import mu_0
from scipy.special import ellipe, ellipk

#: Below this diameter/length ratio the series form of Nagaoka's coefficient is used.
SERIES_BELOW = 2e-2


def nagaoka(diameter_over_length: float | np.ndarray) -> float | np.ndarray:
    """Nagaoka's coefficient K for a coil of the given diameter/length ratio.

    ``diameter_over_length`` is dimensionless and positive (accepts arrays).
    Returns K in (0, 1]; K -> 1 for a long coil, K -> 0 for a flat one.
    """
    x = np.asarray(diameter_over_length, dtype=float)
    if np.any(~(x > 0)):
        raise ValueError("diameter/length must be positive")
    with np.errstate(invalid="ignore", divide="ignore"):
        k2 = x * x / (1.0 + x * x)
        k = np.sqrt(k2)
        kp2 = 1.0 - k2
        kp = np.sqrt(kp2)
        big, small = ellipk(k2), ellipe(k2)
        exact = 4.0 / (3.0 * math.pi * kp) * ((kp2 / k2) * (big - small) + small - k)
    series = 1.0 - 4.0 / (3.0 * math.pi) * x + x * x / 8.0 - x**4 / 64.0
    out = np.where(x < SERIES_BELOW, series, exact)
    return float(out) if out.ndim == 0 else out


def long_solenoid_inductance(turns: float, diameter: float, length: float, permeability: float = 1.0) -> float:
    """``mu0 * mu_r * N^2 * A / l`` (H); diameter and length in metres."""
    _check_geometry(turns, diameter, length, permeability)
    area = math.pi * diameter * diameter / 4.0
    return mu_0 * permeability * turns * turns * area / length


def solenoid_inductance(turns: float, diameter: float, length: float, permeability: float = 1.0) -> float:
    """Inductance (H) of a single-layer coil: long-solenoid formula times Nagaoka's K.

    ``diameter`` is the coil's mean diameter (to the centre of the wire) and
    ``length`` its winding length, both in metres; ``permeability`` is the
    relative permeability of the core (1 for air).
    """
    return long_solenoid_inductance(turns, diameter, length, permeability) * nagaoka(diameter / length)


def _check_geometry(turns: float, diameter: float, length: float, permeability: float) -> None:
    for name, value in (("turns", turns), ("diameter", diameter), ("length", length),
                        ("permeability", permeability)):
        if not value > 0:
            raise ValueError(f"{name} must be positive, got {value:g}")
