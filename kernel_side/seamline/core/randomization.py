"""Fisher randomization tests under complete randomization within a window, and their inversion.

Inside a window the n units are treated as if n_1 of them had been picked at random to be treated
(complete randomization; Cattaneo, Frandsen & Titiunik 2015). Under the sharp null the outcomes are
fixed, so the null distribution of a statistic comes from recomputing it for every assignment:

- exact, by enumerating all C(n, n_1) assignments when there are at most ``EXACT_LIMIT``:
  p = #{S >= S_obs} / C(n, n_1);
- Monte Carlo otherwise, with R assignments drawn uniformly: p = (1 + #{S_r >= S_obs}) / (R + 1),
  which is never zero and valid (Phipson & Smyth 2010).

Statistics are two-sided through their absolute value: |difference in means|, the
Kolmogorov-Smirnov distance sup |F_1 - F_0|, and |rank sum of the treated - its null mean| (mid-ranks).
Ties are compared with the relative tolerance scipy.stats.permutation_test uses (100 machine epsilons).
Randomness only through an explicit numpy Generator.
"""
from __future__ import annotations

from itertools import combinations
from math import comb
from typing import Callable

import numpy as np
from scipy import stats

EXACT_LIMIT = 100_000
CHUNK = 4096                    # assignments per block when computing statistics (memory bound)
DRAW_CHUNK = 1024               # Monte Carlo draws per block of random keys
TIE_TOLERANCE = 100 * np.finfo(float).eps
STATISTICS = ("difference in means", "Kolmogorov-Smirnov", "rank sum")


def draw_assignments(n: int, n_treated: int, permutations: int,
                     rng: np.random.Generator) -> tuple[np.ndarray, bool]:
    """(m, n) boolean matrix of assignments with ``n_treated`` treated each, and whether it is exact.

    Exact: all C(n, n_treated) subsets (the observed one among them). Monte Carlo: ``permutations``
    uniform draws with replacement from that set.
    """
    total = comb(n, n_treated)
    if total <= EXACT_LIMIT:
        out = np.zeros((total, n), dtype=bool)
        rows = np.repeat(np.arange(total), n_treated)
        cols = np.fromiter((i for c in combinations(range(n), n_treated) for i in c), dtype=np.int64,
                           count=total * n_treated)
        out[rows, cols] = True
        return out, True
    out = np.zeros((permutations, n), dtype=bool)
    for start in range(0, permutations, DRAW_CHUNK):   # random keys in blocks bound the memory
        keys = rng.random((min(DRAW_CHUNK, permutations - start), n))
        picked = np.argpartition(keys, n_treated - 1, axis=1)[:, :n_treated]
        np.put_along_axis(out[start: start + len(keys)], picked, True, axis=1)
    return out, False


def _difference_in_means(assign: np.ndarray, y: np.ndarray) -> np.ndarray:
    n1 = assign.sum(axis=1)
    s1 = assign @ y
    return np.abs(s1 / n1 - (y.sum() - s1) / (len(y) - n1))


def _rank_sum(assign: np.ndarray, y: np.ndarray) -> np.ndarray:
    ranks = stats.rankdata(y)                     # mid-ranks for ties
    n1 = assign.sum(axis=1)
    return np.abs(assign @ ranks - n1 * (len(y) + 1) / 2.0)


def _kolmogorov_smirnov(assign: np.ndarray, y: np.ndarray) -> np.ndarray:
    order = np.argsort(y, kind="stable")
    ys = y[order]
    last_of_tie = np.r_[np.diff(ys) > 0, True]    # compare the two CDFs only after each tie group
    a = assign[:, order]
    n1 = a.sum(axis=1, keepdims=True)
    n0 = len(y) - n1
    # F_1 - F_0 at the k-th smallest value is c/n1 - (k - c)/n0 with c the treated count so far:
    # one cumulative sum per assignment instead of two
    c = np.cumsum(a, axis=1, dtype=np.int32)[:, last_of_tie]
    k = np.flatnonzero(last_of_tie) + 1
    gap = c * (1.0 / n1 + 1.0 / n0) - k / n0
    return np.maximum(gap.max(axis=1), -gap.min(axis=1))


_STATISTIC_FUNCTIONS: dict[str, Callable[[np.ndarray, np.ndarray], np.ndarray]] = {
    "difference in means": _difference_in_means,
    "Kolmogorov-Smirnov": _kolmogorov_smirnov,
    "rank sum": _rank_sum,
}


def statistic_values(statistic: str, assign: np.ndarray, y: np.ndarray) -> np.ndarray:
    """The absolute statistic for each row of ``assign`` (computed in blocks of assignments)."""
    fn = _STATISTIC_FUNCTIONS[statistic]
    y = np.asarray(y, dtype=float)
    return np.concatenate([fn(assign[i: i + CHUNK], y) for i in range(0, len(assign), CHUNK)])


def differences_in_means(assign: np.ndarray, columns: list[np.ndarray]) -> list[np.ndarray]:
    """``statistic_values("difference in means", assign, y)`` for several y on the same units, each
    block of assignments cast to float once for all of them (the same numbers: the same products)."""
    columns = [np.asarray(y, dtype=float) for y in columns]
    blocks: list[list[np.ndarray]] = [[] for _ in columns]
    for i in range(0, len(assign), CHUNK):
        a = assign[i: i + CHUNK].astype(float)
        for out, y in zip(blocks, columns):
            out.append(_difference_in_means(a, y))
    return [np.concatenate(b) for b in blocks]


def p_value(observed: float, null: np.ndarray, exact: bool) -> float:
    """Share of assignments at least as extreme (exact), or (1 + count) / (R + 1) (Monte Carlo)."""
    count = int(np.sum(null >= observed - TIE_TOLERANCE * abs(observed)))
    return count / len(null) if exact else (count + 1) / (len(null) + 1)


class RandomizationTest:
    """The randomization test of one window for one statistic, for any outcome vector.

    ``treated`` is the observed assignment; ``assignments`` the enumerated or drawn ones.
    ``p_value(y)`` tests the sharp null of no effect on y; ``p_value_shifted(tau0)`` tests a constant
    additive effect tau0 (outcomes y - tau0 T under the null), with the same assignments for every
    tau0 so that p(tau0) is a deterministic step function.
    """

    def __init__(self, y: np.ndarray, treated: np.ndarray, statistic: str, assignments: np.ndarray,
                 exact: bool):
        self.y = np.asarray(y, dtype=float)
        self.treated = np.asarray(treated, dtype=bool)
        self.statistic = statistic
        self.assignments = assignments
        self.exact = exact
        self._shifted: ShiftedDifference | None = None

    def shifted(self) -> ShiftedDifference:
        """The difference in means at any tau0 without the assignments (computed on first use, so a
        test used only for p_value, as a balance check is, never pays for it)."""
        if self._shifted is None:
            # S_t(tau0) = |D_t(y) - tau0 D_t(T)|, both differences linear in the outcome: precompute
            t = self.treated.astype(float)
            self._shifted = ShiftedDifference(self._signed(self.y), self._signed(t),
                                              self._signed(self.y, self.treated[None, :])[0],
                                              self._signed(t, self.treated[None, :])[0], self.exact)
        return self._shifted

    def _signed(self, v: np.ndarray, assign: np.ndarray | None = None) -> np.ndarray:
        a = self.assignments if assign is None else assign
        n1 = a.sum(axis=1)
        s1 = np.concatenate([a[i: i + CHUNK] @ v for i in range(0, len(a), CHUNK)])
        return s1 / n1 - (v.sum() - s1) / (len(v) - n1)

    def observed(self, y: np.ndarray) -> float:
        return float(statistic_values(self.statistic, self.treated[None, :], y)[0])

    def p_value(self, y: np.ndarray) -> float:
        return p_value(self.observed(y), statistic_values(self.statistic, self.assignments, y), self.exact)

    def p_value_shifted(self, tau0: float) -> float:
        if self.statistic == "difference in means":
            return self.shifted().p_value_shifted(tau0)
        return self.p_value(self.y - tau0 * self.treated)


class ShiftedDifference:
    """p(tau0) of the difference in means from four precomputed pieces: small enough (two vectors
    of one value per assignment) to keep after the assignments are gone."""

    def __init__(self, d_y: np.ndarray, d_t: np.ndarray, obs_d_y: float, obs_d_t: float, exact: bool):
        self._d_y, self._d_t, self._obs_d_y, self._obs_d_t, self.exact = d_y, d_t, obs_d_y, obs_d_t, exact

    def p_value_shifted(self, tau0: float) -> float:
        obs = abs(self._obs_d_y - tau0 * self._obs_d_t)
        return p_value(obs, np.abs(self._d_y - tau0 * self._d_t), self.exact)


def invert(p_of: Callable[[float], float], centre: float, scale: float, alpha: float,
           points: int = 81, refine: int = 30) -> tuple[tuple[float, float], bool]:
    """{tau0 : p(tau0) > alpha} as an interval (its hull), and whether the accepted grid points were
    contiguous. A grid of ``points`` over centre +- 8 scale (widened while the accepted values reach
    its edge), then ``refine`` bisection steps at each end of the accepted run."""
    for _ in range(8):
        grid = np.linspace(centre - 8 * scale, centre + 8 * scale, points)
        accepted = np.array([p_of(t) > alpha for t in grid])
        if not accepted.any():
            return (float("nan"), float("nan")), True
        if not (accepted[0] or accepted[-1]):
            break
        scale *= 4.0
    else:
        return (-np.inf, np.inf), True
    idx = np.flatnonzero(accepted)
    contiguous = bool(np.all(np.diff(idx) == 1))

    def edge(inside: float, outside: float) -> float:
        for _ in range(refine):
            mid = 0.5 * (inside + outside)
            if p_of(mid) > alpha:
                inside = mid
            else:
                outside = mid
        return inside
    low = edge(grid[idx[0]], grid[idx[0] - 1])
    high = edge(grid[idx[-1]], grid[idx[-1] + 1])
    return (float(low), float(high)), contiguous
