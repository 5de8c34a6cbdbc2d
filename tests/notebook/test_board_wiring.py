"""Boards use the paper-workflow exports and accept date scores (wiring of seamline.export and time_score)."""
from __future__ import annotations

import numpy as np
import pandas as pd

import seamline
from seamline.export.script import board_script
from seamline.notebook.magic import parse_spec


def visits(n=2000, seed=4):
    """Test data generated here (seeded): visit dates around a cutoff date, a jump of 0.5."""
    rng = np.random.default_rng(seed)
    days = rng.integers(-200, 200, n)
    return pd.DataFrame({"day": pd.Timestamp("2024-07-01") + pd.to_timedelta(days, unit="D"),
                         "y": 0.5 * (days >= 0) + rng.normal(size=n)})


def test_a_cell_with_a_cutoff_date_gives_the_design_on_that_date():
    df = visits()
    parsed = parse_spec("data: df\nscore: day\ncutoff: 2024-07-01\noutcome: y", {"df": df}, name="visits")
    assert parsed.design_kwargs["cutoff"] == "2024-07-01"
    board = seamline.board(df, **parsed.design_kwargs).wait()
    direct = seamline.Design(df, score="day", cutoff="2024-07-01", outcome="y").fit()
    assert (board.fit.estimate, board.fit.robust_conf_int) == (direct.estimate, direct.robust_conf_int)
    assert board.summary()["cutoff"] == "2024-07-01"
    assert "day = 2024-07-01" in board.export("estimate", "markdown")


def test_board_exports_use_reader_labels_and_the_replication_script():
    df = visits()
    board = seamline.board(df, score="day", cutoff="2024-07-01", outcome="y").wait()
    text = board.export("estimate", "markdown")
    assert "Std. error" in text and "std_error" not in text
    assert board.export("script") == board_script(board)
