"""Multiple cutoffs (a cutoff column) and cumulative cutoffs on one score.

References: each cutoff-specific row is checked against a direct single-cutoff fit of the same rows
computed in the test; the pooled estimate against a direct fit on the normalised score built in the
test; the test of equal effects against scipy.stats.chi2 and statsmodels WLS; the pooled weights
against a first-principles kernel-weight count and the mixture formula of Cattaneo, Keele, Titiunik &
Vazquez-Bare (2016) (from memory).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

import seamline
from seamline.errors import (ColumnNotFoundError, CutoffChoiceError, CutoffOrderError, InvalidOptionError,
                             SingleCutoffError, TooFewUnitsError)

TOL = 1e-9          # rows against their own single-design fits (the same computation, so exact up to rounding)
CUTOFFS = np.array([30.0, 50.0, 70.0])
SHARES = np.array([0.5, 0.3, 0.2])              # P(C = c_k)
DENSITY_AT_CUTOFF = np.array([0.02, 0.05, 0.03])  # f_{X | C = c_k}(c_k): uniform scores of width 1 / f
EFFECTS = np.array([1.0, 2.0, 0.5])


def several_cutoffs(n: int, rng: np.random.Generator) -> pd.DataFrame:
    """Units with cutoff c_k have scores uniform on c_k +- 1/(2 f_k) and a jump EFFECTS[k] at c_k."""
    k = rng.choice(3, n, p=SHARES)
    c = CUTOFFS[k]
    half = 0.5 / DENSITY_AT_CUTOFF[k]
    x = c + rng.uniform(-1.0, 1.0, n) * half
    y = 1.0 + 0.03 * (x - c) + 0.2 * k + EFFECTS[k] * (x >= c) + rng.normal(0.0, 0.8, n)
    z = 0.3 * (x - c) + rng.normal(0.0, 1.0, n)
    return pd.DataFrame({"points": x, "threshold": c, "y": y, "z": z, "district": rng.integers(0, 60, n)})


@pytest.fixture(scope="module")
def frame():
    return several_cutoffs(12000, np.random.default_rng(11))


@pytest.fixture(scope="module")
def design(frame):
    return seamline.Design(frame, score="points", cutoff="threshold", outcome="y")


@pytest.fixture(scope="module")
def effects(design):
    return design.by_cutoff()


def same_fit(row, fit) -> None:
    lo, hi = fit.robust_conf_int
    got = [row.estimate, row.std_error, row.robust_estimate, row.robust_std_error, row.robust_ci_low,
           row.robust_ci_high, row.robust_p_value, row.bandwidth_below, row.bandwidth_above]
    want = [fit.estimate, fit.std_error, fit.bias_corrected_estimate, fit.robust_std_error, lo, hi,
            fit.robust_p_value, fit.bandwidth[0], fit.bandwidth[1]]
    np.testing.assert_allclose(got, want, rtol=TOL, atol=TOL)
    assert (row.n_below, row.n_above) == fit.n_used
    assert (row.units_below, row.units_above) == fit.n_total


# ---- a cutoff column ------------------------------------------------------------------------
def test_table_has_a_row_per_cutoff_with_the_documented_columns(effects):
    table = effects.table()
    assert list(table.cutoff) == list(CUTOFFS)
    for column in ("cutoff", "estimate", "std_error", "robust_ci_low", "robust_ci_high", "robust_p_value",
                   "n_below", "n_above", "bandwidth_below", "bandwidth_above"):
        assert column in table.columns


def test_each_cutoff_row_equals_the_fit_of_its_own_units(frame, effects):
    for row in effects.table().itertuples():
        own = frame[frame.threshold == row.cutoff]
        # Reference: a direct single-cutoff fit of the units with that cutoff, computed here
        direct = seamline.Design(own, score="points", cutoff=row.cutoff, outcome="y").fit()
        same_fit(row, direct)


def test_rows_pass_fit_options_through(frame, design):
    rows = design.by_cutoff(kernel="uniform", degree=2).table()
    own = frame[frame.threshold == 50.0]
    direct = seamline.Design(own, score="points", cutoff=50.0, outcome="y").fit(kernel="uniform", degree=2)
    same_fit(rows[rows.cutoff == 50.0].iloc[0], direct)


def test_pooled_fit_equals_a_direct_fit_on_the_normalised_score(frame, design, effects):
    # Reference: the normalised score built in the test, fitted as an ordinary design at cutoff 0
    normalised = frame.assign(centred=frame.points - frame.threshold)
    direct = seamline.Design(normalised, score="centred", cutoff=0.0, outcome="y").fit()
    for pooled in (design.fit(), effects.pooled):
        assert (pooled.estimate, pooled.std_error, pooled.bias_corrected_estimate, pooled.robust_std_error,
                pooled.bandwidth, pooled.n_used) == (direct.estimate, direct.std_error,
                                                     direct.bias_corrected_estimate, direct.robust_std_error,
                                                     direct.bandwidth, direct.n_used)
    assert design.cutoff == 0.0 and design.score == "points - threshold"
    assert design.cutoffs == tuple(CUTOFFS) and design.cutoff_column == "threshold"


def test_diagnostics_run_on_the_pooled_normalised_design(frame, design):
    normalised = frame.assign(centred=frame.points - frame.threshold)
    direct = seamline.Design(normalised, score="centred", cutoff=0.0, outcome="y")
    assert design.density_test().p_value == direct.density_test().p_value
    assert design.sensitivity().table().estimate.tolist() == direct.sensitivity().table().estimate.tolist()


def test_equality_test_equals_the_chi_square_from_the_rows(effects):
    table = effects.table()
    t, v = table.robust_estimate.to_numpy(), table.robust_std_error.to_numpy() ** 2
    common = np.sum(t / v) / np.sum(1 / v)
    q = np.sum((t - common) ** 2 / v)
    # Reference: scipy.stats.chi2.sf(Q, K - 1) with Q computed here from the rows (common practice)
    assert effects.equality.statistic == pytest.approx(q, rel=1e-12)
    assert effects.equality.df == 2
    assert effects.equality_p_value == pytest.approx(stats.chi2.sf(q, 2), rel=1e-10)
    # Reference: statsmodels WLS(t, 1, weights=1/V): the weighted residual sum of squares is Q and the
    # constant is the precision-weighted common effect with standard error (sum 1/V)^(-1/2)
    wls = sm.WLS(t, np.ones((3, 1)), weights=1 / v).fit()
    assert wls.ssr == pytest.approx(q, rel=1e-10)
    assert effects.equality.common_estimate == pytest.approx(wls.params[0], rel=1e-10)
    assert effects.equality.common_std_error == pytest.approx(np.sum(1 / v) ** -0.5, rel=1e-12)


def test_pooled_weights_are_kernel_weight_shares_near_the_normalised_cutoff(frame, effects):
    pooled = effects.pooled
    h_below, h_above = pooled.bandwidth
    x = (frame.points - frame.threshold).to_numpy()
    u = np.where(x < 0, -x / h_below, x / h_above)
    k = np.clip(1 - u, 0, None)            # triangular kernel (common practice)
    want = np.array([k[frame.threshold == c].sum() for c in CUTOFFS]) / k.sum()
    dec = effects.decomposition
    np.testing.assert_allclose(dec.weights, want, rtol=1e-12)
    # Mixture weights w_k = P(C = c_k) f_k(c_k) / sum_j P(C = c_j) f_j(c_j) (Cattaneo, Keele, Titiunik &
    # Vazquez-Bare 2016, from memory): the kernel shares estimate them (sampling error about 0.02 here)
    theory = SHARES * DENSITY_AT_CUTOFF / np.sum(SHARES * DENSITY_AT_CUTOFF)
    np.testing.assert_allclose(dec.weights, theory, atol=0.04)
    assert dec.weighted_estimate == pytest.approx(np.dot(want, effects.table().estimate), rel=1e-12)
    rse = effects.table().robust_std_error.to_numpy()
    assert dec.weighted_robust_std_error == pytest.approx(np.sqrt(np.sum((want * rse) ** 2)), rel=1e-12)
    # the pooled jump targets the weighted effect sum_k w_k tau_k, not the plain mean of the effects
    target = float(theory @ EFFECTS)
    assert abs(pooled.bias_corrected_estimate - target) < 4 * pooled.robust_std_error
    table = dec.table()
    assert list(table.component)[-2:] == ["weighted average", "pooled fit (normalised score)"]


def test_exports_carry_the_cautions_and_the_test(effects):
    text = effects.to_markdown()
    assert "local to the cutoff" in text and "chi-square" in text and "normalised score" in text
    assert "\\begin{table}" in effects.to_latex() and "seamline-table" in effects._repr_html_()
    assert "weighted average" in effects.decomposition.to_markdown()


def test_a_cutoff_with_too_few_units_is_reported_and_the_others_are_shown(frame):
    rng = np.random.default_rng(2)
    extra = pd.DataFrame({"points": 90 + rng.uniform(-5, 5, 15), "threshold": 90.0, "y": rng.normal(size=15),
                          "z": 0.0, "district": 0})
    design = seamline.Design(pd.concat([frame, extra], ignore_index=True), score="points", cutoff="threshold",
                             outcome="y")
    result = design.by_cutoff()
    table = result.table()
    bad = table[table.cutoff == 90.0].iloc[0]
    assert np.isnan(bad.estimate) and "too few units" in bad.note and "Merge it" in bad.note
    assert table[table.cutoff != 90.0].estimate.notna().all()
    assert result.equality.df == 2 and result.equality.labels == tuple(CUTOFFS)
    assert any(w.startswith("cutoff 90: too few units") for w in result.warnings)
    assert any("renormalised" in w for w in result.warnings)


def test_clusters_shared_across_cutoffs_enter_the_covariance(frame):
    design = seamline.Design(frame, score="points", cutoff="threshold", outcome="y", cluster="district")
    result = design.by_cutoff()
    assert "stacked cluster-robust covariance" in result.equality.assumption
    cov = result.covariance
    table = result.table()
    np.testing.assert_allclose(np.diag(cov), table.robust_std_error ** 2, rtol=1e-10)
    np.testing.assert_array_equal(cov, cov.T)
    t = table.robust_estimate.to_numpy()
    r = np.array([[1.0, -1.0, 0.0], [0.0, 1.0, -1.0]])
    # Reference: Wald test with the full covariance, chi-square with K - 1 df (common practice)
    w = (r @ t) @ np.linalg.solve(r @ cov @ r.T, r @ t)
    assert result.equality.statistic == pytest.approx(w, rel=1e-10)
    draws = np.random.default_rng(0).random(len(frame))
    fuzzy = frame.assign(took=((frame.points >= frame.threshold) & (draws < 0.85)).astype(float))
    fuzzy_result = seamline.Design(fuzzy, score="points", cutoff="threshold", outcome="y", takeup="took",
                                   cluster="district").by_cutoff()
    assert "ignores the resulting correlation" in fuzzy_result.equality.assumption
    assert any("clusters hold units with different cutoffs" in w for w in fuzzy_result.warnings)


def test_the_users_frame_is_not_modified(frame):
    before = frame.copy()
    seamline.Design(frame, score="points", cutoff="threshold", outcome="y").by_cutoff()
    pd.testing.assert_frame_equal(frame, before)


# ---- cumulative cutoffs ---------------------------------------------------------------------
def cumulative(n: int, rng: np.random.Generator) -> pd.DataFrame:
    """One score, a grant at 30 and a larger one at 60."""
    x = rng.uniform(0.0, 100.0, n)
    y = 2.0 + 0.02 * x + 1.0 * (x >= 30) + 0.5 * (x >= 60) + rng.normal(0.0, 1.0, n)
    return pd.DataFrame({"points": x, "y": y})


@pytest.fixture(scope="module")
def steps():
    return cumulative(6000, np.random.default_rng(4))


def test_each_cumulative_cutoff_is_a_design_on_the_rows_between_its_neighbours(steps):
    design = seamline.Design(steps, score="points", cutoff=[30, 60], outcome="y")
    result = design.by_cutoff()
    table = result.table()
    assert list(table.cutoff) == [30.0, 60.0] and result.pooled is None and result.decomposition is None
    windows = {30.0: steps.points < 60, 60.0: steps.points > 30}
    for row in table.itertuples():
        # Reference: a direct single-cutoff fit of the observations strictly between the neighbours
        direct = seamline.Design(steps[windows[row.cutoff]], score="points", cutoff=row.cutoff, outcome="y").fit()
        same_fit(row, direct)
        at = design.at(row.cutoff).fit()
        assert (at.estimate, at.robust_std_error) == (direct.estimate, direct.robust_std_error)
    assert "share the observations" in result.equality.assumption


def test_a_cumulative_design_asks_for_a_cutoff(steps):
    design = seamline.Design(steps, score="points", cutoff=[30, 60], outcome="y")
    with pytest.raises(CutoffChoiceError, match=r"`cutoff` must be chosen first .*design\.at\(30\)\.fit\(\)"):
        design.fit()
    with pytest.raises(CutoffChoiceError, match=r"must be chosen first"):
        design.density_test()
    with pytest.raises(CutoffChoiceError, match=r"design\.at\(30\)\.by_group\('g'\)"):
        design.by_group("g")
    with pytest.raises(InvalidOptionError, match=r"`cutoff` must be one of the design's cutoffs \[30.0, 60.0\]; got 45"):
        design.at(45)
    assert "cumulative cutoffs [30.0, 60.0]" in repr(design)


# ---- bad input ------------------------------------------------------------------------------
def test_a_cutoff_column_with_one_value_is_refused(frame):
    with pytest.raises(SingleCutoffError, match=r"`cutoff` column 'one' must hold at least two distinct cutoffs; "
                                                r"got only 40\. Pass cutoff=40"):
        seamline.Design(frame.assign(one=40.0), score="points", cutoff="one", outcome="y")


def test_a_missing_cutoff_column_names_the_column(frame):
    with pytest.raises(ColumnNotFoundError, match=r"`cutoff` column 'threshhold' is not in the data\. Did you mean 'threshold'"):
        seamline.Design(frame, score="points", cutoff="threshhold", outcome="y")


def test_by_cutoff_on_a_single_cutoff_design_says_how_to_declare_several(steps):
    with pytest.raises(SingleCutoffError, match=r"`cutoff` must be a column name or a list of cutoffs for by_cutoff\(\)"):
        seamline.Design(steps, score="points", cutoff=30, outcome="y").by_cutoff()


@pytest.mark.parametrize("cutoffs", [[60, 30], [30, 30, 60]])
def test_cumulative_cutoffs_must_increase(steps, cutoffs):
    with pytest.raises(CutoffOrderError, match=r"`cutoff` must be strictly increasing cumulative cutoffs; got .* "
                                               r"Sort them and drop repeats: cutoff=\[30\.0, 60\.0\]"):
        seamline.Design(steps, score="points", cutoff=cutoffs, outcome="y")


def test_cumulative_cutoffs_need_units_between_them(steps):
    with pytest.raises(TooFewUnitsError, match=r"`cutoff` must leave at least 20 observations between neighbouring "
                                               r"cutoffs; got \d+ with 'points' strictly between 30 and 30\.2\. Drop or move"):
        seamline.Design(steps, score="points", cutoff=[30, 30.2], outcome="y")


def test_cumulative_cutoffs_must_be_numbers_in_range(steps):
    with pytest.raises(CutoffOrderError, match=r"`cutoff` must be a list of finite numbers"):
        seamline.Design(steps, score="points", cutoff=[30, "sixty"], outcome="y")
    with pytest.raises(InvalidOptionError, match=r"`cutoff` values must lie inside the range of score 'points'"):
        seamline.Design(steps, score="points", cutoff=[30, 160], outcome="y")


@pytest.mark.parametrize("form", [np.float64(40.0), np.array(40.0), [40.0], (40,)])
def test_one_cutoff_in_any_form_is_a_single_design(steps, form):
    design = seamline.Design(steps, score="points", cutoff=form, outcome="y")
    assert design.cutoff_layout == "single" and design.cutoff == 40.0
    assert design.fit().estimate == seamline.Design(steps, score="points", cutoff=40.0, outcome="y").fit().estimate


def test_an_array_of_cutoffs_is_cumulative(steps):
    design = seamline.Design(steps, score="points", cutoff=np.array([30, 60]), outcome="y")
    assert design.cutoff_layout == "cumulative" and design.cutoffs == (30.0, 60.0) and design.cutoff is None


# ---- covariance of adjacent cumulative cutoffs ----------------------------------------------------
def quadratic_terms(d: np.ndarray, y: np.ndarray, h: float) -> tuple[np.ndarray, np.ndarray]:
    """Intercept weights and residuals of a triangular-kernel local quadratic fit at bandwidth h.

    Reference: at h = b the robust bias-corrected local linear estimate equals the local quadratic
    estimate (Calonico, Cattaneo & Titiunik 2014; common practice); the weights are
    e_0' (X'KX)^{-1} X'K and the residuals come from statsmodels WLS(y, X, weights=K).
    """
    k = np.clip(1 - d / h, 0, None)
    x = np.column_stack([np.ones_like(d), d / h, (d / h) ** 2])
    weights = np.linalg.solve(x.T @ (k[:, None] * x), (k[:, None] * x).T)[0]
    inside = k > 0
    resid = np.zeros_like(d)
    resid[inside] = sm.WLS(y[inside], x[inside], weights=k[inside]).fit().resid
    return weights, resid


def test_adjacent_cumulative_estimates_get_their_stacked_covariance():
    rng = np.random.default_rng(9)
    x = rng.uniform(-1.0, 2.0, 1500)
    y = 1.0 + 0.5 * x + 0.3 * (x >= 0) + 0.4 * (x >= 1) + rng.normal(0.0, 1.0, 1500)
    frame = pd.DataFrame({"x": x, "y": y})
    result = seamline.Design(frame, score="x", cutoff=[0, 1], outcome="y").by_cutoff(
        bandwidth=1.0, pilot_bandwidth=1.0, variance="hc0")
    # first principles: design 0 uses (-inf, 1), its treated side is [0, 1); design 1 uses (0, inf), its
    # untreated side is (0, 1); the shared observations are those in (0, 1)
    shared = (x > 0) & (x < 1)
    a0, e0 = quadratic_terms(x[shared], y[shared], 1.0)
    a1, e1 = quadratic_terms(1.0 - x[shared], y[shared], 1.0)
    want = np.sum((a0 * e0) * (-a1 * e1))          # treated side enters + in design 0, untreated - in design 1
    below0 = (x < 0)
    ab, eb = quadratic_terms(-x[below0], y[below0], 1.0)
    above1 = (x >= 1)
    aa, ea = quadratic_terms(x[above1] - 1.0, y[above1], 1.0)
    v0 = np.sum((a0 * e0) ** 2) + np.sum((ab * eb) ** 2)
    v1 = np.sum((a1 * e1) ** 2) + np.sum((aa * ea) ** 2)
    np.testing.assert_allclose(result.covariance, [[v0, want], [want, v1]], rtol=1e-8)
    t = result.table().robust_estimate.to_numpy()
    # Reference: Wald test of t_0 = t_1 with the covariance, chi-square with 1 df (common practice)
    w = (t[0] - t[1]) ** 2 / (v0 + v1 - 2 * want)
    assert result.equality.statistic == pytest.approx(w, rel=1e-8)
    assert result.equality_p_value == pytest.approx(stats.chi2.sf(w, 1), rel=1e-8)
    assert "estimated covariance of adjacent estimates" in result.equality.assumption


def test_windows_that_do_not_overlap_have_zero_covariance(steps):
    result = seamline.Design(steps, score="points", cutoff=[30, 60], outcome="y").by_cutoff(
        bandwidth=10.0, pilot_bandwidth=12.0)
    assert result.covariance[0, 1] == 0.0
    # with a diagonal covariance the Wald test is the precision-weighted chi-square
    table = result.table()
    t, v = table.robust_estimate.to_numpy(), table.robust_std_error.to_numpy() ** 2
    assert result.equality.statistic == pytest.approx((t[0] - t[1]) ** 2 / v.sum(), rel=1e-10)


def test_a_donut_keeps_the_covariance_of_adjacent_cutoffs(steps):
    design = seamline.Design(steps, score="points", cutoff=[30, 60], outcome="y")
    result = design.by_cutoff(bandwidth=25.0, pilot_bandwidth=28.0, donut=1.0, variance="hc3")
    cov = result.covariance
    np.testing.assert_allclose(np.diag(cov), result.table().robust_std_error ** 2, rtol=1e-10)
    assert cov[0, 1] != 0.0 and abs(cov[0, 1]) < np.sqrt(cov[0, 0] * cov[1, 1])
