"""The public entry point: a cutoff design declared once, fitted and diagnosed many times."""
from __future__ import annotations

from collections import OrderedDict
from dataclasses import replace
from math import factorial

import numpy as np
import pandas as pd

from ..core.bandwidth import Selection, coverage_factor, ik_bandwidth, mse_selection
from ..core.kernels import normal_reference_constant
from ..core.locpoly import SideFit, variance_fast, window_arrays
from ..data import DesignData, Prepared
from ..errors import InvalidOptionError
from ..options import SIDES, check_option
from ..results.fit import Fit
from .engine import JumpEngine, check_support, use_fast_variance
from .options import FitSpec, resolve

FEW_OBSERVATIONS = 20   # common practice: flag windows with fewer effective observations per side
WEAK_F = 10.0           # common practice (Staiger & Stock 1997): F < 10 flags a weak first stage
FEW_CLUSTERS = 30       # Cameron & Miller (2015): cluster-robust inference is fragile with few clusters
FEW_DISTINCT = 10       # convention: warn when a side has fewer distinct score values in the window
REFERENCE_LEVEL = 0.95
FIT_CACHE = 512         # fits kept per design (small records)
ENGINE_CACHE = 16       # fitted engines kept per design (they may hold window arrays)
DIAGNOSTIC_CACHE = 64   # diagnostic results kept per design (frozen; each holds a few tables)


class Bounded(OrderedDict):
    """A dict that forgets its least recently used entries beyond ``size``."""

    def __init__(self, size: int):
        super().__init__()
        self.size = size

    def get(self, key, default=None):
        if key in self:
            self.move_to_end(key)
            return self[key]
        return default

    def __setitem__(self, key, value):
        super().__setitem__(key, value)
        self.move_to_end(key)
        while len(self) > self.size:
            self.popitem(last=False)  # fits are computed and cached at this level and re-reported at any other


def _as_names(value, argument: str) -> tuple[str, ...]:
    if value is None:
        return ()
    if isinstance(value, str):
        return (value,)
    try:
        names = tuple(value)
    except TypeError:
        raise InvalidOptionError(f"`{argument}` must be a column name or a list of names; got {value!r}.") from None
    if not all(isinstance(n, str) for n in names):
        raise InvalidOptionError(f"`{argument}` must be column names (strings); got {value!r}.")
    return names


class Design:
    """A regression discontinuity (cutoff) design.

    Parameters
    ----------
    data : pandas.DataFrame (or an Arrow/polars table). Never modified.
    score : name of the running variable.
    cutoff : the threshold; observations with score >= cutoff are "above".
    outcome : an outcome column or a list of them (``fit`` uses the first unless told otherwise).
    treated : "above" or "below", the side assigned the treatment.
    takeup : optional column of treatment actually received (0/1 or a probability) -> fuzzy design.
    covariates : optional pre-treatment columns (balance checks, ``adjust=True``).
    cluster : optional cluster identifier column -> cluster-robust variance.
    weights : optional non-negative sampling weights (multiply the kernel weights).

    Examples
    --------
    >>> from seamline.demo_data import sharp_scenario
    >>> s = sharp_scenario(seed=1)
    >>> fit = Design(s.data, **s.design_kwargs()).fit()
    """

    def __init__(self, data, score: str, cutoff: float, outcome, treated: str = "above", takeup=None,
                 covariates=None, cluster=None, weights=None):
        self.score = score
        self.outcomes = _as_names(outcome, "outcome")
        if not self.outcomes:
            raise InvalidOptionError("`outcome` must name at least one column; got none. Pass outcome=\"y\".")
        self.treated = check_option("treated", treated, SIDES)
        self.takeup = takeup
        self.covariates = _as_names(covariates, "covariates")
        self.cluster = cluster
        self.weights = weights
        try:
            cutoff = float(cutoff)
        except (TypeError, ValueError):
            raise InvalidOptionError(f"`cutoff` must be a number; got {cutoff!r}. Pass e.g. cutoff=40.") from None
        self.cutoff = cutoff
        # A DesignData (already validated, e.g. one side of another design for a placebo cutoff) is
        # used as it is; anything else goes through the data adapter.
        self._data = data if isinstance(data, DesignData) else DesignData(
            data, score=score, cutoff=cutoff, outcomes=self.outcomes, takeup=takeup,
            covariates=self.covariates, cluster=cluster, weights=weights)
        self._selections: dict[tuple, Selection] = {}
        # Bounded: a slider session makes many specifications, and engines hold window arrays.
        self._fits: Bounded = Bounded(FIT_CACHE)
        self._engines: Bounded = Bounded(ENGINE_CACHE)
        self._diagnostics: Bounded = Bounded(DIAGNOSTIC_CACHE)

    @property
    def treated_sign(self) -> int:
        return 1 if self.treated == "above" else -1

    def __repr__(self) -> str:
        kind = "fuzzy" if self.takeup else "sharp"
        return (f"<Design {kind}: score {self.score!r} cutoff {self.cutoff:g} treated {self.treated}, "
                f"outcomes {list(self.outcomes)}>")

    # ---- specification helpers ---------------------------------------------------------------
    def _outcome(self, outcome) -> str:
        if outcome is None:
            return self.outcomes[0]
        allowed = self.outcomes + self.covariates + ((self.takeup,) if self.takeup else ())
        if outcome in allowed:
            return outcome
        raise InvalidOptionError(f"`outcome` must be one of the design's outcomes, covariates or take-up "
                                 f"{list(allowed)}; got {outcome!r}. Declare it in Design(...).")

    def _spec(self, outcome=None, **options) -> FitSpec:
        return resolve(self._outcome(outcome), has_covariates=bool(self.covariates), **options)

    def _variables(self, spec: FitSpec, fuzzy: bool) -> tuple[tuple[str, ...], int]:
        main = (spec.outcome, self.takeup) if fuzzy else (spec.outcome,)
        extra = tuple(c for c in self.covariates if c != spec.outcome) if spec.adjust else ()
        return main + extra, len(main)

    def _is_fuzzy(self, outcome: str, donut: float) -> bool:
        """Fuzzy unless take-up equals assignment on every usable row (then the design is sharp)."""
        if not self.takeup or outcome == self.takeup:
            return False
        prep = self._data.prepare((outcome, self.takeup), donut)
        for side in (prep.below, prep.above):
            assigned = 1.0 if side.sign == self.treated_sign else 0.0
            if not np.allclose(side.values[:, 1] + side.offsets[1], assigned, atol=0, rtol=0):
                return True
        return False

    def _variance_fn(self, spec: FitSpec):
        """Per-side conventional variance for the bandwidth selectors."""
        clustered = self.cluster is not None
        if use_fast_variance(spec.variance, spec.bias_degree) and not clustered:
            kind = "neighbors" if spec.variance == "neighbors" else "hc0"
            return lambda sf, lam: variance_fast(sf, lam, kind, False)

        def direct(sf: SideFit, lam: np.ndarray) -> float:
            wa = window_arrays(sf)
            resid = wa.resid_h @ lam
            if clustered:
                _, inv = np.unique(sf.side.clusters[: wa.rows], return_inverse=True)
                return float(np.sum(np.bincount(inv, weights=wa.a * resid) ** 2))
            if spec.variance == "neighbors":
                return float(np.sum(wa.a ** 2 * (sf.side.nn_residuals()[: wa.rows] @ lam) ** 2))
            power = {"hc0": 0, "hc1": 0, "hc2": 1, "hc3": 2}[spec.variance]
            return float(np.sum(wa.a ** 2 * resid ** 2 / (1 - np.minimum(wa.lev_h, 1 - 1e-12)) ** power))
        return direct

    def _selection(self, spec: FitSpec, prep: Prepared, fuzzy: bool, n_main: int) -> tuple[Selection, np.ndarray]:
        """MSE selection for the spec's target (outcome, fuzzy ratio, or covariate-adjusted outcome)."""
        key = (prep.variables, spec.donut, spec.kernel, spec.degree, spec.bias_degree, spec.derivative,
               spec.variance)
        if key in self._selections:
            return self._selections[key]
        n_vars = len(prep.variables)
        lam = np.zeros(n_vars)
        lam[0] = 1.0
        p, q, nu = spec.degree, spec.bias_degree, spec.derivative
        if fuzzy or n_vars > n_main:
            # Pilot fit at the rule-of-thumb bandwidth gives tau (fuzzy) and gamma (covariates).
            c = normal_reference_constant(spec.kernel) * prep.score_scale * prep.n_total ** (-0.2)
            c = max(c, *(s.bandwidth_for_distinct(q + 2, spec.kernel) for s in (prep.below, prep.above)))
            pilot = JumpEngine(prep, h=(c, c), b=(c, c), p=p, q=q, nu=nu, kernel=spec.kernel,
                               treated_sign=self.treated_sign, n_main=n_main,
                               covariate_names=prep.variables[n_main:])
            main = np.zeros(n_main)
            main[0] = 1.0
            if fuzzy:
                d = np.zeros(n_main)
                d[1] = 1.0
                main = main - pilot.jump(main) / pilot.jump(d) * d
            lam = pilot._full(main)
        sel = mse_selection(prep.below, prep.above, p=p, q=q, nu=nu, kernel=spec.kernel, lam=lam,
                            variance_fn=self._variance_fn(spec), score_scale=prep.score_scale,
                            n_total=prep.n_total)
        self._selections[key] = (sel, lam)
        return sel, lam

    def _warm(self, prep: Prepared, spec: FitSpec) -> None:
        """Build each side's moment tables in one pass, to the degree the selectors and variances use."""
        if self.cluster is not None or spec.adjust:
            return
        kdeg = {"triangular": 1, "uniform": 0, "epanechnikov": 2}[spec.kernel]
        q = spec.bias_degree
        hc = spec.variance != "neighbors"
        # highest power any step asks for: the curvature pilot (order q+1 with its bias column, uniform
        # kernel), the order-q pilot fits (with kernel), and the variances (squared kernel, and for
        # HC the squared residual polynomial); a later, larger request rebuilds the tables
        degree = max(2 * q + 4, 2 * q + 2 + kdeg, 2 * q + 2 * kdeg + (2 * q if hc else 0))
        for side in (prep.below, prep.above):
            side.warm(spec.variance, degree)

    def _bandwidths_for(self, spec: FitSpec, prep: Prepared, fuzzy: bool, n_main: int):
        rule = spec.bandwidth
        if isinstance(rule, tuple) and spec.pilot_bandwidth is not None:
            return rule, spec.pilot_bandwidth, "manual", []  # nothing to select
        sel, lam = self._selection(spec, prep, fuzzy, n_main)
        warnings = list(sel.warnings)
        b = (sel.b_common, sel.b_common)
        if rule == "mse":
            h = (sel.h_common, sel.h_common)
        elif rule == "mse-split":
            h, b = sel.h_split, sel.b_split
        elif rule == "coverage":
            f = coverage_factor(prep.n_total, spec.degree)
            h = (sel.h_common * f, sel.h_common * f)
        elif rule == "ik":
            hik, w = ik_bandwidth(prep.below, prep.above, kernel=spec.kernel, lam=lam,
                                  score_sd=prep.score_sd, n_total=prep.n_total)
            warnings += w
            h = (hik, hik)
        else:
            h = rule
        if spec.pilot_bandwidth is not None:
            b = spec.pilot_bandwidth
        return h, b, ("manual" if isinstance(rule, tuple) else rule), warnings

    # ---- the public API ------------------------------------------------------------------------
    def fit(self, outcome=None, *, bandwidth="mse", kernel="triangular", degree=1, bias_degree=None,
            pilot_bandwidth=None, variance="neighbors", level=0.95, donut=0.0, derivative=0,
            adjust=False) -> Fit:
        """Estimate the jump at the cutoff by local polynomial regression on each side.

        Parameters
        ----------
        outcome : column to analyse (default: the design's first outcome).
        bandwidth : "mse" (MSE-optimal common, Calonico-Cattaneo-Titiunik 2014), "mse-split" (one per
            side), "coverage" (coverage-error rescaling, Calonico-Cattaneo-Farrell 2020), "ik"
            (Imbens-Kalyanaraman 2012), a number, or a pair (below, above) in score units.
        kernel : "triangular", "uniform" or "epanechnikov".
        degree : polynomial degree on each side (0-3); bias_degree : degree of the bias fit (default
            degree + 1); pilot_bandwidth : bandwidth of the bias fit (default: its MSE-optimal rule).
        variance : "neighbors" (3 nearest neighbours), "hc0", "hc1", "hc2" or "hc3"; a design with
            ``cluster`` always uses the cluster-robust variance.
        level : confidence level; donut : exclude observations closer than this to the cutoff;
        derivative : 1 estimates the jump in slope (kink designs); adjust : covariate adjustment
            (Calonico-Cattaneo-Farrell-Titiunik 2019).

        Returns
        -------
        Fit
        """
        spec = self._spec(outcome, bandwidth=bandwidth, kernel=kernel, degree=degree,
                          bias_degree=bias_degree, pilot_bandwidth=pilot_bandwidth, variance=variance,
                          level=level, donut=donut, derivative=derivative, adjust=adjust)
        # The level changes only how a fit is reported: fit once at a reference level, re-report.
        base = replace(spec, level=REFERENCE_LEVEL)
        fit = self._fits.get(base)
        if fit is None:
            fit = self._fits[base] = self._fit(base)
        return fit if spec.level == REFERENCE_LEVEL else fit.with_level(spec.level)

    def _engine(self, spec: FitSpec) -> tuple[JumpEngine, bool, str, list[str]]:
        """The fitted engine of a specification (cached), whether it is fuzzy, the rule and warnings."""
        fuzzy = self._is_fuzzy(spec.outcome, spec.donut)
        variables, n_main = self._variables(spec, fuzzy)
        prep = self._data.prepare(variables, spec.donut)
        self._warm(prep, spec)
        h, b, rule, warnings = self._bandwidths_for(spec, prep, fuzzy, n_main)
        engine = self._engines.get(spec)
        if engine is None:
            check_support(prep, h, b, spec.degree, spec.bias_degree, spec.kernel)
            engine = self._engines[spec] = JumpEngine(
                prep, h=h, b=b, p=spec.degree, q=spec.bias_degree, nu=spec.derivative, kernel=spec.kernel,
                treated_sign=self.treated_sign, n_main=n_main, covariate_names=variables[n_main:])
        return engine, fuzzy, rule, warnings

    def _fit(self, spec: FitSpec) -> Fit:
        engine, fuzzy, rule, warnings = self._engine(spec)
        prep = engine.prep
        n_main = engine.n_main
        variables = prep.variables
        h = tuple(f.h for f in engine.fits)
        b = tuple(f.b for f in engine.fits)
        clustered = self.cluster is not None
        variance_name = "cluster" if clustered else spec.variance

        def var(lam, robust):
            return engine.variance(lam, spec.variance, robust=robust, cluster=clustered)

        e_y = np.eye(n_main)[0]
        common = dict(level=spec.level, bandwidth=h, pilot_bandwidth=b, bandwidth_rule=rule,
                      n_used=engine.counts(False), n_effective_robust=engine.counts(True),
                      n_total=(prep.below.n, prep.above.n), n_dropped=prep.n_dropped, n_donut=prep.n_donut,
                      kernel=spec.kernel, degree=spec.degree, bias_degree=spec.bias_degree,
                      derivative=spec.derivative, variance=variance_name, n_clusters=prep.n_clusters,
                      donut=spec.donut, treated=self.treated, cutoff=self.cutoff, score=self.score,
                      adjusted=spec.adjust, covariates=variables[n_main:])
        gamma = () if engine.adjustment is None else tuple(engine.adjustment.gamma[:, 0])
        if self.takeup and not fuzzy and spec.outcome != self.takeup:
            warnings.append(f"Take-up column {self.takeup!r} equals assignment on every row: the design is "
                            "treated as sharp.")
        first_stage = first_f = None
        if fuzzy:
            e_d = np.eye(n_main)[1]
            jy, jd = engine.jump(e_y), engine.jump(e_d)
            jy_bc, jd_bc = engine.jump(e_y, True), engine.jump(e_d, True)
            est, est_bc = jy / jd, jy_bc / jd_bc
            se = np.sqrt(var((e_y - est * e_d) / jd, False))
            se_r = np.sqrt(var((e_y - est_bc * e_d) / jd_bc, True))
            fs_se = np.sqrt(var(e_d, False))
            first_f = float((jd / fs_se) ** 2)
            first_stage = Fit(outcome=self.takeup, kind="first stage", estimate=jd, std_error=fs_se,
                              bias_corrected_estimate=jd_bc, robust_std_error=np.sqrt(var(e_d, True)),
                              limits=engine.limits(e_d), warnings=(), **common)
            if first_f < WEAK_F:
                warnings.append(f"Weak first stage: F = {first_f:.1f} < {WEAK_F:g} (common practice). The "
                                "ratio estimate and its t-based intervals are unreliable; report the "
                                "first stage and consider weak-identification-robust inference.")
        else:
            est, est_bc = engine.jump(e_y), engine.jump(e_y, True)
            se, se_r = np.sqrt(var(e_y, False)), np.sqrt(var(e_y, True))
        warnings += self._window_warnings(prep, engine, spec)
        return Fit(outcome=spec.outcome, kind="fuzzy" if fuzzy else "sharp", estimate=float(est),
                   std_error=float(se), bias_corrected_estimate=float(est_bc), robust_std_error=float(se_r),
                   limits=engine.limits(e_y), warnings=tuple(warnings), first_stage=first_stage,
                   first_stage_f=first_f, covariate_coefficients=gamma, **common)

    def _window_warnings(self, prep: Prepared, engine: JumpEngine, spec: FitSpec) -> list[str]:
        out = []
        for side, name, f in ((prep.below, "below", engine.fits[0]), (prep.above, "above", engine.fits[1])):
            if f.n_h < FEW_OBSERVATIONS:
                out.append(f"Only {f.n_h} observations {name} the cutoff inside the bandwidth: estimates are "
                           "imprecise and the normal approximation may be poor. Consider a larger bandwidth.")
            distinct = side.distinct_within(f.n_h)
            if distinct < FEW_DISTINCT:
                out.append(f"The score takes only {distinct} distinct values {name} the cutoff inside the "
                           "bandwidth (a discrete score): local polynomial extrapolation to the cutoff rests on "
                           "few mass points. Report the score profile, widen the bandwidth if the design allows, "
                           "and prefer bias-aware inference for discrete scores (planned); clustering by score "
                           "value does not fix misspecification (Kolesar & Rothe 2018).")
        if prep.n_clusters is not None and prep.n_clusters < FEW_CLUSTERS:
            out.append(f"Only {prep.n_clusters} clusters: cluster-robust standard errors can be too small with "
                       f"fewer than about {FEW_CLUSTERS} clusters (Cameron & Miller 2015).")
        return out

    def bandwidths(self, outcome=None, *, kernel="triangular", degree=1, bias_degree=None,
                   variance="neighbors", donut=0.0, derivative=0, adjust=False) -> pd.DataFrame:
        """Every bandwidth rule side by side (rows: rule; columns: bandwidth and pilot, per side)."""
        rows = []
        for rule in ("mse", "mse-split", "coverage", "ik"):
            if rule == "ik" and (degree != 1 or derivative != 0):
                continue
            spec = self._spec(outcome, bandwidth=rule, kernel=kernel, degree=degree, bias_degree=bias_degree,
                              pilot_bandwidth=None, variance=variance, level=0.95, donut=donut,
                              derivative=derivative, adjust=adjust)
            fuzzy = self._is_fuzzy(spec.outcome, spec.donut)
            variables, n_main = self._variables(spec, fuzzy)
            prep = self._data.prepare(variables, spec.donut)
            h, b, _, _ = self._bandwidths_for(spec, prep, fuzzy, n_main)
            rows.append((rule, h[0], h[1], b[0], b[1]))
        return pd.DataFrame(rows, columns=["rule", "bandwidth_below", "bandwidth_above", "pilot_below",
                                           "pilot_above"])

    # ---- diagnostics (implemented in seamline.estimate.diagnostics) ------------------------------
    # Every diagnostic result is cached on the design (least recently used, DIAGNOSTIC_CACHE entries)
    # under its name and its resolved arguments (defaults filled in, fit options equal to the fit's
    # defaults left out), so ``density_test()`` followed by ``checks()`` runs the density test once,
    # and a board asking again for an unchanged panel gets the same object back. Results are frozen;
    # a call that raises is not cached.
    def _diagnostic(self, name: str, *args, **kwargs):
        from . import diagnostics
        key = diagnostics.cache_key(name, args, kwargs)
        if key is None:  # an argument that cannot be a key (e.g. an unhashable object): no caching
            return getattr(diagnostics, name)(self, *args, **kwargs)
        found = self._diagnostics.get(key)
        if found is None:
            found = self._diagnostics[key] = getattr(diagnostics, name)(self, *args, **kwargs)
        return found

    def density_test(self, method: str = "local-cdf", **options):
        """Manipulation test of the score's density at the cutoff.

        method "local-cdf": local polynomial density estimator on the empirical CDF with robust
        bias-corrected inference (Cattaneo, Jansson & Ma 2020); "binned": McCrary (2008).
        Options: level, and for "local-cdf" degree, kernel, bandwidth; for "binned" bin_width, bandwidth.
        The result is cached on the design (see the note above the diagnostics).
        """
        return self._diagnostic("density_test", method, **options)

    def balance(self, covariates=None, *, bandwidth="own", **fit_options):
        """Covariates as placebo outcomes: robust CIs, Holm-adjusted p-values and a joint Wald test (cached)."""
        return self._diagnostic("balance", covariates, bandwidth=bandwidth, **fit_options)

    def sensitivity(self, bandwidths=None, kernels=None, degrees=None, **fit_options):
        """A grid of fits: the selected bandwidth x 0.5 ... x 2 and each selector (default; cached)."""
        return self._diagnostic("sensitivity", bandwidths, kernels, degrees, **fit_options)

    def placebo_cutoffs(self, cutoffs=None, **fit_options):
        """Estimates at fake cutoffs, each using only one side's observations (cached)."""
        return self._diagnostic("placebo_cutoffs", cutoffs, **fit_options)

    def donut(self, radii=None, **fit_options):
        """Estimates excluding observations within each radius of the cutoff (cached)."""
        return self._diagnostic("donut", radii, **fit_options)

    def bins(self, outcome=None, method: str = "equal-width", number=None, **options):
        """Binned means (data-driven number of bins per side, Calonico-Cattaneo-Titiunik 2015) and the
        fitted local polynomial curves with CI bands, for an RD plot (cached)."""
        return self._diagnostic("bins", outcome, method, number, **options)

    def score_profile(self, **fit_options):
        """Distinct values and mass points of the score per side, overall and inside the bandwidth (cached)."""
        return self._diagnostic("score_profile", **fit_options)

    def checks(self, **fit_options):
        """Design-level summary of flags: manipulation, balance, weak first stage, few observations,
        discrete score, heaping. Reuses the cached density test, balance and score profile."""
        return self._diagnostic("checks", **fit_options)
