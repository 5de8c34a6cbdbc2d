"""The methods paragraph states the specification and carries the tables' own numbers.

Reference: the rendered tables of the same result objects (``to_markdown`` / ``table()``), so a
reader who checks a number in the paragraph against a table finds the same digits; the named
methods are the published ones behind each option (Calonico, Cattaneo & Titiunik
2014; Calonico, Cattaneo & Farrell 2020; Imbens & Kalyanaraman 2012; Cattaneo, Jansson & Ma 2020).
"""
from __future__ import annotations

import re

import numpy as np
import pytest

import seamline
from seamline.demo_data import fuzzy_scenario, sharp_scenario
from seamline.export.methods import methods_paragraph
from seamline.export.table_model import format_number
from seamline.results.fit import CAUTION

pytestmark = pytest.mark.usefixtures("close_new_boards")


@pytest.fixture(scope="module")
def sharp():
    return sharp_scenario(n=2000, seed=41)


@pytest.fixture(scope="module")
def design(sharp):
    return seamline.Design(sharp.data, **sharp.design_kwargs())


def _cells(markdown: str) -> set[str]:
    cells = {c.strip() for line in markdown.splitlines() if line.startswith("|") for c in line.strip("|").split("|")}
    # an interval cell "[low, high]" holds two numbers
    return cells | {part.strip() for c in cells if c.startswith("[") for part in c.strip("[]").split(",")}


def _numbers(text: str) -> list[str]:
    # "p < 0.001" is the paragraph's wording of a p-value the tables show as 0.000
    return re.findall(r"-?\d[\d,]*\.\d+", text.replace("p < 0.001", "p = 0.000"))


def _p(value: float) -> str:
    shown = format_number(value, 3)
    return "p < 0.001" if shown == "0.000" else f"p = {shown}"


def test_every_estimate_number_is_in_the_estimate_table(design):
    fit = design.fit()
    text = methods_paragraph(fit)
    table = _cells(fit.to_markdown())
    lo, hi = fit.robust_conf_int
    for value in (fit.estimate, fit.std_error, fit.bias_corrected_estimate, fit.robust_std_error, lo, hi):
        shown = format_number(value, 3)
        assert shown in table and shown in text
    assert f"and {_p(fit.robust_p_value)}." in text
    assert text.endswith(CAUTION)


def test_the_specification_is_stated(design, sharp):
    fit = design.fit()
    text = methods_paragraph(fit, weights=sharp.weights)
    assert f"jump in {fit.outcome} at the cutoff {fit.score} = {fit.cutoff:g}" in text
    assert "local linear regression (polynomial of degree 1)" in text and "triangular kernel" in text
    assert f"{format_number(fit.bandwidth[0], 3)} on both sides (in units of {fit.score})" in text
    assert "local quadratic fit (degree 2)" in text
    assert f"pilot bandwidth {format_number(fit.pilot_bandwidth[0], 3)}" in text
    assert f"cluster-robust with {fit.n_clusters} clusters" in text
    assert f"weighted by {sharp.weights}" in text
    assert (f"{fit.n_used[0]:,} observations below and {fit.n_used[1]:,} above the cutoff inside the "
            "bandwidth") in text
    assert "treatment follows assignment exactly (a sharp design)" in text


@pytest.mark.parametrize(("rule", "phrase"), [
    ("mse", "common mean-squared-error-optimal bandwidth of Calonico, Cattaneo and Titiunik (2014)"),
    ("mse-split", "mean-squared-error optimal for each side separately"),
    ("coverage", "coverage error of the robust confidence interval (Calonico, Cattaneo and Farrell 2020)"),
    ("ik", "Imbens and Kalyanaraman (2012)"),
    ((3.0, 5.0), "fixed by the analyst at 3.000 below and 5.000 above the cutoff"),
])
def test_each_bandwidth_rule_and_its_values(design, rule, phrase):
    fit = design.fit(bandwidth=rule)
    text = methods_paragraph(fit)
    assert phrase in text
    rules = design.bandwidths()
    if isinstance(rule, str):
        row = rules.set_index("rule").loc[rule]
        for value in (row.bandwidth_below, row.bandwidth_above):
            assert format_number(float(value), 3) in text     # the Bandwidths table's digits


def test_the_two_step_pilot_rule_is_named(sharp):
    kwargs = {**sharp.design_kwargs(), "cluster": None}
    design = seamline.Design(sharp.data, **kwargs)
    fit = design.fit(pilot_bandwidth="two-step")
    text = methods_paragraph(fit)
    assert f"pilot bandwidth {format_number(fit.pilot_bandwidth[0], 3)} on both sides, selected as MSE-optimal" in text
    assert "two-step procedure of Calonico, Cattaneo and Titiunik (2014)" in text
    assert "two-step" not in methods_paragraph(design.fit())      # the default pilot is not called that


def test_variance_donut_and_degree_wording(sharp):
    kwargs = {**sharp.design_kwargs(), "cluster": None}
    fit = seamline.Design(sharp.data, **kwargs).fit(variance="hc1", donut=0.5, degree=2)
    text = methods_paragraph(fit)
    assert "heteroskedasticity-robust HC1 variance estimator" in text
    assert "local quadratic regression (polynomial of degree 2)" in text and "local cubic fit (degree 3)" in text
    assert f"{fit.n_donut:,} observations within 0.500 of the cutoff were excluded (a donut)" in text


def test_fuzzy_paragraph_reports_the_first_stage_as_the_table_does():
    s = fuzzy_scenario(n=2000, seed=42)
    fit = seamline.Design(s.data, **s.design_kwargs()).fit()
    text = methods_paragraph(fit)
    table = fit.to_markdown()
    assert f"Take-up ({s.takeup}) is partial, so the design is fuzzy" in text
    assert "estimated effect (the ratio of the two jumps)" in text
    assert f"F statistic {fit.first_stage_f:.1f}" in text and f"F statistic: {fit.first_stage_f:.1f}" in table
    assert format_number(fit.first_stage.estimate, 3) in _cells(table)
    assert "weak" not in text


def test_a_weak_first_stage_is_called_weak():
    s = fuzzy_scenario(n=2000, seed=43)
    data = s.data.copy()
    rng = np.random.default_rng(0)
    noise = rng.random(len(data)) < 0.93                   # take-up mostly unrelated to eligibility
    data.loc[noise, s.takeup] = (rng.random(noise.sum()) < 0.5).astype(float)
    fit = seamline.Design(data, **s.design_kwargs()).fit()
    assert fit.first_stage_f < 10
    assert "weak by the common F < 10 rule (Staiger and Stock 1997)" in methods_paragraph(fit)


def test_diagnostic_sentences_match_their_tables(sharp):
    b = seamline.board(sharp.data, **sharp.design_kwargs())
    text = b.methods_paragraph()
    density, balance, sens = b.results["density"], b.results["balance"], b.results["sensitivity"]
    assert f"statistic {format_number(density.statistic, 3)}, {_p(density.p_value)}" in text
    assert f"p-value {density.p_value:.3f}" in density.to_markdown()
    smallest = format_number(balance.table()["p_value_holm"].min(), 3)
    assert f"smallest adjusted {_p(float(smallest))}" in text and smallest in _cells(balance.to_markdown())
    assert f"joint test of no jump in any covariate gives {_p(balance.joint_p_value)}" in text
    scaled = sens.table()[sens.table()["label"].str.startswith("x")]
    low, high = format_number(scaled["estimate"].min(), 3), format_number(scaled["estimate"].max(), 3)
    assert f"the estimate ranges from {low} to {high}" in text
    assert {low, high} <= _cells(sens.to_markdown())
    placebo = b.results["placebo"].table()
    assert f"At {len(placebo)} placebo cutoffs" in text
    assert all(format_number(c, 3) in text for c in placebo["cutoff"])
    # every number in the paragraph is one the tables or notes show
    shown = " ".join([b.fit.to_markdown(), density.to_markdown(), balance.to_markdown(), sens.to_markdown(),
                      b.results["placebo"].to_markdown(), b.results["donut"].to_markdown(),
                      b.export("bandwidths", "markdown"),
                      # the inference panels (issue 9): bias-aware interval, randomization and its windows
                      *(b.export(what, "markdown") for what in ("bias_aware", "local_randomization", "windows"))])
    missing = [n for n in _numbers(text) if n.replace(",", "") not in shown and n not in shown]
    assert missing == [], f"numbers in the paragraph that no table shows: {missing}"
