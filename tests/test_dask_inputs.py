"""Dask DataFrames and Parquet paths as design data.

Reference: the in-memory pandas path on the same rows (``pandas.concat`` of the pieces written to
Parquet). Every result must agree to a relative difference below 1e-8 with identical counts; the
partitioned route gathers the design's columns exactly, so in practice the numbers are identical.
"""
from __future__ import annotations

import os

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import dask.dataframe as dd

import seamline
from seamline.errors import ColumnNotFoundError, ColumnTypeError, DataSourceError, DuplicateColumnError
from seamline.partitioned import data_identity, gather_frame, reading_progress

from _partitioned_data import KWARGS, SIZES, assert_same, pieces, results


@pytest.fixture(scope="module")
def want(memory_design):
    return results(memory_design)


def test_parquet_folder_equals_memory(parquet_folder, want):
    assert_same(results(seamline.Design(parquet_folder, **KWARGS)), want)


def test_parquet_glob_and_dask_frame_equal_memory(parquet_folder, want, memory_design):
    design = seamline.Design(str(parquet_folder / "part-*.parquet"), **KWARGS)
    assert_same(results(design), want)
    frame = dd.read_parquet(sorted(str(p) for p in parquet_folder.glob("*.parquet")))
    assert_same(results(seamline.Design(frame, **KWARGS)), want)


def test_missing_rows_are_counted_as_in_memory(parquet_folder):
    data = pd.concat(pieces(), ignore_index=True)
    fit = seamline.Design(parquet_folder, **KWARGS).fit()
    # First principles: rows missing the score or the outcome are dropped and counted.
    assert fit.n_dropped == int((data["x"].isna() | data["y"].isna()).sum())


def test_only_the_design_columns_are_read(parquet_folder):
    frame = gather_frame(parquet_folder, ["x", "y"])
    assert list(frame.columns) == ["x", "y"] and len(frame) == sum(SIZES)
    assert frame["x"].dtype == np.float64


def test_two_worker_processes(parquet_folder, want):
    import dask.distributed as distributed
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster, distributed.Client(cluster) as client:
        seen = []
        with distributed.get_task_stream(client) as stream, \
                reading_progress(lambda done, total: seen.append((done, total))):
            design = seamline.Design(parquet_folder, **KWARGS)
        assert len(client.scheduler_info()["workers"]) == 2
        ran = [str(task["key"]) for task in stream.data]
        assert sum("_partition_arrays" in key for key in ran) == len(SIZES)    # read on the workers
    fit = design.fit()
    assert fit.table().equals(want[0]["fit"])
    assert seen[-1] == (len(SIZES), len(SIZES))     # one report per partition, read through futures


def test_progress_on_the_local_scheduler(parquet_folder):
    seen = []
    with reading_progress(lambda done, total: seen.append((done, total))):
        seamline.Design(parquet_folder, **KWARGS)
    assert seen == [(k, len(SIZES)) for k in range(1, len(SIZES) + 1)]
    seamline.Design(parquet_folder, **KWARGS)               # outside the block nothing is reported
    assert len(seen) == len(SIZES)


# ---- bad input ----------------------------------------------------------------------------------
def test_a_path_matching_no_file(tmp_path):
    with pytest.raises(DataSourceError, match=r"`data` path .*nothing-\*\.parquet' must match at least one "
                                              r"Parquet file; got none\. Check the path"):
        seamline.Design(str(tmp_path / "nothing-*.parquet"), **KWARGS)


def test_a_column_missing_from_some_files(tmp_path):
    first, second = pieces()[:2]
    pq.write_table(pa.Table.from_pandas(first, preserve_index=False), tmp_path / "a.parquet")
    pq.write_table(pa.Table.from_pandas(second.drop(columns="c"), preserve_index=False), tmp_path / "b.parquet")
    with pytest.raises(ColumnNotFoundError, match=r"`covariates` column 'c' must be in every Parquet file; got "
                                                  r"it missing from 1 of 2 files \(.*b\.parquet'\)\. Rewrite"):
        seamline.Design(tmp_path, **KWARGS)


def test_a_text_score_in_the_parquet_schema(tmp_path):
    frame = pieces()[0].assign(x=lambda f: f["x"].astype(str))
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), tmp_path / "a.parquet")
    with pytest.raises(ColumnTypeError, match=r"`score` column 'x' must be numeric or a date/time; got Parquet "
                                              r"type (large_)?string in .*a\.parquet'\. Write the column as numbers"):
        seamline.Design(tmp_path, **KWARGS)


def test_a_text_outcome_in_a_dask_frame():
    frame = dd.from_pandas(pieces()[0].assign(y=lambda f: f["y"].astype(str)), npartitions=2)
    with pytest.raises(ColumnTypeError, match=r"`outcome` column 'y' must be numeric; got dtype"):
        seamline.Design(frame, **KWARGS)


def test_a_misspelt_column_of_a_dask_frame():
    frame = dd.from_pandas(pieces()[0], npartitions=2)
    with pytest.raises(ColumnNotFoundError, match=r"`covariates` column 'cc' is not in the data. Did you mean 'c'"):
        seamline.Design(frame, score="x", cutoff=0.0, outcome="y", covariates=["cc"])


# ---- identity for change detection --------------------------------------------------------------
def test_identity_follows_the_files_and_the_collection(tmp_path):
    frame = pieces()[0]
    target = tmp_path / "a.parquet"
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), target)
    before = data_identity(tmp_path)
    assert data_identity(tmp_path) == before
    pq.write_table(pa.Table.from_pandas(frame.iloc[:-1], preserve_index=False), target)
    os.utime(target, ns=(1, 1))        # a new size and a new modification time
    assert data_identity(tmp_path) != before
    lazy = dd.from_pandas(frame, npartitions=2)
    assert data_identity(lazy) == data_identity(lazy)
    assert data_identity(lazy) != data_identity(lazy.assign(y=lazy["y"] + 1))
    assert data_identity(frame) is None


# ---- other column kinds -------------------------------------------------------------------------
def test_dates_labels_weights_and_take_up_from_parquet(tmp_path):
    """A date score, text cluster labels, weights, a 0/1 take-up and an integer column with nulls."""
    rng = np.random.default_rng(21)
    frames = []
    for k, size in enumerate((700, 1300, 500)):
        days = rng.integers(-300, 300, size)
        takeup = (rng.uniform(size=size) < np.where(days >= 0, 0.8, 0.2))
        y = 0.01 * days + 0.6 * takeup + rng.normal(0, 0.5, size)
        count = pd.array(rng.poisson(4, size), dtype="Int64")
        count[::53] = pd.NA
        frames.append(pd.DataFrame({
            "day": pd.Timestamp("2023-03-01") + pd.to_timedelta(days, unit="D"),
            "y": y, "takeup": takeup, "count": count,
            "school": [f"school {i}" for i in rng.integers(0, 40, size)],
            "w": rng.uniform(0.5, 2.0, size)}))
        pq.write_table(pa.Table.from_pandas(frames[-1], preserve_index=False), tmp_path / f"part-{k}.parquet")
    memory = pd.concat([pd.read_parquet(tmp_path / f"part-{k}.parquet") for k in range(3)], ignore_index=True)
    kwargs = dict(score="day", cutoff="2023-03-01", score_unit="days", outcome=["y", "count"], takeup="takeup",
                  cluster="school", weights="w")
    got, want = seamline.Design(tmp_path, **kwargs), seamline.Design(memory, **kwargs)
    for name in ("y", "count"):
        a, b = got.fit(name).table(), want.fit(name).table()
        assert a.equals(b), name
    assert got.fit().n_dropped == want.fit().n_dropped
    assert got.fit("count").n_dropped == int(memory["count"].isna().sum())   # first principles


def test_duplicate_names_in_a_dask_frame():
    frame = pd.DataFrame(np.ones((6, 3)), columns=["x", "y", "y"])
    with pytest.raises(DuplicateColumnError, match=r"column names must be unique; got duplicates \['y'\]"):
        seamline.Design(dd.from_pandas(frame, npartitions=2), score="x", cutoff=0.0, outcome="y")


def test_row_groups_are_read_as_partitions(tmp_path, want, monkeypatch):
    """A Parquet path is read a row group at a time (fewer rows in flight per thread; DEVELOPERS.md,
    "Partitioned inputs"), row groups smaller than PARTITION_BLOCKSIZE merged within a file; the
    results are the in-memory ones all the same (reference: the in-memory pandas path on the same
    rows)."""
    import seamline.partitioned as partitioned
    for k, frame in enumerate(pieces()):       # row groups of 500 rows: 4, 1, 2 and 5 of them
        pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), tmp_path / f"part-{k}.parquet",
                       row_group_size=500)
    roles = {"x": "score", "y": "outcome", "z": "outcome", "c": "covariate"}
    assert partitioned.open_parquet(str(tmp_path), roles).npartitions == 4      # small: a file each
    monkeypatch.setattr(partitioned, "PARTITION_BLOCKSIZE", "1KiB")            # every row group alone
    assert partitioned.open_parquet(str(tmp_path), roles).npartitions == 12
    assert_same(results(seamline.Design(str(tmp_path), **KWARGS)), want)
