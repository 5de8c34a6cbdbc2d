"""Which route a partitioned input (dask, Parquet) takes: streamed in bounded memory
(``seamline.streaming``) or gathered into memory (``seamline.partitioned``)."""
from __future__ import annotations

import os

import numpy as np
import pandas as pd

from .errors import shown

STREAM_ABOVE_ROWS = 2_000_000   # reading="automatic": stream partitioned inputs with more rows


def large_enough(data) -> bool:
    """reading="automatic": whether a partitioned input has more than STREAM_ABOVE_ROWS rows (a Parquet
    path from its files' metadata; a dask frame from ``frame.shape[0]``, which dask may answer from
    metadata too)."""
    if isinstance(data, (str, os.PathLike)):
        import pyarrow.parquet as pq
        from .partitioned import parquet_files
        return sum(pq.read_metadata(f).num_rows for f in parquet_files(data)) > STREAM_ABOVE_ROWS
    return int(data.shape[0].compute()) > STREAM_ABOVE_ROWS


READINGS = ("automatic", "streamed", "gathered")     # Design(reading=...): how a partitioned input is read
STREAMED_RULES = ("mse", "mse-split", "coverage", "ik")    # bandwidth rules computed from a window (and numbers)


def streamable_frame(data, roles: dict[str, str], reading: str, *, cutoff, takeup, cluster, score_unit):
    """The dask DataFrame of the design's columns when the design goes through the bounded-memory
    route, or None (then the caller gathers the columns, seamline.partitioned).

    ``reading``: "automatic" streams a partitioned input of more than STREAM_ABOVE_ROWS rows that the
    route supports (numeric columns, one numeric cutoff, no take-up, cluster or date score);
    "streamed" asks for the route and names what stops it; "gathered" never streams.
    """
    from .errors import InvalidOptionError
    from .partitioned import _check_dask_dtypes, _import_dask, is_partitioned, open_parquet
    if reading == "gathered" or not is_partitioned(data):
        return None
    _import_dask()
    why = None
    if takeup is not None or cluster is not None:
        why = "a fuzzy design (take-up)" if takeup is not None else "a cluster variable"
    elif score_unit is not None or isinstance(cutoff, (str, bool)) or not np.isscalar(cutoff):
        why = "a cutoff that is not one number"
    frame = None
    if why is None:
        if isinstance(data, (str, os.PathLike)):
            frame = open_parquet(data, roles)
        else:
            _check_dask_dtypes(data, roles)
            frame = data[list(roles)]
        bad = [c for c in roles if not (pd.api.types.is_numeric_dtype(frame.dtypes[c])
                                        or pd.api.types.is_bool_dtype(frame.dtypes[c]))
               or pd.api.types.is_object_dtype(frame.dtypes[c])]
        if bad:
            why = f"a column that is not numeric ({shown(bad[0])}, dtype {frame.dtypes[bad[0]]})"
    if why is not None:
        if reading == "streamed":
            raise InvalidOptionError(f"`reading` \"streamed\" needs numeric columns, one numeric cutoff and no take-up "
                                     f"or cluster; got {why}. Use reading=\"gathered\" (the data must then fit in "
                                     "memory), or cast the columns in dask first.")
        return None
    if reading == "automatic" and not large_enough(data if isinstance(data, (str, os.PathLike)) else frame):
        return None
    return frame
