"""Test of equal effects across independent estimates (cutoffs, subgroups) with precision weights.

For estimates t_k with variances V_k from disjoint samples, the precision-weighted common effect
is t_w = sum(t_k / V_k) / sum(1 / V_k) with standard error sum(1 / V_k)^(-1/2), and

    Q = sum((t_k - t_w)^2 / V_k)  ~  chi-square with K - 1 degrees of freedom under t_1 = ... = t_K.

Q is the Wald statistic of the K - 1 contrasts with a diagonal covariance (it does not depend on
which contrasts are used). It assumes the estimates are independent.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats


@dataclass(frozen=True)
class EqualEffects:
    statistic: float
    df: int
    p_value: float
    common_estimate: float
    common_std_error: float


def equal_effects_test(estimates: np.ndarray, std_errors: np.ndarray) -> EqualEffects:
    """Precision-weighted chi-square test of equal effects; needs two or more positive std_errors."""
    t = np.asarray(estimates, dtype=float)
    se = np.asarray(std_errors, dtype=float)
    precision = 1.0 / se ** 2
    common = float(np.sum(precision * t) / np.sum(precision))
    q = float(np.sum(precision * (t - common) ** 2))
    df = len(t) - 1
    return EqualEffects(statistic=q, df=df, p_value=float(stats.chi2.sf(q, df)), common_estimate=common,
                        common_std_error=float(np.sum(precision) ** -0.5))


def wald_equal_effects(estimates: np.ndarray, covariance: np.ndarray) -> EqualEffects:
    """Wald test of equal effects with a full covariance matrix (correlated estimates).

    W = (R t)' (R V R')^{-1} (R t) with R the K - 1 adjacent contrasts e_k - e_{k+1}; W equals
    (t - t_g)' V^{-1} (t - t_g) for the generalised-least-squares common effect
    t_g = 1' V^{-1} t / 1' V^{-1} 1, whose standard error is (1' V^{-1} 1)^(-1/2). With a diagonal V
    this is ``equal_effects_test``.
    """
    t = np.asarray(estimates, dtype=float)
    v = np.asarray(covariance, dtype=float)
    k = len(t)
    contrasts = np.eye(k)[:-1] - np.eye(k, k=1)[:-1]
    diff = contrasts @ t
    w = float(diff @ np.linalg.solve(contrasts @ v @ contrasts.T, diff))
    ones = np.ones(k)
    precision = np.linalg.solve(v, ones)
    return EqualEffects(statistic=w, df=k - 1, p_value=float(stats.chi2.sf(w, k - 1)),
                        common_estimate=float(precision @ t / (precision @ ones)),
                        common_std_error=float((precision @ ones) ** -0.5))
