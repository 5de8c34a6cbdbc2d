"""Partitioned inputs: a dask DataFrame, or a path or glob of Parquet files, gathered exactly.

Route
-----
A partitioned input is checked from its metadata first (the dask frame's column dtypes, or the schema
of every Parquet file: no rows are read), then **only the design's columns** are read, one task per
partition, on whatever dask scheduler is active (the local threaded scheduler by default, a
``dask.distributed.Client`` when the user has made one; we never start a scheduler of our own). Each
task turns its partition into compact arrays (float64 for numeric columns, converted exactly as the
in-memory adapter converts them; date scores and cluster labels as they are), and the arrays are
joined column by column into one pandas frame with a plain ``RangeIndex``. The in-memory engine then
runs on that frame.

What is exact
-------------
Everything. The gathered columns hold the same values, in the same row order, as
``data.compute()`` (or ``pandas.read_parquet`` of the same files), so every result (fits at selected
and manual bandwidths, the bandwidth selectors, density tests, bins, balance, sensitivity, placebo
cutoffs, donut, counts of dropped rows) is the in-memory result on the same rows, bit for bit. Only
row labels in error messages differ: they count rows from 0 across the partitions.

Memory bound
------------
The gathered design columns, 8 bytes x rows x columns (numeric columns), plus, while the partitions
are joined, one more copy of the largest column, plus the partitions being read at that moment (one
per dask thread or worker); the user's own columns that the design does not name are never read. After gathering, the in-memory engine's own working memory applies (see
DEVELOPERS.md, "Partitioned inputs"). On this (gathered) route the rows are *not* streamed, so a
dataset larger than memory does not fit; the bounded-memory route is ``seamline.streaming``
(``Design(..., reading="streamed")``).
"""
from __future__ import annotations

import glob
import hashlib
import os
import re
from contextlib import contextmanager
from contextvars import ContextVar
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from .errors import ColumnNotFoundError, ColumnTypeError, DataSourceError, shown

PARQUET_SUFFIXES = (".parquet", ".parq", ".pq")
INSTALL_HINT = "Install the optional extra: pip install 'seamline[dask]'."
PARTITION_BLOCKSIZE = "16MiB"      # uncompressed Parquet storage per partition read (see open_parquet)
# (done, total) partitions read; set by ``reading_progress`` around a Design(...) call
Report = Callable[[int, int], None]
_REPORT: ContextVar[Report | None] = ContextVar("seamline_reading_progress", default=None)


@contextmanager
def reading_progress(report: Report):
    """Call ``report(done, total)`` as partitions of partitioned inputs are read inside this block.

    Works with dask's local schedulers (through a dask callback) and with a ``dask.distributed``
    client (through its futures); the partitions are computed exactly as without a report.

    Examples
    --------
    >>> with reading_progress(lambda done, total: print(f"{done}/{total}")):   # doctest: +SKIP
    ...     design = seamline.Design("births/*.parquet", score="x", cutoff=0, outcome="y")
    """
    token = _REPORT.set(report)
    try:
        yield
    finally:
        _REPORT.reset(token)


def is_partitioned(data) -> bool:
    """True for a dask DataFrame or a path (str or os.PathLike) naming Parquet files."""
    if isinstance(data, (str, os.PathLike)):
        return True
    return _is_dask_frame(data)


def _is_dask_frame(data) -> bool:
    if not type(data).__module__.startswith("dask"):
        return False
    import dask.dataframe as dd
    return isinstance(data, dd.DataFrame)


def _import_dask():
    try:
        import dask
        import dask.dataframe as dd
    except ImportError:
        raise ImportError(f"Reading Parquet paths and dask DataFrames needs dask. {INSTALL_HINT}") from None
    return dask, dd


# ---- Parquet paths ------------------------------------------------------------------------------
def _natural_key(path: str):
    """part.2 before part.10, as dask orders the files of a folder it wrote."""
    return [int(t) if t.isdigit() else t for t in re.split(r"(\d+)", path)]


def parquet_files(path) -> list[str]:
    """The Parquet files a path names: a file, a folder (every Parquet file under it) or a glob.

    Raises
    ------
    DataSourceError
        When the path matches no Parquet file.
    """
    text = os.fspath(path)
    if os.path.isdir(text):
        files = sorted((str(p) for p in Path(text).rglob("*") if p.suffix in PARQUET_SUFFIXES and p.is_file()),
                       key=_natural_key)
    elif glob.has_magic(text):
        files = sorted((f for f in glob.glob(text, recursive=True) if os.path.isfile(f)), key=_natural_key)
    else:
        files = [text] if os.path.isfile(text) else []
    if not files:
        raise DataSourceError(f"`data` path {shown(text)} must match at least one Parquet file; got none. Check the "
                              "path, or pass a folder of Parquet files or a glob such as 'data/*.parquet'.")
    return files


def _arrow_kind(arrow_type) -> str:
    """'numeric', 'time' or 'other' for a Parquet (Arrow) column type."""
    import pyarrow as pa
    if pa.types.is_dictionary(arrow_type):
        arrow_type = arrow_type.value_type
    if (pa.types.is_integer(arrow_type) or pa.types.is_floating(arrow_type) or pa.types.is_boolean(arrow_type)
            or pa.types.is_decimal(arrow_type) or pa.types.is_null(arrow_type)):
        return "numeric"
    if pa.types.is_temporal(arrow_type):
        return "time"
    return "other"


def _check_parquet_schemas(files: list[str], roles: dict[str, str]) -> None:
    """Every needed column in every file, numeric where the design needs numbers (schemas only)."""
    import pyarrow.parquet as pq
    missing: dict[str, list[str]] = {}
    for f in files:
        schema = pq.read_schema(f)
        names = set(schema.names)
        for name, role in roles.items():
            if name not in names:
                missing.setdefault(name, []).append(f)
                continue
            if role == "cluster":
                continue
            kind = _arrow_kind(schema.field(name).type)
            if kind == "numeric" or (kind == "time" and role == "score"):
                continue
            allowed = "numeric or a date/time" if role == "score" else "numeric"
            raise ColumnTypeError(f"`{role}` column {shown(name)} must be {allowed}; got Parquet type "
                                  f"{schema.field(name).type} in {shown(f)}. Write the column as numbers (or cast "
                                  "it in dask and pass the dask DataFrame), or choose another column.")
    for name, where in missing.items():
        role = roles[name]
        if len(where) == len(files):
            raise ColumnNotFoundError(f"`{role}` column {shown(name)} is not in the Parquet files (e.g. {shown(where[0])}). "
                                      "Check the spelling against the files' schema.")
        files_missing = ", ".join(shown(w) for w in where[:3]) + (" ..." if len(where) > 3 else "")
        raise ColumnNotFoundError(f"`{role}` column {shown(name)} must be in every Parquet file; got it missing from "
                                  f"{len(where)} of {len(files)} files ({files_missing}). Rewrite those files with the "
                                  "column, or select the files that have it with a narrower path or glob.")


def open_parquet(path, roles: dict[str, str]):
    """A dask DataFrame of the design's columns over the Parquet files ``path`` names (schemas checked)."""
    _, dd = _import_dask()
    files = parquet_files(path)
    _check_parquet_schemas(files, roles)
    # Row groups, not whole files, as partitions (small row groups merged up to PARTITION_BLOCKSIZE
    # within a file): fewer rows in flight per thread. At 3e7 rows in files of 2.4e6 rows (three
    # row groups each), a dask pass summing two columns peaked at 0.38 GB instead of 0.66 and took
    # half the time (DEVELOPERS.md, "Partitioned inputs").
    return dd.read_parquet(files, columns=list(roles), split_row_groups="adaptive", blocksize=PARTITION_BLOCKSIZE)


# ---- dask DataFrames ----------------------------------------------------------------------------
def _check_dask_dtypes(frame, roles: dict[str, str]) -> None:
    """Dtypes from the collection's metadata (nothing is computed); DesignData checked the names."""
    for name, role in roles.items():
        if role == "cluster":
            continue
        dtype = frame.dtypes[name]
        ok = pd.api.types.is_numeric_dtype(dtype) or pd.api.types.is_bool_dtype(dtype) or (
            role == "score" and (pd.api.types.is_datetime64_any_dtype(dtype)
                                 or isinstance(dtype, pd.PeriodDtype)))
        if not ok and not pd.api.types.is_object_dtype(dtype):   # object: decided on the values, as in memory
            allowed = "numeric or a date/time" if role == "score" else "numeric"
            raise ColumnTypeError(f"`{role}` column {shown(name)} must be {allowed}; got dtype {dtype} in the dask "
                                  f"DataFrame. Convert it with dask.dataframe.to_numeric or choose another column.")


def _partition_arrays(part: pd.DataFrame, columns: list[str]) -> dict:
    """One partition as compact columns: float64 arrays for numbers, the Series itself otherwise."""
    out = {}
    for name in columns:
        col = part[name]
        dtype = col.dtype
        numeric = (pd.api.types.is_numeric_dtype(dtype) or pd.api.types.is_bool_dtype(dtype)) and \
            not pd.api.types.is_object_dtype(dtype)
        if numeric:
            # the conversion numeric_column makes in memory, done here so only float64 travels
            out[name] = np.asarray(col.to_numpy(dtype=float, na_value=np.nan), dtype=np.float64)
        else:
            out[name] = col.reset_index(drop=True)
    return out


def gather_frame(data, columns: list[str] | None = None, roles: dict[str, str] | None = None) -> pd.DataFrame:
    """The design's columns of a partitioned input as one pandas frame, read on the active scheduler.

    Parameters
    ----------
    data : a dask DataFrame, or a path / glob of Parquet files.
    columns : the columns to read (only these are read; default: all).
    roles : column -> role name for the messages of the metadata checks (default: "column").

    Returns
    -------
    pandas.DataFrame with a RangeIndex; numeric columns are float64 (missing values NaN).
    """
    dask, _ = _import_dask()
    path = isinstance(data, (str, os.PathLike))
    if columns is None:
        if path:
            import pyarrow.parquet as pq
            columns = pq.read_schema(parquet_files(data)[0]).names
        else:
            columns = [str(c) for c in data.columns]
    columns = list(dict.fromkeys(columns))
    roles = roles or {c: "column" for c in columns}
    if path:
        frame = open_parquet(data, roles)
    else:
        _check_dask_dtypes(data, roles)
        frame = data[columns]
    pieces = _compute([dask.delayed(_partition_arrays)(part, columns) for part in frame.to_delayed()])
    joined = {}
    for name in columns:
        parts = [p.pop(name) for p in pieces]   # drop each partition's copy as soon as it is joined
        if parts and all(isinstance(a, np.ndarray) for a in parts):
            joined[name] = np.concatenate(parts) if len(parts) > 1 else parts[0]
        else:
            joined[name] = pd.concat(parts, ignore_index=True) if parts else pd.Series([], dtype=float)
        del parts
    n = len(next(iter(joined.values()))) if joined else 0
    return pd.DataFrame(joined, index=pd.RangeIndex(n), copy=False)


def _compute(tasks: list, name: str = "_partition_arrays", total: int | None = None) -> list:
    """Compute the partition tasks on the active scheduler, reporting progress when asked.

    ``name``: the function whose tasks are counted (one per partition); ``total``: how many there are
    (default: one per task given; a pass reduced to one task gives its partitions' count)."""
    import dask
    report = _REPORT.get()
    total = len(tasks) if total is None else total
    if report is None or total == 0:
        return list(dask.compute(*tasks))
    try:
        from distributed import as_completed, default_client
        client = default_client()
    except (ImportError, ValueError):       # no distributed client: a local scheduler is active
        client = None
    if client is not None:
        futures = client.compute(tasks)
        for done, _ in enumerate(as_completed(futures), 1):
            report(total if len(futures) < total and done == len(futures) else done, total)
        return client.gather(futures)
    from dask.callbacks import Callback

    class Count(Callback):
        done = 0

        def _posttask(self, key, result, dsk, state, worker_id):
            task = key[0] if isinstance(key, tuple) else key
            if str(task).startswith(name):
                Count.done += 1
                report(Count.done, total)

    with Count():
        return list(dask.compute(*tasks))


# ---- identity for change detection --------------------------------------------------------------
def data_identity(data) -> str | None:
    """A cheap identity of a partitioned input, for deciding whether results must be recomputed.

    A dask DataFrame: dask's own deterministic token of the collection (no data is computed). A Parquet
    path: a hash of the matched files' paths, sizes and modification times (one ``stat`` per file).
    Anything else: None (the caller keeps its own way of detecting changes). A path that matches no
    file has the identity of an empty set of files, so the caller sees a change when files appear.
    """
    if isinstance(data, (str, os.PathLike)):
        try:
            files = parquet_files(data)
        except DataSourceError:
            files = []
        stamp = [(f, st.st_size, st.st_mtime_ns) for f in files for st in (os.stat(f),)]
        return "parquet-" + hashlib.sha256(repr((os.fspath(data), stamp)).encode()).hexdigest()[:32]
    if _is_dask_frame(data):
        from dask.base import tokenize
        return "dask-" + tokenize(data)
    return None


def release_memory() -> None:
    """Hand the memory freed by a pass back to the system: pyarrow's pool keeps the pages of the
    partitions it read, and glibc keeps the freed temporaries of each worker thread in that thread's
    arena, where the next allocation of another thread (the gathered window, the sorted scores)
    cannot reuse them. Without this, a pass leaves about its partitions' size behind (measured at
    1e7 rows: 0.51 GB resident after the summary pass, 0.27 GB after both releases)."""
    try:
        import pyarrow
        pyarrow.default_memory_pool().release_unused()
    except (ImportError, AttributeError):
        pass
    if _LIBC is not None:
        _LIBC.malloc_trim(0)


def _libc():
    import ctypes
    import ctypes.util
    import sys
    if not sys.platform.startswith("linux"):
        return None
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        return libc if hasattr(libc, "malloc_trim") else None     # glibc only (not musl)
    except OSError:
        return None


_LIBC = _libc()
