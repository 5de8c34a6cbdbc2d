"""Inputs other than a pandas DataFrame go through pandas conversion and give identical fits."""
import numpy as np
import pandas as pd
import pyarrow as pa
import pytest

import seamline


def frame():
    rng = np.random.default_rng(4)
    x = rng.uniform(-1, 1, 800)
    return pd.DataFrame({"x": x, "y": 0.5 * x + 0.3 * (x >= 0) + rng.normal(0, 0.2, 800)})


class InterchangeOnly:
    """An object that offers only the dataframe interchange protocol (``__dataframe__``)."""

    def __init__(self, df):
        self._df = df

    def __dataframe__(self, nan_as_null=False, allow_copy=True):
        return self._df.__dataframe__(nan_as_null=nan_as_null, allow_copy=allow_copy)


def test_interchange_protocol_input():
    df = frame()
    want = seamline.Design(df, score="x", cutoff=0.0, outcome="y").fit()
    got = seamline.Design(InterchangeOnly(df), score="x", cutoff=0.0, outcome="y").fit()
    assert (got.estimate, got.std_error, got.bandwidth) == (want.estimate, want.std_error, want.bandwidth)


def test_arrow_table_input():
    df = frame()
    want = seamline.Design(df, score="x", cutoff=0.0, outcome="y").fit()
    got = seamline.Design(pa.Table.from_pandas(df), score="x", cutoff=0.0, outcome="y").fit()
    assert (got.estimate, got.robust_conf_int) == (want.estimate, want.robust_conf_int)


def test_other_objects_are_refused_with_a_fix():
    with pytest.raises(TypeError, match="must be a pandas DataFrame"):
        seamline.Design([[1, 2]], score="x", cutoff=0.0, outcome="y")
