"""A design's bandwidth choice: the variance the selectors use, the MSE selection of a fit's
target (cached on the design), the one-pass moment tables the selectors read, and the rule that
gives a fit its main and pilot (bias) bandwidths.

Functions of a ``Design`` (seamline.estimate.design), which calls them for every fit.
"""
from __future__ import annotations

import numpy as np

from ..core.bandwidth import Selection, coverage_factor, ik_bandwidth, mse_selection
from ..core.kernels import normal_reference_constant
from ..core.locpoly import SideFit, variance_fast, window_arrays
from ..data import Prepared
from .engine import JumpEngine, use_fast_variance
from .options import FitSpec

DEFAULT_PILOT_RULE = "nearer-half"   # pilot (bias) bandwidth rule of unclustered fits without a manual pilot


def selection_variance(variance: str) -> str:
    """The variance the bandwidth selectors use: "bias-reduced" selects with the neighbour variance
    (the bandwidths of the default rule; validate_monte_carlo.py intervals measured it so)."""
    return "neighbors" if variance == "bias-reduced" else variance


def variance_fn(design, spec: FitSpec):
    """Per-side conventional variance for the bandwidth selectors."""
    clustered = design.cluster is not None
    variance = selection_variance(spec.variance)
    if use_fast_variance(variance, spec.bias_degree) and not clustered:
        kind = "neighbors" if variance == "neighbors" else "hc0"
        return lambda sf, lam: variance_fast(sf, lam, kind, False)

    def direct(sf: SideFit, lam: np.ndarray) -> float:
        wa = window_arrays(sf)
        resid = wa.resid_h @ lam
        if clustered:
            _, inv = np.unique(sf.side.clusters[: wa.rows], return_inverse=True)
            return float(np.sum(np.bincount(inv, weights=wa.a * resid) ** 2))
        if variance == "neighbors":
            return float(np.sum(wa.a ** 2 * (sf.side.nn_residuals()[: wa.rows] @ lam) ** 2))
        power = {"hc0": 0, "hc1": 0, "hc2": 1, "hc3": 2}[variance]
        return float(np.sum(wa.a ** 2 * resid ** 2 / (1 - np.minimum(wa.lev_h, 1 - 1e-12)) ** power))
    return direct


def selection(design, spec: FitSpec, prep: Prepared, fuzzy: bool, n_main: int) -> tuple[Selection, np.ndarray]:
    """MSE selection for the spec's target (outcome, fuzzy ratio, or covariate-adjusted outcome)."""
    pilot_rule = spec.pilot_bandwidth if isinstance(spec.pilot_bandwidth, str) else DEFAULT_PILOT_RULE
    key = (prep.variables, spec.donut, spec.kernel, spec.degree, spec.bias_degree, spec.derivative,
           spec.variance, pilot_rule)
    if key in design._selections:
        sel, lam = design._selections[key]
        if sel.split is None and sel._split_value is None:
            # the per-side pair went with a streamed window (estimate.design_reading._window_dropper):
            # the common pair is kept, the split one is selected again on this window if read
            sel.split = lambda: _select(design, spec, prep, fuzzy, n_main, pilot_rule)[0]._pair()
        return sel, lam
    design._selections[key] = _select(design, spec, prep, fuzzy, n_main, pilot_rule)
    return design._selections[key]


def _select(design, spec: FitSpec, prep: Prepared, fuzzy: bool, n_main: int,
            pilot_rule: str) -> tuple[Selection, np.ndarray]:
    n_vars = len(prep.variables)
    lam = np.zeros(n_vars)
    lam[0] = 1.0
    p, q, nu = spec.degree, spec.bias_degree, spec.derivative
    if fuzzy or n_vars > n_main:
        # Pilot fit at the rule-of-thumb bandwidth gives tau (fuzzy) and gamma (covariates).
        c = normal_reference_constant(spec.kernel) * prep.score_scale * prep.n_total ** (-0.2)
        c = max(c, *(s.bandwidth_for_distinct(q + 2, spec.kernel) for s in (prep.below, prep.above)))
        pilot = JumpEngine(prep, h=(c, c), b=(c, c), p=p, q=q, nu=nu, kernel=spec.kernel,
                           treated_sign=design.treated_sign, n_main=n_main,
                           covariate_names=prep.variables[n_main:])
        main = np.zeros(n_main)
        main[0] = 1.0
        if fuzzy:
            d = np.zeros(n_main)
            d[1] = 1.0
            main = main - pilot.jump(main) / pilot.jump(d) * d
        lam = pilot._full(main)
    sel = mse_selection(prep.below, prep.above, p=p, q=q, nu=nu, kernel=spec.kernel, lam=lam,
                        variance_fn=variance_fn(design, spec), score_scale=prep.score_scale,
                        n_total=prep.n_total, pilot_rule=pilot_rule)
    return sel, lam


def warm(design, prep: Prepared, spec: FitSpec) -> None:
    """Build each side's moment tables in one pass, to the degree the selectors and variances use."""
    if design.cluster is not None or spec.adjust:
        return
    kdeg = {"triangular": 1, "uniform": 0, "epanechnikov": 2}[spec.kernel]
    q = spec.bias_degree
    hc = selection_variance(spec.variance) != "neighbors"
    # highest power any step asks for: the curvature pilot (order q+1 with its bias column, uniform
    # kernel), the order-q pilot fits (with kernel), and the variances (squared kernel, and for
    # HC the squared residual polynomial); a later, larger request rebuilds the tables
    degree = max(2 * q + 4, 2 * q + 2 + kdeg, 2 * q + 2 * kdeg + (2 * q if hc else 0))
    if (spec.pilot_bandwidth if isinstance(spec.pilot_bandwidth, str) else DEFAULT_PILOT_RULE) == "two-step":
        r = q + 1  # the two-step pilot's global order-(r+1) fit and local order-r fits
        degree = max(degree, 2 * r + 4, 2 * r + 2 + kdeg, 2 * r + 2 * kdeg + (2 * r if hc else 0))
    for side in (prep.below, prep.above):
        side.warm(selection_variance(spec.variance), degree)


def bandwidths_for(design, spec: FitSpec, prep: Prepared, fuzzy: bool, n_main: int):
    rule = spec.bandwidth
    manual_b = isinstance(spec.pilot_bandwidth, tuple)
    if isinstance(rule, tuple) and (manual_b or design.cluster is not None):
        b = spec.pilot_bandwidth if manual_b else rule  # clustered: b = h below
        return rule, b, "manual", []  # nothing to select
    sel, lam = selection(design, spec, prep, fuzzy, n_main)
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
    if manual_b:
        b = spec.pilot_bandwidth
    elif design.cluster is not None and spec.pilot_bandwidth is None:
        # Clustered samples: the bias fit uses the main bandwidth (b = h). Calonico, Cattaneo and
        # Farrell (2018, JASA, "On the effect of bias estimation on coverage accuracy in
        # nonparametric inference") show that rho = h/b = 1 gives the robust bias-corrected interval
        # good coverage. The MSE pilot, selected from CR0 cluster sums, came out small in our
        # clustered Monte Carlo, so few clusters carried the bias fit and intervals under-covered
        # (tests/benchmarks/validate_clusters.py). A pilot the user gives is kept.
        b = h
    return h, b, ("manual" if isinstance(rule, tuple) else rule), warnings


def pilot_rule(design, spec: FitSpec) -> str:
    """How the fit's pilot (bias) bandwidth is chosen (mirrors ``bandwidths_for``)."""
    if isinstance(spec.pilot_bandwidth, tuple):
        return "manual"
    if design.cluster is not None and (spec.pilot_bandwidth is None or isinstance(spec.bandwidth, tuple)):
        return "main bandwidth"
    return spec.pilot_bandwidth or DEFAULT_PILOT_RULE
