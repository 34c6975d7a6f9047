"""Diode reverse recovery: the charge-control model of Lauritzen and Ma.

P. O. Lauritzen and C. L. Ma, "A simple diode model with reverse recovery",
IEEE Transactions on Power Electronics 6(2), 188-191, 1991. Two charges:
``qE`` at the junction, set by the junction voltage, and ``qM`` stored in
the base, with the carrier lifetime ``tau`` and the transit time ``TM``::

    i       = (qE - qM) / TM
    dqM/dt  = (qE - qM) / TM - qM / tau
    qE      = Isat (tau + TM) (exp(v / (n Vt)) - 1)

(The factor ``tau + TM`` in place of the paper's ``tau`` keeps the DC
current equal to the Shockley law with the same ``Isat``.) When the current
is ramped down at ``a = -di/dt`` from ``IF``, ``qM`` follows the current with
the lifetime ``tau``; the junction gives way when ``qE`` reaches zero, at the
reverse peak ``Irm``; then the reverse current decays with
``1/tau_rr = 1/TM + 1/tau``.

:func:`recovery_figures` computes the datasheet figures ``Qrr`` and ``trr``
of that test in closed form; :func:`fit_recovery` finds ``tau`` and ``TM``
from a datasheet's ``Qrr`` and ``trr`` at its ``IF`` and ``-di/dt``.

``trr`` is taken as in the usual datasheet definition: from the zero
crossing of the current to where the straight line through the points of
the tail at 90 % and 25 % of ``Irm`` reaches zero (JEDEC/IEC practice, from
memory); for the exponential tail that is ``1.879 tau_rr`` after the peak.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import brentq, least_squares

#: trr after the reverse peak, in units of the tail's time constant: where the
#: line through the tail's 90 % and 25 % points reaches zero.
TAIL_TRR = math.log(4.0) + 0.25 * (math.log(4.0) - math.log(1 / 0.9)) / 0.65

#: The transit time is kept above this fraction of trr (a snappier fit makes
#: the equations needlessly stiff without changing Qrr or trr by 1 %).
MIN_TRANSIT_FRACTION = 1e-3


def stored_charge(t, tau: float, i_f: float, a: float):
    """qM (C) at time t (s) after the current starts falling from IF (A) at a (A/s)."""
    return tau * (i_f - a * t) + a * tau * tau * (1.0 - np.exp(-t / tau))


def recovery_figures(tau: float, tm: float, i_f: float, a: float) -> tuple[float, float, float]:
    """(Qrr in C, trr in s, Irm in A) of the model for a ramp from IF at -di/dt = a."""
    tz = i_f / a

    def junction(t: float) -> float:  # qE = qM + TM i: zero at the reverse peak
        return stored_charge(t, tau, i_f, a) + tm * (i_f - a * t)

    hi = tz + 10.0 * (tau + tm)
    while junction(hi) > 0:
        hi = tz + 2.0 * (hi - tz)
    t0 = brentq(junction, tz, hi, xtol=1e-15 * hi, rtol=1e-13)
    i_rm = a * (t0 - tz)
    tail = 1.0 / (1.0 / tm + 1.0 / tau)
    return a * (t0 - tz) ** 2 / 2.0 + i_rm * tail, (t0 - tz) + TAIL_TRR * tail, i_rm


def fit_recovery(q_rr: float, t_rr: float, i_f: float, a: float) -> tuple[float, float, float]:
    """(tau, TM) in s that give Qrr and trr at the test point, and the worst relative miss."""
    floor = math.log(MIN_TRANSIT_FRACTION * t_rr)

    def miss(p):
        q, t, _ = recovery_figures(math.exp(p[0]), math.exp(p[1]), i_f, a)
        return [math.log(max(q, 1e-300) / q_rr), math.log(max(t, 1e-300) / t_rr)]

    best = None
    for tau0, tm0 in ((t_rr, t_rr / 3), (10 * t_rr, t_rr / 10), (t_rr / 3, t_rr)):
        start = [math.log(tau0), max(math.log(tm0), floor + 1e-9)]
        r = least_squares(miss, start, bounds=([-60.0, floor], [0.0, 0.0]), xtol=1e-14, ftol=1e-14)
        if best is None or r.cost < best.cost:
            best = r
    tau, tm = math.exp(best.x[0]), math.exp(best.x[1])
    worst = float(np.max(np.abs(np.expm1(np.asarray(miss(best.x))))))
    return tau, tm, worst
