"""Robust bias-corrected estimates and standard errors computed from first principles.

Nothing here imports seamline. Everything is written in the RAW polynomial basis of the signed
distance x = score - cutoff (no scaling by the bandwidth), so that no bandwidth ratio such as
(h/b)^(p+1) appears anywhere: the bias correction is the textbook construction of Calonico,
Cattaneo & Titiunik (2014, Econometrica 82(6)), section 2:

  on each side, with kernel weights W_h = diag(w_i K(|x_i|/h)) and W_b likewise at the pilot b,
    mu_p     = nu! e_nu' (X_p' W_h X_p)^-1 X_p' W_h Y                   (order-p fit at h)
    g        = (X_p' W_h X_p)^-1 X_p' W_h x^(p+1)                       (projection of x^(p+1))
    m_{p+1}  = e_{p+1}' (X_q' W_b X_q)^-1 X_q' W_b Y                    (x^(p+1) coefficient at b)
    mu_bc    = mu_p - nu! g_nu m_{p+1}

so mu_bc = sum_i l_i Y_i with the linear weights l below, and every robust variance is
sum_i l_i^2 omega_i (or a cluster sum of l_i e_i), with

  HC0     omega_i = e_i^2, e_i the residual of the order-q fit at b (the bias fit), for every row
          with l_i != 0 (common practice for the robust variance, CCT 2014 section 3);
  HC1     HC0 times N / (N - k), N the rows with positive weight at max(h, b) on both sides and
          k = 2 (q + 1) + (number of covariates) (common practice, MacKinnon & White 1985);
  HC2/3   e_i^2 / (1 - lev_i) and e_i^2 / (1 - lev_i)^2, lev_i the weighted hat value of the order-q
          fit at b (MacKinnon & White 1985);
  cluster G/(G-1) (N-1)/(N-k) sum_g (sum_{i in g} l_i e_i)^2 over clusters with a row of l_i != 0
          (the CR1 factor, Cameron & Miller 2015);
  neighbours omega_i = M_i/(M_i+1) (Y_i - mean of its M_i nearest neighbours on its side)^2, J = 3,
          every tie at the J-th distance kept (Abadie & Imbens 2006; J = 3 is common practice),
          found here by brute force over all pairs.
"""
from __future__ import annotations

from dataclasses import dataclass
from math import factorial

import numpy as np

NEIGHBORS = 3  # Abadie & Imbens (2006) / common practice: three nearest neighbours


def kernel(u_abs: np.ndarray, name: str) -> np.ndarray:
    """Unnormalised kernel on |u| <= 1 (inclusive): triangular 1-|u|, uniform 1, Epanechnikov 1-u^2."""
    k = {"triangular": 1.0 - u_abs, "uniform": np.ones_like(u_abs), "epanechnikov": 1.0 - u_abs ** 2}[name]
    return np.where(u_abs <= 1.0, k, 0.0)


def neighbor_residuals(x: np.ndarray, values: np.ndarray, j: int = NEIGHBORS) -> np.ndarray:
    """sqrt(M/(M+1)) (V_i - mean of the M nearest others), brute force over all pairs of one side."""
    values = values.reshape(len(x), -1)
    out = np.empty_like(values, dtype=float)
    for i in range(len(x)):
        dist = np.abs(x - x[i])
        dist[i] = np.inf
        radius = np.sort(dist)[j - 1]
        near = dist <= radius
        m = near.sum()
        out[i] = np.sqrt(m / (m + 1.0)) * (values[i] - values[near].mean(axis=0))
    return out


def _wls_operator(x: np.ndarray, weights: np.ndarray, degree: int) -> tuple[np.ndarray, np.ndarray]:
    """(G^-1 X'W, X) for the raw basis X = [1, x, ..., x^degree]: coefficients = first @ Y."""
    basis = np.vander(x, degree + 1, increasing=True)
    gram = basis.T @ (basis * weights[:, None])
    return np.linalg.solve(gram, basis.T * weights[None, :]), basis


@dataclass
class SideRobust:
    """One side's bias-corrected smoother and the pieces its variances need."""

    x: np.ndarray              # signed distances of the side's rows
    weights_bc: np.ndarray     # l_i: mu_bc = l @ Y
    weights_conv: np.ndarray   # the conventional smoother: mu_p = a @ Y
    kw_h: np.ndarray           # w_i K(|x_i|/h)
    op_h: np.ndarray           # (p+1, n) G_h^-1 X_p' W_h
    basis_h: np.ndarray
    op_b: np.ndarray           # (q+1, n) G_b^-1 X_q' W_b
    basis_b: np.ndarray
    lev_b: np.ndarray          # hat values of the order-q weighted fit at b
    n_window: int              # rows with positive weight at h or at b


def side_robust(x: np.ndarray, w: np.ndarray, h: float, b: float, p: int, q: int, nu: int,
                kern: str) -> SideRobust:
    kw_h = w * kernel(np.abs(x) / h, kern)
    kw_b = w * kernel(np.abs(x) / b, kern)
    op_h, basis_h = _wls_operator(x, kw_h, p)
    op_b, basis_b = _wls_operator(x, kw_b, q)
    g = op_h @ x ** (p + 1)                            # projection of x^(p+1) on the degree-p basis
    conv = factorial(nu) * op_h[nu]
    bc = conv - factorial(nu) * g[nu] * op_b[p + 1]    # minus nu! g_nu * (x^(p+1) coefficient at b)
    gram_b = basis_b.T @ (basis_b * kw_b[:, None])
    lev_b = kw_b * np.einsum("ij,ij->i", basis_b @ np.linalg.inv(gram_b), basis_b)
    return SideRobust(x, bc, conv, kw_h, op_h, basis_h, op_b, basis_b, lev_b,
                      int(((kw_h > 0) | (kw_b > 0)).sum()))


@dataclass
class Problem:
    """A two-sided data set split at the cutoff, with a bias-corrected smoother on each side."""

    sides: tuple[SideRobust, SideRobust]      # (below, above)
    rows: tuple[np.ndarray, np.ndarray]       # indices of the input rows on each side
    sign: float                               # +1 when the treated side is above
    q: int


def problem(score, cutoff, h, b, *, p=1, q=None, nu=0, kern="triangular", weights=None,
            treated="above") -> Problem:
    score = np.asarray(score, dtype=float)
    q = p + 1 if q is None else q
    w = np.ones_like(score) if weights is None else np.asarray(weights, dtype=float)
    h, b = np.broadcast_to(h, (2,)), np.broadcast_to(b, (2,))
    x = score - cutoff
    rows = (np.flatnonzero(x < 0), np.flatnonzero(x >= 0))
    sides = tuple(side_robust(x[r], w[r], float(hs), float(bs), p, q, nu, kern)
                  for r, hs, bs in zip(rows, h, b))
    return Problem(sides, rows, 1.0 if treated == "above" else -1.0, q)


def jump(pr: Problem, values: np.ndarray, robust: bool = True) -> np.ndarray:
    """Bias-corrected (or conventional) jump, treated minus untreated, of each column of values."""
    values = values.reshape(len(values), -1)
    lim = [(s.weights_bc if robust else s.weights_conv) @ values[r] for s, r in zip(pr.sides, pr.rows)]
    return pr.sign * (lim[1] - lim[0])


def bias_fit_residuals(pr: Problem, values: np.ndarray) -> list[np.ndarray]:
    """Residuals of the order-q fit at b on each side (the robust variance's residuals)."""
    values = values.reshape(len(values), -1)
    return [values[r] - s.basis_b @ (s.op_b @ values[r]) for s, r in zip(pr.sides, pr.rows)]


def robust_variance(pr: Problem, values: np.ndarray, lam: np.ndarray, kind: str, *,
                    cluster=None, linear_weights=None, n_covariates: int = 0) -> float:
    """Variance of the robust jump of values @ lam for kind "hc0".."hc3", "neighbors" or "cluster".

    ``linear_weights`` (per side, optional) replaces the side-signed smoother weights pr.sign * s * l_i,
    for estimators that are other linear functions of Y (covariate adjustment)."""
    values = values.reshape(len(values), -1)
    n_used = sum(s.n_window for s in pr.sides)
    k = 2 * (pr.q + 1) + n_covariates
    resid = [e @ lam for e in bias_fit_residuals(pr, values)]
    parts, codes = [], []
    for j, (s, r, e) in enumerate(zip(pr.sides, pr.rows, resid)):
        side_sign = pr.sign * (1.0 if j == 1 else -1.0)
        lw = side_sign * s.weights_bc if linear_weights is None else linear_weights[j]
        if kind == "cluster":
            parts.append(lw * e)
            codes.append(np.where(lw != 0, np.asarray(cluster)[r], -1))
            continue
        if kind == "neighbors":
            omega = (neighbor_residuals(s.x, values[r]) @ lam) ** 2
        else:
            power = {"hc0": 0, "hc1": 0, "hc2": 1, "hc3": 2}[kind]
            omega = e ** 2 / (1.0 - s.lev_b) ** power
        parts.append(lw ** 2 * omega)
    if kind == "cluster":
        code, u = np.concatenate(codes), np.concatenate(parts)
        keep = code >= 0
        groups = np.unique(code[keep])
        sums = np.array([u[keep][code[keep] == g].sum() for g in groups])
        big_g = len(groups)
        return float(big_g / (big_g - 1) * (n_used - 1) / (n_used - k) * np.sum(sums ** 2))
    total = float(sum(np.sum(pt) for pt in parts))
    return total * n_used / (n_used - k) if kind == "hc1" else total


@dataclass
class Adjusted:
    """Covariate-adjusted robust jump (additive covariates, Calonico, Cattaneo, Farrell & Titiunik 2019)."""

    gamma: np.ndarray              # coefficients on the covariates, from the conventional fit at h
    estimate: float                # bias-corrected jump of Y - Z gamma
    linear_weights: list[np.ndarray]  # per side: estimate = sum_i weight_i Y_i (Z held fixed)


def adjusted(pr: Problem, y: np.ndarray, z: np.ndarray) -> Adjusted:
    """gamma from the kernel-weighted regression of Y on both sides' degree-p polynomials and Z at h
    (solved here by numpy least squares on the stacked design), then the bias-corrected jump of
    Y - Z gamma and its exact linear weights on Y (gamma is linear in Y for a fixed Z)."""
    z = z.reshape(len(z), -1)
    n, m = len(y), z.shape[1]
    p1 = pr.sides[0].basis_h.shape[1]
    design = np.zeros((n, 2 * p1 + m))
    weight = np.zeros(n)
    for j, (s, r) in enumerate(zip(pr.sides, pr.rows)):
        design[r, j * p1:(j + 1) * p1] = s.basis_h
        weight[r] = s.kw_h
    design[:, 2 * p1:] = z
    keep = weight > 0
    root = np.sqrt(weight[keep])
    hat = np.linalg.pinv(design[keep] * root[:, None]) * root[None, :]   # coefficients = hat @ Y[keep]
    gamma_rows = hat[2 * p1:]                                             # (m, kept rows)
    gamma = gamma_rows @ y[keep]
    est = float(jump(pr, y - z @ gamma)[0])
    # d estimate / d Y_i = side-signed l_i - (robust jump of Z)' (d gamma / d Y_i)
    dz = jump(pr, z)
    d_gamma = np.zeros((m, n))
    d_gamma[:, keep] = gamma_rows
    lw = []
    for j, (s, r) in enumerate(zip(pr.sides, pr.rows)):
        side_sign = pr.sign * (1.0 if j == 1 else -1.0)
        lw.append(side_sign * s.weights_bc - dz @ d_gamma[:, r])
    return Adjusted(gamma, est, lw)
