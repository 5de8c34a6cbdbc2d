"""Charts, tables and the board header of a date-score design speak in dates.

The data are invented here (seeded visits around a cutoff date). The references are outside
seamline: pandas' own date arithmetic (``Timestamp + to_timedelta``) gives the date each chart
point must sit at, Python's ``datetime.date.fromisoformat`` reads the tick labels (ISO 8601 dates),
and the Vega-Lite renderer (vl-convert) draws the ticks. Numbers themselves are checked against
the numeric distance in tests/test_date_scores.py.
"""
from __future__ import annotations

import datetime as dt
import json
import re

import numpy as np
import pandas as pd
import pytest

import altair  # noqa: F401  (required: a missing one fails the suite)
import vl_convert  # noqa: F401

import seamline
from seamline.notebook import charts, static, time_axes
from seamline.notebook.board import Board

CUTOFF = pd.Timestamp("2024-07-01")
DATE_CHARTS = ("estimate", "density", "placebo")
ISO = re.compile(r"^\d{4}-\d{2}-\d{2}( \d{2}:\d{2})?$")


def visits(n: int = 3000, seed: int = 5, tz: str | None = None, hours: bool = False) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    offset = rng.integers(-200, 200, n) * 24 + (rng.integers(0, 24, n) if hours else 0)
    dates = CUTOFF + pd.to_timedelta(offset, unit="h")
    days = offset / 24
    y = 0.5 * (days >= 0) + 0.002 * days + rng.normal(0, 1, n)
    take = (rng.uniform(size=n) < np.where(days >= 0, 0.8, 0.2)).astype(float)
    frame = pd.DataFrame({"visit": dates, "y": y, "z": rng.normal(size=n), "took": take})
    if tz:
        frame["visit"] = frame["visit"].dt.tz_localize(tz)
    return frame


@pytest.fixture(scope="module")
def dated():
    design = seamline.Design(visits(), score="visit", cutoff="2024-07-01", outcome="y")
    return design, design.fit()


def layers(spec: dict):
    """(layer, its data rows) for every leaf layer of a Vega-Lite spec."""
    datasets = spec.get("datasets", {})

    def walk(node):
        if "layer" in node:
            for child in node["layer"]:
                yield from walk(child)
        elif "encoding" in node:
            data = node.get("data", {})
            yield node, datasets.get(data.get("name"), data.get("values", []))
    yield from walk(spec)


def x_layers(chart):
    return [(layer, rows) for layer, rows in layers(charts.to_vega_lite(chart)) if "x" in layer["encoding"]]


def tick_dates(chart) -> list[str]:
    texts = re.findall(r"<text[^>]*>([^<]*)</text>", charts.to_svg(chart))
    return [t for t in texts if ISO.match(t)]


def direct_chart(what: str, design, fit):
    """Each chart built directly from the design's results (not through a board)."""
    if what == "estimate":
        return charts.estimate_chart(design.bins(), fit)
    if what == "density":
        return charts.density_chart(design.density_test())
    return charts.placebo_chart(design.placebo_cutoffs())


@pytest.mark.parametrize("what", DATE_CHARTS)
def test_score_axis_is_a_utc_time_axis_with_iso_ticks_inside_the_data(what, dated):
    design, fit = dated
    chart = direct_chart(what, design, fit)
    for layer, _ in x_layers(chart):
        x = layer["encoding"]["x"]
        assert x["type"] == "temporal" and x["scale"]["type"] == "utc", layer["mark"]
        assert x["axis"]["format"] == "%Y-%m-%d"
    ticks = [dt.date.fromisoformat(t) for t in tick_dates(chart)]
    assert len(ticks) >= 2
    first, last = visits()["visit"].min().date(), visits()["visit"].max().date()
    assert all(first - dt.timedelta(days=31) <= t <= last + dt.timedelta(days=31) for t in ticks)
    assert CUTOFF.date() in ticks or what == "density" or any(t.day == 1 for t in ticks)


def test_points_sit_at_the_dates_pandas_computes(dated):
    design, fit = dated
    table = design.bins().table()
    x = table["score_mean"].where(np.isfinite(table["score_mean"]), (table["left"] + table["right"]) / 2)
    want = sorted((CUTOFF + pd.to_timedelta(d, unit="D")).value / 1e6 for d in x.dropna())
    chart = charts.estimate_chart(design.bins(), fit)
    dots = [rows for layer, rows in x_layers(chart) if layer["mark"]["type"] == "circle"][0]
    # the spec keeps 6 significant digits of each distance (charts._records): a few minutes at most
    assert np.allclose(sorted(r["x"] for r in dots), want, rtol=0, atol=5 * 60_000)
    # the cutoff rule sits at the cutoff date itself
    rules = [rows for layer, rows in x_layers(chart) if layer["encoding"]["x"]["field"] == "c"]
    assert rules and rules[0][0]["c"] == CUTOFF.value / 1e6


def test_tooltips_show_the_dates_of_the_table(dated):
    design, fit = dated
    placebo = design.placebo_cutoffs()
    points = [(layer, rows) for layer, rows in x_layers(charts.placebo_chart(placebo))
              if layer["mark"]["type"] == "circle"][0]
    layer, rows = points
    fields = [t["field"] for t in layer["encoding"]["tooltip"]]
    assert "at__date" in fields
    assert sorted(r["at__date"] for r in rows) == sorted(placebo.table()["cutoff_date"])
    dots = [(layer, rows) for layer, rows in x_layers(charts.estimate_chart(design.bins(), fit))
            if layer["mark"]["type"] == "circle"][0]
    tips = {t.get("title", t["field"]): t["field"] for t in dots[0]["encoding"]["tooltip"]}
    assert tips["bin from"] == "left__date" and tips["bin to"] == "right__date"
    bins = design.bins().table()
    want = {(CUTOFF + pd.to_timedelta(v, unit="D")).date().isoformat() for v in bins["left"]}
    assert {r["left__date"] for r in dots[1]} <= want


def test_a_time_zone_score_shows_its_own_wall_clock_dates():
    design = seamline.Design(visits(tz="Pacific/Auckland"), score="visit", cutoff="2024-07-01", outcome="y")
    chart = charts.estimate_chart(design.bins(), design.fit())
    rule = [rows for layer, rows in x_layers(chart) if layer["encoding"]["x"]["field"] == "c"][0]
    # local midnight of 2024-07-01 in Auckland, drawn as that wall-clock time on a UTC axis
    assert rule[0]["c"] == pd.Timestamp("2024-07-01").value / 1e6
    assert "2024-07-01" in tick_dates(chart)


def test_a_score_with_times_of_day_gets_hours_on_its_ticks():
    design = seamline.Design(visits(hours=True), score="visit", cutoff="2024-07-01", outcome="y")
    spec = charts.to_vega_lite(charts.density_chart(design.density_test()))
    formats = {layer["encoding"]["x"]["axis"]["format"] for layer, _ in layers(spec)
               if "axis" in layer["encoding"].get("x", {})}
    assert formats == {"%Y-%m-%d %H:%M"}


def test_durations_carry_the_unit_and_stay_numbers(dated):
    design, fit = dated
    for chart, title in ((charts.donut_chart(design.donut(), fit=fit), "donut radius excluded each side (days)"),
                         (charts.sensitivity_chart(design.sensitivity(), fit=fit), "(days)")):
        spec = json.dumps(charts.to_vega_lite(chart))
        assert title in spec and '"temporal"' not in spec
    weekly = seamline.Design(visits(), score="visit", cutoff="2024-07-01", outcome="y", score_unit="weeks")
    assert "(weeks)" in json.dumps(charts.to_vega_lite(charts.donut_chart(weekly.donut())))
    subtitle = json.dumps(charts.to_vega_lite(charts.estimate_chart(design.bins(), fit)))
    assert f"bandwidth {charts.number(fit.bandwidth[0])} days (shaded)" in subtitle
    assert "around the cutoff visit = 2024-07-01" in subtitle


def test_numeric_scores_keep_quantitative_axes():
    frame = visits()
    frame["days"] = (frame["visit"] - CUTOFF).dt.days
    design = seamline.Design(frame, score="days", cutoff=0, outcome="y")
    for what in DATE_CHARTS:
        spec = json.dumps(charts.to_vega_lite(direct_chart(what, design, design.fit())))
        assert '"temporal"' not in spec and '"utc"' not in spec


def test_dating_copies_the_chart_and_is_idempotent(dated):
    import altair as alt
    design, _ = dated
    frame = visits()
    frame["days"] = (frame["visit"] - CUTOFF).dt.days
    numeric = seamline.Design(frame, score="days", cutoff=0, outcome="y")
    plain = charts.placebo_chart(numeric.placebo_cutoffs(), cutoff=0.0, configure=False)
    before = json.dumps(plain.to_dict(), sort_keys=True)
    once = time_axes.dated(plain, design.time_scale, alt)
    assert json.dumps(plain.to_dict(), sort_keys=True) == before          # the input is left alone
    assert all(layer["encoding"]["x"]["type"] == "temporal" for layer, _ in x_layers(once))
    twice = time_axes.dated(once, design.time_scale, alt)
    assert json.dumps(twice.to_dict(), sort_keys=True) == json.dumps(once.to_dict(), sort_keys=True)


@pytest.fixture(scope="module")
def date_board():
    board = Board("visits", {"score": "visit", "cutoff": "2024-07-01", "outcome": "y", "covariates": ["z"],
                             "takeup": "took"}, {}, data=visits())
    board.wait()
    return board


@pytest.mark.parametrize("what", ("estimate", "density", "placebo", "first_stage"))
def test_board_charts_of_a_date_score_draw_dates(what, date_board):
    chart = charts.chart_for(date_board, what)
    assert all(layer["encoding"]["x"]["type"] == "temporal" for layer, _ in x_layers(chart))
    assert tick_dates(chart)


def test_board_header_and_tables_state_dates_and_units(date_board):
    fit = date_board.results["fit"]
    html = static.static_html(date_board)
    assert "<code>visit</code> = 2024-07-01" in html
    assert f"Bandwidth {charts.number(fit.bandwidth[0])} days" in html
    assert "Hausman and Rapson 2018" in static.header_html(date_board)     # beside the estimate
    assert "clustering by a time unit" in static.header_html(date_board)
    placebo = date_board.results["placebo"].table()
    assert all(dt.date.fromisoformat(d) for d in placebo["cutoff_date"])
    donut = date_board.results["donut"].table()
    assert all(str(d).endswith(("days", "day")) for d in donut["radius_duration"])
    assert "bandwidth (days)" in html and "Cutoff date" in html
    assert "Bandwidth selectors (days)" in static.panel_html(date_board, "bandwidths", charts=False)
    assert repr(date_board).startswith("<Board visits: visit at 2024-07-01")


def test_a_board_with_a_date_cutoff_on_a_numeric_score_shows_the_named_error():
    frame = visits(n=400)
    frame["days"] = (frame["visit"] - CUTOFF).dt.days
    board = Board("wrong", {"score": "days", "cutoff": "2024-07-01", "outcome": "y"}, {}, data=frame)
    board.wait()
    message = board.errors["fit"]
    assert "`cutoff` must be a number for the numeric score 'days'" in message
    assert "declare a date column as the score" in message
    assert "must be a number for the numeric score" in static.header_html(board)   # the kernel keeps working


def test_a_weeks_board_reports_in_weeks_and_equals_the_weeks_design(date_board):
    # Reference: Design(score_unit="weeks") on the same data, and the definition of a week (7 days) --
    # the same fit on a score divided by 7 has bandwidths divided by 7 (the MSE-optimal bandwidth is
    # equivariant to rescaling the score, common practice).
    board = Board("weekly", {"score": "visit", "cutoff": "2024-07-01", "outcome": "y", "covariates": ["z"],
                             "takeup": "took", "score_unit": "weeks"}, {}, data=visits())
    board.wait()
    fit, days = board.results["fit"], date_board.results["fit"]
    direct = seamline.Design(visits(), score="visit", cutoff="2024-07-01", outcome="y", covariates=["z"],
                             takeup="took", score_unit="weeks").fit()
    np.testing.assert_allclose(fit.bandwidth, direct.bandwidth, rtol=1e-12)
    np.testing.assert_allclose(fit.estimate, direct.estimate, rtol=1e-12)
    np.testing.assert_allclose(np.asarray(fit.bandwidth) * 7, days.bandwidth, rtol=1e-12)
    np.testing.assert_allclose(fit.estimate, days.estimate, rtol=1e-9)
    html = static.static_html(board)
    assert f"Bandwidth {charts.number(fit.bandwidth[0])} weeks" in html and "bandwidth (weeks)" in html
    assert "Bandwidth selectors (weeks)" in static.panel_html(board, "bandwidths", charts=False)
    assert all(str(d).endswith(("weeks", "week")) for d in board.results["donut"].table()["radius_duration"])
    assert "measured in weeks" in board.methods_paragraph()
    board.set_option("score_unit", "days")    # the control: the same numbers as the days board
    np.testing.assert_allclose(board.results["fit"].bandwidth, days.bandwidth, rtol=1e-12)
    board.close()


def test_a_score_unit_on_a_numeric_score_board_says_to_remove_it():
    frame = visits(n=400)
    frame["days"] = (frame["visit"] - CUTOFF).dt.days
    board = Board("numeric", {"score": "days", "cutoff": 0, "outcome": "y", "score_unit": "weeks"}, {}, data=frame)
    board.wait()
    assert "`score_unit` applies to date or time scores only" in board.errors["fit"]
    assert "Remove it, or declare a date or datetime column as the score" in board.errors["fit"]
    with pytest.raises(seamline.errors.InvalidOptionError, match=r"`score_unit` must be one of \"days\", \"hours\""):
        board.set_option("score_unit", "fortnights")
    board.close()


@pytest.mark.parametrize("what", DATE_CHARTS)
def test_live_date_specs_equal_altairs_own_serialisation(what):
    # Reference: Altair's own to_dict of the same chart (the live path leaves date frames to it).
    frame = visits()
    board = Board("visits", {"score": "visit", "cutoff": "2024-07-01", "outcome": "y"}, {}, data=frame).wait()
    expected = charts.chart_for(board, what).to_dict(validate=False)
    live = charts.to_vega_lite(charts.chart_for(board, what))
    live.pop("$schema"), expected.pop("$schema")
    assert live == expected
