"""The widget view and the static HTML of real boards (no browser: the widget models are checked).

Boards are built on the invented demo scenarios. The view must show the board's own numbers, call
``board.set_option`` from its controls, re-render only the open panels whose results changed,
send its charts as Vega-Lite specs with inline summary data, keep errors inside the panels,
escape user text, and export through ``board.export``. The board computes on its worker thread:
``_settle`` waits for it and for the view's last render before a check.
"""
from __future__ import annotations

import base64
import html
import re

import pytest

import ipywidgets  # noqa: F401  (required: a missing one fails the suite)
import altair  # noqa: F401  (required: a missing one fails the suite)
import vl_convert  # noqa: F401  (required: a missing one fails the suite)

import ipywidgets as widgets  # noqa: E402

from seamline.demo_data import fuzzy_scenario, sharp_scenario  # noqa: E402
from seamline.notebook import charts, static  # noqa: E402
from seamline.notebook.board import Board  # noqa: E402
from seamline.notebook.panels import BoardView, mimebundle  # noqa: E402

PANEL_CLASSES = ["seamline-panel-estimate", "seamline-panel-bandwidths", "seamline-panel-balance",
                 "seamline-panel-density", "seamline-panel-first-stage", "seamline-panel-placebos",
                 # several cutoffs, subgroups, power (panels_designs): on every board, saying where they apply
                 "seamline-panel-by-cutoff", "seamline-panel-subgroups", "seamline-panel-power",
                 "seamline-panel-local-randomization"]
HOSTILE = "<img src=x onerror=alert(1)>"


@pytest.fixture(scope="module")
def sharp_data():
    return sharp_scenario(3000, seed=31)


@pytest.fixture()
def sharp_board(sharp_data):
    """A fresh board for tests that change it."""
    return Board("grant", sharp_data.design_kwargs(), {}, data=sharp_data.data.copy())


@pytest.fixture(scope="module")
def shared_board(sharp_data):
    """One board for the tests that only read it (its charts are then rendered once)."""
    return Board("grant", sharp_data.design_kwargs(), {}, data=sharp_data.data.copy())


@pytest.fixture(scope="module")
def fuzzy_view():
    sc = fuzzy_scenario(4000, seed=32)
    board = Board("benefit", sc.design_kwargs(), {}, data=sc.data)
    return BoardView(board)


def _walk(widget):
    yield widget
    for child in getattr(widget, "children", ()):
        yield from _walk(child)


def _with_class(view, css: str):
    return [w for w in _walk(view) if css in w._dom_classes]


def _settle(view):
    """Wait for the board, then render what the view shows (the worker's last callback may still be
    rendering when ``wait`` returns; rendering the same state again changes nothing)."""
    view.board.wait()
    view._render(["header", view._open_tab()])
    view.settle_charts()
    return view


def _open(view, key: str):
    view._tabs.selected_index = [k for k, _ in static.PANELS].index(key)
    return _settle(view)


def _panel(view, key: str) -> str:
    return _open(view, key)._panels[key].value


def _specs(view, key: str) -> list[dict]:
    """The Vega-Lite specs the open tab ``key`` sends to the browser."""
    _open(view, key)
    return [o["data"][charts.VEGA_LITE_MIME] for _w, out in view._charts[key] for o in out.outputs]


def _count_updates(view) -> dict[str, list]:
    seen: dict[str, list] = {key: [] for key in view._panels}
    seen["header"] = []
    for key, widget in [*view._panels.items(), ("header", view._header)]:
        widget.observe(lambda change, k=key: seen[k].append(change["new"]), names="value")
    return seen


# ---------------------------------------------------------------------------------------------
# Structure and content
# ---------------------------------------------------------------------------------------------
def test_view_is_a_vbox_with_header_controls_and_its_tabs(shared_board):
    view = BoardView(shared_board)
    assert isinstance(view, widgets.VBox) and "seamline-board" in view._dom_classes
    assert list(view._tabs.titles) == ["Estimate", "Bandwidths", "Balance", "Density", "First stage",
                                       "Placebos", "By cutoff", "Subgroups", "Power", "Local randomization"]
    for css in PANEL_CLASSES:
        assert len(_with_class(view, css)) == 1, css
    for css in ("seamline-header-box", "seamline-controls", "seamline-progress", "seamline-tabs"):
        assert _with_class(view, css), css
    assert len(_with_class(view, "seamline-export")) == len(static.PANELS)
    controls = {c for w in _walk(view._controls) for c in w._dom_classes if c.startswith("seamline-control-")}
    assert controls == {f"seamline-control-{n}" for n in (
        "outcome", "bandwidth", "manual-bandwidth", "kernel", "degree", "variance", "donut", "level",
        "smoothness", "effect", "headline-cutoff")}


def test_header_shows_the_design_counts_and_headline(shared_board):
    view = _settle(BoardView(shared_board))
    fit = shared_board.fit
    head = view._header.value
    lo, hi = fit.robust_conf_int
    assert "Sharp cutoff design" in head
    assert f"<b>{charts.number(fit.estimate)}</b>" in head
    assert f"[{charts.number(lo)}, {charts.number(hi)}]" in head
    assert f"{fit.n_used[0]:,} below, {fit.n_used[1]:,} above" in head
    assert f"dropped for missing values: {fit.n_dropped:,}" in head
    assert "Design checks:" in head
    assert re.search(r"updated at \d\d:\d\d:\d\d", head)


def test_panels_show_charts_and_the_results_own_tables_offline(shared_board):
    view = BoardView(shared_board)
    results = shared_board.results
    expected_tables = {"estimate": results["fit"], "bandwidths": results["sensitivity"],
                       "balance": results["balance"], "density": results["density"],
                       "placebos": results["placebo"]}
    for key, result in expected_tables.items():
        body = _panel(view, key)
        assert result._repr_html_() in body, key
        assert "<svg" not in body and "seamline-error" not in body, key   # charts are drawn by the browser
        assert "<script" not in body.lower()
        external = re.findall(r"(?:src|href)=\"(https?:[^\"]*)", body)
        assert external == [], f"{key} loads {external}"
        specs = _specs(view, key)
        assert specs and all(s["$schema"].endswith("/vega-lite/v5.json") for s in specs), key
        for spec in specs:          # summary data inline, nothing fetched
            text = str(spec)
            assert "'url'" not in text and "http" not in text.replace(spec["$schema"], ""), key
    assert len(_specs(view, "placebos")) == 2      # placebo cutoffs and donut


def test_sharp_first_stage_tab_says_why_it_does_not_apply(shared_board):
    view = BoardView(shared_board)
    body = _panel(view, "first_stage")
    assert "seamline-info" in body and _specs(view, "first_stage") == []
    assert "First stage does not apply" in body and "takeup" in body
    bar = _with_class(_with_class(view, "seamline-panel-first-stage")[0], "seamline-export")[0]
    assert [row.layout.display for row in bar.children] == ["none"]        # nothing to export
    bar = _with_class(_with_class(view, "seamline-panel-balance")[0], "seamline-export")[0]
    assert [row.layout.display for row in bar.children] == [None]


def test_fuzzy_first_stage_tab_shows_jump_f_and_plot(fuzzy_view):
    board = fuzzy_view.board
    body = _panel(fuzzy_view, "first_stage")
    assert len(_specs(fuzzy_view, "first_stage")) == 1
    assert f"first-stage F = <b>{charts.number(board.fit.first_stage_f)}</b>" in body
    assert f"<b>{charts.number(board.fit.first_stage.estimate)}</b>" in body
    assert "First stage: take-up" in str(_specs(fuzzy_view, "first_stage")[0])
    assert "Fuzzy cutoff design" in fuzzy_view._header.value


# ---------------------------------------------------------------------------------------------
# Controls and selective re-rendering
# ---------------------------------------------------------------------------------------------
def test_controls_start_at_the_board_options(shared_board):
    view = BoardView(shared_board)
    assert view._outcome.value == "math_gain" and view._outcome.options == ("math_gain", "attendance")
    assert view._rule.value == "mse" and view._manual.disabled
    assert view._kernel.value == "triangular" and view._degree.value == 1
    assert view._variance.value == "cluster" and view._variance.disabled   # the design has clusters
    assert view._level.value == 0.95 and view._donut.value == 0.0


def test_kernel_control_refits_and_updates_the_panels(sharp_board):
    view = BoardView(sharp_board)
    before = sharp_board.fit.estimate
    view._kernel.value = "uniform"
    _settle(view)
    assert sharp_board.options["kernel"] == "uniform" and sharp_board.fit.kernel == "uniform"
    assert sharp_board.fit.estimate != before
    assert f"<b>{charts.number(sharp_board.fit.estimate)}</b>" in view._header.value
    assert "uniform kernel" in view._header.value
    assert sharp_board.fit._repr_html_() in _panel(view, "estimate")
    assert view._progress.layout.visibility == "hidden"


def test_outcome_change_rerenders_only_the_panels_that_read_it(sharp_board):
    # Balance reads only the covariates, so switching the outcome leaves its panel untouched; the
    # open estimate panel ends with the new outcome.
    view = BoardView(sharp_board)
    _settle(view)
    seen = _count_updates(view)
    view._outcome.value = "attendance"
    _settle(view)
    assert sharp_board.fit.outcome == "attendance"
    assert seen["balance"] == []
    assert seen["estimate"] and "attendance" in seen["estimate"][-1]
    assert "seamline-pending" not in seen["estimate"][-1]
    assert "attendance" in _panel(view, "bandwidths")
    assert seen["header"] and "attendance" in view._header.value


def test_editing_a_covariate_rerenders_the_balance_panel_only(sharp_board):
    view = _open(BoardView(sharp_board), "balance")
    seen = _count_updates(view)
    sharp_board.data.loc[sharp_board.data.index[:400], "prior_math"] += 5.0   # in place, a used covariate
    assert sharp_board.check_inputs() == {"column:prior_math"}
    _settle(view)
    assert seen["balance"] and "seamline-pending" not in seen["balance"][-1]
    for key in ("estimate", "bandwidths", "density", "first_stage", "placebos"):
        assert seen[key] == [], key
    assert sharp_board.results["balance"]._repr_html_() in _panel(view, "balance")


def test_manual_bandwidth_slider(sharp_board):
    view = BoardView(sharp_board)
    selected = sharp_board.fit.bandwidth[0]
    assert view._manual.min < selected < view._manual.max
    view._rule.value = "manual"
    assert not view._manual.disabled
    view._manual.value = round(1.5 * selected, 2)
    _settle(view)
    assert sharp_board.fit.bandwidth == pytest.approx((round(1.5 * selected, 2),) * 2, rel=1e-9)
    assert sharp_board.fit.bandwidth_rule == "manual"
    view._rule.value = "coverage"
    _settle(view)
    assert sharp_board.fit.bandwidth_rule == "coverage" and view._manual.disabled


def test_with_a_live_front_end_closed_tabs_wait_until_opened(sharp_board, monkeypatch):
    from seamline.notebook import scheduler
    monkeypatch.setattr(scheduler, "live_front_end", lambda: True)
    view = _settle(BoardView(sharp_board))
    assert view._panels["balance"].value == "" and view._panels["estimate"].value
    seen = _count_updates(view)
    view._kernel.value = "uniform"
    _settle(view)
    assert seen["estimate"] and seen["balance"] == []              # only the open tab is rendered
    assert "balance" in view._dirty
    assert sharp_board.results["balance"]._repr_html_() in _panel(view, "balance")   # ... until opened


def test_panels_for_maps_results_to_panels(shared_board):
    view = BoardView(shared_board)
    assert view.panels_for({"status"}) == ["header"]
    assert view.panels_for({"balance"}) == ["header", "balance"]
    assert view.panels_for({"density", "score_profile"}) == ["header", "density"]
    assert view.panels_for({"placebo"}) == ["header", "placebos"]
    assert view.panels_for({"first_stage_bins"}) == ["header", "first_stage"]
    assert view.panels_for({"bias_aware"}) == view.panels_for({"weak_iv"}) == ["header", "estimate"]
    assert view.panels_for({"local_randomization"}) == ["header", "local_randomization"]
    everything = ["header", "estimate", "bandwidths", "balance", "density", "first_stage", "placebos",
                  "by_cutoff", "subgroups", "power", "local_randomization"]
    assert view.panels_for({"fit"}) == ["header", "estimate", "bandwidths", "density", "first_stage",
                                        "placebos", "by_cutoff"]
    assert view.panels_for(set()) == everything
    assert view.panels_for({"something new"}) == everything


def test_progress_bar_shows_while_recomputing(sharp_board):
    view = _settle(BoardView(sharp_board))
    states = []
    sharp_board.on_progress(lambda done, total, label: states.append(
        (label, view._progress.layout.visibility, view._progress.max)))
    view._degree.value = 2
    _settle(view)
    working = [s for s in states if s[0] != "done"]
    assert working and all(vis == "visible" for _, vis, _ in working)
    # the headline first, then the open tab's results, then the rest once the board is idle
    labels = [label for label, _, _ in working]
    # the last is the last panel, in PANELS order, that a degree change touches (local randomization
    # reads no degree, so the weak-instrument set, NotApplicable on this sharp board, comes last)
    assert labels[:2] == ["main estimate", "binned means"] and labels[-1] == "weak-instrument-robust set"
    view._on_change(sharp_board, {"status"})
    assert view._progress.layout.visibility == "hidden"


# ---------------------------------------------------------------------------------------------
# Errors never escape
# ---------------------------------------------------------------------------------------------
def test_a_rejected_value_is_reported_beside_the_controls(sharp_board):
    view = BoardView(sharp_board)
    estimate = sharp_board.fit.estimate
    view._apply("bandwidth", -1.0)
    assert "seamline-error" in view._message.value and "bandwidth" in view._message.value
    assert sharp_board.fit.estimate == estimate and view._rule.value == "mse"
    view._kernel.value = "epanechnikov"                       # the next change clears the message
    assert view._message.value == ""
    _settle(view)


def test_a_failing_recompute_shows_in_the_panels_and_recovers(sharp_board):
    view = BoardView(sharp_board)
    view._donut.value = 1000.0                               # no observations outside the donut
    _settle(view)
    assert sharp_board.status == "error"
    message = html.escape(sharp_board.errors["fit"])
    assert "seamline-error" in view._header.value and message in view._header.value
    for key in view._panels:
        assert "seamline-error" in _panel(view, key), key
    view._donut.value = 0.0
    _settle(view)
    assert sharp_board.status == "fresh"
    assert "seamline-error" not in _panel(view, "estimate") and _specs(view, "estimate")
    assert "seamline-error" not in view._header.value


def test_a_failed_diagnostic_stays_inside_its_panel(sharp_data):
    # A constant covariate cannot be checked for balance; the other panels are unaffected.
    kwargs = sharp_data.design_kwargs()
    kwargs["covariates"] = ["age", "constant"]
    board = Board("grant", kwargs, {}, data=sharp_data.data.assign(constant=1.0))
    assert "balance" in board.errors
    view = BoardView(board)
    body = _panel(view, "balance")
    assert "seamline-error" in body and html.escape(board.errors["balance"]) in body
    assert "seamline-error" not in _panel(view, "estimate")
    assert "seamline-error" not in _panel(view, "density") and _specs(view, "density")


def test_a_chart_that_cannot_be_drawn_keeps_the_table(sharp_board, monkeypatch):
    def broken(chart):
        raise RuntimeError("renderer unavailable")
    static._SVG_CACHE.clear()
    monkeypatch.setattr(charts, "to_svg", broken)
    body = static.panel_html(sharp_board, "balance")
    assert "The chart could not be drawn" in body and "renderer unavailable" in body
    assert sharp_board.results["balance"]._repr_html_() in body


def test_a_broken_board_renders_an_error_not_an_exception():
    class Empty:
        name = "empty"
        results = {"fit": None}
        errors = {"fit": "`cutoff` must lie inside the score's range; got 400."}
    body = static.panel_html(Empty(), "estimate")
    assert "seamline-error" in body and "must lie inside" in body
    assert "seamline-error" in static.header_html(Empty())
    assert "seamline-error" in static.panel_html(Empty(), "no such panel")


# ---------------------------------------------------------------------------------------------
# Escaping
# ---------------------------------------------------------------------------------------------
def test_user_text_is_escaped_everywhere():
    sc = sharp_scenario(2000, seed=33)
    data = sc.data.rename(columns={"math_gain": HOSTILE, "age": "age<script>"})
    board = Board(HOSTILE, {"score": "reading_score", "cutoff": 40, "outcome": HOSTILE,
                            "treated": "below", "covariates": ["age<script>", "prior_math"]}, {}, data=data)
    view = BoardView(board)
    pages = [view._header.value, *(w.value for w in view._panels.values()), static.static_html(board)]
    for page in pages:
        assert "<img" not in page and "<script" not in page
    assert html.escape(HOSTILE) in view._header.value
    assert html.escape(HOSTILE) in _panel(view, "estimate")
    assert "age&lt;script&gt;" in _panel(view, "balance")


# ---------------------------------------------------------------------------------------------
# Exports
# ---------------------------------------------------------------------------------------------
def _buttons(view, panel_css: str, fmt: str):
    box = _with_class(view, panel_css)[0]
    return [w for w in _walk(box) if f"seamline-export-{fmt}" in w._dom_classes]


def _link_payload(html_text: str) -> bytes:
    uri = re.search(r'href="data:[^;]+;base64,([^"]+)"', html_text).group(1)
    return base64.b64decode(uri)


def test_export_buttons_call_board_export(shared_board):
    view = BoardView(shared_board)
    out = _with_class(_with_class(view, "seamline-panel-balance")[0], "seamline-export-result")[0]
    _buttons(view, "seamline-panel-balance", "latex")[0].click()
    area = out.children[0]
    assert isinstance(area, widgets.Textarea)
    assert area.value == shared_board.export("balance", "latex")
    assert r"\begin{tabular}" in area.value and r"\toprule" in area.value
    assert _link_payload(out.children[1].value).decode("utf-8") == area.value
    assert 'download="grant_balance.tex"' in out.children[1].value

    _buttons(view, "seamline-panel-balance", "csv")[0].click()
    assert out.children[0].value == shared_board.export("balance", "csv")

    _buttons(view, "seamline-panel-estimate", "png")[0].click()
    estimate_out = _with_class(_with_class(view, "seamline-panel-estimate")[0], "seamline-export-result")[0]
    png = _link_payload(estimate_out.children[0].value)
    assert png.startswith(b"\x89PNG\r\n\x1a\n") and len(png) > 10_000

    _buttons(view, "seamline-panel-estimate", "svg")[0].click()
    svg = _link_payload(estimate_out.children[0].value).decode("utf-8")
    assert svg.startswith("<svg") and "math_gain" in svg


def test_export_failure_is_shown_not_raised(shared_board):
    view = BoardView(shared_board)
    first_stage = _with_class(view, "seamline-panel-first-stage")[0]
    _buttons(view, "seamline-panel-first-stage", "markdown")[0].click()
    out = _with_class(first_stage, "seamline-export-result")[0]
    assert "seamline-error" in out.children[0].value


def test_methods_paragraph_button(shared_board):
    view = BoardView(shared_board)
    button = [w for w in _walk(view) if "seamline-export-methods" in w._dom_classes][0]
    button.click()
    assert view._methods_out.children[0].value == shared_board.methods_paragraph()


# ---------------------------------------------------------------------------------------------
# Static rendition and the output bundle
# ---------------------------------------------------------------------------------------------
def test_static_html_is_self_contained(shared_board):
    page = static.static_html(shared_board)
    for css in ("estimate", "bandwidths", "balance", "density", "first-stage", "placebos", "by-cutoff",
                "subgroups", "power", "local-randomization"):
        assert f'class="seamline-static-{css}"' in page
    # six diagnostic charts, the power curve, the bias-aware interval against M and the balance over
    # windows (by cutoff and subgroups do not apply here)
    assert page.count("<svg") == 9
    assert "<script" not in page.lower() and "<style" not in page.lower()
    assert shared_board.fit._repr_html_() in page
    assert re.findall(r"(?:src|href)=\"(https?:[^\"]*)", page) == []


def test_mimebundle_pairs_the_widget_with_its_static_copy(shared_board):
    view = BoardView(shared_board)
    bundle = mimebundle(view)
    assert bundle["application/vnd.jupyter.widget-view+json"]["model_id"] == view.model_id
    assert bundle["text/html"] == static.static_html(shared_board)


def test_closing_the_view_unsubscribes(sharp_board):
    view = BoardView(sharp_board)
    seen = _count_updates(view)
    view.close()
    sharp_board.set_option("kernel", "uniform")
    sharp_board.wait()
    assert all(v == [] for v in seen.values())


def test_panel_tables_are_kept_by_result_identity_and_never_go_stale():
    # A live view re-renders a panel each time one of its results arrives; tables of results
    # that did not change come from static_parts.memo_html, and a new result is always rendered.
    from seamline.notebook import static_parts
    calls = []

    class Result:
        def __init__(self, text):
            self.text = text

        def _repr_html_(self):
            calls.append(self.text)
            return f"<table>{self.text}</table>"

    a, b = Result("a"), Result("b")
    assert static_parts._table_html(a) == "<table>a</table>"
    assert static_parts._table_html(a) == "<table>a</table>"
    assert calls == ["a"]
    assert static_parts._table_html(b) == "<table>b</table>"
    assert calls == ["a", "b"]
    for i in range(static_parts._MEMO_SIZE + 1):      # bounded: the oldest entries go
        static_parts._table_html(Result(str(i)))
    static_parts._table_html(a)
    assert calls.count("a") == 2
