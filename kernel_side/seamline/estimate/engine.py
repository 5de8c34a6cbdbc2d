"""Two-sided jump estimation on prepared Sides: estimates, variances, covariate adjustment, clusters.

The jump of a variable combination ``lam`` (outcome, or outcome - tau * take-up for fuzzy designs) is
tau(lam) = sign * (mu_above(lam) - mu_below(lam)), where sign = +1 when the treated side is above.
Variances come from the moment engine when possible (NN, HC0, HC1 without clusters or covariates)
and from a direct pass over the window otherwise; both give the same numbers (tests check it).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..core.cluster_variance import FitRows, bias_reduced_variance, single_row_variance
from ..core.single_row_binned import single_row_variance_binned
from ..core.kernels import kernel_poly
from ..core.locpoly import SideFit, WindowArrays, _omega_terms, fit_side, hc_meat, variance_fast, window_arrays
from ..core.moments import window_gram
from ..data import Prepared
from ..errors import CollinearCovariatesError, TooFewClustersError, TooFewDistinctValuesError, shown

FAST_VARIANCES = ("neighbors", "hc0", "hc1")
# Residual-based (HC) variances expand squared residuals into moments of degree up to 4q + 2k; at a
# bias degree of 3 the cancellation already reaches 1e-9 relative (the degree-2 slope case of
# tests/reference/test_robust_first_principles.py: 1.1e-9 for HC0/HC1, 2e-12 direct), so from 3 on
# they go direct; the default (q = 2) keeps the moment route.
FAST_HC_MAX_BIAS_DEGREE = 2


def use_fast_variance(variance: str, bias_degree: int) -> bool:
    return variance == "neighbors" or (variance in FAST_VARIANCES and bias_degree <= FAST_HC_MAX_BIAS_DEGREE)


def check_support(prep: Prepared, h: tuple[float, float], b: tuple[float, float], p: int, q: int,
                  kernel: str) -> None:
    """Each side needs p+1 (q+1) distinct score values with positive weight at h (b)."""
    for side, name, hs, bs in ((prep.below, "below", h[0], b[0]), (prep.above, "above", h[1], b[1])):
        for bw, order, what in ((hs, p, "bandwidth"), (bs, q, "pilot (bias) bandwidth")):
            have = side.distinct_within(side.count_positive(bw, kernel))
            if have < order + 1:
                need = side.bandwidth_for_distinct(order + 1, kernel)
                fix = (f"Use a {what} of at least {need:.6g} on that side" if np.isfinite(need)
                       else "The side has too few distinct values for this degree: lower the degree")
                raise TooFewDistinctValuesError(
                    f"`{what}` {bw:.6g} must give at least {order + 1} distinct score values with positive "
                    f"weight {name} the cutoff for a degree-{order} fit; got {have}. {fix}.")


@dataclass
class Adjustment:
    """Covariate adjustment (additive covariates, Calonico-Cattaneo-Farrell-Titiunik 2019)."""
    gamma: np.ndarray          # (m, n_main) coefficients of the covariates for each main variable
    q_inv: np.ndarray          # inverse of the covariates' residual cross-product matrix
    delta: np.ndarray          # (m,) conventional covariate jumps
    delta_bc: np.ndarray       # (m,) bias-corrected covariate jumps


class JumpEngine:
    """Both sides fitted for one specification; answers estimates and variances for any lam."""

    def __init__(self, prep: Prepared, *, h: tuple[float, float], b: tuple[float, float], p: int,
                 q: int, nu: int, kernel: str, treated_sign: int, n_main: int,
                 covariate_names: tuple[str, ...] = (), direct: bool = False):
        self.prep = prep
        self.sides = (prep.below, prep.above)
        self.p, self.q, self.nu, self.kernel = p, q, nu, kernel
        self.sign = treated_sign
        self.n_main = n_main
        self.m = len(covariate_names)
        self.covariate_names = covariate_names
        self.direct = direct or self.m > 0
        self.fits: tuple[SideFit, SideFit] = tuple(
            fit_side(s, hs, bs, p, q, nu, kernel, direct=self.direct)
            for s, hs, bs in zip(self.sides, h, b))
        self._arrays: list[WindowArrays] | None = None
        self.adjustment = self._adjust() if self.m else None

    # ---- estimates ---------------------------------------------------------------------------
    def _full(self, lam: np.ndarray) -> np.ndarray:
        """Extend lam over the main variables to all variables (covariates get -gamma lam)."""
        if self.adjustment is None:
            return lam
        return np.concatenate([lam, -self.adjustment.gamma @ lam])

    def limits(self, lam: np.ndarray, robust: bool = False) -> tuple[float, float]:
        lam = self._full(lam)
        return tuple(float((f.estimate_bc if robust else f.estimate) @ lam) for f in self.fits)

    def jump(self, lam: np.ndarray, robust: bool = False) -> float:
        below, above = self.limits(lam, robust)
        return self.sign * (above - below)

    # ---- variances ---------------------------------------------------------------------------
    def arrays(self) -> list[WindowArrays]:
        if self._arrays is None:
            self._arrays = [window_arrays(f) for f in self.fits]
        return self._arrays

    def counts(self, robust: bool) -> tuple[int, int]:
        return tuple(max(f.n_h, f.n_b) if robust else f.n_h for f in self.fits)

    def dof(self, robust: bool) -> tuple[int, int]:
        """(N, k) of the single interacted regression, for HC1 and cluster small-sample factors."""
        n = sum(self.counts(robust))
        k = 2 * ((self.q if robust else self.p) + 1) + self.m
        return n, k

    def variance(self, lam: np.ndarray, variance: str, robust: bool = False,
                 cluster: bool = False) -> float:
        """Variance of jump(lam) (conventional, or of the bias-corrected estimate when robust)."""
        if variance == "bias-reduced":
            if self.adjustment is None and not cluster:
                return self.single_row_variance(lam, robust)[0]
            variance = "hc2"   # covariate adjustment pools across sides: HC2 (see single_row_variance)
        if not self.direct and not cluster and use_fast_variance(variance, self.q):
            kind = "neighbors" if variance == "neighbors" else "hc0"
            total = sum(variance_fast(f, lam, kind, robust) for f in self.fits)
            if variance == "hc1":
                n, k = self.dof(robust)
                total *= n / (n - k)
            return float(total)
        return self._variance_direct(lam, variance, robust, cluster)

    def cluster_variance(self, lam: np.ndarray, robust: bool, correction: str) -> tuple[float, float | None]:
        """Cluster-robust variance of jump(lam) and the degrees of freedom of its t critical value.

        "bias-reduced": CR2 with Bell-McCaffrey degrees of freedom (Bell and McCaffrey 2002; Imbens
        and Kolesar 2016), computed on each side's own weighted fit. With covariate adjustment the
        fit pools the covariate coefficients across sides, which this computation does not cover:
        the classic sum is used there, with G - 1 degrees of freedom (Bester, Conley and Hansen
        2011, J. Econometrics 165(2): 137-151). "classic": the CR1 sum with normal critical values.
        """
        if correction == "classic":
            return self._variance_direct(lam, "hc0", robust, True), None
        if self.adjustment is not None:
            value = self._variance_direct(lam, "hc0", robust, True)
            return value, float(self._clusters_in_window(robust) - 1)
        self._variance_direct(lam, "hc0", robust, True)   # the same checks (two clusters per side)
        return bias_reduced_variance(self._fit_rows(lam, robust, [s.clusters for s in self.sides]))

    def single_row_variance(self, lam: np.ndarray, robust: bool) -> tuple[float, float]:
        """HC2 analogue of the bias-reduced variance and its Bell-McCaffrey degrees of freedom.

        The CR2 variance with one cluster per observation (Bell and McCaffrey 2002), which Imbens and
        Kolesar (2016, Review of Economics and Statistics 98(4)) recommend without clusters too, with
        t critical values on those degrees of freedom. Not defined here with covariate adjustment
        (the fit pools the covariate coefficients across sides): ``variance`` then uses HC2 with
        normal critical values.
        """
        if not self.direct:
            # Wide unweighted windows: sums from binned moments, with no pass over the rows.
            windows = [f.side.count_positive(max(f.h, f.b) if robust else f.h, self.kernel) for f in self.fits]
            binned = single_row_variance_binned(self.fits, lam, robust, windows)
            if binned is not None:
                return binned
        sides = []
        for side, wa in zip(self.sides, self.arrays()):
            # Every row of the window: rows that neither weight nor fit contribute zero terms.
            sides.append(FitRows(weights=self.sign * side.sign * (wa.abc if robust else wa.a),
                                 residuals=(wa.resid_b if robust else wa.resid_h) @ lam,
                                 basis=wa.rq if robust else wa.rp,
                                 fit_weights=wa.kw_b if robust else wa.kw_h))
        return single_row_variance(tuple(sides))

    def _fit_rows(self, lam: np.ndarray, robust: bool, codes: list[np.ndarray]) -> tuple[FitRows, ...]:
        rows = []
        for side, wa, side_codes in zip(self.sides, self.arrays(), codes):
            weights = self.sign * side.sign * (wa.abc if robust else wa.a)
            fit_weights = wa.kw_b if robust else wa.kw_h
            # The rows of this estimator: those it weights and those of the fit behind its residuals.
            used = (weights != 0) | (fit_weights > 0)
            rows.append(FitRows(weights=weights[used],
                                residuals=((wa.resid_b if robust else wa.resid_h) @ lam)[used],
                                basis=(wa.rq if robust else wa.rp)[used],
                                fit_weights=fit_weights[used],
                                clusters=side_codes[: wa.rows][used]))
        return tuple(rows)

    def _clusters_in_window(self, robust: bool) -> int:
        codes = []
        for side, wa in zip(self.sides, self.arrays()):
            weight = wa.abc if robust else wa.a
            codes.append(side.clusters[: wa.rows][weight != 0])
        return int(len(np.unique(np.concatenate(codes))))

    def _variance_direct(self, lam: np.ndarray, variance: str, robust: bool, cluster: bool) -> float:
        full = self._full(lam)
        adj = self.adjustment
        contributions, codes = [], []
        n_used, k = self.dof(robust)
        for side, f, wa in zip(self.sides, self.fits, self.arrays()):
            side_sign = self.sign * side.sign  # +sign above, -sign below
            weight = side_sign * (wa.abc if robust else wa.a)
            resid = (wa.resid_b if robust else wa.resid_h) @ full
            lev = wa.lev_b if robust else wa.lev_h
            if adj is not None:
                zt = wa.resid_h[:, self.n_main:]
                zt = np.where((wa.kw_h > 0)[:, None], zt, 0.0)
                weight = weight - wa.kw_h * (zt @ (adj.q_inv @ (adj.delta_bc if robust else adj.delta)))
                if not robust:
                    lev = lev + wa.kw_h * np.einsum("ij,jk,ik->i", zt, adj.q_inv, zt)
            if variance == "neighbors" and not cluster:
                omega = (side.nn_residuals()[: wa.rows] @ full) ** 2
            elif variance in ("hc2", "hc3") and not cluster:
                power = 1 if variance == "hc2" else 2
                omega = resid ** 2 / (1.0 - np.minimum(lev, 1 - 1e-12)) ** power
            else:
                omega = resid ** 2
            if cluster:
                contributions.append(weight * resid)
                codes.append(np.where(weight != 0, side.clusters[: wa.rows], -1))
            else:
                contributions.append(weight ** 2 * omega)
        if cluster:
            nonzero = [c >= 0 for c in codes]  # observations with weight in the window
            for cl, nz, name in zip(codes, nonzero, ("below", "above")):
                if len(np.unique(cl[nz])) < 2:
                    raise TooFewClustersError(
                        f"`cluster` must have at least two clusters with observations inside the window "
                        f"{name} the cutoff; got {len(np.unique(cl[nz]))}. Use a larger bandwidth or a finer "
                        "cluster variable.")
            all_codes = np.concatenate([c[nz] for c, nz in zip(codes, nonzero)])
            all_u = np.concatenate([u[nz] for u, nz in zip(contributions, nonzero)])
            uniq, inv = np.unique(all_codes, return_inverse=True)
            sums = np.bincount(inv, weights=all_u)
            g = len(uniq)
            factor = g / (g - 1) * (n_used - 1) / (n_used - k)
            return float(factor * np.sum(sums ** 2))
        total = float(sum(np.sum(c) for c in contributions))
        if variance == "hc1":
            total *= n_used / (n_used - k)
        return total

    # ---- fitted curves -------------------------------------------------------------------------
    def coefficient_covariance(self, index: int, lam: np.ndarray, variance: str, cluster: bool) -> np.ndarray:
        """Sandwich covariance of the order-p coefficients (u = x/h units) on side ``index``."""
        sf, side = self.fits[index], self.sides[index]
        p = self.p
        variance = "hc2" if variance == "bias-reduced" else variance   # pointwise bands: its HC2 part
        if not self.direct and not cluster and use_fast_variance(variance, self.q):
            kind = "neighbors" if variance == "neighbors" else "hc0"
            kp = kernel_poly(self.kernel)
            terms = _omega_terms(side, lam, kind, sf.beta_h, sf.h, sf.h)
            meat = window_gram(side.moments, sf.h, terms, p + 1, p + 1, kp, kp, 1.0, 1.0, float(side.sign))
        elif not cluster and variance != "neighbors":
            # HC: block by block over the rows inside h, not the fit's per-row arrays over max(h, b)
            # (the default variance's pointwise bands read this; on a wide window those arrays were
            # the largest allocation of a streamed design's bins)
            meat = hc_meat(sf, lam, {"hc2": 1, "hc3": 2}.get(variance, 0))
        else:
            wa = self.arrays()[index]
            kw, r = wa.kw_h, wa.rp
            resid = wa.resid_h[:, : len(lam)] @ lam
            if cluster:
                _, inv = np.unique(side.clusters[: wa.rows], return_inverse=True)
                scores = np.zeros((inv.max() + 1, p + 1))
                np.add.at(scores, inv, (kw * resid)[:, None] * r)
                meat = scores.T @ scores
            else:
                omega = (side.nn_residuals()[: wa.rows, : len(lam)] @ lam) ** 2
                meat = (r * (kw ** 2 * omega)[:, None]).T @ r
        bread = np.linalg.inv(sf.gamma_p)
        return bread @ meat @ bread

    def curve(self, lam: np.ndarray, variance: str, cluster: bool, points: int = 40):
        """Fitted order-p polynomial on each side inside the bandwidth, with pointwise standard errors.

        Yields (side sign, x relative to the cutoff, fitted value, standard error) per side.
        """
        for index, (side, sf) in enumerate(zip(self.sides, self.fits)):
            d = np.linspace(0.0, min(sf.h, float(side.far)), points)
            u = side.sign * d / sf.h
            r = np.vander(u, self.p + 1, increasing=True)
            coef = sf.beta_h[:, : len(lam)] @ lam
            fitted = r @ coef + side.offsets[: len(lam)] @ lam
            cov = self.coefficient_covariance(index, lam, variance, cluster)
            se = np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", r, cov, r), 0.0))
            yield side.sign, side.sign * d, fitted, se

    # ---- covariate adjustment ----------------------------------------------------------------
    def _adjust(self) -> Adjustment:
        nm = self.n_main
        q_mat = np.zeros((self.m, self.m))
        xy = np.zeros((self.m, nm))
        for wa in self.arrays():
            zt = wa.resid_h[:, nm:] * wa.kw_h[:, None]
            q_mat += zt.T @ wa.resid_h[:, nm:]
            xy += zt.T @ wa.resid_h[:, :nm]
        self._check_collinear(q_mat)
        q_inv = np.linalg.inv(q_mat)
        gamma = q_inv @ xy
        lim = [f.estimate[nm:] for f in self.fits]
        lim_bc = [f.estimate_bc[nm:] for f in self.fits]
        delta = self.sign * (lim[1] - lim[0])
        delta_bc = self.sign * (lim_bc[1] - lim_bc[0])
        return Adjustment(gamma, q_inv, delta, delta_bc)

    def _check_collinear(self, q_mat: np.ndarray) -> None:
        """Name the covariates that are collinear (with each other or the local polynomial)."""
        scale = np.sqrt(np.clip(np.diag(q_mat), 0, None))
        tol = 1e-10
        kept: list[int] = []
        for j in range(self.m):
            if scale[j] <= tol * max(1.0, scale.max()):
                raise CollinearCovariatesError(
                    f"`covariates` must vary within the window after removing the local polynomial; got "
                    f"{shown(self.covariate_names[j])} constant (or a polynomial in the score) there. Drop it.")
            trial = kept + [j]
            sub = q_mat[np.ix_(trial, trial)] / np.outer(scale[trial], scale[trial])
            if np.linalg.eigvalsh(sub)[0] <= tol:
                names = [self.covariate_names[i] for i in trial]
                raise CollinearCovariatesError(
                    f"`covariates` must not be collinear inside the window; got {shown(names)} linearly dependent "
                    f"({shown(self.covariate_names[j])} is a combination of the others). Drop one of them.")
            kept.append(j)
