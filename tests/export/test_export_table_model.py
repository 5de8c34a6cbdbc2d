"""Tests of the immutable table model and its construction from a DataFrame."""
from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest

from seamline.export import TableModel, format_number, from_dataframe


def test_model_is_immutable(small_model):
    with pytest.raises(dataclasses.FrozenInstanceError, match="cannot assign to field 'title'"):
        small_model.title = "other"  # type: ignore[misc]
    assert isinstance(small_model.rows, tuple)
    assert all(isinstance(row, tuple) for row in small_model.rows)


def test_cells_are_normalised_to_plain_python():
    model = TableModel(
        title="t",
        columns=("a", "b", "c", "d", "e"),
        rows=[[np.float64(1.5), np.int64(3), np.nan, [np.float32(0.5), 2], np.bool_(True)],
              [pd.NA, None, "x", np.str_("y"), False]],
        decimals=2,
    )
    assert model.rows == ((1.5, 3, None, (0.5, 2.0), "True"), (None, None, "x", "y", "False"))
    assert type(model.rows[0][0]) is float and type(model.rows[0][1]) is int
    assert model.decimals == (2, 2, 2, 2, 2)
    assert model.numeric_columns() == (True, True, False, False, False)
    assert model.shape == (2, 5)


def test_display_rounds_floats_keeps_integers_and_hides_negative_zero():
    model = TableModel(
        title="t", columns=("a", "b"), rows=((-0.0004, 12), (2.5, -3)), decimals=(3, 3)
    )
    assert [model.display(0, 0), model.display(0, 1)] == ["0.000", "12"]
    assert [model.display(1, 0), model.display(1, 1)] == ["2.500", "-3"]
    assert format_number((0.125, -1.0), 1) == "[0.1, -1.0]"  # round-half-even as Python formats
    assert format_number(None, 3) == ""


@pytest.mark.parametrize(
    ("kwargs", "error", "message"),
    [
        (dict(rows=((1, 2),)), ValueError, r"`rows\[0\]` must have 1 cells, one per column; got 2\."),
        (dict(decimals=(1, 2)), ValueError, r"`decimals` must have 1 entries, one per column; got 2\."),
        (dict(decimals=-1), ValueError, r"`decimals` must be a whole number from 0 to 15; got -1\."),
        (dict(decimals=(2.5,)), ValueError, r"`decimals` must be a whole number from 0 to 15; got 2\.5\."),
        (dict(label="tab 1"), ValueError, r"`label` must use only letters, digits .*; got 'tab 1'\."),
        (dict(title=None), TypeError, r"`title` must be a string; got NoneType\."),
    ],
)
def test_invalid_models_are_refused(kwargs, error, message):
    base = dict(title="t", columns=("a",), rows=((1.0,),), decimals=(3,))
    with pytest.raises(error, match=message):
        TableModel(**{**base, **kwargs})


def test_from_dataframe_with_default_index_and_decimals():
    df = pd.DataFrame({"estimate": [1.23456, -0.5], "n": [10, 20], "rule": ["mse", "ik"]})
    model = from_dataframe(df, title="Invented", notes=["a note"], label="tab:x")
    assert model.columns == ("estimate", "n", "rule")
    assert model.rows == ((1.23456, 10, "mse"), (-0.5, 20, "ik"))
    assert model.decimals == (3, 3, 3)
    assert model.notes == ("a note",)
    assert model.label == "tab:x"
    assert model.numeric_columns() == (True, True, False)


def test_from_dataframe_includes_a_named_or_labelled_index():
    df = pd.DataFrame({"estimate": [1.0, 2.0]}, index=["conventional", "robust"])
    model = from_dataframe(df, title="t", decimals={"estimate": 1})
    assert model.columns == ("", "estimate")
    assert model.rows == (("conventional", 1.0), ("robust", 2.0))
    assert model.decimals == (3, 1)
    assert from_dataframe(df, title="t", index=False).columns == ("estimate",)
    named = df.rename_axis("row")
    assert from_dataframe(named, title="t").columns == ("row", "estimate")


def test_from_dataframe_joins_multiindex_labels():
    columns = pd.MultiIndex.from_tuples([("below", "h"), ("above", "h")])
    index = pd.MultiIndex.from_tuples([("mse", 1), ("ik", 2)], names=["rule", "k"])
    df = pd.DataFrame([[1.0, 2.0], [3.0, 4.0]], columns=columns, index=index)
    model = from_dataframe(df, title="t")
    assert model.columns == ("rule / k", "below / h", "above / h")
    assert model.rows[0] == ("mse / 1", 1.0, 2.0)


def test_from_dataframe_does_not_modify_the_frame():
    df = pd.DataFrame({"a": [1.0, np.nan], "b": ["x", None]})
    before = df.copy()
    from_dataframe(df, title="t")
    pd.testing.assert_frame_equal(df, before)


def test_from_dataframe_refuses_bad_input():
    with pytest.raises(TypeError, match=r"`df` must be a pandas DataFrame; got dict\."):
        from_dataframe({"a": [1]}, title="t")  # type: ignore[arg-type]
    df = pd.DataFrame({"a": [1.0]})
    with pytest.raises(ValueError, match=r"`decimals` must name columns of the table; got \['b'\]\."):
        from_dataframe(df, title="t", decimals={"b": 2})
    with pytest.raises(ValueError, match=r"`decimals\['a'\]` must be a whole number from 0 to 15; got 99\."):
        from_dataframe(df, title="t", decimals={"a": 99})
