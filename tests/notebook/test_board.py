"""Boards built from Python: results, caching, options, errors, subscriptions and exports.

Reference: every number on a board must equal a direct ``seamline.Design(...)`` call on the same
data with the same options (the brief's reference for the notebook layer), and exported tables
must read back to the numbers of the result objects (CSV at full precision via pandas, Markdown at
the tables' three decimals). Data: the package's invented demo scenarios (n = 2000).
"""
from __future__ import annotations

import io
import json
import re

import numpy as np
import pandas as pd
import pytest

import seamline
from seamline.demo_data import fuzzy_scenario, sharp_scenario
from seamline.errors import InvalidOptionError
from seamline.estimate.design import Design
from seamline.notebook.board import NotApplicable, boards, find
from seamline.notebook.reactive import PANELS

pytestmark = pytest.mark.usefixtures("close_new_boards")

TIGHT = dict(rtol=1e-12, atol=1e-12)   # same code path, same data: equal to rounding
APPROX = dict(rel=1e-12, abs=1e-12)


@pytest.fixture
def sharp():
    return sharp_scenario(n=2000, seed=11)


def _kwargs(s):
    return {k: v for k, v in s.design_kwargs().items()}


def _make(s, **options):
    return seamline.board(s.data, **_kwargs(s), **options)


def _same_fit(a, b):
    np.testing.assert_allclose([a.estimate, a.std_error, a.bias_corrected_estimate, a.robust_std_error,
                                *a.bandwidth, *a.robust_conf_int],
                               [b.estimate, b.std_error, b.bias_corrected_estimate, b.robust_std_error,
                                *b.bandwidth, *b.robust_conf_int], **TIGHT)
    assert a.n_used == b.n_used and a.level == b.level


# ---- results -------------------------------------------------------------------------------------
def test_every_panel_equals_the_direct_design_call(sharp):
    b = _make(sharp).wait()
    assert b.status == "fresh" and not b.stale and b.errors == {} and b.updated_at is not None
    assert set(b.results) == set(PANELS)
    ref = Design(sharp.data, **_kwargs(sharp))
    _same_fit(b.fit, ref.fit())
    pd.testing.assert_frame_equal(b.results["bandwidths"], ref.bandwidths())
    pd.testing.assert_frame_equal(b.results["sensitivity"].table(), ref.sensitivity().table())
    pd.testing.assert_frame_equal(b.results["balance"].table(), ref.balance().table())
    pd.testing.assert_frame_equal(b.results["placebo"].table(), ref.placebo_cutoffs().table())
    pd.testing.assert_frame_equal(b.results["donut"].table(), ref.donut().table())
    pd.testing.assert_frame_equal(b.results["bins"].table(), ref.bins().table())
    pd.testing.assert_frame_equal(b.results["checks"].table(), ref.checks().table())
    assert b.results["density"].p_value == pytest.approx(ref.density_test().p_value, **APPROX)
    assert isinstance(b.results["first_stage"], NotApplicable)
    assert "Sharp design" in b.results["first_stage"].reason and b.results["first_stage"].applies is False


def test_fuzzy_board_reports_the_first_stage():
    s = fuzzy_scenario(n=2000, seed=5)
    b = _make(s)
    ref = Design(s.data, **_kwargs(s)).fit()
    _same_fit(b.fit, ref)
    _same_fit(b.results["first_stage"], ref.first_stage)
    fs_bins = b.results["first_stage_bins"]
    assert fs_bins.outcome == s.takeup
    # the take-up plot is drawn at the main fit's bandwidths, so its jump is the reported first stage
    assert fs_bins.fit.estimate == pytest.approx(ref.first_stage.estimate, **APPROX)


def test_the_users_data_is_never_modified(sharp):
    before = sharp.data.copy(deep=True)
    b = _make(sharp)
    b.set_option("kernel", "uniform")
    b.set_option("donut", 0.5)
    b.export("estimate", "csv")
    pd.testing.assert_frame_equal(sharp.data, before)


def test_no_covariates_gives_a_reason_not_an_error(sharp):
    kwargs = {**_kwargs(sharp), "covariates": None}
    b = seamline.board(sharp.data, **kwargs)
    assert isinstance(b.results["balance"], NotApplicable)
    assert "No covariates" in str(b.results["balance"]) and "balance" not in b.errors


# ---- caching and the recompute rules ---------------------------------------------------------
@pytest.fixture
def fit_calls(monkeypatch):
    """Count real (uncached) fits: Design._fit does the work, Design.fit only looks up its cache."""
    calls = []
    real = Design._fit

    def counting(self, spec):
        calls.append(spec)
        return real(self, spec)

    monkeypatch.setattr(Design, "_fit", counting)
    return calls


def test_level_rereports_without_refitting(sharp, fit_calls):
    b = _make(sharp, panels=["fit"])
    first = b.fit
    n = len(fit_calls)
    b.set_option("level", 0.9)
    assert len(fit_calls) == n, "a new level must not refit"
    assert b.fit.level == 0.9 and b.fit.estimate == first.estimate
    ref = Design(sharp.data, **_kwargs(sharp)).fit(level=0.9)
    np.testing.assert_allclose(b.fit.robust_conf_int, ref.robust_conf_int, **TIGHT)


def test_switching_back_to_an_earlier_option_is_a_cache_hit(sharp, fit_calls):
    b = _make(sharp, panels=["fit", "bandwidths"])
    first = b.fit
    b.set_option("bandwidth", 4.0)
    _same_fit(b.fit, Design(sharp.data, **_kwargs(sharp)).fit(bandwidth=4.0))
    n = len(fit_calls)
    changed = []
    b.on_change(lambda board, names: changed.append(names))
    b.set_option("bandwidth", "mse")
    assert b.fit is first and len(fit_calls) == n
    assert "fit" in changed[-1] and "bandwidths" not in changed[-1]   # the selectors did not change


def test_kernel_change_recomputes_every_fit_but_not_the_density_test(sharp):
    b = _make(sharp)
    density, fit = b.results["density"], b.fit
    b.set_option("kernel", "epanechnikov")
    assert b.results["density"] is density
    assert b.fit is not fit and b.fit.kernel == "epanechnikov"
    _same_fit(b.fit, Design(sharp.data, **_kwargs(sharp)).fit(kernel="epanechnikov"))


def test_set_option_rejects_bad_values_and_changes_nothing(sharp):
    b = _make(sharp, panels=["fit"])
    fit = b.fit
    with pytest.raises(InvalidOptionError, match="`kernel` must be one of"):
        b.set_option("kernel", "gaussian")
    with pytest.raises(InvalidOptionError, match="`degree` must be an integer from 0 to 3"):
        b.set_option("degree", 7)
    with pytest.raises(InvalidOptionError, match="`name` must be a setting of the board"):
        b.set_option("colour", "red")
    with pytest.raises(InvalidOptionError, match="`outcome` must be one of the declared outcomes"):
        b.set_option("outcome", "nope")
    assert b.fit is fit and b.options["kernel"] == "triangular"


def test_selecting_another_outcome(sharp):
    b = _make(sharp, panels=["fit"])
    b.set_option("outcome", sharp.outcome[1])
    _same_fit(b.fit, Design(sharp.data, **_kwargs(sharp)).fit(sharp.outcome[1]))


# ---- errors -----------------------------------------------------------------------------------------
def test_a_failing_main_fit_sets_status_error_and_recovers(sharp):
    b = _make(sharp)
    b.set_option("bandwidth", 0.01)            # far too narrow: no observations in the window
    assert b.wait().status == "error" and b.fit is None
    assert b.errors["fit"].startswith("`")     # the engine's own message, e.g. `bandwidth` ...
    assert b.summary()["error"] == b.errors["fit"]
    b.set_option("bandwidth", "mse")
    assert b.wait().status == "fresh" and b.fit is not None and "fit" not in b.errors


def test_a_failing_panel_keeps_the_others(sharp):
    # a covariate observed only far from the cutoff: its balance fit has no data near the cutoff
    data = sharp.data.copy()
    x = data[sharp.score]
    data["sparse"] = np.where((x - sharp.cutoff).abs() > 30, 1.0, np.nan)
    b = seamline.board(data, **{**_kwargs(sharp), "covariates": ["sparse"]}).wait()
    assert b.status == "fresh" and b.fit is not None
    assert b.results["balance"] is None and "balance" in b.errors
    assert b.results["density"] is not None


def test_a_broken_subscriber_does_not_break_the_board(sharp, caplog):
    b = _make(sharp, panels=["fit"])

    def broken(board, changed):
        raise RuntimeError("view bug")

    b.on_change(broken)
    b.set_option("level", 0.99)
    assert b.wait().fit.level == 0.99 and b.status == "fresh"
    assert "view bug" in caplog.text


# ---- pause / resume, subscriptions, summary, registry -------------------------------------------
def test_pause_marks_stale_and_resume_recomputes(sharp):
    data = sharp.data.copy()
    b = seamline.board(data, **_kwargs(sharp), panels=["fit"])
    fit = b.fit
    b.pause()
    outcome = sharp.outcome[0]
    data.loc[data[sharp.score] < sharp.cutoff, outcome] += 1.0      # in place, a used column
    assert b.check_inputs() == {f"column:{outcome}"}
    assert b.stale and b.status == "stale" and b.fit is fit        # paused: old numbers, flagged
    b.resume()
    assert not b.stale and b.wait().status == "fresh"
    _same_fit(b.fit, Design(data, **_kwargs(sharp)).fit())


def test_progress_and_change_notifications(sharp):
    b = _make(sharp, panels=["fit", "bandwidths", "density"]).wait()
    progress, changes = [], []
    b.on_progress(lambda done, total, label: progress.append((done, total, label)))
    unsubscribe = b.on_change(lambda board, changed: changes.append(changed))
    b.set_option("kernel", "uniform")
    b.wait()
    assert progress[-1][0] == progress[-1][1] and progress[-1][2] == "done"
    assert {"fit", "bandwidths"} <= set().union(*changes) and "density" not in set().union(*changes)
    assert any("status" in c for c in changes)
    unsubscribe()
    n = len(changes)
    b.set_option("kernel", "triangular")
    b.wait()
    assert len(changes) == n


def test_summary_is_json_ready(sharp):
    b = _make(sharp, panels=["fit"])
    summary = json.loads(json.dumps(b.summary()))
    assert summary["estimate"] == pytest.approx(b.fit.estimate)
    assert summary["robust_ci"] == pytest.approx(list(b.fit.robust_conf_int))
    assert summary["status"] == "fresh" and summary["kind"] == "sharp" and summary["error"] is None
    assert re.match(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d", summary["updated_at"])


def test_registry_lists_live_boards_and_close_removes(sharp):
    b = _make(sharp, panels=["fit"], name="regtest")
    assert b in boards() and find("regtest") is b
    b.close()
    assert b not in boards() and find("regtest") is None
    assert b.check_inputs() == set()


# ---- exports ------------------------------------------------------------------------------------
def _markdown_numbers(text: str) -> list[str]:
    rows = [line for line in text.splitlines() if line.startswith("| ") and "---" not in line]
    return [cell.strip() for row in rows[1:] for cell in row.strip("|").split("|")]


@pytest.mark.parametrize("what", ["estimate", "sensitivity", "balance", "density", "placebo", "donut", "bins"])
def test_table_exports_read_back(sharp, what):
    b = _make(sharp)
    result = b.results["fit" if what == "estimate" else what]
    table = result.table()
    csv = b.export(what, "csv")
    back = pd.read_csv(io.StringIO(csv))
    numeric = table.select_dtypes("number").columns
    # Exports carry reader labels (seamline.export.labels), in the order of table()'s columns, at full precision.
    assert not set(numeric) & set(back.columns)
    np.testing.assert_allclose(back.select_dtypes("number").to_numpy(float), table[numeric].to_numpy(float),
                               rtol=1e-12)
    markdown = b.export(what, "markdown")
    cells = _markdown_numbers(markdown)
    first = table[numeric[0]].iloc[0]
    assert f"{first:.3f}" in cells or str(first) in cells
    latex = b.export(what, "latex")
    assert latex.count(r"\begin{") == latex.count(r"\end{") and r"\toprule" in latex
    assert "_" not in latex.replace(r"\_", "")          # every underscore escaped
    assert "<table" in b.export(what, "html")
    assert b.export(what, "text").strip()


def test_chart_exports_and_files(sharp, tmp_path):
    b = _make(sharp)
    svg = b.export("estimate", "svg", path=tmp_path / "estimate.svg")
    assert svg.lstrip().startswith("<svg") and (tmp_path / "estimate.svg").read_text() == svg
    png = b.export("density", "png", path=tmp_path / "density.png")
    assert png[:8] == b"\x89PNG\r\n\x1a\n" and (tmp_path / "density.png").read_bytes() == png
    tex = b.export("estimate", "latex", path=tmp_path / "estimate.tex")
    assert (tmp_path / "estimate.tex").read_text() == tex
    assert not (tmp_path / "other.csv").exists()
    b.export("estimate", "csv")                           # no path: nothing written
    assert sorted(p.name for p in tmp_path.iterdir()) == ["density.png", "estimate.svg", "estimate.tex"]


def test_methods_export_and_bad_requests(sharp):
    b = _make(sharp)
    text = b.export("methods", "text")
    assert text.strip() == b.methods_paragraph()
    assert r"math\_gain" in b.export("methods", "latex")
    with pytest.raises(InvalidOptionError, match="`what` must be one of"):
        b.export("everything", "latex")
    with pytest.raises(InvalidOptionError, match="`fmt` must be one of"):
        b.export("estimate", "docx")
    with pytest.raises(InvalidOptionError, match="`fmt` for the methods paragraph"):
        b.export("methods", "png")
    with pytest.raises(InvalidOptionError, match="has none: Sharp design"):
        b.export("first_stage", "csv")


def test_exporting_a_stale_board_warns(sharp):
    data = sharp.data.copy()
    b = seamline.board(data, **_kwargs(sharp), panels=["fit"])
    b.pause()
    data.loc[0, sharp.score] = data[sharp.score].iloc[1]
    b.check_inputs()
    with pytest.warns(UserWarning, match="is stale"):
        b.export("estimate", "markdown")
