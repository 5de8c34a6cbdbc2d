"""Fixtures shared across test modules.

``parquet_folder`` and ``memory_design``: the partitioned-input tests' data (tests/_partitioned_data.py)
written as one Parquet file per piece, and the in-memory design on the same rows (the reference).
"""
from __future__ import annotations

import pandas as pd
import pytest

import seamline

from _partitioned_data import KWARGS, pieces


@pytest.fixture(scope="module")
def parquet_folder(tmp_path_factory):
    import pyarrow as pa          # the optional dask extra: imported only by the tests that use it
    import pyarrow.parquet as pq

    path = tmp_path_factory.mktemp("parquet")
    for k, frame in enumerate(pieces()):
        pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), path / f"part-{k}.parquet")
    return path


@pytest.fixture(scope="module")
def memory_design():
    return seamline.Design(pd.concat(pieces(), ignore_index=True), **KWARGS)
