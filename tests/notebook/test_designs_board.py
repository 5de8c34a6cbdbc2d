"""Boards with several cutoffs, subgroups and power: the cell, the panels, exports and bad input.

References: every panel number is checked against the direct ``seamline.Design`` call for the same
declaration (``Design.by_cutoff``, ``Design.at``, ``Design.by_group``, ``Design.power_curve``,
``Design.power``, ``Design.sample_size``: a board only routes and re-reports what the engine
computes); the test of equal effects against the chi-square statistic rebuilt from the rows with
``scipy.stats.chi2`` (precision-weighted mean, G - 1 degrees of freedom: common practice); power
against no effect against the size of the test, 1 - level (first principles). Data: the package's
invented demo scenarios (``seamline.demo_cutoffs``), for demos only -- never a reference value.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import seamline
from seamline.demo_cutoffs import cumulative_grants_scenario, district_cutoffs_scenario
from seamline.errors import DesignSpecError, InvalidOptionError
from seamline.notebook import static
from seamline.notebook.magic import parse_spec
from seamline.notebook.spec import NotApplicable

pytestmark = pytest.mark.usefixtures("close_new_boards")

TIGHT = dict(rtol=1e-9, atol=1e-12)
MACHINE = ("robust_ci_low", "robust_ci_high", "std_error", "n_below", "bandwidth_below", "units_below",
           "robust_p_value")


@pytest.fixture(scope="module")
def farms():
    return cumulative_grants_scenario(3000, seed=14)


@pytest.fixture(scope="module")
def districts():
    return district_cutoffs_scenario(3000, seed=15)


def _ns(**extra):
    s = cumulative_grants_scenario(600, seed=2)
    return {"farms": s.data, "thresholds": [30, 60], "planned": 0.4, "when": "2024-03-01", **extra}


BASE = "data: farms\nscore: support_points\noutcome: investment\n"


# ---- the cell ------------------------------------------------------------------------------------
@pytest.mark.parametrize(("line", "cutoff"), [
    ("cutoff: 30, 60", (30.0, 60.0)),
    ("cutoff: [30, 60]", (30.0, 60.0)),
    ("cutoff: thresholds", (30.0, 60.0)),          # a notebook variable holding a list
    ("cutoff: 30", 30.0),
    ("cutoff: [45]", 45.0),
    ("cutoff: cooperative", "cooperative"),        # a column of per-unit cutoffs (checked by the Design)
    ("cutoff: 'cooperative'", "cooperative"),
    ("cutoff: 2024-03-01", "2024-03-01"),          # a date still reads as a date (date scores)
])
def test_the_cutoff_line_reads_numbers_lists_columns_variables_and_dates(line, cutoff):
    spec = parse_spec(BASE + line, _ns())
    assert spec.design_kwargs["cutoff"] == cutoff


@pytest.mark.parametrize(("line", "pattern"), [
    ("cutoff: 60, 30", r"^line 5: `cutoff` must list cumulative cutoffs in increasing order .*got 60, 30\. "
                       r"Write `cutoff: 30, 60`"),
    ("cutoff: 30, 30", r"increasing order without repeats; got 30, 30\. Write `cutoff: 30`"),
    ("cutoff: 30, sixty", r"^line 5: `cutoff` must list numbers when it lists several cutoffs; got '30, sixty'"),
    ("cutoff: [30, 'x']", r"must list numbers when it lists several cutoffs"),
    # a quoted expression is not a column name
    ("cutoff: 'support_points + 1'", r"^line 5: `cutoff` in quotes must name a column of the data .* or a "
                                     r"date; got \"'support_points \+ 1'\", which is neither"),
    ("cutoff: threshold_col", r"^line 5: `cutoff` must be a number, a column name, increasing numbers or the "
                              r"name of a notebook variable; got 'threshold_col', which is neither"),
    ("cutoff: 30, 60\ngroups: coop", r"^line 6: `groups` must name a column of the data; got 'coop'.*"
                                     r"Did you mean 'cooperative'"),
    ("cutoff: 30, 60\neffect: big", r"^line 6: `effect` must be a number or the name of a notebook variable"),
    ("cutoff: 30, 60\nheadline: 60", r"^line 6: `headline` must be a known key.*Did you mean `headline_cutoff`"),
])
def test_bad_cutoff_lines_name_the_line_and_the_fix(line, pattern):
    with pytest.raises(DesignSpecError, match=pattern):
        parse_spec(BASE + line, _ns())


def test_new_keys_read_literals_and_variables():
    spec = parse_spec(BASE + "cutoff: 30, 60\ngroups: cooperative\neffect: planned\nheadline_cutoff: 60", _ns())
    assert spec.design_kwargs["groups"] == "cooperative"
    assert spec.design_kwargs["effect"] == 0.4 and spec.spec_variables["effect"] == "planned"
    assert spec.design_kwargs["headline_cutoff"] == 60.0


def test_a_cell_builds_the_board_and_a_cutoff_column_outside_the_data_is_pointed(farms):
    from seamline.notebook.magic import build_board
    ns = _ns()
    board = build_board(parse_spec(BASE + "cutoff: 30, 60\ngroups: cooperative", ns, name="grants"), ns)
    board.refresh()
    assert board.wait().status == "fresh" and board.fit.cutoff == 30.0
    # a cutoff column with one distinct value: the engine's named error, on the cutoff line
    ns["farms"] = ns["farms"].assign(same=40.0)
    with pytest.raises(DesignSpecError, match=r"^line 4: `cutoff` column 'same' must hold at least two distinct"):
        build_board(parse_spec("data: farms\nscore: support_points\ncutoff: same\noutcome: investment", ns,
                               name="grants2"), ns)


# ---- every panel against the engine ------------------------------------------------------------
def test_column_board_panels_equal_the_engine(districts):
    d = districts
    b = seamline.board(d.data, score=d.score, cutoff=d.cutoff, outcome="repair_spending", groups="owner",
                       effect=0.5, level=0.9)
    design = seamline.Design(d.data, score=d.score, cutoff=d.cutoff, outcome="repair_spending", cluster=None)
    kw = dict(level=0.9)
    fit = design.fit(**kw)
    np.testing.assert_allclose(b.fit.robust_conf_int, fit.robust_conf_int, **TIGHT)   # headline: the pooled fit
    effects, want = b.results["by_cutoff"], design.by_cutoff(**kw)
    pd.testing.assert_frame_equal(effects.table(), want.table(), **TIGHT)
    assert effects.pooled.estimate == fit.estimate
    pd.testing.assert_frame_equal(effects.decomposition.table(), want.decomposition.table(), **TIGHT)
    # each row is its cutoff's own single-design fit
    for row in effects.rows:
        own = design.at(row.label).fit(**kw)
        assert row.estimate == pytest.approx(own.estimate, rel=1e-9)
    # the equality test rebuilt from the rows (independent rows, precision weights, G - 1 df)
    t = np.array([r.robust_estimate for r in effects.rows])
    v = np.array([r.robust_std_error ** 2 for r in effects.rows])
    mean = np.sum(t / v) / np.sum(1 / v)
    chi = float(np.sum((t - mean) ** 2 / v))
    assert effects.equality.statistic == pytest.approx(chi, rel=1e-9)
    assert effects.equality_p_value == pytest.approx(stats.chi2.sf(chi, len(t) - 1), rel=1e-9)
    groups, want_groups = b.results["subgroups"], design.by_group("owner", **kw)
    pd.testing.assert_frame_equal(groups.table(), want_groups.table(), **TIGHT)
    report = b.results["power"]
    pd.testing.assert_frame_equal(report.table(), design.power_curve(**kw).table(), **TIGHT)
    assert report.power.power == pytest.approx(design.power(0.5, **kw).power, rel=1e-12)
    sample = design.sample_size(0.5, power=0.8, **kw)
    assert (report.sample.n_total, report.sample.n_window) == (sample.n_total, sample.n_window)
    # the effect detectable with 80% power has power 0.8 (first principles: the curve's own formula)
    assert design.power(report.detectable, **kw).power == pytest.approx(0.8, abs=1e-9)


def test_cumulative_board_headline_is_the_chosen_cutoff(farms):
    s = farms
    b = seamline.board(s.data, score=s.score, cutoff=list(s.cutoff), outcome="investment")
    design = seamline.Design(s.data, score=s.score, cutoff=list(s.cutoff), outcome="investment")
    assert b.fit.estimate == design.at(30.0).fit().estimate
    b.set_option("headline_cutoff", 60)
    assert b.fit.estimate == design.at(60.0).fit().estimate
    assert b.results["density"].p_value == design.at(60.0).density_test().p_value
    pd.testing.assert_frame_equal(b.results["by_cutoff"].table(), design.by_cutoff().table(), **TIGHT)
    assert b.results["by_cutoff"].decomposition is None
    assert isinstance(b.results["subgroups"], NotApplicable)


def test_power_against_no_effect_is_the_size_of_the_test(farms):
    s = farms
    b = seamline.board(s.data, score=s.score, cutoff=30.0, outcome="investment", effect=0.0, level=0.9)
    report = b.results["power"]
    assert report.power.power == pytest.approx(1 - 0.9, abs=1e-12)
    assert report.sample is None and "`effect` must be non-zero" in report.sample_error
    html = static.panel_html(b, "power", charts=False)
    assert "seamline-error" in html and "The sample size could not be computed" in html
    assert "80% power against an effect of about" in html and "se(n) =" in html     # the scaling rule
    b.set_option("effect", 0.5)                                                      # the board goes on
    assert b.results["power"].sample is not None


# ---- panels and the not-applicable tabs ---------------------------------------------------------
def test_panels_show_tables_charts_and_say_where_they_do_not_apply(districts, farms):
    d = districts
    b = seamline.board(d.data, **{**d.design_kwargs(), "covariates": None}, groups="owner")
    by_cutoff = static.panel_html(b, "by_cutoff")
    assert "Pooled estimate" in by_cutoff or "pooled estimate" in by_cutoff
    assert "Test of equal effects across cutoffs" in by_cutoff and by_cutoff.count("<svg") == 1
    assert "weighted average" in by_cutoff and "seamline-error" not in by_cutoff
    subgroups = static.panel_html(b, "subgroups")
    # owners and renters share street blocks (clusters): the test says how it treats that
    assert "Assumption:" in subgroups and "cluster" in subgroups
    single = seamline.board(farms.data, score=farms.score, cutoff=30.0, outcome="investment")
    assert "By cutoff does not apply to this board" in static.panel_html(single, "by_cutoff", charts=False)
    assert "`groups: &lt;column&gt;`" in static.panel_html(single, "subgroups", charts=False)
    assert "Set an effect" in static.panel_html(single, "power", charts=False)


def test_a_group_with_too_few_units_is_reported_on_its_row_and_the_others_shown(farms):
    data = farms.data.copy()
    data["region"] = np.where(data["support_points"] > 25, "hills", "plain")
    data.loc[data.index[:3], "region"] = "islands"          # three farms: too few on both sides
    b = seamline.board(data, score=farms.score, cutoff=30.0, outcome="investment", groups="region")
    rows = {r.label: r for r in b.results["subgroups"].rows}
    assert not rows["islands"].fitted and "too few units on one side" in rows["islands"].note
    assert rows["hills"].fitted
    html = static.panel_html(b, "subgroups", charts=False)
    assert "too few units on one side" in html


def test_bad_board_input_shows_in_the_panels_and_the_kernel_goes_on(farms):
    s = farms
    b = seamline.board(s.data, score=s.score, cutoff=list(s.cutoff), outcome="investment")
    b.set_option("headline_cutoff", 45)
    assert "`headline_cutoff` must be one of the cutoffs 30, 60; got 45" in b.errors["fit"]
    assert "headline_cutoff" in static.panel_html(b, "estimate")
    b.set_option("headline_cutoff", 60)
    assert b.wait().status == "fresh" and b.fit.cutoff == 60.0
    b.set_option("groups", "no_such_column")
    assert "no_such_column" in b.errors["subgroups"] and b.status == "fresh"
    with pytest.raises(InvalidOptionError, match=r"`effect` must be a finite number"):
        b.set_option("effect", "large")
    with pytest.raises(InvalidOptionError, match=r"increasing order"):
        b.set_option("cutoff", (60, 30))


# ---- exports, methods paragraph, script ---------------------------------------------------------
def test_every_new_table_and_chart_exports_with_reader_labels(districts):
    d = districts
    b = seamline.board(d.data, **{**d.design_kwargs(), "covariates": None}, groups="owner", effect=0.5)
    for what in ("by_cutoff", "decomposition", "subgroups", "power", "sample_size"):
        for fmt in ("markdown", "csv", "latex", "html", "text"):
            text = b.export(what, fmt)
            assert not [m for m in MACHINE if m in text], (what, fmt)
        assert "Note" not in b.export(what, "csv").splitlines()[0]     # an all-blank column is dropped (header)
    assert "pooled (normalised score)" in b.export("by_cutoff", "csv")
    csv = b.export("by_cutoff", "csv")
    assert "Robust 95% CI (low)" in csv and "Robust 95% CI (high)" in csv     # CSV keeps the bounds apart
    for what in ("by_cutoff", "subgroups", "power"):
        assert b.export(what, "svg").lstrip().startswith("<svg")
    cumulative = seamline.board(cumulative_grants_scenario(2000, seed=3).data, score="support_points",
                                cutoff=[30, 60], outcome="investment")
    with pytest.raises(InvalidOptionError, match=r"`what` \"decomposition\" needs a cutoff column"):
        cumulative.export("decomposition", "csv")


def test_the_methods_paragraph_cites_the_methods_where_they_apply(districts, farms):
    d = districts
    b = seamline.board(d.data, **{**d.design_kwargs(), "covariates": None}, groups="owner", effect=0.5)
    text = b.methods_paragraph()
    assert "Cattaneo, Keele, Titiunik and Vazquez-Bare (2016)" in text
    assert "Cattaneo, Titiunik and Vazquez-Bare (2019)" in text and "se(n) =" in text
    assert "By owner" in text and "test of equal effects across groups" in text
    assert text.rstrip().endswith("does not replace judgement about the design.")   # cautions still last
    effects = b.results["by_cutoff"]
    assert f"{effects.rows[0].estimate:.3f} at cutoff 45" in text
    plain = seamline.board(farms.data, score=farms.score, cutoff=30.0, outcome="investment").methods_paragraph()
    assert "Vazquez-Bare" not in plain       # one cutoff, no groups, no planned effect: nothing added


def test_editing_the_cutoff_column_in_place_recomputes_the_board(districts):
    data = districts.data.copy()
    b = seamline.board(data, score=districts.score, cutoff="district_threshold", outcome="repair_spending")
    before = b.results["by_cutoff"]
    data.loc[data["district"] == "west", "district_threshold"] = 58.0       # in place, as a user would
    assert "column:district_threshold" in b.check_inputs()
    after = b.results["by_cutoff"]
    assert after is not before and [r.label for r in after.rows] == [45.0, 50.0, 55.0, 58.0]
    want = seamline.Design(data, score=districts.score, cutoff="district_threshold", outcome="repair_spending")
    assert b.fit.estimate == want.fit().estimate


def test_the_view_has_effect_and_headline_controls(farms):
    from seamline.notebook.panels import BoardView
    s = farms
    b = seamline.board(s.data, score=s.score, cutoff=list(s.cutoff), outcome="investment")
    view = BoardView(b.wait())
    headline, effect = view._designs.headline, view._designs.effect
    assert headline.layout.display is None and [v for _l, v in headline.options] == [30.0, 60.0]
    headline.value = 60.0
    assert b.wait().fit.cutoff == 60.0
    effect.value = "0.3"
    assert b.wait().spec["effect"] == 0.3 and b.results["power"].sample is not None
    effect.value = "a lot"                          # shown beside the controls; nothing changes
    assert "The effect was not changed" in view._message.value and b.spec["effect"] == 0.3
    single = BoardView(seamline.board(s.data, score=s.score, cutoff=30.0, outcome="investment").wait())
    assert single._designs.headline.layout.display == "none"
    view.close()
    single.close()


def test_the_header_says_which_cutoff_the_headline_is(farms, districts):
    s = farms
    b = seamline.board(s.data, score=s.score, cutoff=list(s.cutoff), outcome="investment", headline_cutoff=60)
    assert "Cumulative cutoffs 30, 60: the headline and the single-cutoff tabs show the cutoff 60" in \
        static.header_html(b)
    d = districts
    column = seamline.board(d.data, score=d.score, cutoff=d.cutoff, outcome="repair_spending")
    assert "the headline pools every unit on the normalised score" in static.header_html(column)
    single = seamline.board(s.data, score=s.score, cutoff=30.0, outcome="investment")
    assert "seamline-cutoffs-note" not in static.header_html(single)


def test_export_buttons_only_where_there_is_a_table(farms, districts):
    s = farms
    cumulative = seamline.board(s.data, score=s.score, cutoff=list(s.cutoff), outcome="investment")
    assert static.export_available(cumulative, "by_cutoff") and not static.export_available(cumulative,
                                                                                            "decomposition")
    assert not static.export_available(cumulative, "subgroups") and static.export_available(cumulative, "power")
    column = seamline.board(districts.data, score=districts.score, cutoff=districts.cutoff, outcome="repair_spending")
    assert static.export_available(column, "decomposition")


def test_inference_panels_of_a_cumulative_board_read_the_headline_cutoff():
    """Reference: Design.at(c).bias_aware / local_randomization called directly (the headline cutoff's
    own design); found in the browser run of the fourth demo, where the whole design was asked."""
    from seamline.demo_cutoffs import cumulative_grants_scenario
    s = cumulative_grants_scenario(3000, seed=4)
    b = seamline.board(s.data, score=s.score, cutoff=list(s.cutoff), outcome="investment",
                       covariates=["farm_size"], headline_cutoff=60.0, window=3.0, seed=7,
                       permutations=999).wait()
    at = seamline.Design(s.data, score=s.score, cutoff=list(s.cutoff), outcome="investment",
                covariates=["farm_size"]).at(60.0)
    aware, want = b.results["bias_aware"], at.bias_aware("investment")
    assert aware.conf_int == pytest.approx(want.conf_int, rel=1e-12)
    lr = b.results["local_randomization"]
    direct = at.local_randomization("investment", window=3.0, seed=7, permutations=999)
    assert lr.estimate == pytest.approx(direct.estimate, rel=1e-12) and lr.p_value == direct.p_value
