"""Design-level diagnostics (issue 3) checked against outside references and published designs.

References: statsmodels (multipletests for Holm; WLS where noted), pandas groupby for bin means,
scipy.stats for the chi-square/normal laws, and the Lee / Ludwig-Miller simulation designs
(Calonico, Cattaneo & Titiunik 2014, Econometrica 82(6), Models 1-2; coefficients from memory) as
data-generating processes with known truth.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.multitest import multipletests

import seamline
from seamline.errors import InvalidOptionError, OneSidedDataError, SeamlineError

SIGMA = 0.1295
LEFT = np.array([0.48, 1.27, 7.18, 20.21, 21.54, 7.33])     # CCT 2014 Model 1 (Lee 2008 fit; from memory)
RIGHT = np.array([0.52, 0.84, -3.00, 7.99, -9.01, 3.56])


def lee(n: int, rng: np.random.Generator, covariate_jump: float = 0.0) -> pd.DataFrame:
    """The Lee design (CCT 2014 Model 1) plus a smooth pre-treatment covariate z (optionally with a jump)."""
    x = 2.0 * rng.beta(2.0, 4.0, n) - 1.0
    powers = np.vander(x, 6, increasing=True)
    y = np.where(x < 0, powers @ LEFT, powers @ RIGHT) + rng.normal(0.0, SIGMA, n)
    z = 0.5 + 0.8 * x - 0.6 * x ** 2 + covariate_jump * (x >= 0) + rng.normal(0.0, 0.3, n)
    z2 = np.sin(2 * x) + rng.normal(0.0, 0.5, n)
    return pd.DataFrame({"x": x, "y": y, "z": z, "z2": z2})


@pytest.fixture(scope="module")
def design():
    return seamline.Design(lee(3000, np.random.default_rng(1)), score="x", cutoff=0.0, outcome="y",
                           covariates=["z", "z2"])


# ---- sensitivity -----------------------------------------------------------------------------
def test_sensitivity_rows_equal_individual_fits(design):
    sens = design.sensitivity(kernels=["triangular", "uniform"], degrees=[1, 2])
    table = sens.table()
    assert len(table) == 2 * 2 * 6 + 2 * (4 + 3)  # scaled rows + selectors (ik only for degree 1)
    for row, f in zip(table.itertuples(), sens.fits):
        again = design.fit(bandwidth=(row.bandwidth_below, row.bandwidth_above) if row.label.startswith("x")
                           else row.label, kernel=row.kernel, degree=row.degree)
        assert (again.estimate, again.std_error, again.robust_conf_int) == (
            row.estimate, row.std_error, (row.robust_ci_low, row.robust_ci_high))
        assert (again.n_used) == (row.n_below, row.n_above)
    main = design.fit()
    x1 = table[(table.label == "x1") & (table.kernel == "triangular") & (table.degree == 1)].iloc[0]
    assert x1.bandwidth_below == main.bandwidth[0] and x1.estimate == main.estimate


def test_sensitivity_user_grid_and_columns(design):
    table = design.sensitivity(bandwidths=[0.2, (0.15, 0.3), "ik"]).table()
    assert list(table.label) == ["0.2", "(0.15, 0.3)", "ik"]
    for col in ("bandwidth_below", "bandwidth_above", "kernel", "degree", "estimate", "std_error",
                "robust_ci_low", "robust_ci_high", "robust_p_value", "n_below", "n_above"):
        assert col in table.columns
    assert table.bandwidth_below.iloc[1] == 0.15 and table.bandwidth_above.iloc[1] == 0.3


# ---- balance ---------------------------------------------------------------------------------
def test_balance_holm_equals_statsmodels(design):
    bal = design.balance()
    table = bal.table()
    want = multipletests(table.p_value.to_numpy(), method="holm")[1]  # statsmodels reference
    np.testing.assert_allclose(table.p_value_holm.to_numpy(), want, rtol=1e-12)
    for row, f in zip(table.itertuples(), bal.fits):
        assert row.estimate == design.fit(row.covariate).estimate
    assert {"covariate", "estimate", "std_error", "p_value", "p_value_holm"} <= set(table.columns)
    assert 0.0 <= bal.joint_p_value <= 1.0


@pytest.mark.parametrize("missing", [False, True])
def test_balance_joint_test_equals_linearmodels_sur(missing):
    # With a uniform kernel and the bias bandwidth equal to the bandwidth, each robust estimate is
    # the jump of a local quadratic fit (common practice: the bias-corrected local linear estimate
    # at b = h is the local quadratic one), so the joint Wald test with HC0 residuals is that of
    # two interacted quadratic OLS regressions on the same window. Reference: linearmodels' SUR
    # (equation-by-equation OLS, heteroskedasticity-robust cross-equation covariance, no
    # small-sample factor).
    # With a covariate missing in some rows, the joint test refits both on the complete cases.
    from linearmodels.system import SUR
    data = lee(3000, np.random.default_rng(5))
    if missing:
        data.loc[data.index[::13], "z2"] = np.nan
    h = 0.4
    d = seamline.Design(data, score="x", cutoff=0.0, outcome="y", covariates=["z", "z2"])
    bal = d.balance(bandwidth=h, pilot_bandwidth=h, kernel="uniform", variance="hc0")
    w = data[(data.x.abs() <= h) & data.z2.notna()]
    t = (w.x >= 0).astype(float)
    exog = pd.DataFrame({"c": 1.0, "x": w.x, "x2": w.x ** 2, "t": t, "tx": t * w.x, "tx2": t * w.x ** 2},
                        index=w.index)
    res = SUR({v: {"dependent": w[v], "exog": exog} for v in ("z", "z2")}).fit(
        method="ols", cov_type="robust", debiased=False)
    names = ["z_t", "z2_t"]
    tau = res.params[names].to_numpy()
    cov = res.cov.loc[names, names].to_numpy()
    if not missing:
        np.testing.assert_allclose([r["robust_estimate"] for r in bal.rows], tau, rtol=1e-9)
    assert bal.joint_statistic == pytest.approx(float(tau @ np.linalg.solve(cov, tau)), rel=1e-9)
    assert bal.joint_df == 2


@pytest.mark.parametrize("variance", ["hc0", "neighbors"])
@pytest.mark.parametrize("weighted", [False, True])
def test_balance_joint_test_of_one_covariate_is_its_squared_t(variance, weighted):
    # One covariate: the joint Wald statistic is the square of its robust t statistic, whose
    # standard error is checked against statsmodels elsewhere (tests/reference); each covariate's
    # own bandwidths, triangular kernel.
    data = lee(2000, np.random.default_rng(6))
    if weighted:
        data["w"] = np.random.default_rng(7).uniform(0.5, 2.0, len(data))
    d = seamline.Design(data, score="x", cutoff=0.0, outcome="y", covariates=["z", "z2"],
                        weights="w" if weighted else None)
    for name in ("z", "z2"):
        bal = d.balance(covariates=[name], variance=variance)
        row = bal.rows[0]
        assert bal.joint_statistic == pytest.approx((row["robust_estimate"] / row["robust_std_error"]) ** 2,
                                                    rel=1e-9)
        assert bal.joint_p_value == pytest.approx(row["p_value"], rel=1e-8)


def test_balance_window_means_equal_pandas(design):
    bal = design.balance(bandwidth=0.3)
    data = lee(3000, np.random.default_rng(1))
    row = bal.table().iloc[0]
    below = data[(data.x < 0) & (data.x >= -0.3)].z.mean()
    above = data[(data.x >= 0) & (data.x <= 0.3)].z.mean()
    assert row.mean_below == pytest.approx(below) and row.mean_above == pytest.approx(above)


def test_balance_window_means_equal_pandas_with_weights_and_missing_values():
    # Reference: pandas' weighted means of the rows inside each bandwidth (rows missing the
    # covariate left out), the below side x in [-h, 0), the above side [0, h].
    data = lee(3000, np.random.default_rng(3))
    data["w"] = np.random.default_rng(4).uniform(0.2, 3.0, len(data))
    data.loc[data.index[::17], "z"] = np.nan
    d = seamline.Design(data, score="x", cutoff=0.0, outcome="y", covariates=["z"], weights="w")
    row = d.balance(bandwidth=(0.25, 0.35)).table().iloc[0]
    ok = data.z.notna()
    for side, inside in (("below", (data.x < 0) & (data.x >= -0.25)), ("above", (data.x >= 0) & (data.x <= 0.35))):
        part = data[inside & ok]
        assert row[f"mean_{side}"] == pytest.approx((part.w * part.z).sum() / part.w.sum(), rel=1e-12)


@pytest.mark.slow
def test_balance_rejection_rates():
    """No jump: rejection near 5% for each covariate and for the joint test; a jump is detected.

    n = 3000 (at n = 600 robust intervals with estimated bandwidths still over-reject a little, about 7%
    per covariate in a 200-draw run). 150 replications: the band is 5% +- 3 Monte Carlo SE,
    sqrt(0.05 * 0.95 / 150) = 0.0178, i.e. at most 0.103. Power: 40 draws with a covariate jump of
    0.3 (about 4 SE of the jump): at least 0.8 (a lower bound, not a band)."""
    reps = 150
    rng = np.random.default_rng(2024)
    single, joint, power = [], [], []
    for _ in range(reps):
        d = seamline.Design(lee(3000, rng), score="x", cutoff=0.0, outcome="y", covariates=["z", "z2"])
        bal = d.balance()
        single.append(bal.rows[0]["p_value"] < 0.05)
        joint.append(bal.joint_p_value < 0.05)
    for _ in range(40):
        d = seamline.Design(lee(3000, rng, covariate_jump=0.3), score="x", cutoff=0.0, outcome="y", covariates=["z"])
        power.append(d.balance().rows[0]["p_value"] < 0.05)
    mc_se = np.sqrt(0.05 * 0.95 / reps)
    assert abs(np.mean(single) - 0.05) <= 3 * mc_se, np.mean(single)
    assert abs(np.mean(joint) - 0.05) <= 3 * mc_se, np.mean(joint)
    assert np.mean(power) >= 0.8, np.mean(power)


def test_balance_bad_input(design):
    with pytest.raises(InvalidOptionError, match="declared in the design"):
        design.balance(["income"])
    plain = seamline.Design(lee(500, np.random.default_rng(3)), score="x", cutoff=0.0, outcome="y")
    with pytest.raises(InvalidOptionError, match="pre-treatment columns"):
        plain.balance()
    constant = seamline.Design(lee(500, np.random.default_rng(3)).assign(one=1.0), score="x", cutoff=0.0,
                               outcome="y", covariates=["one"])
    with pytest.raises(InvalidOptionError, match="'one' constant"):
        constant.balance()
    frame = lee(500, np.random.default_rng(3)).assign(label="a")
    with pytest.raises(SeamlineError, match="'label' must be numeric"):
        seamline.Design(frame, score="x", cutoff=0.0, outcome="y", covariates=["label"])


# ---- placebo and donut -----------------------------------------------------------------------
# Measured by `python tests/benchmarks/validate_monte_carlo.py measure` (360 draws, seeds 5000-5005):
# placebo robust coverage share and its Monte Carlo SE. Below the nominal 0.95 by about 5 MC SE: the
# same under-coverage of the default robust interval raised in issue 9 ("Inference a referee accepts").
MEASURED_PLACEBO_COVERAGE = (0.9257, 0.0047)


@pytest.mark.slow
def test_placebo_cutoffs_cover_zero_at_the_measured_rate():
    """Lee Model 1 has no jump away from 0: placebo robust CIs should cover 0 95% of the time; they
    cover about 0.926 (issue 9), and the test records that instead of widening a nominal band.

    60 replications x 8 placebos; the 8 intervals of one draw are correlated, so the Monte Carlo SE
    is the SD of the per-draw coverage share over sqrt(60); the band is 3 of those, combined with the
    measured value's own MC SE."""
    rng = np.random.default_rng(77)
    shares = []
    for _ in range(60):
        res = seamline.Design(lee(2000, rng), score="x", cutoff=0.0, outcome="y").placebo_cutoffs()
        t = res.table()
        shares.append(float(((t.robust_ci_low <= 0) & (0 <= t.robust_ci_high)).mean()))
    measured, measured_se = MEASURED_PLACEBO_COVERAGE
    mc_se = np.sqrt(np.var(shares, ddof=1) / len(shares) + measured_se ** 2)
    assert abs(np.mean(shares) - measured) <= 3 * mc_se, (np.mean(shares), mc_se)


def test_placebo_uses_one_side_only(design):
    res = design.placebo_cutoffs(cutoffs=[0.3])
    data = lee(3000, np.random.default_rng(1))
    above = data[data.x >= 0]
    direct = seamline.Design(above, score="x", cutoff=0.3, outcome="y").fit()
    row = res.table().iloc[0]
    assert row.side == "above" and row.estimate == pytest.approx(direct.estimate, rel=1e-12)
    with pytest.raises(OneSidedDataError, match="at least 20 observations"):
        design.placebo_cutoffs(cutoffs=[0.999])
    with pytest.raises(InvalidOptionError, match="differ from the true cutoff"):
        design.placebo_cutoffs(cutoffs=[0.0])


def test_donut_rows_equal_fits_and_bad_radius(design):
    res = design.donut(radii=[0.0, 0.05])
    for row in res.table().itertuples():
        f = design.fit(donut=row.radius)
        assert row.estimate == f.estimate and row.n_excluded == f.n_donut
    assert res.table().n_excluded.iloc[1] == int(np.sum(np.abs(lee(3000, np.random.default_rng(1)).x) < 0.05))
    with pytest.raises(OneSidedDataError, match="empties a side"):
        design.donut(radii=[5.0])
    with pytest.raises(InvalidOptionError, match="non-negative"):
        design.donut(radii=[-1.0])


# ---- bins ------------------------------------------------------------------------------------
def test_bins_means_equal_pandas_groupby(design):
    res = design.bins(method="equal-count", number=(10, 6))
    table = res.table()
    data = lee(3000, np.random.default_rng(1))
    for side, part in (("below", data[data.x < 0]), ("above", data[data.x >= 0])):
        rows = table[table.side == side]
        edges = np.r_[rows.left.to_numpy(), rows.right.to_numpy()[-1]]
        assert len(rows) == (10 if side == "below" else 6)
        counts = rows["count"].to_numpy()
        assert counts.max() - counts.min() <= 1
        assigned = res.binned.assignment[(data.x.to_numpy() < 0) == (side == "below")]
        means = part.groupby(assigned - assigned.min()).y.mean().to_numpy()
        np.testing.assert_allclose(rows["mean"].to_numpy(), means, rtol=1e-12)
        assert edges[0] <= part.x.min() and edges[-1] >= part.x.max()


def test_bins_curve_meets_the_fit_at_the_cutoff(design):
    """The curve at the cutoff is the fit's limit, and its band there is z times the side's HC0 SE of
    the intercept. Reference: statsmodels WLS(y, [1, x], weights=1 - |x|/h).fit(cov_type="HC0") on
    the rows of that side inside h; z from scipy.stats.norm.ppf."""
    import statsmodels.api as sm
    from scipy import stats

    h = 0.3
    res = design.bins(bandwidth=h, variance="hc0", level=0.9)
    fit = design.fit(bandwidth=h, variance="hc0")
    curve = res.curve()
    data = lee(3000, np.random.default_rng(1))
    for side, limit in (("below", fit.limits[0]), ("above", fit.limits[1])):
        at_cutoff = curve[(curve.side == side) & (curve.x == 0.0)]
        assert at_cutoff.fit.iloc[0] == pytest.approx(limit, rel=1e-9)
        rows = data[((data.x < 0) if side == "below" else (data.x >= 0)) & (data.x.abs() < h)]
        ref = sm.WLS(rows.y, sm.add_constant(rows.x), weights=1 - rows.x.abs() / h).fit(cov_type="HC0")
        assert at_cutoff.fit.iloc[0] == pytest.approx(ref.params.iloc[0], rel=1e-9)
        half = stats.norm.ppf(0.95) * ref.bse.iloc[0]
        assert at_cutoff.ci_high.iloc[0] - at_cutoff.fit.iloc[0] == pytest.approx(half, rel=1e-8)
        assert at_cutoff.fit.iloc[0] - at_cutoff.ci_low.iloc[0] == pytest.approx(half, rel=1e-8)
    assert set(res.table().columns) >= {"side", "left", "right", "count", "mean", "ci_low", "ci_high"}
    glob = design.bins(global_degree=4).global_polynomial()
    assert set(glob.side) == {"below", "above"}


@pytest.mark.parametrize("variance, cov_type", [("bias-reduced", "HC2"), ("hc3", "HC3")])
def test_bins_bands_of_hc_variances_row_by_row_in_blocks(variance, cov_type, monkeypatch):
    """The pointwise bands of the default variance are its HC2 part (HC3 likewise), summed block by
    block over the rows inside h (blocks of 100 rows here, weighted rows). Reference: statsmodels
    WLS(y, [1, x], weights=w (1 - |x|/h)).fit(cov_type=...) on each side's rows inside h; the band's
    half-width at x0 is z sqrt([1, x0] V [1, x0]'), z from scipy.stats.norm.ppf."""
    import statsmodels.api as sm
    from scipy import stats
    from seamline.core import locpoly

    monkeypatch.setattr(locpoly, "HC_BLOCK", 100)
    rng = np.random.default_rng(4)
    data = lee(3000, rng).assign(w=rng.uniform(0.5, 2.0, 3000))
    design = seamline.Design(data, score="x", cutoff=0.0, outcome="y", weights="w")
    h = 0.3
    curve = design.bins(bandwidth=h, variance=variance, level=0.9).curve_frame
    for side in ("below", "above"):
        rows = data[((data.x < 0) if side == "below" else (data.x >= 0)) & (data.x.abs() < h)]
        cov = sm.WLS(rows.y, sm.add_constant(rows.x), weights=rows.w * (1 - rows.x.abs() / h)).fit(
            cov_type=cov_type).cov_params().to_numpy()
        part = curve[curve.side == side]
        basis = np.column_stack([np.ones(len(part)), part.x])
        half = stats.norm.ppf(0.95) * np.sqrt(np.einsum("ij,jk,ik->i", basis, cov, basis))
        np.testing.assert_allclose(part.ci_high - part.fit, half, rtol=1e-8)
        np.testing.assert_allclose(part.fit - part.ci_low, half, rtol=1e-8)


def test_bins_bad_counts(design):
    with pytest.raises(SeamlineError, match="number"):
        design.bins(number=0)
    with pytest.raises(SeamlineError, match="number"):
        design.bins(number=10 ** 6)


# ---- density ---------------------------------------------------------------------------------
@pytest.mark.parametrize("method", ["local-cdf", "binned"])
def test_density_test_result_and_manipulation(method):
    rng = np.random.default_rng(5)
    x = rng.normal(size=4000)
    smooth = seamline.Design(pd.DataFrame({"x": x, "y": x}), score="x", cutoff=0.3, outcome="y")
    res = smooth.density_test(method)
    assert res.method == method and res.p_value > 0.01
    from scipy.stats import norm  # reference density at the cutoff
    assert res.ci_below[0] < norm.pdf(0.3) < res.ci_below[1] or res.ci_above[0] < norm.pdf(0.3) < res.ci_above[1]
    moved = x.copy()
    shift = (moved < 0.3) & (moved > 0.0) & (rng.uniform(size=len(x)) < 0.5)
    moved[shift] += 0.3  # sorting: units just below moved just above
    sorted_design = seamline.Design(pd.DataFrame({"x": moved, "y": moved}), score="x", cutoff=0.3, outcome="y")
    assert sorted_design.density_test(method).p_value < 0.01
    assert set(res.table().columns) >= {"side", "density", "ci_low", "ci_high"}
    assert {"side", "x", "density", "ci_low", "ci_high"} <= set(res.grid().columns)
    hist = res.histogram()
    assert ((hist.right <= 0.3) | (hist.left >= 0.3)).all()  # bins never straddle the cutoff


# ---- score profile and checks ----------------------------------------------------------------
def test_score_profile_counts_equal_pandas():
    rng = np.random.default_rng(9)
    ages = rng.integers(50, 85, 3000)
    frame = pd.DataFrame({"age": ages, "y": 0.1 * ages + (ages >= 65) + rng.normal(size=3000)})
    d = seamline.Design(frame, score="age", cutoff=65, outcome="y")
    prof = d.score_profile()
    table = prof.table()
    below = table[(table.side == "below") & (table.scope == "all")].iloc[0]
    counts = frame[frame.age < 65].age.value_counts()
    assert below.distinct_values == len(counts) and below.mass_points == int((counts >= 2).sum())
    assert below.largest_mass == counts.max()
    assert prof.resolution == 1.0


def test_checks_flag_manipulation_and_weak_first_stage():
    rng = np.random.default_rng(11)
    n = 3000
    x = rng.normal(size=n)
    x[(x < 0) & (x > -0.4) & (rng.uniform(size=n) < 0.6)] += 0.4
    takeup = (rng.uniform(size=n) < 0.10 + 0.03 * (x >= 0)).astype(float)  # a tiny first stage
    frame = pd.DataFrame({"x": x, "y": x + takeup + rng.normal(size=n), "d": takeup})
    res = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", takeup="d").checks()
    status = dict(zip(res.table().check, res.table().status))
    assert status["manipulation (density test)"] == "flag"
    assert status["first stage strength"] == "flag"
    assert status["covariate balance"] == "not applicable"
    assert res.flagged and any("first stage" in w for w in res.warnings)


def test_results_render_everywhere(design):
    for res in (design.density_test(), design.balance(), design.sensitivity(), design.placebo_cutoffs(),
                design.donut(), design.bins(), design.score_profile(), design.checks()):
        assert "\\toprule" in res.to_latex() and "|" in res.to_markdown() and "<table" in res._repr_html_()
