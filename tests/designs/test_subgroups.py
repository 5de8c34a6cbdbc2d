"""Subgroup effects and the test of equal effects across groups.

References: each group row against a direct fit of the group's rows computed in the test; the test
of equal effects against scipy.stats.chi2 and statsmodels WLS; for two groups, the square of the
difference z-statistic (common practice).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

import seamline
from seamline.errors import ColumnNotFoundError, InvalidOptionError

TOL = 1e-9


def grouped(n: int, rng: np.random.Generator) -> pd.DataFrame:
    """A score on [-1, 1), three regions with effects 0.3, 0.6, 0.6, and households as clusters."""
    x = rng.uniform(-1.0, 1.0, n)
    region = rng.choice(["east", "north", "west"], n, p=[0.4, 0.35, 0.25])
    effect = np.where(region == "east", 0.3, 0.6)
    y = 0.4 + 0.5 * x - 0.3 * x ** 2 + effect * (x >= 0) + rng.normal(0.0, 0.4, n)
    return pd.DataFrame({"x": x, "y": y, "region": region, "household": rng.integers(0, n // 4, n),
                         "own_cluster": np.arange(n)})


@pytest.fixture(scope="module")
def frame():
    return grouped(6000, np.random.default_rng(8))


@pytest.fixture(scope="module")
def design(frame):
    return seamline.Design(frame, score="x", cutoff=0.0, outcome="y")


def test_each_group_row_equals_the_fit_of_the_groups_rows(frame, design):
    result = design.by_group("region")
    table = result.table()
    assert list(table.group) == ["east", "north", "west"]
    for row in table.itertuples():
        # Reference: a direct fit of the group's rows, computed here
        direct = seamline.Design(frame[frame.region == row.group], score="x", cutoff=0.0, outcome="y").fit()
        lo, hi = direct.robust_conf_int
        np.testing.assert_allclose([row.estimate, row.std_error, row.robust_ci_low, row.robust_ci_high,
                                    row.bandwidth_below],
                                   [direct.estimate, direct.std_error, lo, hi, direct.bandwidth[0]], rtol=TOL)
        assert (row.n_below, row.n_above) == direct.n_used
    assert "chi-square" in result.to_markdown() and "local to the cutoff" in result.to_markdown()


def test_equality_p_value_equals_the_chi_square_from_the_rows(design):
    result = design.by_group("region")
    table = result.table()
    t, v = table.robust_estimate.to_numpy(), table.robust_std_error.to_numpy() ** 2
    common = np.sum(t / v) / np.sum(1 / v)
    q = np.sum((t - common) ** 2 / v)
    # Reference: scipy.stats.chi2.sf(Q, G - 1), Q from the rows' robust estimates and variances (common practice)
    assert result.equality_p_value == pytest.approx(stats.chi2.sf(q, 2), rel=1e-10)
    # Reference: statsmodels WLS of the estimates on a constant with weights 1/V: ssr is Q
    assert sm.WLS(t, np.ones((3, 1)), weights=1 / v).fit().ssr == pytest.approx(result.equality.statistic, rel=1e-10)


def test_two_groups_give_the_squared_difference_statistic(frame, design):
    two = frame.assign(pair=np.where(frame.region == "east", "east", "other"))
    result = seamline.Design(two, score="x", cutoff=0.0, outcome="y").by_group("pair")
    a, b = result.rows
    # (t_a - t_b) / sqrt(V_a + V_b), squared, is the one-df chi-square (common practice)
    z = (a.robust_estimate - b.robust_estimate) / np.hypot(a.robust_std_error, b.robust_std_error)
    assert result.equality.statistic == pytest.approx(z ** 2, rel=1e-10)
    assert result.equality_p_value == pytest.approx(2 * stats.norm.sf(abs(z)), rel=1e-9)


def test_a_small_group_is_reported_and_the_others_are_still_shown(frame):
    small = frame.assign(region=np.where((frame.region == "west") & (frame.x < 0) & (frame.index % 50 != 0),
                                         "dropped", frame.region))
    small = small[small.region != "dropped"]
    result = seamline.Design(small, score="x", cutoff=0.0, outcome="y").by_group("region")
    table = result.table()
    west = table[table.group == "west"].iloc[0]
    assert np.isnan(west.estimate) and west.units_below < 20 and "too few units on one side" in west.note
    assert table[table.group != "west"].estimate.notna().all()
    assert result.equality.labels == ("east", "north") and result.equality.df == 1
    assert any(w.startswith("group west: too few units") for w in result.warnings)


def local_quadratic_scores(d: np.ndarray, y: np.ndarray, clusters: np.ndarray, h: float, sign: float):
    """Contributions a_i e_i of one side of a local quadratic fit at h (triangular kernel), by cluster.

    Reference: at h = b the robust bias-corrected local linear estimate is the local quadratic
    estimate (Calonico, Cattaneo & Titiunik 2014; common practice); weights e_0'(X'KX)^{-1}X'K and
    residuals from statsmodels WLS(y, X, weights=K), summed by cluster as in the cluster-robust sandwich.
    """
    k = np.clip(1 - d / h, 0, None)
    inside = k > 0
    d, y, k, clusters = d[inside], y[inside], k[inside], clusters[inside]
    x = np.column_stack([np.ones_like(d), d / h, (d / h) ** 2])
    a = np.linalg.solve(x.T @ (k[:, None] * x), (k[:, None] * x).T)[0]
    e = sm.WLS(y, x, weights=k).fit().resid
    return pd.Series(sign * a * e).groupby(clusters).sum(), len(d)


def test_groups_sharing_clusters_get_their_stacked_cluster_covariance(frame):
    design = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", cluster="household")
    # The reference below is the classic CR1 sum; the default bias-reduced rows keep those
    # correlations with their own (CR2) variances on the diagonal (checked at the end).
    result = design.by_group("region", bandwidth=0.5, pilot_bandwidth=0.5, cluster_variance="classic")
    assert "stacked cluster-robust covariance" in result.equality.assumption
    scores, factors = [], []
    for g in ("east", "north", "west"):
        own = frame[frame.region == g]
        x, y, c = own.x.to_numpy(), own.y.to_numpy(), own.household.to_numpy()
        below, n_below = local_quadratic_scores(-x[x < 0], y[x < 0], c[x < 0], 0.5, -1.0)
        above, n_above = local_quadratic_scores(x[x >= 0], y[x >= 0], c[x >= 0], 0.5, 1.0)
        u = below.add(above, fill_value=0.0)
        n, k, m = n_below + n_above, 6, len(u)
        scores.append(u)
        factors.append(m / (m - 1) * (n - 1) / (n - k))   # the usual cluster small-sample factor (common practice)
    want = np.array([[np.sqrt(fi * fj) * float(ui.mul(uj, fill_value=0.0).sum()) for uj, fj in zip(scores, factors)]
                     for ui, fi in zip(scores, factors)])
    np.testing.assert_allclose(result.covariance, want, rtol=1e-8)
    np.testing.assert_allclose(np.diag(result.covariance), result.table().robust_std_error ** 2, rtol=1e-10)
    t = result.table().robust_estimate.to_numpy()
    r = np.array([[1.0, -1.0, 0.0], [0.0, 1.0, -1.0]])
    # Reference: Wald test of equal effects with the full covariance, chi-square with G - 1 df (common practice)
    w = (r @ t) @ np.linalg.solve(r @ want @ r.T, r @ t)
    assert result.equality.statistic == pytest.approx(w, rel=1e-8)
    assert result.equality_p_value == pytest.approx(stats.chi2.sf(w, 2), rel=1e-8)
    reduced = design.by_group("region", bandwidth=0.5, pilot_bandwidth=0.5)
    np.testing.assert_allclose(np.diag(reduced.covariance), reduced.table().robust_std_error ** 2, rtol=1e-10)
    corr = want / np.sqrt(np.outer(np.diag(want), np.diag(want)))
    np.testing.assert_allclose(reduced.covariance / np.sqrt(np.outer(np.diag(reduced.covariance),
                                                                     np.diag(reduced.covariance))), corr, rtol=1e-8)
    apart = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", cluster="own_cluster").by_group("region")
    assert "disjoint samples" in apart.equality.assumption and apart.covariance is None


def test_fuzzy_groups_sharing_clusters_say_the_test_assumes_independence(frame):
    rng = np.random.default_rng(1)
    fuzzy = frame.assign(took=((frame.x >= 0) & (rng.random(len(frame)) < 0.8)).astype(float))
    result = seamline.Design(fuzzy, score="x", cutoff=0.0, outcome="y", takeup="took",
                             cluster="household").by_group("region")
    assert "assumes independence" in result.equality.assumption and result.covariance is None
    assert any("members of several groups" in w for w in result.warnings)


def test_groups_of_a_multiple_cutoff_design_are_pooled_fits_within_the_group():
    rng = np.random.default_rng(3)
    n = 6000
    c = rng.choice([-0.2, 0.3], n)
    x = c + rng.uniform(-1, 1, n)
    frame = pd.DataFrame({"x": x, "c": c, "y": 0.5 * (x - c) + 0.4 * (x >= c) + rng.normal(0, 0.3, n),
                          "sex": rng.choice(["f", "m"], n)})
    result = seamline.Design(frame, score="x", cutoff="c", outcome="y").by_group("sex")
    for row in result.table().itertuples():
        # Reference: the group's rows declared as a cutoff-column design, fitted directly
        direct = seamline.Design(frame[frame.sex == row.group], score="x", cutoff="c", outcome="y").fit()
        assert (row.estimate, row.robust_std_error) == (direct.estimate, direct.robust_std_error)


def test_bad_group_columns(frame, design):
    with pytest.raises(ColumnNotFoundError, match=r"`column` must name a column of the data; got 'regoin'"):
        design.by_group("regoin")
    with pytest.raises(InvalidOptionError, match=r"`column` must have at most 50 groups; got 6000 distinct values "
                                                 r"in 'y'\. Group a continuous column first"):
        design.by_group("y")
    with pytest.raises(InvalidOptionError, match=r"`column` must have at least two groups"):
        seamline.Design(frame.assign(one="a"), score="x", cutoff=0.0, outcome="y").by_group("one")


def test_rows_with_a_missing_group_are_left_out_and_counted(frame):
    holes = frame.assign(region=frame.region.where(frame.index % 10 != 0))
    result = seamline.Design(holes, score="x", cutoff=0.0, outcome="y").by_group("region")
    assert "600 rows with a missing 'region' are left out of every group." in result.warnings
    east = holes[holes.region == "east"]
    # Reference: a direct fit of the group's rows
    assert result.rows[0].estimate == seamline.Design(east, score="x", cutoff=0.0, outcome="y").fit().estimate


@pytest.mark.slow
def test_equality_test_has_about_its_nominal_size_under_equal_effects():
    """R = 200 samples with equal effects in two groups; the 5% test should reject about 5% of the time.

    Band: 0.05 +- 3 binomial standard errors, 3 sqrt(0.05 * 0.95 / 200) = 0.046 (common practice); a few
    seconds on one core.
    """
    rng = np.random.default_rng(77)
    reps, rejected = 200, 0
    for _ in range(reps):
        x = rng.uniform(-1.0, 1.0, 2000)
        group = rng.choice(["a", "b"], 2000)
        y = 0.4 + 0.5 * x - 0.3 * x ** 2 + 0.5 * (x >= 0) + rng.normal(0.0, 0.4, 2000)
        frame = pd.DataFrame({"x": x, "y": y, "group": group})
        result = seamline.Design(frame, score="x", cutoff=0.0, outcome="y").by_group("group")
        rejected += result.equality_p_value < 0.05
    assert abs(rejected / reps - 0.05) < 3 * np.sqrt(0.05 * 0.95 / reps), rejected / reps


def test_groups_inside_one_cutoff_of_a_cutoff_column_are_fitted_at_that_cutoff():
    # Reference: each group's direct single-cutoff fit on its own rows (computed here). A group that
    # lies inside one cutoff group (a region with its own threshold) has no pooled design of its own.
    rng = np.random.default_rng(31)
    n = 4000
    region = rng.choice(["east", "west"], n)
    threshold = np.where(region == "east", 40.0, 55.0)
    score = rng.uniform(0.0, 100.0, n)
    y = 1.0 + 0.02 * score + np.where(region == "east", 1.0, 0.5) * (score >= threshold) + rng.normal(0, 0.5, n)
    data = pd.DataFrame({"score": score, "threshold": threshold, "region": region, "y": y})
    design = seamline.Design(data, score="score", cutoff="threshold", outcome="y")
    groups = design.by_group("region")
    for row in groups.rows:
        own = data[data["region"] == row.label]
        direct = seamline.Design(own, score="score", cutoff=float(own["threshold"].iloc[0]), outcome="y").fit()
        assert row.fitted and row.estimate == pytest.approx(direct.estimate, rel=TOL, abs=TOL)
