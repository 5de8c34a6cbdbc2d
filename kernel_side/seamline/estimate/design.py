"""The public entry point: a cutoff design declared once, fitted and diagnosed many times."""
from __future__ import annotations

from collections import OrderedDict
from dataclasses import replace

import numpy as np
import pandas as pd

from ..core.bandwidth import Selection
from ..core.window_side import WindowTooNarrow
from ..data import DesignData, Prepared, as_frame
from ..streaming import StreamingData
from ..streaming_route import READINGS
from ..errors import CutoffTypeError, InvalidOptionError, shown
from ..options import SIDES, check_option
from ..time_score import TIME_CAUTION, is_time_value
from ..results.fit import Fit
from .bandwidth_choice import bandwidths_for, pilot_rule, warm
from .design_reading import prepared_sides, read_data
from .engine import JumpEngine, check_support
from .multiple_cutoffs import CutoffPlan
from .options import FitSpec, resolve

FEW_OBSERVATIONS = 20   # common practice: flag windows with fewer effective observations per side
WEAK_F = 10.0           # common practice (Staiger & Stock 1997): F < 10 flags a weak first stage
FEW_CLUSTERS = 30       # Cameron & Miller (2015): cluster-robust inference is fragile with few clusters
FEW_DISTINCT = 10       # convention: warn when a side has fewer distinct score values in the window
REFERENCE_LEVEL = 0.95
FIT_CACHE = 512         # fits kept per design (small records)
ENGINE_CACHE = 16       # fitted engines kept per design (they may hold window arrays)
DIAGNOSTIC_CACHE = 64   # diagnostic results kept per design (frozen; each holds a few tables)
INFERENCE_PARTS = 64    # level-free parts of bias-aware and local randomization results (small records)
PLACEBO_DESIGNS = 8     # placebo-cutoff designs kept per design: one ladder (each holds a side's preparation)


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
        raise InvalidOptionError(f"`{argument}` must be a column name or a list of names; got {shown(value)}.") from None
    if not all(isinstance(n, str) for n in names):
        raise InvalidOptionError(f"`{argument}` must be column names (strings); got {shown(value)}.")
    return names


class Design:
    """A regression discontinuity (cutoff) design.

    Parameters
    ----------
    data : pandas.DataFrame (or an Arrow/polars table). Never modified.
    score : name of the running variable.
    cutoff : the threshold; observations with score >= cutoff are "above". Also: the name of a column
        holding each unit's own cutoff (the design is then the pooled design on the normalised score
        ``score - cutoff``, cutoff 0; see ``by_cutoff``), or a list of increasing numbers, cumulative
        cutoffs on one score (pick one with ``at(cutoff)``; ``by_cutoff`` fits them all).
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

    def __init__(self, data, score: str, cutoff, outcome, treated: str = "above", takeup=None,
                 covariates=None, cluster=None, weights=None, score_unit=None, reading: str = "automatic"):
        self.score = score
        self.reading = check_option("reading", reading, READINGS)
        self._frame_loader = None
        self._frame_value = None
        self.outcomes = _as_names(outcome, "outcome")
        if not self.outcomes:
            raise InvalidOptionError("`outcome` must name at least one column; got none. Pass outcome=\"y\".")
        self.treated = check_option("treated", treated, SIDES)
        self.takeup = takeup
        self.covariates = _as_names(covariates, "covariates")
        self.cluster = cluster
        self.weights = weights
        if isinstance(data, DesignData):
            # Already validated (one side of another design, for a placebo cutoff): used as it is.
            cutoff = float(cutoff)
            self._source = self._frame = None
            self._declared = dict(score=score, cutoff=cutoff, outcome=self.outcomes, treated=self.treated,
                                  takeup=takeup, covariates=self.covariates, cluster=cluster, weights=weights)
            self._plan = CutoffPlan("single", (cutoff,), None, score, cutoff, None)
            self.cutoff_layout, self.cutoffs, self.cutoff_column = "single", (cutoff,), None
            self._subsets = {}
            self._data, self.cutoff, self.time_scale = data, cutoff, None
        else:
            read_data(self, data, score, cutoff, takeup, cluster, weights, score_unit)
        self._selections: dict[tuple, Selection] = {}
        self._needed: dict[tuple, float] = {}     # radius each streamed variable set's window must reach
        # Bounded: a slider session makes many specifications, and engines hold window arrays.
        self._fits: Bounded = Bounded(FIT_CACHE)
        self._engines: Bounded = Bounded(ENGINE_CACHE)
        self._diagnostics: Bounded = Bounded(DIAGNOSTIC_CACHE)
        # What bias_aware and local_randomization compute whatever the level (the moments at each
        # searched bandwidth, the balance of nested windows, a window's randomization distribution),
        # so a level change on a board redoes only the level's own arithmetic.
        self._inference: Bounded = Bounded(INFERENCE_PARTS)
        # Placebo-cutoff designs by (side, cutoff, outcome), with their prepared sides
        # (estimate.diagnostics._placebo_design).
        self._placebos: Bounded = Bounded(PLACEBO_DESIGNS)

    @property
    def _frame(self):
        """The declared columns as a pandas frame (on the bounded-memory route, gathered when first asked for)."""
        if self._frame_value is None and self._frame_loader is not None:
            self._frame_value = self._frame_loader()
        return self._frame_value

    @_frame.setter
    def _frame(self, value) -> None:
        self._frame_value = value

    @property
    def streamed(self) -> bool:
        """True when the design's data are read on the bounded-memory route (``reading``)."""
        return isinstance(self._data, StreamingData)

    @property
    def treated_sign(self) -> int:
        return 1 if self.treated == "above" else -1

    @property
    def cutoff_label(self) -> str:
        """The cutoff as a reader writes it: a number, or the date of a date score."""
        return f"{self.cutoff:g}" if self.time_scale is None else self.time_scale.label()

    def __repr__(self) -> str:
        kind = "fuzzy" if self.takeup else "sharp"
        unit = "" if self.time_scale is None else f" (score in {self.time_scale.unit} from the cutoff)"
        where = f"score {self.score!r} cutoff {self.cutoff_label}{unit}" if self.cutoff is not None else \
            f"score {self.score!r} cumulative cutoffs {list(self.cutoffs)}"
        if self.cutoff_layout == "column":
            where += f" (cutoffs {list(self.cutoffs)} from {self.cutoff_column!r})"
        return f"<Design {kind}: {where} treated {self.treated}, outcomes {list(self.outcomes)}>"

    # ---- specification helpers ---------------------------------------------------------------
    def _outcome(self, outcome) -> str:
        if outcome is None:
            return self.outcomes[0]
        allowed = self.outcomes + self.covariates + ((self.takeup,) if self.takeup else ())
        if outcome in allowed:
            return outcome
        raise InvalidOptionError(f"`outcome` must be one of the design's outcomes, covariates or take-up "
                                 f"[{', '.join(shown(a) for a in allowed)}]; got {shown(outcome)}. Declare it in Design(...).")

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

    # ---- the public API ------------------------------------------------------------------------
    def fit(self, outcome=None, *, bandwidth="mse", kernel="triangular", degree=1, bias_degree=None,
            pilot_bandwidth=None, variance="bias-reduced", level=0.95, donut=0.0, derivative=0,
            adjust=False, cluster_variance="bias-reduced") -> Fit:
        """Estimate the jump at the cutoff by local polynomial regression on each side.

        Parameters
        ----------
        outcome : column to analyse (default: the design's first outcome).
        bandwidth : "mse" (MSE-optimal common, Calonico-Cattaneo-Titiunik 2014), "mse-split" (one per
            side), "coverage" (coverage-error rescaling, Calonico-Cattaneo-Farrell 2020), "ik"
            (Imbens-Kalyanaraman 2012), a number, or a pair (below, above) in score units.
        kernel : "triangular", "uniform" or "epanechnikov".
        degree : polynomial degree on each side (0-3); bias_degree : degree of the bias fit (default
            degree + 1); pilot_bandwidth : bandwidth of the bias fit: a number or pair, or a rule for
            its MSE-optimal choice, "nearer-half" (default: curvature from a polynomial on the half of
            each side nearer the cutoff; our convention) or "two-step" (the bias-bandwidth selector of
            Calonico, Cattaneo and Titiunik 2014: curvature from a local fit at its own MSE bandwidth,
            with a regulariser). With ``cluster`` the default is the main bandwidth, b = h, after
            Calonico, Cattaneo and Farrell 2018.
        variance : "bias-reduced" (default: HC2 as the bias-reduced variance with one cluster per observation, with t critical values
            on its Bell-McCaffrey degrees of freedom; Imbens and Kolesar 2016; bandwidths are selected
            with the neighbour variance; HC2 with normal critical values under ``adjust``),
            "neighbors" (3 nearest neighbours), "hc0", "hc1", "hc2" or "hc3"; a design with ``cluster``
            always uses the cluster-robust variance.
        level : confidence level; donut : exclude observations closer than this to the cutoff;
        derivative : 1 estimates the jump in slope (kink designs); adjust : covariate adjustment
            (Calonico-Cattaneo-Farrell-Titiunik 2019).
        cluster_variance : with ``cluster``, "bias-reduced" (default: the CR2 variance with
            Bell-McCaffrey degrees of freedom and t critical values; Bell and McCaffrey 2002, Imbens
            and Kolesar 2016) or "classic" (CR1 with normal critical values). Ignored without clusters.

        Returns
        -------
        Fit
        """
        spec = self._spec(outcome, bandwidth=bandwidth, kernel=kernel, degree=degree,
                          bias_degree=bias_degree, pilot_bandwidth=pilot_bandwidth, variance=variance,
                          level=level, donut=donut, derivative=derivative, adjust=adjust,
                          cluster_variance=cluster_variance)
        # The level changes only how a fit is reported: fit once at a reference level, re-report.
        base = replace(spec, level=REFERENCE_LEVEL)
        fit = self._fits.get(base)
        if fit is None:
            fit = self._fits[base] = self._fit(base)
        return fit if spec.level == REFERENCE_LEVEL else fit.with_level(spec.level)

    def _engine(self, spec: FitSpec) -> tuple[JumpEngine, bool, str, list[str]]:
        """The fitted engine of a specification (cached), whether it is fuzzy, the rule and warnings."""
        while True:
            try:
                return self._engine_once(spec)
            except WindowTooNarrow as need:      # the streamed window must reach further: gather more
                fuzzy = self._is_fuzzy(spec.outcome, spec.donut)
                variables = self._variables(spec, fuzzy)[0]
                self._needed[variables] = max(need.radius, self._needed.get(variables) or 0.0)

    def _engine_once(self, spec: FitSpec) -> tuple[JumpEngine, bool, str, list[str]]:
        fuzzy = self._is_fuzzy(spec.outcome, spec.donut)
        variables, n_main = self._variables(spec, fuzzy)
        prep = prepared_sides(self, spec, variables)
        warm(self, prep, spec)
        h, b, rule, warnings = bandwidths_for(self, spec, prep, fuzzy, n_main)
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

        dofs: dict[tuple[str, bool], float | None] = {}

        def var(lam, robust, name="main"):
            if not clustered and spec.variance == "bias-reduced" and engine.adjustment is None:
                value, dofs[(name, robust)] = engine.single_row_variance(lam, robust)
                return value
            if not clustered:
                return engine.variance(lam, spec.variance, robust=robust)
            value, dofs[(name, robust)] = engine.cluster_variance(lam, robust, spec.cluster_variance)
            return value

        e_y = np.eye(n_main)[0]
        common = dict(level=spec.level, bandwidth=h, pilot_bandwidth=b, bandwidth_rule=rule,
                      n_used=engine.counts(False), n_effective_robust=engine.counts(True),
                      n_total=(prep.below.n, prep.above.n), n_dropped=prep.n_dropped, n_donut=prep.n_donut,
                      kernel=spec.kernel, degree=spec.degree, bias_degree=spec.bias_degree,
                      derivative=spec.derivative, variance=variance_name, n_clusters=prep.n_clusters,
                      donut=spec.donut, treated=self.treated, cutoff=self.cutoff, score=self.score,
                      adjusted=spec.adjust, covariates=variables[n_main:], time_scale=self.time_scale,
                      cluster_variance=spec.cluster_variance if clustered else None,
                      pilot_rule=pilot_rule(self, spec))
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
            fs_se = np.sqrt(var(e_d, False, "first stage"))
            fs_se_r = np.sqrt(var(e_d, True, "first stage"))
            first_f = float((jd / fs_se) ** 2)
            # robust covariance of the two jumps by polarisation (for weak-instrument-robust sets)
            v_y, v_d = var(e_y, True, "reduced form"), fs_se_r ** 2
            reduced = dict(robust_jumps=(float(jy_bc), float(jd_bc)), robust_jump_covariance=(
                float(v_y), float(0.5 * (var(e_y + e_d, True, "sum") - v_y - v_d)), float(v_d)))
            first_stage = Fit(outcome=self.takeup, kind="first stage", estimate=jd, std_error=fs_se,
                              bias_corrected_estimate=jd_bc, robust_std_error=fs_se_r,
                              limits=engine.limits(e_d), warnings=(),
                              dof=(dofs.get(("first stage", False)), dofs.get(("first stage", True))), **common)
            if first_f < WEAK_F:
                warnings.append(f"Weak first stage: F = {first_f:.1f} < {WEAK_F:g} (common practice). The "
                                "ratio estimate and its t-based intervals are unreliable; report the "
                                "first stage and consider weak-identification-robust inference.")
        else:
            reduced = {}
            est, est_bc = engine.jump(e_y), engine.jump(e_y, True)
            se, se_r = np.sqrt(var(e_y, False)), np.sqrt(var(e_y, True))
        warnings += self._window_warnings(prep, engine, spec)
        if self.time_scale is not None:
            warnings.append(TIME_CAUTION)
        return Fit(outcome=spec.outcome, kind="fuzzy" if fuzzy else "sharp", estimate=float(est),
                   std_error=float(se), bias_corrected_estimate=float(est_bc), robust_std_error=float(se_r),
                   limits=engine.limits(e_y), warnings=tuple(warnings), first_stage=first_stage,
                   first_stage_f=first_f, covariate_coefficients=gamma, **reduced,
                   dof=(dofs.get(("main", False)), dofs.get(("main", True))), **common)

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
                   variance="bias-reduced", donut=0.0, derivative=0, adjust=False) -> pd.DataFrame:
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
            h, b, _, _ = bandwidths_for(self, spec, prep, fuzzy, n_main)
            rows.append((rule, h[0], h[1], b[0], b[1]))
        return pd.DataFrame(rows, columns=["rule", "bandwidth_below", "bandwidth_above", "pilot_below",
                                           "pilot_above"])

    # ---- inference beyond the robust interval (seamline.estimate.bias_aware, .local_randomization) --
    def bias_aware(self, outcome=None, *, smoothness=None, bandwidth="optimal", kernel="triangular",
                   degree=1, level=0.95, smoothness_class="taylor"):
        """Bias-aware (fixed-length) confidence interval (Armstrong & Kolesar 2018, 2020).

        Parameters
        ----------
        outcome : column to analyse (default: the design's first outcome).
        smoothness : the bound M on curvature (Taylor class: on each side the first-order expansion at
            the cutoff errs by at most M x^2 / 2), in outcome units per squared score unit. None: the
            rule of thumb (largest |second derivative| of a global quartic fitted on each side). Fuzzy
            designs: one number for both columns or a pair (outcome, take-up).
        bandwidth : "optimal" (minimises the interval's length), a number, or a pair (below, above).
        kernel, degree : of the local polynomial (degree 1-3); level : confidence level.
        smoothness_class : "taylor" (the bound above) or "holder" (|second derivative| <= M on each
            side, a smaller class: shorter intervals, exact worst-case bias by integration).

        Returns
        -------
        BiasAwareInterval
            With ``estimate``, ``std_error``, ``max_bias``, ``critical_value``, ``conf_int`` and a
            ``sensitivity`` table over multiples of the bound. Fuzzy designs invert the bias-aware test
            on outcome - tau0 x take-up (``intervals`` may be unbounded).
        """
        from . import bias_aware
        return bias_aware.bias_aware(self, outcome, smoothness=smoothness, bandwidth=bandwidth,
                                     kernel=kernel, degree=degree, level=level,
                                     smoothness_class=smoothness_class)

    def local_randomization(self, outcome=None, *, window=None, statistic="difference in means",
                            permutations=10_000, seed=None, level=0.95, **options):
        """Local randomization inference (Cattaneo, Frandsen & Titiunik 2015).

        Parameters
        ----------
        outcome : column to analyse (default: the design's first outcome).
        window : a half-width w (the window [cutoff - w, cutoff + w], both ends included), a pair
            (low, high) of scores, or None: the largest window of a nested sequence such that it and
            every smaller window have a minimum covariate balance p-value of at least 0.15.
        statistic : "difference in means", "Kolmogorov-Smirnov" or "rank sum" (two-sided via |.|).
        permutations : Monte Carlo draws when the window has more than 100,000 assignments (fewer are
            enumerated exactly); seed : for the draws (None: one is drawn and recorded).
        level : of the interval that inverts randomization tests under a constant additive effect.
        options : covariates (subset used for balance), candidates (half-widths of the nested
            sequence), balance_threshold (default 0.15).

        Returns
        -------
        LocalRandomization
            With ``window``, ``estimate``, ``p_value``, ``conf_int``, ``n_below``, ``n_above``, the
            ``windows`` table and a ``sensitivity`` table over windows. Every window needs at least
            5 units on each side.
        """
        from . import local_randomization
        return local_randomization.local_randomization(self, outcome, window=window, statistic=statistic,
                                                       permutations=permutations, seed=seed, level=level,
                                                       **options)

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
            return self._with_time_scale(getattr(diagnostics, name)(self, *args, **kwargs))
        found = self._diagnostics.get(key)
        if found is None:
            found = self._diagnostics[key] = self._with_time_scale(getattr(diagnostics, name)(self, *args, **kwargs))
        return found

    def _with_time_scale(self, result):
        """A date score's result carries the TimeScale, so tables and charts built from the result
        alone can speak in dates and durations."""
        if self.time_scale is not None and getattr(result, "time_scale", self.time_scale) is None:
            return replace(result, time_scale=self.time_scale)
        return result

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
        if self.time_scale is None:
            return self._diagnostic("placebo_cutoffs", cutoffs, **fit_options)
        if cutoffs is not None:
            cutoffs = tuple(self._distance(c, "cutoffs") for c in np.atleast_1d(np.asarray(cutoffs, dtype=object)))
        result = self._diagnostic("placebo_cutoffs", cutoffs, **fit_options)
        return replace(result, cutoff_dates=tuple(self.time_scale.label(r["cutoff"]) for r in result.rows))

    def _distance(self, value, argument: str) -> float:
        """A date (or a number already in score units) as the distance from a date score's cutoff."""
        if isinstance(value, str) or is_time_value(value):
            scale = self.time_scale
            try:
                stamp = pd.Timestamp(value)
            except ValueError:
                raise CutoffTypeError(f"`{argument}` must be dates (or distances in {scale.unit}) for the date score "
                                      f"{shown(self.score)}; got {shown(value)}. Write dates as ISO dates, e.g. "
                                      "[\"2024-03-01\"].") from None
            if stamp.tzinfo is None and scale.cutoff.tzinfo is not None:
                stamp = stamp.tz_localize(scale.cutoff.tzinfo)
            try:
                return float((stamp - scale.cutoff).total_seconds() / scale.seconds)
            except TypeError:
                raise CutoffTypeError(f"`{argument}` must match the time zone of score {shown(self.score)}; got "
                                      f"{shown(value)}. Give dates in the score's time zone.") from None
        try:
            return float(value)
        except (TypeError, ValueError):
            raise CutoffTypeError(f"`{argument}` must be dates (or distances in {self.time_scale.unit}) for the "
                                  f"date score {shown(self.score)}; got {shown(value)}. Pass e.g. [\"2024-03-01\"].") from None

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

    # ---- several cutoffs, subgroups, power (seamline.estimate.multiple_cutoffs, subgroups, power) ----
    def at(self, cutoff: float) -> "Design":
        """The single-cutoff design at one of several cutoffs.

        A cutoff column: the units with that cutoff. Cumulative cutoffs: the observations strictly
        between the neighbouring cutoffs. The same declaration (outcomes, take-up, covariates,
        cluster, weights) applies; the result is cached.
        """
        from .multiple_cutoffs import rows_of
        value = float(cutoff) if isinstance(cutoff, (int, float, np.number)) and not isinstance(cutoff, bool) else None
        if self.cutoff_layout == "single" or value not in self.cutoffs:
            raise InvalidOptionError(f"`cutoff` must be one of the design's cutoffs {shown(list(self.cutoffs))}; got "
                                     f"{shown(cutoff)}. Pick one of the listed values.")
        if ("at", value) not in self._subsets:
            self._subsets[("at", value)] = self._subset(rows_of(self, value), value)
        return self._subsets[("at", value)]

    def _frame_with(self, column: str) -> pd.DataFrame:
        """The design's frame with one more of the user's columns (read now from a lazy input)."""
        if column in self._frame.columns or isinstance(self._source, pd.DataFrame):
            return self._frame
        return as_frame(self._source, [*self._frame.columns, column])

    def _subset(self, rows: np.ndarray, cutoff) -> "Design":
        """The same declaration on some of the user's rows (a new frame), with the given cutoff."""
        declared = dict(self._declared, cutoff=cutoff)
        return Design(self._frame[np.asarray(rows, dtype=bool)], **declared)

    def by_cutoff(self, **fit_options):
        """Cutoff-specific effects, one default fit per cutoff, with a test of equal effects.

        For a cutoff column the result also holds the pooled fit on the normalised score
        (``pooled``, equal to ``fit()``) and its decomposition as a weighted average of the
        cutoff-specific effects (``decomposition``). ``fit_options`` are passed to every fit.
        """
        from . import multiple_cutoffs
        return multiple_cutoffs.by_cutoff(self, **fit_options)

    def by_group(self, column: str, **fit_options):
        """Subgroup effects: the default fit on each group's rows and the chi-square test of equal effects."""
        from . import subgroups
        return subgroups.by_group(self, column, **fit_options)

    def power(self, effect, level: float = 0.95, n=None, *, scaling: str = "reselected-bandwidth", **fit_options):
        """Power of the robust test against ``effect``, with this design as pilot data (at total size ``n``)."""
        from . import power
        return power.power(self, effect, level=level, n=n, scaling=scaling, **fit_options)

    def power_curve(self, effects=None, level: float = 0.95, n=None, *, scaling: str = "reselected-bandwidth",
                    **fit_options):
        """Power of the robust test over a grid of effects (default: from 0 to about 99% power)."""
        from . import power
        return power.power_curve(self, effects, level=level, n=n, scaling=scaling, **fit_options)

    def sample_size(self, effect, power: float = 0.8, level: float = 0.95, *,
                    scaling: str = "reselected-bandwidth", **fit_options):
        """Total sample size (and window counts) for the robust test to reach ``power`` against ``effect``."""
        from . import power as power_module
        return power_module.sample_size(self, effect, power=power, level=level, scaling=scaling, **fit_options)
