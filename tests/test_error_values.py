"""Error messages show values as a user types them: ``2.0``, never ``np.float64(2.0)``.

Values computed with numpy (a cutoff read from an array, a bandwidth from a fit) reach the
validators as numpy scalars; their repr would show the wrapper. The expected text of each check is
the Python literal a user would type for the same value (the Python language reference's
``repr`` of the built-in number, string or tuple).
"""
from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest

import seamline
from seamline import errors
from seamline.errors import shown
from seamline.export import TableModel, from_dataframe

WRAPPERS = re.compile(r"np\.|numpy|float64|int64|array\(")


def frame(n: int = 300, seed: int = 5) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = rng.uniform(-1.0, 1.0, n)
    return pd.DataFrame({"points": x, "gain": 0.5 * x + (x >= 0) + rng.normal(0.0, 0.2, n)})


# ---- the helper itself ---------------------------------------------------------------------------
@pytest.mark.parametrize(
    "value,typed",
    [
        (np.float64(2.0), "2.0"),            # Python: repr(2.0) == "2.0"
        (np.float32(1.5), "1.5"),
        (np.int64(3), "3"),
        (np.bool_(True), "True"),
        (np.str_("gaussian"), "'gaussian'"),  # text keeps its quotes, as typed in Python
        ((np.float64(1.0), np.int64(2)), "(1.0, 2)"),
        ([np.float64(0.5)], "[0.5]"),
        (np.array([1.0, 2.5]), "[1.0, 2.5]"),
        (np.array(4.0), "4.0"),
        (float("nan"), "nan"),
        (-float("inf"), "-inf"),
        ({"level": np.float64(0.9)}, "{'level': 0.9}"),
        ((7,), "(7,)"),
        (None, "None"),
    ],
)
def test_shown_writes_the_literal_a_user_types(value, typed):
    assert shown(value) == typed


def test_shown_summarises_long_objects_by_type():
    assert shown(pd.DataFrame({"a": range(100)})) == "a DataFrame"
    assert shown(list(range(20))) == "[0, 1, 2, 3, 4, 5, ...]"


# ---- messages raised across the layers -------------------------------------------------------
def _message(call) -> str:
    with pytest.raises((errors.SeamlineError, ValueError, TypeError), match=r"got ") as info:
        call()
    return str(info.value)


def test_messages_show_numpy_values_plainly():
    data = frame()
    design = seamline.Design(data, score="points", cutoff=0.0, outcome="gain")
    cases = [
        # (call, the text the message must hold)
        (lambda: design.fit(bandwidth=np.float64(-2.0)), "got -2.0"),
        (lambda: design.fit(bandwidth=(np.float64(1.0), np.float64(-1.0))), "got (1.0, -1.0)"),
        (lambda: design.fit(level=np.float64(1.5)), "got 1.5"),
        (lambda: design.fit(kernel=np.str_("gaussian")), "got 'gaussian'"),
        (lambda: design.fit(degree=np.int64(9)), "got 9"),
        (lambda: design.fit(donut=np.float64(-0.5)), "got -0.5"),
        (lambda: seamline.Design(data, score="points", cutoff=np.float64(50.0), outcome="gain"), "got 50.0"),
        (lambda: from_dataframe(pd.DataFrame({"a": [1.0]}), title="t", decimals=np.int64(40)), "got 40"),
        (lambda: TableModel(title="t", columns=("a",), rows=((1.0,),), decimals=(np.int64(-1),)), "got -1"),
    ]
    for call, expected in cases:
        message = _message(call)
        assert expected in message, message
        assert not WRAPPERS.search(message), message
