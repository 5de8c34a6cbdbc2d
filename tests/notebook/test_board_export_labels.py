"""Every export of every board panel speaks to a reader, and the caution is stated once per board.

The panels are read from ``seamline.notebook.exports.EXPORTS`` (so a panel added later is swept
too: the test fails if some panel applies on none of the boards below). Each is exported in every
table format of ``Board.export``; no machine column name (any column of any panel's ``table()``)
may appear, raw or LaTeX/Markdown-escaped. The board's static copy (what a saved notebook and
the command-line report show) and its methods paragraph state the usual caution exactly once.

Data: the package's invented demo scenarios (a sharp design with covariates and clusters, a fuzzy
design, cutoffs that differ by district with subgroups, two cumulative cutoffs). These are presentation checks; the numbers are checked elsewhere against direct calls.
"""
from __future__ import annotations

import pandas as pd
import pytest

import seamline
from seamline.demo_cutoffs import cumulative_grants_scenario, district_cutoffs_scenario
from seamline.demo_data import fuzzy_scenario, sharp_scenario
from seamline.notebook.board import boards
from seamline.notebook.exports import EXPORTS, TABLE_FORMATS
from seamline.notebook.spec import NotApplicable
from seamline.notebook.static import static_html
from seamline.results.base import CAUTION


@pytest.fixture(scope="module")
def board_list():
    live = {id(b) for b in boards()}
    sharp, fuzzy = sharp_scenario(n=2000, seed=4), fuzzy_scenario(n=3000, seed=4)
    made = [seamline.board(sharp.data, name="sharp_board", **sharp.design_kwargs()).wait(),
            seamline.board(fuzzy.data, name="fuzzy_board", **fuzzy.design_kwargs()).wait()]
    districts, grants = district_cutoffs_scenario(3000, seed=4), cumulative_grants_scenario(3000, seed=4)
    made += [seamline.board(districts.data, name="district_board", groups="owner", effect=0.5,
                            **districts.design_kwargs()).wait(),
             seamline.board(grants.data, name="grants_board", groups="cooperative",
                            **grants.design_kwargs()).wait()]
    yield made
    for b in boards():
        if id(b) not in live:
            b.close()


def _current(board, what):
    result = board.results.get(EXPORTS[what])
    if what == "decomposition" and getattr(result, "decomposition", None) is None:
        return None                      # cumulative cutoffs have no pooled estimate to decompose
    return None if result is None or isinstance(result, NotApplicable) else result


def _machine_names(board_list) -> set[str]:
    names = set()
    for board in board_list:
        for what in EXPORTS:
            result = _current(board, what)
            if result is None:
                continue
            table = result if isinstance(result, pd.DataFrame) else result.table()
            names.update(str(c) for c in table.columns)
    return names


def test_every_panel_applies_on_some_board(board_list):
    missing = [what for what in EXPORTS if all(_current(b, what) is None for b in board_list)]
    assert missing == [], f"add a board on which these panels apply: {missing}"


@pytest.mark.parametrize("fmt", TABLE_FORMATS)
def test_no_machine_column_name_in_any_panel_export(board_list, fmt):
    snake = sorted(n for n in _machine_names(board_list) if "_" in n)
    assert {"std_error", "n_below"} <= set(snake)          # the sweep knows the names it looks for
    for board in board_list:
        for what in EXPORTS:
            if _current(board, what) is None:
                continue
            text = board.export(what, fmt)
            assert text.strip(), (board.name, what, fmt)
            for name in snake:
                assert name not in text and name.replace("_", r"\_") not in text, (board.name, what, fmt, name)


def test_no_machine_column_name_in_the_static_board(board_list):
    # the copy a saved notebook, nbconvert and the command-line report show (every panel, one page)
    snake = sorted(n for n in _machine_names(board_list) if "_" in n)
    for board in board_list:
        page = static_html(board, charts=False)
        leaked = [name for name in snake if name in page or name.replace("_", r"\_") in page]
        assert leaked == [], (board.name, leaked)


def test_the_static_board_and_the_methods_paragraph_state_the_caution_once(board_list):
    for board in board_list:
        page = static_html(board, charts=False)
        assert page.count(CAUTION) == 1, board.name
        for what in EXPORTS:               # ... and no panel table repeats it
            if _current(board, what) is not None:
                assert "local to the cutoff" not in board.export(what, "markdown"), (board.name, what)
        assert board.methods_paragraph().count(CAUTION) == 1, board.name
