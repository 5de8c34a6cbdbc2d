"""Chart builders, checked through their Vega-Lite specs (``to_dict()``) without a browser.

Every chart is built from real seamline results on the invented demo scenarios (the data are
invented; nothing here checks an estimator -- the engine's own tests do that against statsmodels,
linearmodels and published designs). What is checked: the chart draws exactly the numbers of the
result tables it is given (and only summary rows, never raw observations), marks the cutoff, the
bandwidth and the selectors where the results say they are, names its axes after the user's
columns, colours the treated side, and renders offline to SVG and PNG.
"""
from __future__ import annotations

import math
import re
import struct

import numpy as np
import pandas as pd
import pytest

import altair  # noqa: F401  (required: a missing one fails the suite)
import vl_convert  # noqa: F401  (required: a missing one fails the suite)

import seamline  # noqa: E402
from seamline.demo_data import discrete_scenario, fuzzy_scenario, sharp_scenario  # noqa: E402
from seamline.notebook import charts  # noqa: E402
from seamline.notebook.board import Board  # noqa: E402

# Values in a chart spec are rounded to 6 significant digits (charts._records).
REL = 1e-5


# ---------------------------------------------------------------------------------------------
# Fixtures: real results on invented data
# ---------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def sharp():
    sc = sharp_scenario(3000, seed=21)
    design = seamline.Design(sc.data, **sc.design_kwargs())
    fit = design.fit()
    return sc, design, fit


@pytest.fixture(scope="module")
def fuzzy():
    sc = fuzzy_scenario(4000, seed=22)
    design = seamline.Design(sc.data, **sc.design_kwargs())
    return sc, design, design.fit()


@pytest.fixture(scope="module")
def sharp_board():
    sc = sharp_scenario(3000, seed=21)
    return Board("grant", sc.design_kwargs(), {}, data=sc.data)


@pytest.fixture(scope="module")
def fuzzy_board():
    sc = fuzzy_scenario(4000, seed=22)
    return Board("benefit", sc.design_kwargs(), {}, data=sc.data)


# ---------------------------------------------------------------------------------------------
# Spec helpers
# ---------------------------------------------------------------------------------------------
def _layers(spec: dict, data: dict | None = None) -> list[dict]:
    """Flatten nested layers of a (possibly faceted) spec; children inherit their parent's data."""
    if "spec" in spec:
        spec = spec["spec"]
    out = []
    for layer in spec.get("layer", []):
        inherited = layer.get("data") or data
        if "layer" in layer:
            out.extend(_layers(layer, inherited))
        else:
            out.append({**layer, "data": inherited} if inherited and "data" not in layer else layer)
    return out


def _mark(layer: dict) -> str:
    mark = layer.get("mark")
    return mark if isinstance(mark, str) else mark.get("type")


def _rows(spec: dict, layer: dict) -> list[dict]:
    data = layer.get("data") or spec.get("data")
    if "values" in data:
        return data["values"]
    return spec["datasets"][data["name"]]


def _find(spec: dict, mark: str, **encoded) -> list[dict]:
    """Layers with this mark whose encodings use the given fields (x="x", y="mean", ...)."""
    found = []
    for layer in _layers(spec):
        if _mark(layer) != mark:
            continue
        enc = layer.get("encoding", {})
        if all(enc.get(ch, {}).get("field") == f for ch, f in encoded.items()):
            found.append(layer)
    return found


def _all_rows(spec: dict) -> int:
    return sum(len(v) for v in spec.get("datasets", {}).values())


def _titles(spec: dict) -> set[str]:
    titles = set()
    for layer in _layers(spec):
        for channel in layer.get("encoding", {}).values():
            if isinstance(channel, dict) and isinstance(channel.get("title"), str):
                titles.add(channel["title"])
    return titles


def _subtitle(spec: dict) -> str:
    title = spec.get("title", {})
    sub = title.get("subtitle", "")
    return " ".join(sub) if isinstance(sub, list) else str(sub)


def _close(a, b) -> bool:
    # A missing value travels as JSON null (None) in the spec and as NaN in the tables.
    a = float("nan") if a is None else float(a)
    b = float("nan") if b is None else float(b)
    if math.isnan(a) or math.isnan(b):
        return math.isnan(a) and math.isnan(b)
    return math.isclose(a, b, rel_tol=REL, abs_tol=1e-9)


# ---------------------------------------------------------------------------------------------
# The cutoff plot
# ---------------------------------------------------------------------------------------------
def test_estimate_chart_draws_the_bin_means_and_fits_of_the_results(sharp):
    sc, design, fit = sharp
    bins = design.bins()
    spec = charts.estimate_chart(bins, fit).to_dict()

    dots = _find(spec, "circle", x="x", y="mean")
    assert len(dots) == 1
    table = bins.table()
    table = table[np.isfinite(table["mean"])]
    drawn = _rows(spec, dots[0])
    assert len(drawn) == len(table)
    for row, (_, ref) in zip(drawn, table.iterrows()):
        assert _close(row["mean"], ref["mean"]) and _close(row["ci_low"], ref["ci_low"])
        assert row["side"] == ref["side"]

    lines = _find(spec, "line", x="x", y="fit")
    assert len(lines) == 1
    curve = bins.curve()
    drawn_curve = _rows(spec, lines[0])
    assert len(drawn_curve) == len(curve)
    h_below, h_above = fit.bandwidth
    xs = np.array([r["x"] for r in drawn_curve])
    # the fitted lines live inside the bandwidth on each side
    assert xs.min() >= fit.cutoff - h_below * (1 + REL) and xs.max() <= fit.cutoff + h_above * (1 + REL)
    assert _find(spec, "area", x="x", y="ci_low"), "no confidence band around the fits"

    # the shaded window spans the bandwidth, clipped to the data
    window = [layer for layer in _layers(spec) if _mark(layer) == "rect"]
    (lo_hi,) = _rows(spec, window[0])
    assert _close(lo_hi["lo"], fit.cutoff - h_below) and _close(lo_hi["hi"], fit.cutoff + h_above)


def test_estimate_chart_marks_the_cutoff_and_names_the_axes_after_the_columns(sharp):
    sc, design, fit = sharp
    spec = charts.estimate_chart(design.bins(), fit).to_dict()
    rules = [layer for layer in _layers(spec) if _mark(layer) == "rule"
             and layer.get("encoding", {}).get("x", {}).get("field") == "c"]
    assert [r["c"] for r in _rows(spec, rules[0])] == [40.0]
    assert rules[0]["mark"]["strokeDash"], "the cutoff rule is dashed"
    assert {"reading_score", "math_gain (mean per bin)"} <= _titles(spec)
    lo, hi = fit.robust_conf_int
    assert charts.number(lo) in _subtitle(spec) and charts.number(hi) in _subtitle(spec)
    assert spec["title"]["text"] == "math_gain around the cutoff reading_score = 40"


def test_estimate_chart_holds_summary_rows_only(sharp):
    # "Chart data must be the summary/binned tables, never raw rows": the spec is a few hundred
    # values at most, whatever the number of observations.
    sc, design, fit = sharp
    spec = charts.estimate_chart(design.bins(), fit).to_dict()
    n_rows = _all_rows(spec)
    assert n_rows < 300 < len(sc.data)
    raw_scores = set(np.round(sc.data["reading_score"], 6))
    drawn_x = {round(r["x"], 6) for r in _rows(spec, _find(spec, "circle", x="x", y="mean")[0])}
    # bin positions are means of many scores, not the scores themselves
    assert len(drawn_x & raw_scores) <= 2


def test_treated_side_gets_the_treated_colour(sharp, fuzzy):
    for (sc, design, fit), treated in ((sharp, "below"), (fuzzy, "below")):
        spec = charts.estimate_chart(design.bins(), fit).to_dict()
        scale = _find(spec, "circle", x="x", y="mean")[0]["encoding"]["color"]["scale"]
        colours = dict(zip(scale["domain"], scale["range"]))
        assert colours[f"{treated} cutoff (treated)"] == charts.TREATED
    sc = discrete_scenario(2000, seed=23)
    design = seamline.Design(sc.data, **sc.design_kwargs())
    spec = charts.estimate_chart(design.bins(), design.fit()).to_dict()
    scale = _find(spec, "circle", x="x", y="mean")[0]["encoding"]["color"]["scale"]
    assert dict(zip(scale["domain"], scale["range"]))["above cutoff (treated)"] == charts.TREATED


def test_global_polynomial_layer_is_optional_and_labelled(sharp):
    sc, design, fit = sharp
    bins = design.bins()
    plain = charts.estimate_chart(bins, fit).to_dict()
    assert "display only" not in _subtitle(plain)
    frame = bins.global_polynomial()
    guided = charts.estimate_chart(bins, fit, global_polynomial=True).to_dict()
    if frame is None:
        assert len(_layers(guided)) == len(_layers(plain))
    else:
        assert "global polynomial (display only)" in _subtitle(guided)
        assert len(_layers(guided)) == len(_layers(plain)) + 1


def test_first_stage_chart_shows_takeup_shares_and_the_f_statistic(fuzzy):
    sc, design, fit = fuzzy
    # Binned take-up shares with the take-up fit at the fuzzy fit's bandwidth: the take-up column
    # as the outcome of a design with the same score, cutoff and treated side.
    takeup = seamline.Design(sc.data, score=sc.score, cutoff=sc.cutoff, outcome=sc.takeup,
                             treated=sc.treated, cluster=sc.cluster)
    bins = takeup.bins(bandwidth=fit.bandwidth)
    spec = charts.first_stage_chart(bins, fit).to_dict()
    drawn = _rows(spec, _find(spec, "circle", x="x", y="mean")[0])
    shares = [r["mean"] for r in drawn]
    assert all(0.0 <= s <= 1.0 for s in shares)
    assert f"first-stage F = {charts.number(fit.first_stage_f)}" in _subtitle(spec)
    assert f"take-up jump {charts.number(fit.first_stage.estimate)}" in _subtitle(spec)
    assert "take-up share (received_benefit)" in _titles(spec)


# ---------------------------------------------------------------------------------------------
# Bandwidths, balance, density, placebos, donut
# ---------------------------------------------------------------------------------------------
def test_sensitivity_chart_plots_each_row_and_marks_selected_and_selectors(sharp):
    sc, design, fit = sharp
    sens = design.sensitivity()
    selectors = design.bandwidths()
    spec = charts.sensitivity_chart(sens, fit=fit, bandwidths=selectors).to_dict()
    table = sens.table()
    scaled = table[table["label"].str.startswith("x")]
    named = table[~table["label"].str.startswith("x")]
    path = _rows(spec, _find(spec, "circle", x="h", y="estimate")[0])
    assert [r["label"] for r in path] == list(scaled["label"])
    for row, (_, ref) in zip(path, scaled.iterrows()):
        assert _close(row["estimate"], ref["estimate"]) and _close(row["lo"], ref["robust_ci_low"])
        assert _close(row["hi"], ref["robust_ci_high"]) and _close(row["h"], ref["bandwidth_below"])
    open_points = _rows(spec, _find(spec, "point", x="h", y="estimate")[0])
    assert sorted(r["label"] for r in open_points) == sorted(named["label"])
    labels = {r["label"]: r["h"] for layer in _find(spec, "text", x="h") for r in _rows(spec, layer)}
    assert _close(labels[f"selected ({fit.bandwidth_rule})"], fit.bandwidth[0])
    for _, row in selectors.iterrows():
        if row["rule"] != fit.bandwidth_rule:
            assert _close(labels[row["rule"]], row["bandwidth_below"])
    assert "jump in math_gain" in _titles(spec)


def test_balance_chart_has_one_row_per_covariate_in_its_own_units(sharp):
    sc, design, fit = sharp
    balance = design.balance()
    spec = charts.balance_chart(balance).to_dict()
    assert spec["facet"]["row"]["field"] == "name"
    assert spec["resolve"]["scale"]["x"] == "independent"
    rows = spec["datasets"][spec["data"]["name"]]
    table = balance.table()
    assert [r["name"] for r in rows] == list(table["covariate"])
    for row, (_, ref) in zip(rows, table.iterrows()):
        assert _close(row["estimate"], ref["estimate"]) and _close(row["lo"], ref["ci_low"])
        assert _close(row["hi"], ref["ci_high"])
    assert any(_mark(layer) == "rule" and layer["encoding"]["x"]["field"] == "zero" for layer in _layers(spec))
    assert "joint test p" in _subtitle(spec)


def test_density_chart_draws_histogram_and_fitted_densities_with_the_test(sharp):
    sc, design, fit = sharp
    density = design.density_test()
    spec = charts.density_chart(density, score=fit.score, treated=fit.treated).to_dict()
    bars = _rows(spec, [layer for layer in _layers(spec) if _mark(layer) == "rect"][0])
    hist = density.histogram()
    assert len(bars) == len(hist)
    assert all(_close(b["density"], h) for b, h in zip(bars, hist["density"]))
    grid = density.grid()
    line = _rows(spec, _find(spec, "line", x="x", y="density")[0])
    assert len(line) == int(np.isfinite(grid["density"]).sum())
    assert f"T = {density.statistic:.2f}" in spec["title"]["text"]
    assert spec["title"]["text"].startswith("Density of reading_score")


def test_placebo_chart_plots_each_placebo_and_marks_the_true_cutoff(sharp):
    sc, design, fit = sharp
    placebo = design.placebo_cutoffs()
    spec = charts.placebo_chart(placebo, cutoff=fit.cutoff, score=fit.score, treated=fit.treated).to_dict()
    drawn = _rows(spec, _find(spec, "circle", x="at", y="estimate")[0])
    table = placebo.table()
    assert [r["at"] for r in drawn] == pytest.approx(list(table["cutoff"]), rel=REL)
    assert [r["estimate"] for r in drawn] == pytest.approx(list(table["estimate"]), rel=REL)
    true_rule = [r for layer in _find(spec, "text", x="c") for r in _rows(spec, layer)]
    assert true_rule == [{"c": 40.0, "label": "true cutoff"}]
    assert any(layer["encoding"].get("y", {}).get("field") == "zero" for layer in _layers(spec))


def test_donut_chart_plots_estimates_by_radius(sharp):
    sc, design, fit = sharp
    donut = design.donut()
    spec = charts.donut_chart(donut, fit=fit).to_dict()
    drawn = _rows(spec, _find(spec, "circle", x="radius", y="estimate")[0])
    table = donut.table()
    assert [r["radius"] for r in drawn] == pytest.approx(list(table["radius"]), rel=REL, abs=1e-12)
    assert [r["hi"] for r in drawn] == pytest.approx(list(table["robust_ci_high"]), rel=REL)
    assert "donut radius (reading_score units excluded each side)" in _titles(spec)


# ---------------------------------------------------------------------------------------------
# Dispatch from a board
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("what", ["estimate", "sensitivity", "balance", "density", "placebo", "donut"])
def test_chart_for_builds_each_chart_of_a_board(sharp_board, what):
    spec = charts.chart_for(sharp_board, what).to_dict()
    assert spec["$schema"].startswith("https://vega.github.io/schema/vega-lite/")
    assert 0 < _all_rows(spec) < 400


def test_chart_for_first_stage_on_fuzzy_board(fuzzy_board):
    spec = charts.chart_for(fuzzy_board, "first_stage").to_dict()
    assert spec["title"]["text"].startswith("First stage")


def test_chart_for_explains_what_does_not_apply(sharp_board):
    with pytest.raises(ValueError, match="no first stage"):
        charts.chart_for(sharp_board, "first_stage")
    with pytest.raises(ValueError, match=r"`what` must be one of .*\"donut\""):
        charts.chart_for(sharp_board, "histogram")


# ---------------------------------------------------------------------------------------------
# Offline rendering
# ---------------------------------------------------------------------------------------------
def _png_size(data: bytes) -> tuple[int, int]:
    # PNG signature, then the IHDR chunk: width and height as big-endian 32-bit integers
    # (PNG specification, section 11.2.2).
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    return struct.unpack(">II", data[16:24])


def test_svg_and_png_render_offline(sharp):
    sc, design, fit = sharp
    chart = charts.estimate_chart(design.bins(), fit)
    svg = charts.to_svg(chart)
    assert svg.startswith("<svg") and svg.rstrip().endswith("</svg>")
    assert "http://" not in svg.replace("http://www.w3.org/", "")   # no external resource
    assert "<script" not in svg
    width1, height1 = _png_size(charts.to_png(chart, scale=1))
    width2, height2 = _png_size(charts.to_png(chart, scale=2))
    assert 360 <= width1 <= 460, "about 400 px wide, so two charts fit side by side"
    assert (width2, height2) == (2 * width1, 2 * height1)


def test_svg_ids_are_unique_per_drawing(sharp):
    sc, design, fit = sharp
    one = charts.to_svg(charts.estimate_chart(design.bins(), fit))
    two = charts.to_svg(charts.estimate_chart(design.bins(), fit, global_polynomial=True,
                                              title="another drawing"))
    ids_one = set(re.findall(r'id="([^"]+)"', one))
    ids_two = set(re.findall(r'id="([^"]+)"', two))
    assert ids_one and ids_two and not ids_one & ids_two
    for ident in ids_one:
        assert f"url(#{ident})" in one
    assert charts.to_svg(charts.estimate_chart(design.bins(), fit)) == one   # reproducible


def test_svg_tidying_trims_geometry_but_never_text():
    raw = ('<svg><path d="M1.23456,7.891011L3,4" transform="translate(0.5555,2)"/>'
           '<text transform="translate(10.98765,3)">0.025</text><text>12.3456</text></svg>')
    tidy = charts._tidy_svg(raw)
    assert 'd="M1.23,7.89L3,4"' in tidy and 'transform="translate(0.55,2)"' in tidy
    assert ">0.025</text>" in tidy and ">12.3456</text>" in tidy


def test_user_column_names_are_escaped_in_svg():
    hostile = "<img src=x onerror=alert(1)>"
    sc = sharp_scenario(2000, seed=24)
    data = sc.data.rename(columns={"math_gain": hostile, "reading_score": "score & <b>"})
    design = seamline.Design(data, score="score & <b>", cutoff=40, outcome=hostile, treated="below")
    fit = design.fit()
    svg = charts.to_svg(charts.estimate_chart(design.bins(), fit))
    assert "<img" not in svg and "<b>" not in svg
    assert "&lt;img src=x onerror=alert(1)&gt;" in svg
    assert "score &amp; &lt;b&gt;" in svg


def test_number_formats_for_titles():
    assert charts.number(3.05712) == "3.06"
    assert charts.number(-0.000123456) == "-0.000123"
    assert charts.number(12345.6) == "12,346"
    assert charts.number(float("inf")) == "n/a"
    assert charts.number(None) == "n/a"


def test_charts_module_does_not_import_altair_until_used():
    import subprocess
    import sys
    code = ("import sys, seamline.notebook.charts, seamline.notebook.static; "
            "print('altair' in sys.modules, 'vl_convert' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["False", "False"]


def test_chart_data_columns_are_internal_names(sharp):
    # User column names appear only in titles; fields are fixed internal names, so names with
    # dots or brackets cannot break an encoding.
    sc, design, fit = sharp
    spec = charts.estimate_chart(design.bins(), fit).to_dict()
    fields = {ch.get("field") for layer in _layers(spec) for ch in layer.get("encoding", {}).values()
              if isinstance(ch, dict)}
    assert not fields & {"reading_score", "math_gain"}
    assert isinstance(pd.DataFrame(_rows(spec, _find(spec, "circle", x="x", y="mean")[0])), pd.DataFrame)


# ---------------------------------------------------------------------------------------------
# Specs for the browser: Vega-Lite 5 with inline summary data
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("what", charts.CHART_NAMES)
def test_every_chart_spec_compiles_with_vega_lite_5(what, sharp_board, fuzzy_board):
    # JupyterLab's built-in renderer is Vega-Lite 5; the spec we send declares v5. Reference:
    # vl-convert's own Vega-Lite 5 compiler (vl_version="5.8", the oldest 5.x it ships).
    import vl_convert
    board = fuzzy_board if what == "first_stage" else sharp_board
    if what in ("by_cutoff", "subgroups"):       # these charts need several cutoffs and groups
        from seamline.demo_cutoffs import district_cutoffs_scenario
        sc = district_cutoffs_scenario(3000, seed=23)
        board = Board("districts", {**sc.design_kwargs(), "groups": "owner"}, {}, data=sc.data)
    spec = charts.to_vega_lite(charts.chart_for(board.wait(), what))
    assert spec["$schema"] == "https://vega.github.io/schema/vega-lite/v5.json"
    vega = vl_convert.vegalite_to_vega(spec, vl_version="5.8")
    assert vega["$schema"].startswith("https://vega.github.io/schema/vega/v5")
    assert "url" not in str(spec.get("datasets", {})) and "'url'" not in str(spec.get("data", {}))
    svg = vl_convert.vegalite_to_svg(spec, vl_version="5.8")
    assert "<path" in svg or "<rect" in svg or "<circle" in svg or "<line" in svg


# The live view's specs skip Altair's general data sanitizer (charts_render._inline_frames) and
# set the shared look in place (charts_style._configure). Reference: Altair's own serialisation
# of the same chart (``to_dict``, which sanitizes every frame itself) must give the same spec.
@pytest.mark.parametrize("what", charts.CHART_NAMES)
def test_live_specs_equal_altairs_own_serialisation(what, sharp_board, fuzzy_board):
    board = fuzzy_board if what == "first_stage" else sharp_board
    if what in ("by_cutoff", "subgroups"):
        from seamline.demo_cutoffs import district_cutoffs_scenario
        sc = district_cutoffs_scenario(3000, seed=23)
        board = Board("districts", {**sc.design_kwargs(), "groups": "owner"}, {}, data=sc.data)
    state = board.wait()
    expected = charts.chart_for(state, what).to_dict(validate=False)
    live = charts.to_vega_lite(charts.chart_for(state, what))
    live.pop("$schema"), expected.pop("$schema")
    assert live == expected


def test_inlined_frame_values_match_altairs_sanitizer():
    # Reference: Altair's default data transformer (sanitize, then records) on the same frame.
    import altair as alt
    from altair.utils.data import to_values
    from seamline.notebook.charts_render import _inline_frames
    frame = pd.DataFrame({
        "f": [1.5, np.nan, np.inf, -np.inf, 2.0],
        "i": np.arange(5, dtype=np.int64),
        "u": np.arange(5, dtype=np.uint8),
        "b": [True, False, True, False, True],
        "s": ["a", None, "c", "d", "e"],
        "o": pd.Series(["x", 1, 2.5, None, np.nan], dtype=object),
        "t": pd.array(["p", None, "r", "s", "t"], dtype="string"),
    })
    chart = alt.layer(alt.Chart(frame).mark_point().encode(x=alt.X("f:Q"), y=alt.Y("i:Q")),
                      alt.Chart(frame.assign(day=pd.date_range("2024-01-01", periods=5)))
                      .mark_point().encode(x=alt.X("day:T"), y=alt.Y("u:Q")))
    expected = [to_values(layer.data)["values"] for layer in chart.layer]
    _inline_frames(chart)
    assert chart.layer[0].data == {"values": expected[0]}
    assert isinstance(chart.layer[1].data, pd.DataFrame)      # dates: left to Altair
    assert all(type(a) is type(b) for row_a, row_b in zip(chart.layer[0].data["values"], expected[0])
               for a, b in zip(row_a.values(), row_b.values()))
