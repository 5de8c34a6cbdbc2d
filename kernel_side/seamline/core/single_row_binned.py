"""The single-row bias-reduced variance (HC2 with Bell-McCaffrey degrees of freedom) over a wide
window, in work that grows with the number of bins, not of rows.

``cluster_variance.single_row_variance`` needs, per side, sums over the window's rows of
    A^2/B * (y - m)^2,  A^2,  A^4 (2B - 1)/B^2,  A^2/B * F^j u^k,  F u^k,  F^2 u^k
where A (the estimator weight), m (the fitted value), F (the fit's kernel weight), u (its basis
variable) and B = 1 + r'M2 r - 2F r'M1 r are all functions of the row's distance d to the cutoff:
polynomials in d between the kinks of the kernels (at h and b), and 1/B a smooth rational function
(B = 1 minus a leverage of order 1/n). So each sum over a narrow bin of sorted rows is a Taylor
expansion around the bin's centre c, contracted with the bin's moments sum y^j (d - c)^k, which are
computed once per side. Bins that hold a kink, and bins wider than 1/32 of the window, are summed
row by row. With bins of at most 1/32 of the window and terms up to (d - c)^8 the truncation error is
about 1e-12 relative for the variance (its polynomials have degree <= 12 at a bias degree of 2; the
rational part's series converges like the leverage, below 1e-4 at the window sizes this path is used
for) and 1e-10 to 1e-8 for the degrees of freedom (degree 16-20 polynomials), whose effect on the t
quantile at thousands of degrees of freedom is below 1e-12 (checked against the row-by-row
computation in tests/reference/test_single_row_binned.py).

Unweighted sides only: with sampling weights B depends on each row's weight, not on d alone.
"""
from __future__ import annotations

from dataclasses import dataclass
from math import comb, factorial

import numpy as np
from numpy.polynomial import polynomial as P

from .kernels import kernel_poly
from .side import Side

ORDER = 8                 # Taylor terms (d - c)^0 .. (d - c)^ORDER
MIN_ROWS = 30_000         # below this many window rows on a side the row-by-row pass is cheaper
_WIDEST = 1.0 / 32        # a bin wider than this share of the window is summed row by row
_TARGET_BINS = 2048
DEGREE = 20              # highest power of x a summed polynomial may have (16 are used at q = 2)


# Index tables for the moment contractions (see _Sums._moments).
_SHIFT = np.add.outer(np.arange(ORDER + 1), np.arange(ORDER + 1))          # [j, m] -> j + m
_BINOMIAL_N, _BINOMIAL_J = (a.ravel() for a in np.meshgrid(np.arange(DEGREE + 1), np.arange(ORDER + 1), indexing="ij"))
_keep = _BINOMIAL_J <= _BINOMIAL_N
_BINOMIAL_N, _BINOMIAL_J = _BINOMIAL_N[_keep], _BINOMIAL_J[_keep]
_BINOMIAL = np.array([comb(int(n), int(j)) for n, j in zip(_BINOMIAL_N, _BINOMIAL_J)], dtype=float)
del _keep


@dataclass(frozen=True)
class SideBins:
    """Bins of a side's first sorted rows with their moments sum Y (d - c)^k, k <= ORDER. Every bin
    holds ``size`` rows; rows past the last whole bin are summed row by row."""
    starts: np.ndarray     # (G + 1,) first row of each bin, and the end of the last
    low: np.ndarray        # (G,) smallest and largest distance in each bin
    high: np.ndarray
    centre: np.ndarray     # (G,) (low + high) / 2
    moments: np.ndarray    # (Y, G, ORDER + 1): Y = 1, then y_v, then y_v y_w (v <= w)


def side_bins(side: Side, n_vars: int, rows: int) -> SideBins:
    """Bins and moments of ``side``'s first variables, covering at least its first ``rows`` rows
    (cached on the side and extended, by doubling, when a wider window needs more). A side cut from
    another (a donut's tail, a placebo cutoff's side: ``Side.cut_from``) takes the bins of the side it
    is cut from, moved to its own distances and means, so a donut or placebo fit reads no rows for
    them. The bins depend only on the sides, so a sum does not depend on which windows came before."""
    base = side._nn_base
    if base is not None and base[0].values.shape[1] == side.values.shape[1]:
        return _cut_bins(side, n_vars, rows, *base)
    cache = side.__dict__.setdefault("_single_row_bins", {})
    # the bin size follows the whole side's count; the bins stop at the rows held (a side of a
    # streamed window, ``core.window_side``, holds only its nearer rows: a bin past ``rows`` is never
    # summed by moments, so fewer bins there give the same sums)
    size, held_rows = max(64, -(-side.n // _TARGET_BINS)), len(side.distance)
    held = cache.get(n_vars)
    if held is None or (held.starts[-1] < rows and held.starts[-1] + size <= held_rows):
        have = 0 if held is None else int(held.starts[-1])
        want = min(held_rows // size, max(-(-rows // size), 2 * have // size))
        new = _build_bins(side, n_vars, size, want, first=have // size)
        cache[n_vars] = new if held is None else SideBins(
            np.r_[held.starts[:-1], new.starts], np.r_[held.low, new.low], np.r_[held.high, new.high],
            np.r_[held.centre, new.centre], np.concatenate([held.moments, new.moments], axis=1))
    return cache[n_vars]


def _cut_bins(side: Side, n_vars: int, rows: int, base: Side, start: int, reversed_: bool) -> SideBins:
    """The whole bins of ``base`` that lie inside ``side`` (its rows ``start + i``, or reversed
    ``start - 1 - i``), in ``side``'s distances (d' = d - shift, or shift - d) and centred on its means."""
    full = side_bins(base, n_vars, start if reversed_ else start + rows)
    b_starts = full.starts
    if reversed_:
        keep = np.flatnonzero(b_starts[1:] <= start)[::-1]
        shift = side.distance[0] + base.distance[start - 1] if len(keep) else 0.0
        new_starts = start - np.r_[b_starts[keep + 1], b_starts[keep[-1]] if len(keep) else start]
        centre = shift - full.centre[keep]
        moments = full.moments[:, keep, :] * (-1.0) ** np.arange(ORDER + 1)   # (d' - c') = -(d - c)
    else:
        keep = np.flatnonzero(b_starts[:-1] >= start)
        shift = base.distance[start] - side.distance[0] if start < base.n else 0.0
        new_starts = np.r_[b_starts[keep], b_starts[keep[-1] + 1] if len(keep) else start] - start
        centre = full.centre[keep] - shift
        moments = full.moments[:, keep, :].copy()
    if not len(keep):
        new_starts = np.zeros(1, dtype=int)
    # Re-centre the variables: y' = y + delta with delta = base offsets - this side's offsets.
    delta = (base.offsets - side.offsets)[:n_vars]
    pairs = [(v, w) for v in range(n_vars) for w in range(v, n_vars)]
    one, ys = moments[0], moments[1: 1 + n_vars].copy()
    for j, (v, w) in enumerate(pairs):
        moments[1 + n_vars + j] += delta[w] * ys[v] + delta[v] * ys[w] + delta[v] * delta[w] * one
    moments[1: 1 + n_vars] += delta[:, None, None] * one
    low = side.distance[new_starts[:-1]] if len(keep) else np.zeros(0)
    high = side.distance[new_starts[1:] - 1] if len(keep) else np.zeros(0)
    return SideBins(new_starts, low, high, centre, moments)


BUILD_ROWS = 1 << 15      # rows per step of the bin moments: their temporaries (about 13 numbers a row,
# 3.4 MB) stay in cache; at 2^18 rows they did not, and bins of 1000+ rows took 25 ns a row, not 11


def _build_bins(side: Side, n_vars: int, size: int, count: int, first: int = 0) -> SideBins:
    """Bins ``first`` .. ``count`` - 1 of ``size`` rows each (a wider window adds bins to those it
    has: each bin's moments are its own rows', so the result is the same bit for bit)."""
    # a few bins at a time, as many as make BUILD_ROWS rows: at 1e8 rows a bin holds 24 000 rows,
    # and 256 bins at a time made temporaries of 0.6 GB
    chunk = max(1, BUILD_ROWS // size)
    starts = np.arange(first, count + 1) * size
    rows = slice(first * size, count * size)
    count -= first
    d = side.distance[rows].reshape(count, size)
    low, high = d[:, 0], d[:, -1]
    centre = 0.5 * (low + high)
    vals = side.values[rows, :n_vars].reshape(count, size, n_vars)
    pairs = [(v, w) for v in range(n_vars) for w in range(v, n_vars)]
    moments = np.empty((1 + n_vars + len(pairs), count, ORDER + 1))
    # both factors laid out with the bin's rows last (contiguous), so the product is a batch of
    # row-long dot products: 2.2x faster than rows-first, and each bin's product is its own
    vals = vals.transpose(0, 2, 1)                   # (count, n_vars, size) view
    for g0 in range(0, count, chunk):        # (chunk, ORDER + 1, size) temporaries
        g1 = min(count, g0 + chunk)
        t = d[g0:g1] - centre[g0:g1, None]
        powers = np.empty((g1 - g0, ORDER + 1, size))
        powers[:, 0] = 1.0
        for k in range(1, ORDER + 1):
            np.multiply(powers[:, k - 1], t, out=powers[:, k])
        v = vals[g0:g1]
        series = np.concatenate([np.ones((g1 - g0, 1, size)), v] + [v[:, i: i + 1] * v[:, j: j + 1]
                                                                    for i, j in pairs], axis=1)
        moments[:, g0:g1, :] = np.matmul(series, powers.transpose(0, 2, 1)).transpose(1, 0, 2)
    return SideBins(starts, low, high, centre, moments)


def usable(side: Side, window_rows: int) -> bool:
    return side.weights is None and window_rows >= MIN_ROWS


# ---- truncated Taylor series at the bin centres: arrays (G, ORDER + 1) -----------------------
def _series(poly: np.ndarray, x: np.ndarray) -> np.ndarray:
    out = np.empty((len(x), ORDER + 1))
    for k in range(ORDER + 1):
        out[:, k] = P.polyval(x, P.polyder(poly, k)) / factorial(k) if k < len(poly) else 0.0
    return out


def _times(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    out = np.zeros_like(a)
    for k in range(ORDER + 1):
        out[:, k] = np.einsum("ij,ij->i", a[:, : k + 1], b[:, k::-1])
    return out


def _reciprocal(b: np.ndarray) -> np.ndarray:
    out = np.zeros_like(b)
    out[:, 0] = 1.0 / b[:, 0]
    for k in range(1, ORDER + 1):
        out[:, k] = -np.einsum("ij,ij->i", b[:, 1: k + 1], out[:, k - 1::-1]) / b[:, 0]
    return out


@dataclass
class _Zone:
    """The polynomials (in x = d / H) that hold for the rows with distance in (low, high]."""
    low: float
    high: float
    weight: np.ndarray      # A
    fitted: np.ndarray      # m (of the combined variable y . lam)
    fit_weight: np.ndarray  # F
    basis_var: np.ndarray   # u of the fit's basis, as a polynomial in x


def _scaled(coefs: np.ndarray, factor: float) -> np.ndarray:
    """p(factor * x) as a polynomial in x."""
    return np.asarray(coefs, dtype=float) * factor ** np.arange(len(coefs))


def _zones(sf, lam: np.ndarray, robust: bool, big: float) -> list[_Zone]:
    s, kp = float(sf.side.sign), kernel_poly(sf.kernel)
    k_h, k_b = _scaled(kp, big / sf.h), _scaled(kp, big / sf.b)
    a_h = P.polymul(k_h, _scaled(sf.c_h, s * big / sf.h))
    if not robust:
        return [_Zone(-np.inf, sf.h, a_h, _scaled(sf.beta_h @ lam, s * big / sf.h), k_h,
                      np.array([0.0, s * big / sf.h]))]
    a_b = P.polymul(k_b, _scaled(sf.c_b, s * big / sf.b))
    fitted, u_b = _scaled(sf.beta_b @ lam, s * big / sf.b), np.array([0.0, s * big / sf.b])
    near = min(sf.h, sf.b)
    zones = [_Zone(-np.inf, near, P.polysub(a_h, a_b), fitted, k_b, u_b)]
    if sf.h > sf.b:
        zones.append(_Zone(near, sf.h, a_h, fitted, np.zeros(1), u_b))
    elif sf.b > sf.h:
        zones.append(_Zone(near, sf.b, -a_b, fitted, k_b, u_b))
    return zones


class _Sums:
    """Sums over one side's window of poly(x) / B^power * y^j, for polynomials given per zone.

    Each sum is linear in the polynomial's coefficients, so it is the dot product of them with the
    window moments V_n = sum_i x_i^n / B_i^power * y_i^j, n <= DEGREE, computed once per (zone,
    power, j): the narrow bins inside a zone from their Taylor series (x^n / B^power expanded at the
    bin centre, contracted with the bin moments), the other rows one by one.
    """

    def __init__(self, sf, lam: np.ndarray, robust: bool, window_rows: int):
        side = sf.side
        self.big = max(sf.h, sf.b) if robust else sf.h
        self.zones = _zones(sf, lam, robust, self.big)
        bins = side_bins(side, len(lam), window_rows)
        last = min(int(np.searchsorted(bins.starts, window_rows, side="left")), len(bins.centre))
        low, high = bins.low[:last], bins.high[:last]
        narrow = ((high - low) <= _WIDEST * self.big) & (bins.starts[1: last + 1] <= window_rows)
        covered = np.zeros(last, dtype=bool)
        scale = self.big ** -np.arange(ORDER + 1, dtype=float)
        nv = len(lam)
        pairs = [(v, w) for v in range(nv) for w in range(v, nv)]
        self.smooth = []             # per zone: (centres in x, moments of 1, y, y^2 per bin)
        for z in self.zones:
            take = narrow & (low > z.low) & (high <= z.high)
            covered |= take
            m = bins.moments[:, :last][:, take] * scale
            y = np.tensordot(lam, m[1: 1 + nv], axes=1)
            yy = sum((1.0 if v == w else 2.0) * lam[v] * lam[w] * m[1 + nv + j] for j, (v, w) in enumerate(pairs))
            self.smooth.append((bins.centre[:last][take] / self.big, (m[0], y, yy)))
        rows = [np.arange(bins.starts[g], min(bins.starts[g + 1], window_rows)) for g in np.flatnonzero(~covered)]
        rows.append(np.arange(min(bins.starts[0], window_rows)))  # before the first whole bin
        rows.append(np.arange(bins.starts[-1], window_rows))     # past the last whole bin
        rows = np.concatenate(rows) if rows else np.zeros(0, dtype=int)
        d = side.distance[rows]
        self.direct = []             # per zone: (x, y) of the rows summed one by one
        for z in self.zones:
            at = rows[(d > z.low) & (d <= z.high)]
            self.direct.append((side.distance[at] / self.big, side.values[at, :nv] @ lam))
        self.b_polys: list[np.ndarray] | None = None
        self._cache: dict = {}

    def set_b(self, b_polys: list[np.ndarray]) -> None:
        for b, (xc, _), (xd, _) in zip(b_polys, self.smooth, self.direct):
            if min(P.polyval(xc, b).min(initial=1.0), P.polyval(xd, b).min(initial=1.0)) < 0.5:
                raise _Fallback
        self.b_polys = b_polys

    def total(self, polys: list[np.ndarray], power: int = 0, y: int = 0) -> float:
        """sum over the window of poly(x) / B^power * y^j, with poly given per zone."""
        if max(len(poly) for poly in polys) > DEGREE + 1:
            raise _Fallback
        return float(sum(np.dot(poly, self._moments(z, power, y)[: len(poly)]) for z, poly in enumerate(polys)))

    def _moments(self, z: int, power: int, y: int) -> np.ndarray:
        key = (z, power, y)
        if key not in self._cache:
            xc, moments = self.smooth[z]
            s = moments[y]                                       # (G, ORDER + 1): sum y^j (x - xc)^k
            if power:
                c = self._inverse_b(z, power)
                # w_j = sum_{m} c_m s_(j + m): the series of 1/B^power folded into the moments
                padded = np.concatenate([s, np.zeros_like(s)], axis=1)
                w = np.einsum("gm,gjm->gj", c, padded[:, _SHIFT])
            else:
                w = s
            # V_n = sum_bins sum_j C(n, j) xc^(n - j) w_j; einsum rather than a threaded BLAS call
            z_mat = np.einsum("gn,gk->nk", self._vander(z), w)      # (DEGREE + 1, ORDER + 1)
            out = np.bincount(_BINOMIAL_N, weights=_BINOMIAL * z_mat[_BINOMIAL_N - _BINOMIAL_J, _BINOMIAL_J],
                              minlength=DEGREE + 1)
            xd, yd = self.direct[z]
            weight = yd ** y
            if power:
                weight = weight / P.polyval(xd, self.b_polys[z]) ** power
            out += np.einsum("gn,g->n", np.vander(xd, DEGREE + 1, increasing=True), weight)
            self._cache[key] = out
        return self._cache[key]

    def _inverse_b(self, z: int, power: int) -> np.ndarray:
        """Series of 1/B^power at zone z's bin centres (one per zone and power)."""
        key = ("inverse", z, power)
        if key not in self._cache:
            if power == 1:
                self._cache[key] = _reciprocal(_series(self.b_polys[z], self.smooth[z][0]))
            else:
                inv = self._inverse_b(z, 1)
                self._cache[key] = _times(inv, inv)
        return self._cache[key]

    def _vander(self, z: int) -> np.ndarray:
        key = ("vander", z)
        if key not in self._cache:
            self._cache[key] = np.vander(self.smooth[z][0], DEGREE + 1, increasing=True)
        return self._cache[key]


def _quadratic_form(m: np.ndarray, powers: list[np.ndarray]) -> np.ndarray:
    """r' M r as a polynomial in x, for r = (1, u, u^2, ...) with u^k given as ``powers[k]``."""
    out = np.zeros(1)
    for j in range(m.shape[0]):
        for k in range(m.shape[0]):
            out = P.polyadd(out, m[j, k] * powers[j + k])
    return out


class _Fallback(Exception):
    """B is not close to 1 somewhere in the window: the row-by-row pass is used instead."""


def single_row_variance_binned(fits, lam: np.ndarray, robust: bool, window_rows: list[int]):
    """(variance, degrees of freedom) of the two sides' jump, or None where this path does not
    apply (sampling weights, small windows, a leverage not small): the caller then goes row by row."""
    if not all(usable(sf.side, n) for sf, n in zip(fits, window_rows)):
        return None
    try:
        return _binned(fits, lam, robust, window_rows)
    except _Fallback:
        return None


def _binned(fits, lam, robust, window_rows):
    variance = trace = trace_sq = 0.0
    for sf, n_rows in zip(fits, window_rows):
        sums = _Sums(sf, lam, robust, n_rows)
        zones = sums.zones
        r = (sf.q if robust else sf.p) + 1
        powers = [[P.polypow(z.basis_var, k) for k in range(2 * r - 1)] for z in zones]
        hankel = np.add.outer(np.arange(r), np.arange(r))
        g = np.array([sums.total([P.polymul(z.fit_weight, pw[k]) for z, pw in zip(zones, powers)])
                      for k in range(2 * r - 1)])
        g2 = np.array([sums.total([P.polymul(P.polypow(z.fit_weight, 2), pw[k]) for z, pw in zip(zones, powers)])
                       for k in range(2 * r - 1)])
        m1 = np.linalg.inv(g[hankel])
        m2 = m1 @ g2[hankel] @ m1
        b_polys = []
        for z, pw in zip(zones, powers):
            q1 = _quadratic_form(m1, pw)
            q2 = _quadratic_form(m2, pw)
            b_polys.append(P.polysub(P.polyadd([1.0], q2), 2.0 * P.polymul(z.fit_weight, q1)))
        sums.set_b(b_polys)
        a2 = [P.polypow(z.weight, 2) for z in zones]
        variance += (sums.total(a2, 1, 2) - 2.0 * sums.total([P.polymul(a, z.fitted) for a, z in zip(a2, zones)], 1, 1)
                     + sums.total([P.polymul(a, P.polypow(z.fitted, 2)) for a, z in zip(a2, zones)], 1, 0))
        trace += sums.total(a2)
        a4 = [P.polypow(a, 2) for a in a2]
        sq = 2.0 * sums.total(a4, 1) - sums.total(a4, 2)              # sum d^2 + 2 sum d f
        moments = np.array([[sums.total([P.polymul(P.polymul(a, P.polypow(z.fit_weight, j)), pw[k])
                                         for a, z, pw in zip(a2, zones, powers)], 1)
                             for k in range(2 * r - 1)] for j in range(3)])
        p_rr, p_rk, p_kk = (moments[j][hankel] for j in range(3))
        wp = np.block([[m2, -m1], [-m1, np.zeros_like(m1)]]) @ np.block([[p_rr, p_rk], [p_rk.T, p_kk]])
        trace_sq += sq + float(np.trace(wp @ wp))
    return variance, (float(trace ** 2 / trace_sq) if trace_sq > 0 else float("nan"))
