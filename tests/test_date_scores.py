"""Dates and times as the score: every number equals the design on the numeric distance.

A date score is defined as its distance from the cutoff date in the chosen unit, so the reference
for every check is the same design declared on that distance computed inside the test with plain
pandas arithmetic (no seamline code): equality to 1e-12 is an identity, not an approximation.
"""
from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest

import seamline
from seamline.errors import ColumnTypeError, CutoffTypeError, InvalidOptionError
from seamline.export.methods import methods_paragraph

TOL = 1e-12
CUTOFF = pd.Timestamp("2024-07-01")


def visits(n=2500, seed=11, tz=None, hours=False):
    """Visit dates around a cutoff date with a jump of 0.5 (test data generated here, seeded)."""
    rng = np.random.default_rng(seed)
    days = rng.integers(-240, 240, n)
    when = CUTOFF + pd.to_timedelta(days, unit="D")
    if hours:
        when = when + pd.to_timedelta(rng.integers(0, 24, n), unit="h")
    if tz is not None:
        when = when.tz_localize(tz)
    y = 0.004 * days + 0.5 * (days >= 0) + rng.normal(0, 1, n)
    return pd.DataFrame({"visit_date": when, "y": y, "z": rng.normal(size=n)})


def distance_frame(df, unit_days=1.0):
    """The reference: the score as a float distance from the cutoff, computed with pandas alone."""
    cutoff = CUTOFF if df["visit_date"].dt.tz is None else CUTOFF.tz_localize(df["visit_date"].dt.tz)
    dist = (df["visit_date"] - cutoff).dt.total_seconds() / (86400.0 * unit_days)
    return pd.DataFrame({"distance": dist, "y": df["y"], "z": df["z"]})


def same_fit(a, b, tol=TOL):
    for name in ("estimate", "std_error", "bias_corrected_estimate", "robust_std_error"):
        assert getattr(a, name) == pytest.approx(getattr(b, name), rel=tol, abs=tol), name
    assert a.bandwidth == pytest.approx(b.bandwidth, rel=tol)
    assert a.pilot_bandwidth == pytest.approx(b.pilot_bandwidth, rel=tol)
    assert a.n_used == b.n_used


@pytest.mark.parametrize("cutoff", ["2024-07-01", CUTOFF, CUTOFF.date(), np.datetime64("2024-07-01"),
                                    dt.datetime(2024, 7, 1)])
def test_datetime_score_equals_the_fit_on_days_from_the_cutoff(cutoff):
    df = visits()
    got = seamline.Design(df, score="visit_date", cutoff=cutoff, outcome="y").fit()
    want = seamline.Design(distance_frame(df), score="distance", cutoff=0.0, outcome="y").fit()
    same_fit(got, want)


def test_date_objects_column_equals_the_datetime_column():
    df = visits()
    as_dates = df.assign(visit_date=df["visit_date"].dt.date)      # object column of datetime.date
    assert as_dates["visit_date"].dtype == object
    got = seamline.Design(as_dates, score="visit_date", cutoff="2024-07-01", outcome="y").fit()
    want = seamline.Design(distance_frame(df), score="distance", cutoff=0.0, outcome="y").fit()
    same_fit(got, want)


def test_diagnostics_equal_those_on_the_distance():
    df = visits()
    dated = seamline.Design(df, score="visit_date", cutoff="2024-07-01", outcome="y", covariates="z")
    plain = seamline.Design(distance_frame(df), score="distance", cutoff=0.0, outcome="y", covariates="z")
    a, b = dated.density_test(), plain.density_test()
    assert (a.statistic, a.p_value) == pytest.approx((b.statistic, b.p_value), rel=TOL)
    pd.testing.assert_frame_equal(dated.bins().table(), plain.bins().table(), rtol=TOL)
    pd.testing.assert_frame_equal(dated.balance().table(), plain.balance().table(), rtol=TOL)
    donut = dated.donut().table()
    pd.testing.assert_frame_equal(donut.drop(columns="radius_duration"), plain.donut().table(), rtol=TOL)
    assert list(donut["radius_duration"]) == [f"{r:.4g} {'day' if r == 1 else 'days'}" for r in donut["radius"]]
    placebo = dated.placebo_cutoffs().table()
    pd.testing.assert_frame_equal(placebo.drop(columns="cutoff_date"), plain.placebo_cutoffs().table(), rtol=TOL)


@pytest.mark.parametrize("unit, days_per_unit", [("hours", 1 / 24), ("weeks", 7.0),
                                                  # average month and year lengths (common practice)
                                                  ("months", 365.25 / 12), ("years", 365.25)])
def test_units_scale_the_distance_by_their_stated_length(unit, days_per_unit):
    df = visits(hours=True)
    got = seamline.Design(df, score="visit_date", cutoff=CUTOFF, outcome="y", score_unit=unit).fit()
    want = seamline.Design(distance_frame(df, days_per_unit), score="distance", cutoff=0.0, outcome="y").fit()
    same_fit(got, want, tol=1e-10)
    in_days = seamline.Design(df, score="visit_date", cutoff=CUTOFF, outcome="y").fit()
    # Bandwidth selection is equivariant in the score's units: h(unit) x length = h(days).
    assert got.bandwidth[0] * days_per_unit == pytest.approx(in_days.bandwidth[0], rel=1e-9)
    assert got.estimate == pytest.approx(in_days.estimate, rel=1e-9)


def test_time_zones_follow_the_score():
    df = visits(tz="Europe/Berlin")
    got = seamline.Design(df, score="visit_date", cutoff="2024-07-01", outcome="y").fit()
    want = seamline.Design(distance_frame(df), score="distance", cutoff=0.0, outcome="y").fit()
    same_fit(got, want)
    utc = pd.Timestamp("2024-06-30 22:00", tz="UTC")      # the same instant as midnight in Berlin
    same_fit(seamline.Design(df, score="visit_date", cutoff=utc, outcome="y").fit(), want)


def test_results_speak_in_dates_and_units():
    df = visits()
    design = seamline.Design(df, score="visit_date", cutoff="2024-07-01", outcome="y")
    fit = design.fit(bandwidth=41.5)
    assert "2024-07-01" in repr(design)
    assert fit.title().endswith("visit_date = 2024-07-01 (treated above)")
    assert "bandwidth 41.5 days (manual)" in fit.notes()[0]
    text = methods_paragraph(fit)
    assert "visit_date = 2024-07-01" in text and "days from the cutoff date" in text
    assert "Hausman and Rapson 2018" in text
    assert any("Hausman and Rapson 2018" in w for w in fit.warnings)
    placebo = design.placebo_cutoffs(cutoffs=["2024-03-01", "2024-10-01"]).table()
    assert placebo["cutoff_date"].tolist() == ["2024-03-01", "2024-10-01"]
    assert placebo["cutoff"].tolist() == [-122.0, 92.0]       # days from 2024-07-01, counted by hand


def test_numeric_scores_carry_no_time_caution():
    df = distance_frame(visits())
    fit = seamline.Design(df, score="distance", cutoff=0.0, outcome="y").fit()
    assert not any("Hausman" in w for w in fit.warnings)
    assert "Hausman" not in methods_paragraph(fit)


def test_the_data_are_not_modified():
    df = visits()
    before = df.copy()
    seamline.Design(df, score="visit_date", cutoff="2024-07-01", outcome="y").fit()
    pd.testing.assert_frame_equal(df, before)


# ---- bad input ---------------------------------------------------------------------------------
def test_a_date_cutoff_for_a_numeric_score_is_refused():
    df = distance_frame(visits())
    with pytest.raises(CutoffTypeError, match="`cutoff` must be a number for the numeric score 'distance'"):
        seamline.Design(df, score="distance", cutoff=CUTOFF, outcome="y")
    with pytest.raises(CutoffTypeError, match="got the date '2024-07-01'.*declare a date column"):
        seamline.Design(df, score="distance", cutoff="2024-07-01", outcome="y")
    # Any other text is read as the name of a column of per-unit cutoffs.
    with pytest.raises(seamline.errors.ColumnNotFoundError, match="`cutoff` column 'forty' is not in the data"):
        seamline.Design(df, score="distance", cutoff="forty", outcome="y")


def test_a_number_cutoff_for_a_date_score_is_refused():
    with pytest.raises(CutoffTypeError, match="`cutoff` must be a date for the date score 'visit_date'; got 40"):
        seamline.Design(visits(), score="visit_date", cutoff=40, outcome="y")
    with pytest.raises(CutoffTypeError, match="Write it as an ISO date"):
        seamline.Design(visits(), score="visit_date", cutoff="first of July", outcome="y")


def test_time_zone_mismatches_are_refused():
    with pytest.raises(CutoffTypeError, match=r"must carry the time zone of score 'visit_date' \(UTC\)"):
        seamline.Design(visits(tz="UTC"), score="visit_date", cutoff=CUTOFF, outcome="y")
    with pytest.raises(CutoffTypeError, match="must have no time zone, like score 'visit_date'"):
        seamline.Design(visits(), score="visit_date", cutoff=CUTOFF.tz_localize("UTC"), outcome="y")


def test_a_score_mixing_dates_and_other_values_is_refused():
    df = visits(n=300)
    mixed = df.assign(visit_date=df["visit_date"].dt.date.astype(object))
    mixed.loc[7, "visit_date"] = "n/a"
    with pytest.raises(ColumnTypeError, match=r"must hold dates only; got a mix of dates and str .*'n/a' at row 7"):
        seamline.Design(mixed, score="visit_date", cutoff="2024-07-01", outcome="y")


def test_a_score_mixing_numbers_and_dates_is_named_a_mix_whatever_comes_first():
    df = visits(n=300)
    mixed = df.assign(visit_date=df["visit_date"].astype(object))
    mixed.loc[0, "visit_date"] = 3.5
    with pytest.raises(ColumnTypeError, match=r"must hold dates only; got a mix of dates and float .*3.5 at row 0"):
        seamline.Design(mixed, score="visit_date", cutoff="2024-07-01", outcome="y")


def test_a_score_mixing_time_zones_is_refused():
    df = visits(n=300)
    mixed = df.assign(visit_date=df["visit_date"].astype(object))
    mixed.loc[0, "visit_date"] = pd.Timestamp("2024-01-01", tz="UTC")
    with pytest.raises(ColumnTypeError, match=r"must use one time zone; got \['None', 'UTC'\].*utc=True"):
        seamline.Design(mixed, score="visit_date", cutoff="2024-07-01", outcome="y")


def test_placebo_cutoffs_that_are_not_dates_are_refused():
    design = seamline.Design(visits(), score="visit_date", cutoff="2024-07-01", outcome="y")
    with pytest.raises(CutoffTypeError, match=r"`cutoffs` must be dates .* got 'soon'. Write dates as ISO dates"):
        design.placebo_cutoffs(["soon"])
    # a date is the same placebo as its distance in days (pandas' own date arithmetic)
    by_date = design.placebo_cutoffs(["2024-05-01"]).table()
    by_days = design.placebo_cutoffs([(pd.Timestamp("2024-05-01") - CUTOFF).days]).table()
    pd.testing.assert_frame_equal(by_date, by_days)


def test_units_are_checked():
    with pytest.raises(InvalidOptionError, match='`score_unit` must be one of "days", "hours"'):
        seamline.Design(visits(), score="visit_date", cutoff="2024-07-01", outcome="y", score_unit="fortnights")
    with pytest.raises(InvalidOptionError, match="`score_unit` applies to date or time scores"):
        seamline.Design(distance_frame(visits()), score="distance", cutoff=0.0, outcome="y", score_unit="days")


def test_a_cutoff_date_outside_the_data_names_the_dates():
    with pytest.raises(seamline.errors.CutoffOutOfRangeError,
                       match=r"within the dates of score 'visit_date' \[2023-11-0\d, 2025-02-2\d\]; got 2026-01-01"):
        seamline.Design(visits(), score="visit_date", cutoff="2026-01-01", outcome="y")
