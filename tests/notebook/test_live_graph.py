"""The board's compute graph: which engine calls each change makes, and that every panel equals
the direct ``seamline.Design`` call for the same inputs.

Reference: a direct ``Design(...)`` call on the same data with the same options (the notebook
layer's reference: a board only routes, caches and re-reports what the engine computes), and for
the level, the first-principles fact that a normal interval at another level keeps its centre and
scales its half-width by the ratio of normal quantiles (common practice). Data: the package's
invented demo scenario (n = 2000) with two extra invented columns (a take-up column and a copy of
the score).
"""
from __future__ import annotations

import threading
from collections import Counter

import numpy as np
import pandas as pd
import pytest

import seamline
from seamline.data import DesignData
from seamline.demo_data import sharp_scenario
from seamline.estimate import bandwidth_choice
from seamline.estimate import bias_aware, diagnostics, local_randomization, score_profile
from seamline.estimate.design import Design
from seamline.notebook.board import boards
from seamline.notebook.compute import compute_graph
from seamline.notebook.spec import NotApplicable

TIGHT = dict(rtol=1e-9, atol=1e-12)   # re-reported intervals equal direct ones to rounding

# Design methods a board may call, counted by name when the board calls them (not when one calls
# another); "fits" counts every real (uncached) fit, "selections" every bandwidth selection and
# "density" every density test, wherever they are called from.
METHODS = ("fit", "bandwidths", "bins", "sensitivity", "placebo_cutoffs", "donut", "balance", "score_profile",
           "checks", "by_cutoff", "by_group", "bias_aware", "local_randomization")
FIT_DIAGNOSTICS = {"bins", "sensitivity", "placebo_cutoffs", "donut", "score_profile"}
PARTS = ("binned means", "score census", "placebo designs", "nested balance",   # see PART_CHANGES
         "rule of thumb", "bias-aware moments", "randomization draws", "window tests")


@pytest.fixture(autouse=True)
def _close_boards():
    before = {id(b) for b in boards()}
    yield
    for b in boards():
        if id(b) not in before:
            b.close()


@pytest.fixture
def scenario():
    s = sharp_scenario(n=2000, seed=11)
    data = s.data.copy()
    rng = np.random.default_rng(3)           # invented: take-up mostly follows assignment
    assigned = (data[s.score] < s.cutoff).to_numpy()
    data["enrolled"] = np.where(rng.random(len(data)) < 0.85, assigned, ~assigned).astype(float)
    data["score_copy"] = data[s.score] + 0.0
    return s, data


@pytest.fixture
def calls(monkeypatch):
    counts: Counter = Counter()
    depth = threading.local()

    def wrap(owner, name, label, outermost):
        real = getattr(owner, name)

        def counting(*args, **kwargs):
            level = getattr(depth, "n", 0)
            if level == 0 or not outermost:
                counts[label] += 1
            depth.n = level + 1
            try:
                return real(*args, **kwargs)
            finally:
                depth.n = level

        monkeypatch.setattr(owner, name, counting)

    for name in METHODS:
        wrap(Design, name, name, True)
    wrap(Design, "_fit", "fits", False)
    wrap(bandwidth_choice, "mse_selection", "selections", False)
    wrap(diagnostics, "density_test", "density", False)
    # the parts of diagnostics that read no fit option, kept on the Design (every real computation)
    wrap(diagnostics, "binned_means", "binned means", False)
    wrap(score_profile, "_census", "score census", False)
    wrap(DesignData, "one_side", "placebo designs", False)
    wrap(local_randomization, "_nested_balance", "nested balance", False)
    # the inference engines' own parts: the rule-of-thumb bound, the moments at one searched bandwidth,
    # a pass of Monte Carlo draws over windows, a window's outcome test
    wrap(bias_aware, "rule_of_thumb", "rule of thumb", False)
    wrap(bias_aware._Problem, "_from_moments", "bias-aware moments", False)
    wrap(local_randomization, "_treated_sums", "randomization draws", False)
    wrap(local_randomization, "prefix_assignments", "randomization draws", False)
    wrap(local_randomization._WindowOutcome, "__init__", "window tests", False)
    return counts


# change -> (how to apply it, the calls it must make; every other counted call must be zero)
ALL_BUT_DENSITY = {"fit", "bandwidths", "balance", *FIT_DIAGNOSTICS}
# The inference nodes (notebook/compute_inference.py): the bias-aware interval reads the rows, the outcome,
# kernel, degree, smoothness and level; local randomization the rows, the outcome, the covariates, its own
# settings and level. Both read level because their intervals cannot be re-reported by scaling (a folded
# normal quantile, an inverted randomization test); neither reads the bandwidth, pilot, variance, donut or
# adjustment (their panels say what they ignore). The weak-IV set is a Fit method, not counted here.
INFERENCE = {"bias_aware", "local_randomization"}
CHANGES = {
    "level": (("level", 0.9), INFERENCE),
    "bandwidth (manual)": (("bandwidth", 3.0), {"fit", *FIT_DIAGNOSTICS}),
    "bandwidth (another rule)": (("bandwidth", "coverage"), {"fit", "balance", *FIT_DIAGNOSTICS}),
    "kernel": (("kernel", "uniform"), ALL_BUT_DENSITY | {"bias_aware"}),
    "degree": (("degree", 2), ALL_BUT_DENSITY | {"bias_aware"}),
    "bias_degree": (("bias_degree", 3), ALL_BUT_DENSITY),
    # the checks' balance uses the pilot bandwidth (as Design.checks does), the panel's does not
    "pilot_bandwidth": (("pilot_bandwidth", 9.0), {"fit", "balance", *FIT_DIAGNOSTICS}),
    "variance": (("variance", "hc1"), ALL_BUT_DENSITY),
    # the donut ladder re-selects its own radii, so the donut option does not touch it
    "donut": (("donut", 0.5), ALL_BUT_DENSITY - {"donut"}),
    # a kink has no bias-aware interval: the node says so without calling the engine
    "derivative": (("derivative", 1), ALL_BUT_DENSITY),
    # placebo fits and balance never adjust, so adjusting touches neither
    "adjust": (("adjust", True), ALL_BUT_DENSITY - {"placebo_cutoffs", "balance"}),
    "outcome": (("outcome", "attendance"), ALL_BUT_DENSITY - {"balance"} | INFERENCE),
    "score": (("score", "score_copy"), ALL_BUT_DENSITY | {"density"} | INFERENCE),
    "cutoff": (("cutoff", 41.0), ALL_BUT_DENSITY | {"density"} | INFERENCE),
    "treated": (("treated", "above"), ALL_BUT_DENSITY | INFERENCE),
    "takeup": (("takeup", "enrolled"), ALL_BUT_DENSITY | INFERENCE),
    # the window is chosen by covariate balance, so local randomization reads the covariates
    "covariates": (("covariates", ("age", "prior_math")), {"balance", "local_randomization"}),
    "cluster": (("cluster", None), ALL_BUT_DENSITY | INFERENCE),
    "weights": (("weights", None), ALL_BUT_DENSITY | INFERENCE),
    "smoothness": (("smoothness", 0.5), {"bias_aware"}),
    "window": (("window", 2.0), {"local_randomization"}),
    "statistic": (("statistic", "rank sum"), {"local_randomization"}),
    "permutations": (("permutations", 2000), {"local_randomization"}),
    "seed": (("seed", 99), {"local_randomization"}),
    "column: outcome": (("edit", "math_gain"), ALL_BUT_DENSITY - {"balance"} | INFERENCE),
    "column: covariate": (("edit", "age"), {"balance", "local_randomization"}),
    "column: score": (("edit", "reading_score"), ALL_BUT_DENSITY | {"density"} | INFERENCE),
    "column: unused": (("edit", "free_lunch_unused"), set()),
    # the power panel re-reads the main fit it has (no engine call); subgroups need `groups`
    "effect": (("effect", 0.5), set()),
    "groups": (("groups", "free_lunch"), {"by_group"}),
}
SEED = 20260314     # the board's local randomization seed (a drawn one could not be compared)


def _board(s, data):
    kwargs = {**s.design_kwargs(), "covariates": ["age", "prior_math", "free_lunch"]}
    return seamline.board(data, **kwargs, seed=SEED).wait()


def _apply(board, data, change):
    name, value = change
    if name == "edit":
        if value not in data:
            data[value] = 1.0                       # a column the board does not read
        data.loc[data.index[:300], value] += 0.25   # in place
        return board.check_inputs()
    board.set_option(name, value)
    return None


@pytest.mark.parametrize("label", list(CHANGES))
def test_each_change_makes_exactly_its_engine_calls(label, scenario, calls):
    s, data = scenario
    b = _board(s, data)
    change, expected = CHANGES[label]
    calls.clear()
    _apply(b, data, change)
    b.wait()
    made = {name for name, n in calls.items() if n} - {"fits", "selections", *PARTS}
    if not expected:
        assert calls["fits"] == calls["selections"] == 0, "nothing may be fitted or selected"
    assert made == expected, f"{label}: extra {made - expected}, missing {expected - made}"
    assert calls["checks"] == 0, "the checks summary is assembled, never recomputed"
    assert calls["density"] <= 1 and calls["balance"] <= 2


# The parts of the diagnostics that read no fit option (kept on the Design): how many times each
# change computes them (binned means of the outcome; the score's census behind the score profile;
# the designs of the 8 placebo cutoffs, with their prepared sides and neighbour residuals). Asserted
# part by part, so panels added elsewhere do not disturb these rows.
# Inference parts (notebook/compute_inference.py and the engines behind it): the rule-of-thumb bound is
# kept per design and outcome; each searched bandwidth's moments (jumps, covariance, bias at M = 1) are
# kept per design and specification, so a level or smoothness change evaluates only the few new
# bandwidths of the bounded refinement (never the 60-point grid again: see
# test_a_level_change_reads_the_kept_bandwidth_grid); the Monte Carlo draws and each window's outcome
# test (difference in means) are kept per design, outcome, covariates, draws and seed, so a level
# change draws nothing and tests no window again.
NO_INFERENCE = {"rule of thumb": 0, "bias-aware moments": 0, "randomization draws": 0, "window tests": 0}
REFINED = range(1, 8 * 30)          # the 7 bounded refinements (main + 6 sensitivity bounds), no grid
PART_CHANGES = {
    "level": {"binned means": 0, "score census": 0, "placebo designs": 0, "nested balance": 0,
              "rule of thumb": 0, "bias-aware moments": REFINED, "randomization draws": 0, "window tests": 0},
    "bandwidth (manual)": {"binned means": 0, "score census": 0, "placebo designs": 0, "nested balance": 0,
                           **NO_INFERENCE},
    "bandwidth (another rule)": {"binned means": 0, "score census": 0, "placebo designs": 0, "nested balance": 0,
                                 **NO_INFERENCE},
    # a kernel is a new bias-aware specification: its own bandwidth grid (the bound reads no kernel)
    "kernel": {"binned means": 0, "score census": 0, "placebo designs": 0, "nested balance": 0,
               "rule of thumb": 0, "bias-aware moments": range(60, 60 + 8 * 30), "randomization draws": 0,
               "window tests": 0},
    "variance": {"binned means": 0, "score census": 0, "placebo designs": 0, "nested balance": 0, **NO_INFERENCE},
    "donut": {"binned means": 0, "score census": 0, "placebo designs": 0, "nested balance": 0, **NO_INFERENCE},
    # a new outcome: its own binned means, placebo designs and balance (rows without the outcome drop out)
    "outcome": {"binned means": 1, "score census": 0, "placebo designs": 8, "nested balance": 1,
                "rule of thumb": 1, "randomization draws": 1},
    # a new cutoff: a new Design, so everything once
    "cutoff": {"binned means": 1, "score census": 1, "placebo designs": 8, "nested balance": 1,
               "rule of thumb": 1, "randomization draws": 1},
    # an edited covariate rebuilds the Design; bins, profile and placebo read no covariate, balance does
    "column: covariate": {"binned means": 0, "score census": 0, "placebo designs": 0, "nested balance": 1},
    # a given bound re-reads the kept moments on the grid and refines; nothing of local randomization
    "smoothness": {"nested balance": 0, "rule of thumb": 0, "bias-aware moments": REFINED,
                   "randomization draws": 0, "window tests": 0},
    # a given window: the balance table is kept (its key holds no window); the window's own test is new
    "window": {"nested balance": 0, "rule of thumb": 0, "bias-aware moments": 0, "randomization draws": 1,
               "window tests": 1},
    # another statistic tests the outcome afresh in each window it reports (the balance is kept)
    "statistic": {"nested balance": 0, "rule of thumb": 0, "bias-aware moments": 0},
    # new draws: everything of local randomization once (one pass over all windows), nothing bias-aware
    "permutations": {"nested balance": 1, "rule of thumb": 0, "bias-aware moments": 0, "randomization draws": 1},
    "seed": {"nested balance": 1, "rule of thumb": 0, "bias-aware moments": 0, "randomization draws": 1},
}


@pytest.mark.parametrize("label", list(PART_CHANGES))
def test_each_change_recomputes_only_the_diagnostic_parts_it_reaches(label, scenario, calls):
    s, data = scenario
    b = _board(s, data)
    change, _ = CHANGES[label]
    calls.clear()
    _apply(b, data, change)
    b.wait()
    for part, expected in PART_CHANGES[label].items():
        ok = calls[part] in expected if isinstance(expected, range) else calls[part] == expected
        assert ok, f"{label}: {part} computed {calls[part]} times, expected {expected}"


def test_a_level_change_reads_the_kept_bandwidth_grid(scenario, monkeypatch):
    # the bias-aware search's 60 grid bandwidths are evaluated once per design and specification: a level
    # change evaluates only the refinement's new points, none on the grid
    from seamline.core.bias_aware import GRID_POINTS
    s, data = scenario
    b = _board(s, data)
    evaluated = []
    real = bias_aware._Problem._from_moments

    def counting(problem, h):
        evaluated.append((problem, h[0]))
        return real(problem, h)
    monkeypatch.setattr(bias_aware._Problem, "_from_moments", counting)
    b.set_option("level", 0.9)
    b.wait()
    assert evaluated, "the refinement at a new level evaluates a few new bandwidths"
    problem = evaluated[0][0]
    grid = set(np.geomspace(*problem.bandwidth_range(), GRID_POINTS).tolist())
    assert not grid & {h for _, h in evaluated}
    assert len(evaluated) < 7 * 30


def test_nothing_runs_twice_when_panels_share_a_result(scenario, calls):
    s, data = scenario
    _board(s, data)
    # One density test serves the density panel and the checks; one balance serves both at "mse".
    assert calls["density"] == 1 and calls["balance"] == 1 and calls["checks"] == 0
    assert calls["bandwidths"] == 1 and calls["donut"] == 1 and calls["placebo_cutoffs"] == 1
    assert calls["binned means"] == 1 and calls["score census"] == 1 and calls["placebo designs"] == 8


def test_switching_back_is_a_cache_hit(scenario, calls):
    s, data = scenario
    b = _board(s, data)
    b.set_option("bandwidth", 3.0)
    b.wait()
    calls.clear()
    b.set_option("bandwidth", "mse")
    b.wait()
    assert sum(calls.values()) == 0


def test_the_graph_is_acyclic_and_level_is_a_source_of_the_inference_nodes_only():
    graph = compute_graph(score="x", outcomes=["y"], outcome="y", covariates=["c"], takeup="t")
    # Every other result is computed at 0.95 and re-reported; the inference intervals cannot be.
    assert {n for n in graph.nodes - graph.sources if "level" in graph.sources_of(n)} == {
        "bias_aware", "weak_iv", "local_randomization"}
    assert graph.stale_after({"bandwidth"}) >= {"main_fit", "bins", "sensitivity", "placebo", "donut_ladder"}
    assert not graph.stale_after({"bandwidth"}) & {"density", "selectors", "balance", "checks_balance"}
    assert graph.stale_after({"column:c"}) == {"design", "balance", "checks_balance", "checks",
                                               "local_randomization"}


def test_a_score_unit_change_rebuilds_what_a_cutoff_change_rebuilds(scenario, calls):
    # score_unit rescales every distance from the cutoff, so it reaches exactly what the cutoff reaches:
    # a new Design and every node (a numeric score takes no unit, hence a date copy of the score here).
    s, data = scenario
    dated = data.assign(visit=pd.Timestamp("2024-07-01") + pd.to_timedelta((data[s.score] - s.cutoff) * 86400.0,
                                                                           unit="s"))
    kwargs = {**s.design_kwargs(), "score": "visit", "cutoff": "2024-07-01",
              "covariates": ["age", "prior_math", "free_lunch"]}
    b = seamline.board(dated, **kwargs, seed=SEED).wait()
    calls.clear()
    b.set_option("score_unit", "weeks")
    b.wait()
    made = {name for name, n in calls.items() if n} - {"fits", "selections", *PARTS}
    assert made == CHANGES["cutoff"][1]
    assert {part: calls[part] for part in PART_CHANGES["cutoff"]} == PART_CHANGES["cutoff"]
    calls.clear()
    b.set_option("score_unit", None)          # back to days: every node is a cache hit
    b.wait()
    assert sum(calls.values()) == 0
    graph = compute_graph(score="x", outcomes=["y"], outcome="y", covariates=["c"], takeup="t")
    assert graph.stale_after({"score_unit"}) == graph.stale_after({"cutoff"})


# ---- every panel against the direct Design call ----------------------------------------------------
def _expected(data, spec, options, inference=None):
    """Every panel computed directly with seamline.Design for the given declaration and options."""
    design = Design(data, **spec)
    kw = dict(options)
    inference = {"smoothness": None, "window": None, "statistic": "difference in means", "permutations": 10_000,
                 "seed": SEED, **(inference or {})}
    level = kw["level"]
    rule = kw["bandwidth"] if isinstance(kw["bandwidth"], str) else "mse"
    fit = design.fit(**kw)
    out = {
        "fit": fit,
        "bandwidths": design.bandwidths(kw["outcome"], **{k: kw[k] for k in (
            "kernel", "degree", "bias_degree", "variance", "donut", "derivative", "adjust")}),
        "bins": design.bins(**kw),
        "sensitivity": design.sensitivity(**kw),
        "placebo": design.placebo_cutoffs(**kw),
        "donut": design.donut(**{k: v for k, v in kw.items() if k != "donut"}),
        "density": design.density_test(level=level),
        "score_profile": design.score_profile(**kw),
        "checks": design.checks(**kw),
    }
    if spec.get("covariates"):
        out["balance"] = design.balance(rule=rule, **{k: v for k, v in kw.items() if k not in (
            "outcome", "bandwidth", "pilot_bandwidth", "adjust")})
    # the power panel's curve: Design.power_curve with the board's options (the board passes its main fit)
    out["power"] = design.power_curve(**kw)
    if kw["derivative"] == 0:
        out["bias_aware"] = design.bias_aware(kw["outcome"], smoothness=inference["smoothness"], kernel=kw["kernel"],
                                              degree=kw["degree"], level=level)
    if spec.get("covariates") or inference["window"] is not None:
        out["local_randomization"] = design.local_randomization(
            kw["outcome"], **{k: v for k, v in inference.items() if k != "smoothness"}, level=level)
    if fit.first_stage is not None:
        out["weak_iv"] = fit.weak_iv_conf_set(level)
        out["first_stage"] = fit.first_stage
        out["first_stage_bins"] = design.bins(spec["takeup"], **{
            **{k: v for k, v in kw.items() if k not in ("outcome", "adjust")},
            "bandwidth": fit.bandwidth, "pilot_bandwidth": fit.pilot_bandwidth})
    return out


def _same(got, want, panel):
    if isinstance(want, pd.DataFrame):
        pd.testing.assert_frame_equal(got, want, **TIGHT)
        return
    for table in ("table", "curve", "grid"):
        if hasattr(want, table):
            pd.testing.assert_frame_equal(getattr(got, table)(), getattr(want, table)(), check_exact=False,
                                          **TIGHT, obj=f"{panel}.{table}()")
    if hasattr(want, "robust_conf_int"):
        np.testing.assert_allclose(got.robust_conf_int, want.robust_conf_int, **TIGHT)
        assert got.level == want.level


SETTINGS = [
    ("bandwidth", 3.0), ("bandwidth", "coverage"), ("kernel", "epanechnikov"), ("degree", 2), ("bias_degree", 3),
    ("pilot_bandwidth", 9.0), ("variance", "hc2"), ("level", 0.9), ("donut", 0.5), ("derivative", 1),
    ("adjust", True), ("outcome", "attendance"), ("score", "score_copy"), ("cutoff", 41.0), ("treated", "above"),
    ("takeup", "enrolled"), ("covariates", ("age",)), ("cluster", None), ("weights", None),
    ("smoothness", 0.5), ("window", 2.0), ("statistic", "Kolmogorov-Smirnov"),
]


@pytest.mark.parametrize(("name", "value"), SETTINGS, ids=[f"{n}={v}" for n, v in SETTINGS])
def test_every_panel_equals_the_direct_design_call_after_a_setting(name, value, scenario):
    s, data = scenario
    b = _board(s, data)
    b.set_option(name, value)
    b.wait()
    spec = {**s.design_kwargs(), "covariates": ["age", "prior_math", "free_lunch"]}
    options = {"outcome": spec["outcome"][0], "bandwidth": "mse", "kernel": "triangular", "degree": 1,
               "bias_degree": None, "pilot_bandwidth": None, "variance": "bias-reduced", "level": 0.95,
               "donut": 0.0, "derivative": 0, "adjust": False}
    inference = {}
    if name in options:
        options[name] = value
    elif name in ("smoothness", "window", "statistic"):
        inference[name] = value
    else:
        spec[name] = list(value) if isinstance(value, tuple) else value
    expected = _expected(data, spec, options, inference)
    for panel in b.panels:
        got = b.results[panel]
        if panel not in expected:
            assert isinstance(got, NotApplicable), panel
            continue
        assert got is not None, (panel, b.errors.get(panel))
        _same(got, expected[panel], panel)


def test_a_level_change_equals_the_interval_rebuilt_by_hand(scenario):
    s, data = scenario
    b = _board(s, data)
    before = b.results["density"]
    b.set_option("level", 0.8)
    after = b.results["density"]
    # First principles: centre kept, half-width scaled by z(0.9) / z(0.975) (common practice).
    from scipy import stats
    ratio = stats.norm.ppf(0.9) / stats.norm.ppf(0.975)
    centre = sum(before.ci_below) / 2
    half = (before.ci_below[1] - before.ci_below[0]) / 2
    np.testing.assert_allclose(after.ci_below, (centre - ratio * half, centre + ratio * half), **TIGHT)
    assert after.p_value == before.p_value and after.level == 0.8


# ---- boards with several cutoffs and subgroups (seamline.notebook.designs_graph) -----------------
# change -> (how to apply it, the calls it must make) on a board with cumulative cutoffs 30, 60 and
# groups: the headline cutoff moves every single-cutoff panel and the subgroups (which are taken at
# the headline cutoff) but never the cutoff-specific effects; the level and the effect compute nothing.
SINGLE_PANELS = ALL_BUT_DENSITY | {"density"}
# The inference nodes (compute_inference) read the level and the rows of the headline design, and the
# window chosen by covariate balance reads the covariates.
INFERENCE_NODES = {"bias_aware", "local_randomization"}
DESIGNS_CHANGES = {
    "level": (("level", 0.9), INFERENCE_NODES),
    "effect": (("effect", 0.4), set()),
    "headline_cutoff": (("headline_cutoff", 60.0), SINGLE_PANELS | {"by_group"} | INFERENCE_NODES),
    "bandwidth (manual)": (("bandwidth", 6.0), {"fit", *FIT_DIAGNOSTICS, "by_cutoff", "by_group"}),
    "groups": (("groups", None), set()),
    "column: outcome": (("edit", "investment"), ALL_BUT_DENSITY - {"balance"} | {"by_cutoff", "by_group"}
                        | INFERENCE_NODES),
    "column: covariate": (("edit", "farm_size"), {"balance", "local_randomization"}),
}


def _designs_board():
    from seamline.demo_cutoffs import cumulative_grants_scenario
    s = cumulative_grants_scenario(4000, seed=5)
    data = s.data.copy()
    b = seamline.board(data, score=s.score, cutoff=s.cutoff, outcome="investment", covariates=["farm_size"],
                       groups="cooperative").wait()
    return b, data


@pytest.mark.parametrize("label", list(DESIGNS_CHANGES))
def test_each_change_on_a_board_with_several_cutoffs_makes_exactly_its_engine_calls(label, calls):
    b, data = _designs_board()
    change, expected = DESIGNS_CHANGES[label]
    calls.clear()
    _apply(b, data, change)
    b.wait()
    # the bandwidth-free parts inside the engine calls are counted by PART_CHANGES on a single board
    made = {name for name, n in calls.items() if n} - {"fits", "selections"} - set(PARTS)
    if not expected:
        assert calls["fits"] == calls["selections"] == 0, "nothing may be fitted or selected"
    assert made == expected, f"{label}: extra {made - expected}, missing {expected - made}"
    assert calls["checks"] == 0


def test_a_single_cutoff_board_never_runs_the_designs_nodes(scenario, calls):
    s, data = scenario
    b = _board(s, data)
    assert calls["by_cutoff"] == calls["by_group"] == 0
    assert isinstance(b.results["by_cutoff"], NotApplicable) and isinstance(b.results["subgroups"], NotApplicable)
    graph = compute_graph(score="x", outcomes=["y"], outcome="y")
    assert not graph.nodes & {"cutoff_effects", "group_effects"}


def test_designs_panels_equal_the_direct_design_calls():
    """Reference: Design.at / by_cutoff / by_group / power_curve / sample_size called directly."""
    b, data = _designs_board()
    b.set_option("effect", 0.4)
    b.set_option("headline_cutoff", 60.0)
    b.set_option("level", 0.9)
    b.wait()
    from seamline.demo_cutoffs import cumulative_grants_scenario
    s = cumulative_grants_scenario(4000, seed=5)
    design = Design(data, score=s.score, cutoff=list(s.cutoff), outcome="investment", covariates=["farm_size"])
    at = design.at(60.0)
    kw = dict(outcome="investment", level=0.9)
    np.testing.assert_allclose(b.fit.robust_conf_int, at.fit(**kw).robust_conf_int, **TIGHT)
    pd.testing.assert_frame_equal(b.results["by_cutoff"].table(), design.by_cutoff(**kw).table(), **TIGHT)
    pd.testing.assert_frame_equal(b.results["subgroups"].table(), at.by_group("cooperative", **kw).table(), **TIGHT)
    report = b.results["power"]
    pd.testing.assert_frame_equal(report.table(), at.power_curve(**kw).table(), **TIGHT)
    want = at.sample_size(0.4, power=0.8, **kw)
    assert report.sample.n_total == want.n_total and report.sample.n_window == want.n_window
    assert report.power.power == pytest.approx(at.power(0.4, **kw).power, rel=1e-12)
