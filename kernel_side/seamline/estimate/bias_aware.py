"""Bias-aware (fixed-length) intervals for sharp and fuzzy cutoff designs (Armstrong & Kolesar 2018, 2020).

The estimator is the engine's conventional local polynomial jump (``JumpEngine`` with the direct
window arrays), i.e. sum_i a_i Y_i with the engine's own smoother weights; its worst-case bias over
the Taylor class and the folded-normal critical value come from ``seamline.core.bias_aware``.

Fuzzy designs invert the bias-aware test of "no jump in outcome - tau0 x take-up": with the same
weights for both columns the adjusted outcome has bias bound (M_outcome + |tau0| M_takeup) times the
bias of the weights at M = 1, and a variance quadratic in tau0.
"""
from __future__ import annotations

from dataclasses import dataclass
from numbers import Real

import numpy as np
import pandas as pd

from ..core.bias_aware import (accepted_set, critical_value, critical_values, half_length, holder_max_bias,
                               minimise_on_log_grid, second_derivative_bound, taylor_max_bias,
                               side_at_bandwidth)
from ..core.kernels import kernel_weights
from ..data import Prepared
from ..errors import InvalidOptionError, InvalidSmoothnessError, shown
from ..options import KERNELS, SMOOTHNESS_CLASSES, check_level, check_option
from ..results.inference import BiasAwareInterval
from .design import Bounded
from .engine import JumpEngine, check_support
from .options import _int_in, _positive_pair

SMOOTHNESS_MULTIPLES = (0.5, 1.0, 1.5, 2.0, 3.0, 4.0)   # sensitivity rows (convention)
T_RANGE = (0.2, 1.5)   # optimal max_bias/se lies near 0.5-0.6; far outside signals a range edge
MOMENTS_KEPT = 1024    # bandwidths whose moments a design keeps per specification (a search uses ~75)


@dataclass
class _Moments:
    """What an interval at one bandwidth needs: jumps, their covariance, the bias at M = 1, counts."""
    jumps: np.ndarray          # (k,) conventional jumps of the main variables
    cov: np.ndarray            # (k, k) covariance of the jumps
    unit_bias: float           # worst-case bias of the weights at smoothness 1
    n_used: tuple[int, int]


class _Problem:
    """One design, outcome and specification; evaluates the interval at any bandwidth."""

    def __init__(self, design, prep: Prepared, n_main: int, kernel: str, degree: int, level: float,
                 smoothness_class: str, cache: dict | None = None):
        self.design, self.prep, self.n_main = design, prep, n_main
        self.kernel, self.degree, self.level = kernel, degree, level
        self.side_bias = taylor_max_bias if smoothness_class == "taylor" else holder_max_bias
        # the moments at a bandwidth do not depend on the level or the bound: bias_aware passes the
        # design's record for this specification, so a level change reuses the searched bandwidths
        self._cache: dict[tuple, _Moments] = {} if cache is None else cache

    def moments(self, h: tuple[float, float], cluster: bool = False) -> _Moments:
        key = (h, cluster)
        found = self._cache.get(key)
        if found is None:
            found = self._cache[key] = (self._direct(h, cluster) if cluster else self._from_moments(h))
        return found

    def _covariance(self, engine: JumpEngine, cluster: bool) -> np.ndarray:
        eye = np.eye(self.n_main)
        var = lambda lam: engine.variance(lam, "neighbors", cluster=cluster)  # noqa: E731
        cov = np.diag([var(e) for e in eye])
        for i in range(self.n_main):          # polarisation: every variance is a quadratic form
            for j in range(i):
                cov[i, j] = cov[j, i] = 0.5 * (var(eye[i] + eye[j]) - cov[i, i] - cov[j, j])
        return cov

    def _from_moments(self, h: tuple[float, float]) -> _Moments:
        """The moments at one bandwidth from the sides' window moment tables
        (``core.bias_aware.side_at_bandwidth``): the fit, the nearest-neighbour variance and (Taylor
        class) the worst-case bias cost O(log n + block) each, so the search's ~75 bandwidths cost
        milliseconds, not a pass over the rows inside each."""
        taylor = self.side_bias is taylor_max_bias
        limits, cov, unit_bias, counts = [], np.zeros((self.n_main, self.n_main)), 0.0, []
        for side, hs in zip((self.prep.below, self.prep.above), h):
            lim, v, bias, c, rows = side_at_bandwidth(side, hs, self.kernel, self.degree, self.n_main, taylor)
            limits.append(lim)
            cov += v
            counts.append(rows)
            if taylor:
                unit_bias += bias
            else:                               # Hölder: the integral needs the weights themselves
                a = _weights(side, hs, self.kernel, self.degree, c)
                unit_bias += self.side_bias(a, side.distance[: len(a)], 1.0)
        jumps = self.design.treated_sign * (limits[1] - limits[0])
        return _Moments(jumps, cov, float(unit_bias), tuple(counts))

    def _direct(self, h: tuple[float, float], cluster: bool) -> _Moments:
        """The moments from the window arrays (the cluster-robust variance needs them)."""
        engine = JumpEngine(self.prep, h=h, b=h, p=self.degree, q=self.degree, nu=0, kernel=self.kernel,
                            treated_sign=self.design.treated_sign, n_main=self.n_main, direct=True)
        jumps = np.array([engine.jump(e) for e in np.eye(self.n_main)])
        unit_bias = sum(self.side_bias(wa.a, side.distance[: wa.rows], 1.0)
                        for side, wa in zip(engine.sides, engine.arrays()))
        return _Moments(jumps, self._covariance(engine, cluster), unit_bias, engine.counts(False))

    # ---- the sharp interval and the fuzzy set at one bandwidth ---------------------------------
    def sharp(self, m: _Moments, smoothness: float):
        est, se = float(m.jumps[0]), float(np.sqrt(m.cov[0, 0]))
        bias = smoothness * m.unit_bias
        half = half_length(bias, se, self.level)
        return est, se, bias, (est - half, est + half)

    def fuzzy_test(self, m: _Moments, smoothness: tuple[float, float]):
        """g(tau0) <= 0 exactly when the bias-aware test of tau0 does not reject."""
        m_y, m_d = smoothness

        def g(tau0: float) -> float:
            lam = np.array([1.0, -tau0])
            se = float(np.sqrt(max(lam @ m.cov @ lam, 0.0)))
            return abs(lam @ m.jumps) - half_length((m_y + abs(tau0) * m_d) * m.unit_bias, se, self.level)
        return g

    def fuzzy(self, m: _Moments, smoothness: tuple[float, float]):
        jy, jd = float(m.jumps[0]), float(m.jumps[1])
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = jy / jd
            lam = np.array([1.0, -ratio])
            se = float(np.sqrt(max(lam @ m.cov @ lam, 0.0)) / abs(jd))   # delta-method se of the ratio
            bias = (smoothness[0] + abs(ratio) * smoothness[1]) * m.unit_bias / abs(jd)
        # the grid is centred on the ratio and scaled by its se; without a first-stage jump any
        # finite centre and scale reach the whole line just as well
        centre = ratio if np.isfinite(ratio) else 0.0
        scale = se if np.isfinite(se) and se > 0 else 1.0
        pieces = accepted_set(self.fuzzy_test(m, smoothness), centre, scale)
        return ratio, se, bias, pieces

    def length(self, h: float, smoothness) -> float:
        """Half-length at a common bandwidth h (fuzzy: of the linearised ratio at its own estimate)."""
        m = self.moments((h, h))
        if self.n_main == 1:
            return half_length(smoothness * m.unit_bias, float(np.sqrt(m.cov[0, 0])), self.level)
        jd = float(m.jumps[1])
        if jd == 0.0:
            return np.inf
        ratio = float(m.jumps[0]) / jd
        lam = np.array([1.0, -ratio])
        se = float(np.sqrt(max(lam @ m.cov @ lam, 0.0)))
        bias = (smoothness[0] + abs(ratio) * smoothness[1]) * m.unit_bias
        return half_length(bias, se, self.level) / abs(jd)

    def bandwidth_range(self) -> tuple[float, float]:
        low = max(s.bandwidth_for_distinct(self.degree + 2, self.kernel) for s in (self.prep.below,
                                                                                   self.prep.above))
        high = max(float(s.distance[-1]) for s in (self.prep.below, self.prep.above))
        return float(low), float(high)

    def optimal_bandwidth(self, smoothness) -> tuple[float, bool]:
        low, high = self.bandwidth_range()
        if not np.isfinite(low):
            from ..errors import TooFewDistinctValuesError
            raise TooFewDistinctValuesError(
                f"`degree` {self.degree} must leave at least {self.degree + 2} distinct score values on each "
                "side of the cutoff; got fewer. Lower the degree.")
        return minimise_on_log_grid(lambda h: self.length(h, smoothness), low, high,
                                    on_grid=(lambda grid: self.sharp_lengths(grid, smoothness))
                                    if self.n_main == 1 else None)

    def sharp_lengths(self, grid: np.ndarray, smoothness: float) -> np.ndarray:
        """``length`` at every bandwidth of ``grid`` (sharp designs), the critical values at once."""
        kept = [self.moments((float(h), float(h))) for h in grid]
        se = np.sqrt(np.array([m.cov[0, 0] for m in kept]))
        bias = smoothness * np.array([m.unit_bias for m in kept])
        with np.errstate(divide="ignore", invalid="ignore"):
            half = critical_values(np.where(se > 0, bias / se, 0.0), self.level) * se
        return np.where(se > 0, half, np.nan)


def _weights(side, h: float, kernel: str, degree: int, c: np.ndarray) -> np.ndarray:
    """The order-p smoother weights w_i K(d_i/h) c' r_p(s d_i/h) of the rows inside the bandwidth."""
    rows = side.count_positive(h, kernel)
    d = side.distance[:rows]
    basis = np.vander(side.sign * d / h, degree + 1, increasing=True)
    return side.w(slice(0, rows)) * kernel_weights(kernel, d / h) * (basis @ c)


def _check_smoothness(value, fuzzy: bool):
    """None, a positive number, or (fuzzy) a pair (outcome, take-up) of positive numbers."""
    def positive(v) -> bool:
        return isinstance(v, Real) and not isinstance(v, bool) and np.isfinite(v) and v > 0
    if value is None:
        return None
    if fuzzy and isinstance(value, (tuple, list)) and len(value) == 2 and all(positive(v) for v in value):
        return float(value[0]), float(value[1])
    if positive(value):
        return (float(value), float(value)) if fuzzy else float(value)
    pair = " or a pair (outcome, take-up)" if fuzzy else ""
    raise InvalidSmoothnessError(
        f"`smoothness` must be a positive number{pair} (a bound on the second derivative, in outcome "
        f"units per squared score unit); got {shown(value)}. Pass a positive bound, or smoothness=None for the "
        "rule of thumb.")


def rule_of_thumb(prep: Prepared, column: int) -> float:
    """Larger over the two sides of max |second derivative| of a global quartic fitted on that side."""
    bounds = []
    for side in (prep.below, prep.above):
        y = side.values[:, column] + side.offsets[column]
        bounds.append(second_derivative_bound(side.sign * side.distance, y))
    bound = np.nanmax(bounds) if np.isfinite(bounds).any() else np.nan
    return float(bound)


def _kept(design, key: tuple, make):
    """The design's level-free record under ``key`` (made on first use)."""
    found = design._inference.get(key)
    if found is None:
        found = design._inference[key] = make()
    return found


def bias_aware(design, outcome=None, *, smoothness=None, bandwidth="optimal", kernel="triangular",
               degree=1, level=0.95, smoothness_class="taylor") -> BiasAwareInterval:
    """Bias-aware interval for ``Design.bias_aware`` (see its docstring)."""
    outcome = design._outcome(outcome)
    if isinstance(smoothness_class, str) and smoothness_class.strip().lower() == "hölder":
        smoothness_class = "holder"
    smoothness_class = check_option("smoothness_class", smoothness_class, SMOOTHNESS_CLASSES)
    kernel = check_option("kernel", kernel, KERNELS)
    degree = _int_in("degree", degree, 1, 3)
    level = check_level(level)
    fuzzy = design._is_fuzzy(outcome, 0.0)
    variables = (outcome, design.takeup) if fuzzy else (outcome,)
    smoothness = _check_smoothness(smoothness, fuzzy)
    prep = design._data.prepare(variables, 0.0)
    problem = _Problem(design, prep, len(variables), kernel, degree, level, smoothness_class,
                       _kept(design, ("bias-aware moments", variables, kernel, degree, smoothness_class),
                             lambda: Bounded(MOMENTS_KEPT)))
    warnings: list[str] = []
    rule = "given"
    if smoothness is None:
        rule = "rule of thumb"
        values = _kept(design, ("bias-aware rule of thumb", variables),
                       lambda: tuple(rule_of_thumb(prep, j) for j in range(len(variables))))
        for name, v in zip(variables, values):
            if not np.isfinite(v) or v <= 0:
                raise InvalidSmoothnessError(
                    f"`smoothness` must be given for {shown(name)}: the rule of thumb found no curvature (got "
                    f"{shown(v)}; too few distinct score values or an exactly linear column). Pass smoothness=M.")
        smoothness = (values[0], values[1]) if fuzzy else values[0]
    if isinstance(bandwidth, str):
        if bandwidth.strip().lower() != "optimal":
            raise InvalidOptionError(f"`bandwidth` must be \"optimal\" or a positive number (or pair below, "
                                     f"above); got {shown(bandwidth)}. Use bandwidth=\"optimal\".")
        common, at_edge = problem.optimal_bandwidth(smoothness)
        h, bandwidth_rule = (common, common), "optimal"
        if at_edge:
            warnings.append("The length-minimising bandwidth lies at an end of the searched range "
                            f"[{problem.bandwidth_range()[0]:.4g}, {problem.bandwidth_range()[1]:.4g}]: the "
                            "bound on curvature is so small (or so large) that the search stopped at the edge.")
    else:
        h, bandwidth_rule = _positive_pair("bandwidth", bandwidth), "manual"
    check_support(prep, h, h, degree, degree, kernel)
    clustered = design.cluster is not None
    m = problem.moments(h, cluster=clustered)
    if fuzzy:
        est, se, bias, pieces = problem.fuzzy(m, smoothness)
    else:
        est, se, bias, ci = problem.sharp(m, smoothness)
        pieces = (ci,)
    t = bias / se if se > 0 else np.nan
    if bandwidth_rule == "optimal" and not fuzzy and not T_RANGE[0] <= t <= T_RANGE[1] and not warnings:
        warnings.append(f"max_bias / std_error = {t:.2f} at the chosen bandwidth, outside the usual "
                        f"{T_RANGE[0]}-{T_RANGE[1]} of a length-minimising choice: check the bandwidth range.")
    if rule == "rule of thumb":
        warnings.append("The smoothness bound comes from a rule of thumb (the largest curvature of a global "
                        "quartic on each side): it can understate curvature close to the cutoff. Defend the "
                        "bound, and read the sensitivity table.")
    if fuzzy and not (len(pieces) == 1 and np.all(np.isfinite(pieces[0]))):
        warnings.append("The bias-aware confidence set is unbounded or not one interval: the first stage is "
                        "too weak to bound the effect at this smoothness.")
    if clustered:
        warnings.append("The standard error is cluster-robust at the chosen bandwidth; the bandwidth search "
                        "used the nearest-neighbour variance.")
    return BiasAwareInterval(
        outcome=outcome, kind="fuzzy" if fuzzy else "sharp", estimate=float(est), std_error=float(se),
        max_bias=float(bias), smoothness=smoothness if not fuzzy else smoothness[0],
        takeup_smoothness=smoothness[1] if fuzzy else None, smoothness_rule=rule,
        smoothness_class="Taylor" if smoothness_class == "taylor" else "Hölder",
        critical_value=critical_value(t, level) if np.isfinite(t) else float("nan"),
        intervals=tuple((float(a), float(b)) for a, b in pieces), level=level, bandwidth=tuple(map(float, h)),
        bandwidth_rule=bandwidth_rule, n_used=m.n_used, kernel=kernel, degree=degree,
        variance="cluster" if clustered else "neighbors", score=design.score, cutoff=design.cutoff,
        treated=design.treated, warnings=tuple(warnings),
        sensitivity_fn=lambda: _sensitivity(problem, smoothness, h, fuzzy, clustered))


def _sensitivity(problem: _Problem, smoothness, h_main: tuple[float, float], fuzzy: bool,
                 clustered: bool = False) -> pd.DataFrame:
    """Intervals at multiples of the bound: bandwidth re-optimised, and fixed at the main choice
    (with the main result's variance, so the row at multiple 1 is the main interval)."""
    rows = []
    fixed = problem.moments(h_main, cluster=clustered)
    for k in SMOOTHNESS_MULTIPLES:
        bound = (smoothness[0] * k, smoothness[1] * k) if fuzzy else smoothness * k
        common, _ = problem.optimal_bandwidth(bound)
        m = problem.moments((common, common), cluster=clustered)
        row = {"multiple": k, "smoothness": bound[0] if fuzzy else bound, "bandwidth": common}
        for label, mm in (("", m), ("_fixed_bandwidth", fixed)):
            if fuzzy:
                est, se, bias, pieces = problem.fuzzy(mm, bound)
                lo, hi = pieces[0][0], pieces[-1][1]
            else:
                est, se, bias, (lo, hi) = problem.sharp(mm, bound)
            row.update({f"estimate{label}": est, f"max_bias{label}": bias, f"std_error{label}": se,
                        f"ci_low{label}": lo, f"ci_high{label}": hi})
        rows.append(row)
    return pd.DataFrame(rows)
