"""Every bad-input case of issue 2 section 6 raises the named seamline error with a useful message.

Each case builds an invented data set (seeded), breaks one thing, and expects the exception class
from seamline.errors with ``match=`` on the column name and/or the rule. The checks wrap both the
design declaration and the fit, so a case passes whether the engine validates eagerly (in
``Design``) or when fitting. Also: missing rows are dropped and counted, and the user's DataFrame
is never modified.
"""
from __future__ import annotations

import copy

import numpy as np
import pandas as pd
import pytest

import seamline
from seamline import errors


def frame(n: int = 400, seed: int = 3) -> pd.DataFrame:
    """Invented data with distinctive column names so messages can be matched on them."""
    rng = np.random.default_rng(seed)
    score = rng.uniform(-1.0, 1.0, n)
    t = (score >= 0).astype(float)
    enrolled = (rng.uniform(size=n) < 0.2 + 0.6 * t).astype(float)
    return pd.DataFrame({
        "exam_points": score,
        "earnings": 1.0 + 0.5 * score + 0.4 * enrolled + rng.normal(0.0, 0.3, n),
        "enrolled": enrolled,
        "age_z": rng.normal(size=n),
        "prior_z": rng.normal(size=n),
        "sample_wt": rng.uniform(0.5, 2.0, n),
        "school_id": rng.integers(0, 25, n),
    })


BASE = dict(score="exam_points", cutoff=0.0, outcome="earnings")


def run(data, fit_kwargs=None, **design_kwargs):
    """Declare and fit (a manual bandwidth keeps the fit cheap and deterministic)."""
    spec = {**BASE, **design_kwargs}
    kwargs = {"bandwidth": 0.5, **(fit_kwargs or {})}
    return seamline.Design(data, **spec).fit(**kwargs)


def all_of(*parts: str) -> str:
    """A regex that requires every part somewhere in the message, in any order."""
    return "(?is)^" + "".join(f"(?=.*{p})" for p in parts)


# --------------------------------------------------------------------------------------------
# Missing and duplicate columns
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    "argument,value",
    [
        ("score", "exam_pts"),
        ("outcome", "earnigns"),
        ("takeup", "enroled"),
        ("covariates", ["age_z", "prior_zz"]),
        ("cluster", "school"),
        ("weights", "sample_weight"),
    ],
)
def test_missing_column(argument, value):
    missing = value[-1] if isinstance(value, list) else value
    kwargs = {argument: value}
    fit_kwargs = {"adjust": True} if argument == "covariates" else None
    with pytest.raises(errors.ColumnNotFoundError, match=all_of(missing)):
        run(frame(), fit_kwargs, **kwargs)


def test_undeclared_outcome_in_fit():
    """fit(outcome=...) chooses among the columns declared in Design, so a name that was never
    declared is an invalid option value (whether or not the data hold such a column)."""
    design = seamline.Design(frame(), **BASE)
    with pytest.raises(errors.InvalidOptionError, match=all_of("`outcome`", "wages")):
        design.fit(outcome="wages", bandwidth=0.5)


@pytest.mark.parametrize("column", ["exam_points", "earnings"])
def test_duplicate_column_names(column):
    data = frame()
    dup = pd.concat([data, data[[column]]], axis=1)
    assert list(dup.columns).count(column) == 2
    with pytest.raises(errors.DuplicateColumnError, match=all_of(column)):
        run(dup)


# --------------------------------------------------------------------------------------------
# Column contents
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize("column", ["exam_points", "earnings"])
def test_non_numeric_column(column):
    data = frame()
    data[column] = np.where(data[column] > 0, "high", "low")
    with pytest.raises(errors.ColumnTypeError, match=all_of(column, "numeric")):
        run(data)


@pytest.mark.parametrize("column", ["exam_points", "earnings"])
def test_all_missing_column(column):
    data = frame()
    data[column] = np.nan
    with pytest.raises(errors.EmptyColumnError, match=all_of(column)):
        run(data)


@pytest.mark.parametrize(
    "column,extra",
    [
        ("exam_points", {}),
        ("earnings", {}),
        ("sample_wt", {"weights": "sample_wt"}),
        ("age_z", {"covariates": ["age_z"]}),
    ],
)
@pytest.mark.parametrize("value", [np.inf, -np.inf])
def test_infinite_values(column, extra, value):
    data = frame()
    data.loc[7, column] = value
    fit_kwargs = {"adjust": True} if "covariates" in extra else None
    with pytest.raises(errors.NonFiniteValueError, match=all_of(column, "(finite|inf)")):
        run(data, fit_kwargs, **extra)


@pytest.mark.parametrize("cutoff", [5.0, -3.0])
def test_cutoff_outside_score_range(cutoff):
    with pytest.raises(errors.CutoffOutOfRangeError, match=all_of("cutoff", str(int(cutoff)))):
        run(frame(), cutoff=cutoff)


def test_all_observations_on_one_side():
    data = frame()
    # the minimum is "above" (score >= cutoff), so nothing lies below
    cutoff = float(data["exam_points"].min())
    with pytest.raises(errors.OneSidedDataError, match=all_of("below")):
        run(data, cutoff=cutoff)


def test_one_side_empty_after_dropping_missing():
    data = frame()
    data.loc[data["exam_points"] < 0, "earnings"] = np.nan
    with pytest.raises(errors.OneSidedDataError, match=all_of("below")):
        run(data)


@pytest.mark.parametrize(
    "degree,bandwidth,found",
    [
        (2, 2.5, 2),   # below: -2, -1 inside (triangular weight > 0); a quadratic needs 3
        (1, 1.5, 1),   # below: only -1; a line needs 2
        (3, 3.5, 3),   # below: -3, -2, -1; a cubic needs 4
    ],
)
def test_too_few_distinct_values_in_the_bandwidth(degree, bandwidth, found):
    rng = np.random.default_rng(8)
    score = rng.integers(-10, 11, 600).astype(float)
    data = pd.DataFrame({"exam_points": score, "earnings": 0.1 * score + rng.normal(size=600)})
    # the message says how many distinct values there are; the wording "distinct" names the rule
    with pytest.raises(errors.TooFewDistinctValuesError, match=all_of("distinct", "below", rf"\b{found}\b")):
        run(data, {"bandwidth": bandwidth, "degree": degree, "kernel": "triangular"})


@pytest.mark.parametrize(
    "make,names",
    [
        (lambda d: d.assign(prior_z=2.0 * d["age_z"] + 1.0), ["age_z", "prior_z"]),
        (lambda d: d.assign(prior_z=3.0), ["prior_z"]),                 # constant: the intercepts
        (lambda d: d.assign(prior_z=d["exam_points"]), ["prior_z"]),    # the score: the polynomial
    ],
    ids=["pair", "constant", "score"],
)
def test_collinear_covariates_are_named(make, names):
    data = make(frame())
    with pytest.raises(errors.CollinearCovariatesError, match=all_of(*names)):
        run(data, {"adjust": True}, covariates=["age_z", "prior_z"])


@pytest.mark.parametrize("bad", [2.0, -1.0, 1.5])
def test_takeup_outside_unit_interval(bad):
    data = frame()
    data.loc[11, "enrolled"] = bad
    with pytest.raises(errors.TakeupRangeError, match=all_of("enrolled")):
        run(data, takeup="enrolled")


def test_fewer_than_two_clusters_on_a_side():
    data = frame()
    data.loc[data["exam_points"] < 0, "school_id"] = 99
    with pytest.raises(errors.TooFewClustersError, match=all_of("cluster")):
        run(data, cluster="school_id")


def test_single_cluster():
    data = frame().assign(school_id=4)
    with pytest.raises(errors.TooFewClustersError, match=all_of("cluster")):
        run(data, cluster="school_id")


def test_negative_weights():
    data = frame()
    data.loc[5, "sample_wt"] = -0.5
    with pytest.raises(errors.InvalidWeightsError, match=all_of("sample_wt", "negative")):
        run(data, weights="sample_wt")


def test_all_zero_weights():
    data = frame().assign(sample_wt=0.0)
    with pytest.raises(errors.InvalidWeightsError, match=all_of("sample_wt", "zero")):
        run(data, weights="sample_wt")


# --------------------------------------------------------------------------------------------
# Options
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    "where,argument,value",
    [
        ("fit", "kernel", "gaussian"),
        ("fit", "variance", "hc4"),
        ("fit", "bandwidth", "silverman"),
        ("fit", "pilot_bandwidth", "twostep"),
        ("design", "treated", "left"),
    ],
)
def test_invalid_option_string(where, argument, value):
    design_kwargs = {argument: value} if where == "design" else {}
    fit_kwargs = {argument: value} if where == "fit" else None
    with pytest.raises(errors.InvalidOptionError, match=all_of(argument, value)):
        run(frame(), fit_kwargs, **design_kwargs)


@pytest.mark.parametrize("bandwidth", [-0.3, 0.0, (0.4, 0.0), float("nan"), float("inf")])
def test_invalid_manual_bandwidth(bandwidth):
    with pytest.raises(errors.InvalidBandwidthError, match=all_of("bandwidth")):
        run(frame(), {"bandwidth": bandwidth})


# --------------------------------------------------------------------------------------------
# Missing rows: dropped and counted, never silently
# --------------------------------------------------------------------------------------------
def test_rows_with_missing_values_are_dropped_and_counted():
    data = frame()
    data.loc[[3, 40, 41], "exam_points"] = np.nan
    data.loc[[40, 77, 78, 300], "earnings"] = np.nan  # row 40 misses both: counted once
    clean = data.dropna(subset=["exam_points", "earnings"])
    assert len(data) - len(clean) == 6
    got = run(data, {"variance": "hc1"})
    want = run(clean, {"variance": "hc1"})
    assert got.n_dropped == 6
    assert want.n_dropped == 0
    assert sum(got.n_total) == len(data) - 6
    assert got.estimate == want.estimate
    assert got.std_error == want.std_error


@pytest.mark.parametrize(
    "column,extra,fit_kwargs",
    [
        ("sample_wt", {"weights": "sample_wt"}, {}),
        ("school_id", {"cluster": "school_id"}, {}),
        ("enrolled", {"takeup": "enrolled"}, {}),
        ("age_z", {"covariates": ["age_z"]}, {"adjust": True}),
    ],
)
def test_missing_values_in_other_used_columns_are_dropped(column, extra, fit_kwargs):
    data = frame()
    if column == "school_id":
        data[column] = data[column].astype(float)
    data.loc[[2, 9, 150], column] = np.nan
    got = run(data, fit_kwargs, **extra)
    want = run(data.dropna(subset=[column]), fit_kwargs, **extra)
    assert got.n_dropped == 3
    assert got.estimate == want.estimate


# --------------------------------------------------------------------------------------------
# The user's DataFrame is never modified
# --------------------------------------------------------------------------------------------
def test_user_dataframe_is_never_modified():
    data = frame()
    data.loc[[3, 50], "earnings"] = np.nan
    data.index = pd.RangeIndex(100, 100 + len(data), name="row_id")[::-1]  # a non-default index
    data.attrs = {}
    before = copy.deepcopy(data)
    before_columns = list(data.columns)
    before_dtypes = data.dtypes.copy()

    design = seamline.Design(data, score="exam_points", cutoff=0.0, outcome=["earnings", "age_z"],
                             takeup="enrolled", covariates=["prior_z"], cluster="school_id",
                             weights="sample_wt")
    design.fit(bandwidth=0.5)
    design.fit(bandwidth=(0.4, 0.6), adjust=True, donut=0.05)
    design.fit()
    design.fit(outcome="age_z", bandwidth=0.5, degree=2)
    design.bandwidths()
    sharp = seamline.Design(data, score="exam_points", cutoff=0.0, outcome="earnings", treated="below")
    sharp.fit(bandwidth=0.5, variance="hc3")

    pd.testing.assert_frame_equal(data, before, check_exact=True)
    assert list(data.columns) == before_columns
    pd.testing.assert_series_equal(data.dtypes, before_dtypes)
    assert data.attrs == {}
    assert data.index.equals(before.index)
