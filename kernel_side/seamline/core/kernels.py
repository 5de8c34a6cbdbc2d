"""Kernels with support |u| <= 1 and the constants the bandwidth rules need.

Each kernel is stored as an (unnormalised) polynomial in |u| because every local polynomial quantity
is then a polynomial in the distance to the cutoff, which is what makes the moment engine exact.
Normalisation does not change a weighted least-squares fit; constants that depend on it use the
normalised kernel explicitly.
"""
from __future__ import annotations

from functools import lru_cache
from math import factorial, pi, sqrt

import numpy as np
from numpy.polynomial import polynomial as P

# K(u) for 0 <= |u| <= 1 as ascending coefficients in |u| (triangular 1-u, uniform 1, Epanechnikov 1-u^2)
_POLYS: dict[str, tuple[float, ...]] = {
    "triangular": (1.0, -1.0),
    "uniform": (1.0,),
    "epanechnikov": (1.0, 0.0, -1.0),
}


def kernel_poly(kernel: str) -> np.ndarray:
    """Ascending polynomial coefficients of the (unnormalised) kernel in |u| on [0, 1]."""
    return np.array(_POLYS[kernel], dtype=float)


def kernel_weights(kernel: str, u_abs: np.ndarray) -> np.ndarray:
    """Kernel values at |u|; zero outside [0, 1] (the support includes |u| == 1)."""
    u_abs = np.asarray(u_abs, dtype=float)
    out = P.polyval(u_abs, kernel_poly(kernel))
    return np.where(u_abs <= 1.0, out, 0.0)


def _integral01(coefs: np.ndarray) -> float:
    """Exact integral over [0, 1] of a polynomial given by ascending coefficients."""
    return float(np.sum(coefs / np.arange(1, len(coefs) + 1)))


@lru_cache(maxsize=None)
def one_sided_moments(kernel: str, upto: int = 8) -> tuple[np.ndarray, np.ndarray]:
    """nu_j = int_0^1 u^j K(u) du and pi_j = int_0^1 u^j K(u)^2 du for the normalised kernel."""
    k = kernel_poly(kernel) / normalising_constant(kernel)
    k2 = P.polymul(k, k)
    nu = np.array([_integral01(P.polymul(k, [0] * j + [1])) for j in range(upto + 1)])
    pi_ = np.array([_integral01(P.polymul(k2, [0] * j + [1])) for j in range(upto + 1)])
    return nu, pi_


@lru_cache(maxsize=None)
def normalising_constant(kernel: str) -> float:
    """int_{-1}^{1} of the unnormalised kernel (so K / constant integrates to one)."""
    return 2.0 * _integral01(kernel_poly(kernel))


@lru_cache(maxsize=None)
def boundary_constants(kernel: str, degree: int, derivative: int = 0) -> tuple[float, float, float]:
    """Equivalent boundary kernel constants (R*, mu*, C) for an order-`degree` fit of a derivative.

    R* = int_0^1 K*^2, mu* = int_0^1 u^(p+1) K*, and C is the one-sided MSE-optimal bandwidth constant
    C = [(2 nu + 1) (p+1)!^2 R* / (2 (p + 1 - nu) mu*^2)]^(1/(2p+3))   (METHODS section 1.4).
    """
    p, v = degree, derivative
    nu, _ = one_sided_moments(kernel, 2 * p + 3)
    gamma = np.array([[nu[i + j] for j in range(p + 1)] for i in range(p + 1)])
    k = kernel_poly(kernel) / normalising_constant(kernel)
    e = np.linalg.solve(gamma, np.eye(p + 1)[v])  # K*(u) = e' r_p(u) K(u)
    kstar = P.polymul(e, k)
    r_star = _integral01(P.polymul(kstar, kstar))
    mu_star = _integral01(P.polymul(kstar, [0] * (p + 1) + [1]))
    const = ((2 * v + 1) * factorial(p + 1) ** 2 * r_star
             / (2 * (p + 1 - v) * mu_star ** 2)) ** (1.0 / (2 * p + 3))
    return r_star, mu_star, const


@lru_cache(maxsize=None)
def normal_reference_constant(kernel: str) -> float:
    """Rule-of-thumb density bandwidth constant (8 sqrt(pi) R(K) / (3 mu2(K)^2))^(1/5) (Silverman 1986)."""
    nu, pi_ = one_sided_moments(kernel, 2)
    r_k = 2.0 * pi_[0]
    mu2 = 2.0 * nu[2]
    return (8.0 * sqrt(pi) * r_k / (3.0 * mu2 ** 2)) ** 0.2


@lru_cache(maxsize=None)
def ik_constant(kernel: str) -> float:
    """Imbens-Kalyanaraman C_K = (C2 / (4 C1^2))^(1/5) for a kernel on [-1, 1] (METHODS section 3.1)."""
    nu, pi_ = one_sided_moments(kernel, 4)
    den = nu[2] * nu[0] - nu[1] ** 2
    c1 = 0.5 * (nu[2] ** 2 - nu[1] * nu[3]) / den
    c2 = (nu[2] ** 2 * pi_[0] - 2 * nu[1] * nu[2] * pi_[1] + nu[1] ** 2 * pi_[2]) / den ** 2
    return (c2 / (4.0 * c1 ** 2)) ** 0.2
