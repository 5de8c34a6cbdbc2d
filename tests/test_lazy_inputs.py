"""Lazy and columnar inputs (polars, Arrow) collect only the design's columns and equal pandas."""
from __future__ import annotations

import numpy as np
import pandas as pd
import polars as pl
import pyarrow as pa
import pyarrow.dataset as ds
import pyarrow.parquet as pq
import pytest

import seamline
from seamline.errors import ColumnNotFoundError, DuplicateColumnError

KWARGS = dict(score="x", cutoff=0.0, outcome="y", covariates=["z"], cluster="g", weights="w")


def frame(n=1500, seed=8):
    """Test data generated here (seeded), with a few missing values to count the same way."""
    rng = np.random.default_rng(seed)
    x = rng.uniform(-1, 1, n)
    y = 0.5 * x + 0.3 * (x >= 0) + rng.normal(0, 0.3, n)
    y[::97] = np.nan
    return pd.DataFrame({"x": x, "y": y, "z": rng.normal(size=n), "g": rng.integers(0, 60, n),
                         "w": rng.uniform(0.5, 2.0, n), "unused": rng.normal(size=n)})


def numbers(design):
    fit = design.fit(adjust=True)
    return (fit.estimate, fit.std_error, fit.robust_conf_int, fit.bandwidth, fit.n_used, fit.n_dropped,
            design.density_test().p_value)


@pytest.fixture(scope="module")
def want():
    return numbers(seamline.Design(frame(), **KWARGS))


def test_polars_lazy_frame(want):
    assert numbers(seamline.Design(pl.from_pandas(frame()).lazy(), **KWARGS)) == want


def test_polars_data_frame(want):
    assert numbers(seamline.Design(pl.from_pandas(frame()), **KWARGS)) == want


def test_arrow_table_and_record_batch(want):
    table = pa.Table.from_pandas(frame(), preserve_index=False)
    assert numbers(seamline.Design(table, **KWARGS)) == want
    assert numbers(seamline.Design(table.to_batches()[0], **KWARGS)) == want


def test_arrow_dataset_from_parquet_files(want, tmp_path):
    df = frame()
    # Two files of uneven size: a dataset is read across them in order.
    pq.write_table(pa.Table.from_pandas(df.iloc[:400], preserve_index=False), tmp_path / "part-0.parquet")
    pq.write_table(pa.Table.from_pandas(df.iloc[400:], preserve_index=False), tmp_path / "part-1.parquet")
    assert numbers(seamline.Design(ds.dataset(tmp_path, format="parquet"), **KWARGS)) == want


def test_a_lazy_frame_computes_only_the_used_columns(want):
    lazy = pl.from_pandas(frame()).lazy().with_columns(
        # A column that fails if it is ever computed: strict integer parsing of text that is no integer.
        broken=pl.lit("not a number").str.to_integer(strict=True))
    with pytest.raises(pl.exceptions.ComputeError):
        lazy.select("broken").collect()          # so the check below could fail
    assert numbers(seamline.Design(lazy, **KWARGS)) == want


def test_missing_and_duplicate_columns_are_named_before_reading():
    lazy = pl.from_pandas(frame()).lazy()
    with pytest.raises(ColumnNotFoundError, match=r"`covariates` column 'zz' is not in the data. Did you mean 'z'"):
        seamline.Design(lazy, score="x", cutoff=0.0, outcome="y", covariates=["zz"])
    table = pa.table({"x": [0.1, -0.1], "y": [1.0, 2.0], "y2": [3.0, 4.0]}).rename_columns(["x", "y", "y"])
    with pytest.raises(DuplicateColumnError, match=r"got duplicates \['y'\]"):
        seamline.Design(table, score="x", cutoff=0.0, outcome="y")


def test_polars_dates_as_the_score():
    rng = np.random.default_rng(2)
    days = rng.integers(-200, 200, 1200)
    cutoff = pd.Timestamp("2024-07-01")
    pdf = pd.DataFrame({"day": (cutoff + pd.to_timedelta(days, unit="D")),
                        "y": 0.5 * (days >= 0) + rng.normal(size=1200)})
    lazy = pl.from_pandas(pdf).lazy().with_columns(pl.col("day").cast(pl.Date))
    got = seamline.Design(lazy, score="day", cutoff="2024-07-01", outcome="y").fit()
    ref = seamline.Design(pdf.assign(d=days.astype(float)), score="d", cutoff=0.0, outcome="y").fit()
    assert (got.estimate, *got.bandwidth) == pytest.approx((ref.estimate, *ref.bandwidth), rel=1e-12)
