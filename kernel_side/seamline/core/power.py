"""Power and sample size of the robust bias-corrected test of no effect, from a pilot standard error.

The test rejects H0: tau = 0 when |t| > z, t = bias-corrected estimate / robust standard error and
z = Phi^{-1}(1 - alpha / 2). The bias-corrected estimate is centred at tau to first order, so under
the alternative t is approximately N(tau / se, 1) and

    power(tau) = 1 - Phi(z - tau / se) + Phi(-z - tau / se)

(Cattaneo, Titiunik & Vazquez-Bare 2019). At tau = 0 this is alpha.

The standard error at another total sample size n follows se(n) = se_0 (n_0 / n)^gamma:
gamma = 1/2 when the bandwidth is held fixed (the effective sample in the window grows like n);
gamma = 1/2 - r (1 + 2 nu) / 2 when the bandwidth is re-selected at the rate h ~ n^(-r) (derived:
the variance of a local polynomial estimate of the nu-th derivative is of order 1 / (n h^(1 + 2 nu))).
"""
from __future__ import annotations

import math

import numpy as np
from scipy import optimize, stats


def power_of_test(effect, std_error: float, level: float) -> np.ndarray:
    """Rejection probability of the two-sided test at ``level`` against ``effect`` (array-valued)."""
    z = stats.norm.ppf(0.5 + level / 2.0)
    shift = np.asarray(effect, dtype=float) / std_error
    return stats.norm.sf(z - shift) + stats.norm.cdf(-z - shift)


def bandwidth_rate(rule: str, degree: int) -> float:
    """r in h ~ n^(-r): MSE-optimal rules n^(-1/(2p+3)); the coverage-error rule n^(-1/(p+3))."""
    return 1.0 / (degree + 3) if rule == "coverage" else 1.0 / (2 * degree + 3)


def se_exponent(scaling: str, rule: str, degree: int, derivative: int) -> float:
    """gamma in se(n) = se_0 (n_0 / n)^gamma."""
    if scaling == "fixed-bandwidth":
        return 0.5
    return 0.5 - bandwidth_rate(rule, degree) * (1 + 2 * derivative) / 2.0


def window_growth(scaling: str, rule: str, degree: int) -> float:
    """Exponent of n in the number of observations inside the bandwidth (locally constant density)."""
    return 1.0 if scaling == "fixed-bandwidth" else 1.0 - bandwidth_rate(rule, degree)


def scaled_std_error(se0: float, n0: float, n: float, exponent: float) -> float:
    return se0 * (n0 / n) ** exponent


def required_n(effect: float, se0: float, n0: float, exponent: float, power: float, level: float) -> float:
    """The (real) total sample size at which the test reaches ``power``; power rises with n."""
    # power(n) increases from alpha (n -> 0) to 1 (n -> inf); solve on log n, bracket by doubling
    def gap(log_n: float) -> float:
        return float(power_of_test(effect, scaled_std_error(se0, n0, math.exp(log_n), exponent), level)) - power

    lo = hi = math.log(n0)
    for _ in range(300):  # callers ensure alpha < power < 1 and effect != 0, so both ends are found
        if gap(lo) <= 0:
            break
        lo -= 2.0
    for _ in range(300):
        if gap(hi) >= 0:
            break
        hi += 2.0
    return math.exp(optimize.brentq(gap, lo, hi, xtol=1e-12, rtol=1e-14))
