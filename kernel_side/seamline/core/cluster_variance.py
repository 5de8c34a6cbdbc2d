"""Bias-reduced cluster-robust variance (CR2) and its Satterthwaite degrees of freedom.

The classic cluster-robust variance sums (sum_{i in g} a_i e_i)^2 over clusters, with e the
residuals of the fit. Residuals are shrunk by the fit (E[e e'] = (I - H) Sigma (I - H)'), so the
sum is biased down, and with few clusters its sampling noise makes normal critical values too
small. Bell and McCaffrey (2002, Survey Methodology 28(2): 169-181) rescale each cluster's
residuals by B_g^(-1/2), B_g = [(I - H)(I - H)']_gg, which makes the variance unbiased when the
errors are independent with equal variance (the working model), and approximate its distribution
by a scaled chi-square whose degrees of freedom they give in closed form; Imbens and Kolesar
(2016, Review of Economics and Statistics 98(4): 701-712) recommend exactly this pair (CR2 with
the Bell-McCaffrey degrees of freedom) for clustered inference in small samples. Pustejovsky and
Tipton (2018, Journal of Business & Economic Statistics 36(4): 672-683) give the form for weighted
fits used here (working model: independent errors of equal variance; the kernel and sampling
weights enter the hat matrix).

Here each side of the cutoff is a separate weighted polynomial fit, so H is block diagonal:
H_s = R_s G_s^-1 R_s' K_s with R_s the polynomial basis rows and K_s the fit weights. Every block
of (I - H)(I - H)' is the identity plus a matrix of rank at most 4 (q + 1), so B_g^(-1/2) and the
degrees of freedom are computed from small matrices: no n x n matrix is ever formed.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

# Eigenvalues of B_g below this are treated as zero (a cluster that determines the fit on its own);
# the inverse square root is then a pseudo-inverse, as Pustejovsky and Tipton (2018) do.
_SINGULAR = 1e-10


@dataclass(frozen=True)
class FitRows:
    """One side's weighted polynomial fit, as the variance needs it (rows of the window only)."""
    weights: np.ndarray       # estimator weights a_i (sign of the side included)
    residuals: np.ndarray     # residuals e_i of the fit
    basis: np.ndarray         # (rows, r) polynomial basis r(x_i) = (1, u_i, u_i^2, ...)
    fit_weights: np.ndarray   # kernel x sampling weights of the fit, K_i
    clusters: np.ndarray | None = None   # cluster codes (non-negative integers); None: one row each

    @property
    def bread(self) -> np.ndarray:
        """G^-1, the inverse of the fit's weighted cross-product matrix."""
        return np.linalg.inv((self.basis * self.fit_weights[:, None]).T @ self.basis)


def _blocks(side: FitRows) -> tuple[np.ndarray, np.ndarray]:
    """M1 = G^-1 and M2 = G^-1 (R' K^2 R) G^-1: (H H')_ij = r_i' M2 r_j, H_ij = r_i' M1 r_j K_j."""
    m1 = side.bread
    rk = side.basis * side.fit_weights[:, None]
    return m1, m1 @ (rk.T @ rk) @ m1


def bias_reduced_variance(sides: tuple[FitRows, ...]) -> tuple[float, float]:
    """CR2 variance of sum_i a_i Y_i and its Bell-McCaffrey degrees of freedom.

    Parameters
    ----------
    sides : the fits whose estimator weights are combined (the two sides of the cutoff). A cluster
        may have rows on both sides.

    Returns
    -------
    (variance, degrees_of_freedom)
    """
    if any(s.clusters is None for s in sides):
        return single_row_variance(sides)
    blocks = [_blocks(s) for s in sides]
    r = [s.basis.shape[1] for s in sides]
    codes = np.concatenate([s.clusters for s in sides])
    side_of = np.concatenate([np.full(len(s.weights), j) for j, s in enumerate(sides)])
    row_of = np.concatenate([np.arange(len(s.weights)) for s in sides])
    order = np.argsort(codes, kind="stable")
    bounds = np.flatnonzero(np.diff(codes[order])) + 1
    n_groups = len(bounds) + 1
    width = 2 * sum(r)                     # per side: t_g = R_g' v_g and s_g = R_g' K_g v_g
    u = np.zeros((n_groups, width))
    d = np.zeros(n_groups)
    if n_groups == len(codes):             # one row per cluster (HC2-like): B_g is a number
        return single_row_variance(sides)
    groups = np.split(order, bounds)
    variance = 0.0
    for g, members in enumerate(groups):
        parts = [(j, row_of[members[side_of[members] == j]]) for j in range(len(sides))]
        parts = [(j, rows) for j, rows in parts if len(rows)]
        a = np.concatenate([sides[j].weights[rows] for j, rows in parts])
        e = np.concatenate([sides[j].residuals[rows] for j, rows in parts])
        # B_g = I + Z C Z', Z = [R, K R] per side present, C = [[M2, -M1], [-M1, 0]] per side.
        # Rows of one side only touch that side's columns: Z is block diagonal by side.
        z = np.zeros((len(a), sum(2 * r[j] for j, _ in parts)))
        c_blocks, row, col = [], 0, 0
        for j, rows in parts:
            basis = sides[j].basis[rows]
            k = len(rows)
            z[row: row + k, col: col + r[j]] = basis
            z[row: row + k, col + r[j]: col + 2 * r[j]] = basis * sides[j].fit_weights[rows][:, None]
            m1, m2 = blocks[j]
            c_blocks.append(np.block([[m2, -m1], [-m1, np.zeros_like(m1)]]))
            row, col = row + k, col + 2 * r[j]
        c = _block_diag(c_blocks)
        v = _inverse_sqrt_apply(z, c, a)
        variance += float(v @ e) ** 2
        d[g] = float(v @ v)
        offset, col = 0, 0
        for j in range(len(sides)):
            rows = dict(parts).get(j)
            if rows is not None:
                size = len(rows)
                vj = v[offset: offset + size]
                basis = sides[j].basis[rows]
                u[g, col: col + r[j]] = basis.T @ vj
                u[g, col + r[j]: col + 2 * r[j]] = basis.T @ (sides[j].fit_weights[rows] * vj)
                offset += size
            col += 2 * r[j]
    return variance, _degrees_of_freedom(blocks, u, d)


def single_row_variance(sides: tuple[FitRows, ...]) -> tuple[float, float]:
    """``bias_reduced_variance`` when every cluster is one row (HC2 with Bell-McCaffrey degrees of
    freedom), in a few passes over each side's rows: no cluster codes are read or sorted.

    With one row per cluster, B_i = 1 + r_i' M2 r_i - 2 K_i r_i' M1 r_i is a number and
    v_i = a_i B_i^(-1/2) (0 where B_i vanishes). The pieces of the degrees of freedom reduce to
    d_i = v_i^2, f_i = d_i (B_i - 1) and, per side, P = U'U with u_i = v_i [r_i, K_i r_i]: every sum
    is over rows, and P is a (2r x 2r) matrix per side because a row touches its own side only.
    The basis rows are powers (1, u, u^2, ...) of one variable, so each quadratic form r_i' M r_i is a
    polynomial in u_i (evaluated by Horner's rule) and P is read off the moments sum d_i K_i^j u_i^m:
    about fifteen times fewer operations than the matrix products. Rows where both a_i and K_i are
    zero contribute nothing, so ``clusters`` is not read.
    """
    variance = trace = trace_sq = 0.0
    for side in sides:
        r = side.basis.shape[1]
        u = side.basis[:, 1] if r > 1 else np.zeros(len(side.weights))
        k = side.fit_weights
        hankel = np.add.outer(np.arange(r), np.arange(r))
        kernel_moments = _moments(np.stack([k, k * k]), u, 2 * r - 1)
        m1 = np.linalg.inv(kernel_moments[0][hankel])                # G^-1, G = R'KR
        m2 = m1 @ kernel_moments[1][hankel] @ m1                    # G^-1 R'K^2R G^-1
        b = 1.0 + _quadratic_form(m2, u) - 2.0 * k * _quadratic_form(m1, u)
        d = np.where(b > _SINGULAR, side.weights ** 2 / np.maximum(b, _SINGULAR), 0.0)
        # Sums by einsum, not BLAS: a threaded BLAS call on vectors this long can stall for tens of
        # milliseconds when the machine's cores are busy.
        variance += float(np.einsum("i,i->", d, side.residuals ** 2))
        trace += float(np.einsum("i,i->", d, b))          # sum d_i + sum f_i
        moments = _moments(np.stack([d, d * k, d * k * k]), u, 2 * r - 1)
        p_rr, p_rk, p_kk = (moments[j][hankel] for j in range(3))
        wp = np.block([[m2, -m1], [-m1, np.zeros_like(m1)]]) @ np.block([[p_rr, p_rk], [p_rk.T, p_kk]])
        trace_sq += float(np.einsum("i,i->", d, d * (2.0 * b - 1.0)) + np.trace(wp @ wp))   # sum d^2 + 2 sum d f + tr(WPWP)
    return variance, (float(trace ** 2 / trace_sq) if trace_sq > 0 else float("nan"))


def _quadratic_form(m: np.ndarray, u: np.ndarray) -> np.ndarray:
    """r_i' M r_i for r_i = (1, u_i, ..., u_i^(r-1)): the polynomial with coefficients
    c_m = sum_{j+l=m} M_jl, by Horner's rule."""
    r = m.shape[0]
    coef = np.zeros(2 * r - 1)
    for j in range(r):
        coef[j: j + r] += m[j]
    out = np.full(len(u), coef[-1])
    for c in coef[-2::-1]:
        out *= u
        out += c
    return out


def _moments(weights: np.ndarray, u: np.ndarray, count: int) -> np.ndarray:
    """sum_i weights[j, i] u_i^m for m < count: one (rows x j) product per power."""
    out = np.empty((weights.shape[0], count))
    power = np.ones_like(u)
    for m in range(count):
        out[:, m] = np.einsum("ji,i->j", weights, power)
        if m + 1 < count:
            power *= u
    return out


def _degrees_of_freedom(blocks, u: np.ndarray, d: np.ndarray) -> float:
    """Bell-McCaffrey degrees of freedom from the per-cluster pieces d_g = v_g'v_g and u_g."""
    w = _block_diag([np.block([[m2, -m1], [-m1, np.zeros_like(m1)]]) for m1, m2 in blocks])
    # C'C = diag(d) + U W U' (G x G, never formed): traces from G x width products.
    uw = u @ w
    f_diag = np.einsum("ij,ij->i", uw, u)
    p = u.T @ u
    trace = d.sum() + f_diag.sum()
    trace_sq = float(np.sum(d ** 2) + 2.0 * np.sum(d * f_diag) + np.trace(w @ p @ w @ p))
    return float(trace ** 2 / trace_sq) if trace_sq > 0 else float("nan")


def _block_diag(blocks: list[np.ndarray]) -> np.ndarray:
    size = sum(b.shape[0] for b in blocks)
    out = np.zeros((size, size))
    at = 0
    for b in blocks:
        k = b.shape[0]
        out[at: at + k, at: at + k] = b
        at += k
    return out


def _inverse_sqrt_apply(z: np.ndarray, c: np.ndarray, x: np.ndarray) -> np.ndarray:
    """(I + Z C Z')^(-1/2) x for a symmetric C, through the column space of Z."""
    if z.shape[0] <= z.shape[1]:          # small cluster: the dense matrix is smaller
        b = np.eye(z.shape[0]) + z @ c @ z.T
        lam, vec = np.linalg.eigh((b + b.T) / 2)
        scale = np.where(lam > _SINGULAR, 1.0 / np.sqrt(np.maximum(lam, _SINGULAR)), 0.0)
        return vec @ (scale * (vec.T @ x))
    q, t = np.linalg.qr(z)
    s = t @ c @ t.T
    lam, vec = np.linalg.eigh((s + s.T) / 2)
    one_plus = 1.0 + lam
    scale = np.where(one_plus > _SINGULAR, 1.0 / np.sqrt(np.maximum(one_plus, _SINGULAR)), 0.0) - 1.0
    qv = q @ vec
    return x + qv @ (scale * (qv.T @ x))
