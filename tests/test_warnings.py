"""Every user-facing warning and design check: one small data set that triggers it, its text asserted,
and its absence on a clean design.

The data sets are invented by the seeded code below (test input only). Counts quoted in a message
are recomputed here from the data (first principles); thresholds are facts of the trade named in
the engine (common practice: 20 observations per side, F < 10, 30 clusters, 10 distinct values).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import seamline


def clean_frame(seed: int = 3, n: int = 2000) -> pd.DataFrame:
    """Smooth outcome with a jump, continuous uniform score, balanced covariates, strong take-up."""
    rng = np.random.default_rng(seed)
    x = rng.uniform(-1.0, 1.0, n)
    d = (rng.uniform(size=n) < 0.1 + 0.8 * (x >= 0)).astype(float)
    return pd.DataFrame({
        "x": x,
        "y": 0.5 + 0.8 * x - 0.3 * x ** 2 + 0.4 * d + rng.normal(0, 0.3, n),
        "z": 0.2 * x + rng.normal(0, 1, n),
        "d": d,
        "g": rng.integers(0, 200, n),
    })


@pytest.fixture(scope="module")
def clean():
    return seamline.Design(clean_frame(), score="x", cutoff=0.0, outcome="y", covariates=["z"])


# ---- a clean design raises none of them ------------------------------------------------------
def test_clean_design_has_no_warnings(clean):
    assert clean.fit().warnings == ()
    assert clean.fit(bandwidth="ik").warnings == ()
    assert clean.density_test().warnings == ()
    assert clean.balance().warnings == ()
    assert clean.placebo_cutoffs().warnings == ()
    assert clean.score_profile().warnings == ()
    assert clean.sensitivity().warnings == ()
    checks = clean.checks()
    assert checks.warnings == ()
    assert set(checks.table().status) <= {"ok", "not applicable"}


def test_clean_fuzzy_and_clustered_design_has_no_warnings():
    frame = clean_frame()
    fit = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", takeup="d", cluster="g").fit()
    assert fit.kind == "fuzzy" and fit.first_stage_f > 10
    assert fit.warnings == ()


# ---- fit warnings ----------------------------------------------------------------------------
def test_few_observations_in_the_window():
    frame = clean_frame(n=600)
    h = 0.05
    fit = seamline.Design(frame, score="x", cutoff=0.0, outcome="y").fit(bandwidth=h)
    x = frame.x.to_numpy()
    below, above = int(((x < 0) & (x > -h)).sum()), int(((x >= 0) & (x < h)).sum())  # triangular: |x| < h
    assert below < 20 and above < 20
    assert (f"Only {below} observations below the cutoff inside the bandwidth: estimates are imprecise and the "
            "normal approximation may be poor. Consider a larger bandwidth.") in fit.warnings
    assert any(w.startswith(f"Only {above} observations above the cutoff") for w in fit.warnings)


def test_discrete_score():
    rng = np.random.default_rng(5)
    x = rng.integers(-8, 9, 1500).astype(float)
    frame = pd.DataFrame({"x": x, "y": 0.2 * x + (x >= 0) + rng.normal(0, 1, 1500)})
    fit = seamline.Design(frame, score="x", cutoff=0.0, outcome="y").fit(bandwidth=3.5)
    # rows with positive triangular weight: x in {-3, -2, -1} below and {0, 1, 2, 3} above
    assert any(w.startswith("The score takes only 3 distinct values below the cutoff inside the bandwidth "
                            "(a discrete score)") for w in fit.warnings)
    assert any(w.startswith("The score takes only 4 distinct values above the cutoff") for w in fit.warnings)
    assert any("Kolesar & Rothe 2018" in w for w in fit.warnings)
    profile = seamline.Design(frame, score="x", cutoff=0.0, outcome="y").score_profile(bandwidth=3.5)
    assert any(w.startswith("Few distinct score values inside the bandwidth: below (3), above (4).")
               for w in profile.warnings)


def test_few_clusters():
    frame = clean_frame().assign(g=lambda f: np.random.default_rng(1).integers(0, 12, len(f)))
    fit = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", cluster="g").fit()
    assert fit.n_clusters == 12
    assert ("Only 12 clusters: cluster-robust standard errors can be too small with fewer than about 30 "
            "clusters (Cameron & Miller 2015).") in fit.warnings


def test_weak_first_stage():
    rng = np.random.default_rng(8)
    frame = clean_frame().assign(d=lambda f: (rng.uniform(size=len(f)) < 0.45 + 0.05 * (f.x >= 0)).astype(float))
    fit = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", takeup="d").fit()
    assert fit.first_stage_f < 10
    # common practice (Staiger & Stock 1997): F = squared t-statistic of the take-up jump
    assert fit.first_stage_f == pytest.approx((fit.first_stage.estimate / fit.first_stage.std_error) ** 2, rel=1e-12)
    assert any(w.startswith(f"Weak first stage: F = {fit.first_stage_f:.1f} < 10 (common practice).")
               for w in fit.warnings)


def test_takeup_equal_to_assignment():
    frame = clean_frame().assign(d=lambda f: (f.x >= 0).astype(float))
    fit = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", takeup="d").fit()
    assert fit.kind == "sharp"
    assert "Take-up column 'd' equals assignment on every row: the design is treated as sharp." in fit.warnings


def test_bandwidth_reaching_the_range_of_the_data():
    """A noiseless step: no curvature and zero neighbour variance, so the rule runs to the data's range."""
    x = np.random.default_rng(0).uniform(-1, 1, 300)
    frame = pd.DataFrame({"x": x, "y": np.where(x >= 0, 2.0, 1.0)})
    fit = seamline.Design(frame, score="x", cutoff=0.0, outcome="y").fit()
    assert fit.bandwidth[0] == pytest.approx(np.abs(x).max(), rel=1e-12)
    assert ("The MSE-optimal bandwidth reached the range of the data: the estimated curvature difference is "
            "close to zero. Consider a manual bandwidth.") in fit.warnings


# ---- diagnostics warnings --------------------------------------------------------------------
def test_density_jump_and_ties_and_binned_rule():
    rng = np.random.default_rng(4)
    x = np.concatenate([rng.uniform(-1, 0, 2000), rng.uniform(0, 1, 6000)])  # three times the density above
    sorted_design = seamline.Design(pd.DataFrame({"x": x, "y": x}), score="x", cutoff=0.0, outcome="y")
    dens = sorted_design.density_test()
    assert dens.p_value < 0.05
    assert any(w.startswith(f"The density of 'x' jumps at the cutoff (p = {dens.p_value:.3f}): evidence of sorting")
               for w in dens.warnings)
    binned = sorted_design.density_test(method="binned")
    assert any(w.startswith("The binned test uses a rule-of-thumb bandwidth") for w in binned.warnings)
    tied = np.round(rng.uniform(-1, 1, 2000), 2)  # 201 distinct values for 2000 rows
    dens_tied = seamline.Design(pd.DataFrame({"x": tied, "y": tied}), score="x", cutoff=0.0, outcome="y").density_test()
    _, counts = np.unique(tied, return_counts=True)
    share = counts[counts >= 2].sum() / len(tied)  # rows whose value is shared with another row
    assert dens_tied.tie_share > 0.5
    assert any(w.startswith(f"{dens_tied.tie_share:.0%} of score values are tied (a discrete score)")
               for w in dens_tied.warnings)
    assert dens_tied.tie_share == pytest.approx(share, rel=1e-12)


def test_covariate_imbalance():
    frame = clean_frame().assign(z=lambda f: f.z + 1.0 * (f.x >= 0))
    bal = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", covariates=["z"]).balance()
    assert bal.warnings[0].startswith("Covariates jump at the cutoff (Holm-adjusted p < 0.05): ['z'].")
    assert f"The joint test rejects balance of all covariates (p = {bal.joint_p_value:.3f})." in bal.warnings
    checks = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", covariates=["z"]).checks()
    status = dict(zip(checks.table().check, checks.table().status))
    assert status["covariate balance"] == "flag"
    assert any(w.startswith("covariate balance: smallest Holm p = ") for w in checks.warnings)


def test_placebo_cutoffs_with_jumps_away_from_the_cutoff():
    rng = np.random.default_rng(6)
    x = rng.uniform(-1, 1, 4000)
    steps = np.floor(x * 5) * 0.5  # a jump of 0.5 at every multiple of 0.2: many placebos reject
    frame = pd.DataFrame({"x": x, "y": steps + rng.normal(0, 0.05, 4000)})
    placebo = seamline.Design(frame, score="x", cutoff=0.0, outcome="y").placebo_cutoffs(
        cutoffs=[-0.8, -0.6, -0.4, -0.2, 0.2, 0.4, 0.6, 0.8], bandwidth=0.1)
    rejected = [r["cutoff"] for r in placebo.rows if r["robust_p_value"] < 0.05]
    assert len(rejected) == 8
    assert placebo.warnings == (f"8 of 8 placebo cutoffs show a significant jump ({rejected}); the outcome may "
                                "jump away from the cutoff too, or the specification is too rigid.",)


def test_sensitivity_row_skipped_on_a_discrete_score():
    rng = np.random.default_rng(9)
    x = rng.integers(-6, 7, 3000).astype(float)
    frame = pd.DataFrame({"x": x, "y": 0.3 * x + (x >= 0) + rng.normal(0, 1, 3000)})
    sens = seamline.Design(frame, score="x", cutoff=0.0, outcome="y").sensitivity()
    labels = {r["label"] for r in sens.rows}
    skipped = [w for w in sens.warnings if w.startswith("Row x")]
    assert skipped, sens.warnings
    for w in skipped:
        label = w.split()[1]
        assert label not in labels and "skipped: `bandwidth`" in w


def test_heaping_at_round_values():
    rng = np.random.default_rng(12)
    x = np.round(rng.uniform(-10, 10, 3000), 2)
    x[:600] = np.round(x[:600], 1)  # 20% of the scores heaped at multiples of 0.1 (recorded to 0.01)
    frame = pd.DataFrame({"x": x, "y": 0.1 * x + rng.normal(0, 1, 3000)})
    design = seamline.Design(frame, score="x", cutoff=0.0, outcome="y")
    profile = design.score_profile()
    share = np.isclose(x * 10, np.round(x * 10), atol=1e-9).mean()  # a smooth score puts 10% there
    assert any(w.startswith(f"Heaping: {share:.1%} of scores sit at multiples of 0.1 (about 10.0% expected).")
               for w in profile.warnings), profile.warnings
    checks = design.checks()
    assert dict(zip(checks.table().check, checks.table().status))["heaping at round values"] == "flag"


def test_checks_flag_few_observations():
    frame = clean_frame(n=300)
    checks = seamline.Design(frame, score="x", cutoff=0.0, outcome="y").checks(bandwidth=0.08)
    fit = seamline.Design(frame, score="x", cutoff=0.0, outcome="y").fit(bandwidth=0.08)
    assert (f"observations in the window: {fit.n_used[0]} below, {fit.n_used[1]} above") in checks.warnings


def test_heaping_shares_equal_the_share_of_observations_at_round_values():
    # First principles: the share of (non-missing) observations whose score is a multiple of each
    # step, asked observation by observation; the profile asks once per distinct value.
    rng = np.random.default_rng(13)
    x = np.round(rng.normal(0, 4, 5000), 2)
    x[:900] = np.round(x[:900], 1)
    x[::97] = np.nan
    frame = pd.DataFrame({"x": x, "y": rng.normal(0, 1, 5000)})
    profile = seamline.Design(frame, score="x", cutoff=0.0, outcome="y").score_profile()
    scores = x[~np.isnan(x)]
    assert profile.heaping
    for row in profile.heaping:
        step = row["step"]
        assert row["share"] == float(np.isclose(scores / step, np.round(scores / step), atol=1e-9, rtol=0).mean())
