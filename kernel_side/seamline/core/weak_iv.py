"""Closed-form inversion of the null-restricted test of a ratio of jumps (Feir, Lemieux & Marmer 2016).

Under H0: tau = tau0 the adjusted outcome Y - tau0 D has no jump, so with jumps (j_y, j_d) and their
covariance (v_y, c, v_d) the statistic T(tau0) = (j_y - tau0 j_d) / sqrt(v_y - 2 tau0 c + tau0^2 v_d)
is compared with z. T(tau0)^2 <= z^2 is the quadratic inequality a2 tau0^2 + a1 tau0 + a0 <= 0 with

    a2 = j_d^2 - z^2 v_d,   a1 = -2 (j_y j_d - z^2 c),   a0 = j_y^2 - z^2 v_y,

whose solution is one interval (a2 > 0), two rays or the whole line (a2 < 0), or a half-line (a2 = 0).
The ratio j_y / j_d always belongs to the set (T = 0 there), so it is never empty.
"""
from __future__ import annotations

import numpy as np

LINEAR_TOLERANCE = 1e-12   # |a2| below this share of (j_d^2 + z^2 v_d) counts as zero (convention)


def quadratic_coefficients(j_y: float, j_d: float, v_y: float, c: float, v_d: float,
                           z: float) -> tuple[float, float, float]:
    z2 = z * z
    return j_d * j_d - z2 * v_d, -2.0 * (j_y * j_d - z2 * c), j_y * j_y - z2 * v_y


def robust_set(j_y: float, j_d: float, v_y: float, c: float, v_d: float,
               z: float) -> tuple[tuple[float, float], ...]:
    """{tau0 : T(tau0)^2 <= z^2} as closed intervals with ends that may be +-inf."""
    a2, a1, a0 = quadratic_coefficients(j_y, j_d, v_y, c, v_d, z)
    if abs(a2) < LINEAR_TOLERANCE * (j_d * j_d + z * z * v_d):
        if a1 > 0:
            return ((-np.inf, -a0 / a1),)
        if a1 < 0:
            return ((-a0 / a1, np.inf),)
        return ((-np.inf, np.inf),) if a0 <= 0 else ()
    disc = a1 * a1 - 4.0 * a2 * a0
    if disc <= 0:
        # a2 < 0: q is negative everywhere. (a2 > 0 with disc <= 0 cannot happen: q(ratio) < 0.)
        return ((-np.inf, np.inf),) if a2 < 0 else ()
    # numerically stable roots (no cancellation between -a1 and sqrt(disc))
    q = -0.5 * (a1 + np.copysign(np.sqrt(disc), a1))
    r1, r2 = sorted((q / a2, a0 / q))
    if a2 > 0:
        return ((float(r1), float(r2)),)
    return ((-np.inf, float(r1)), (float(r2), np.inf))
