"""Boards over partitioned inputs: a dask DataFrame or a Parquet path, from Python and from ``%%cutoff``.

Reference: the same board built on the same rows held in memory as one pandas frame (whose numbers
``tests/notebook/test_live_graph.py`` checks against direct ``Design`` calls, and those in turn are
checked against statsmodels in the engine's tests). The data are generated here (seeded, invented).
Change detection must not read rows: a partitioned input's identity is dask's token of the
collection or the files' sizes and modification times (``partitioned.data_identity``).
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
from seamline.errors import DesignSpecError
from seamline.notebook import scheduler, static
from seamline.notebook.board import Board

pytestmark = pytest.mark.usefixtures("close_new_boards")

KW = dict(score="x", cutoff=0.0, outcome="y", treated="above")
SIZES = (700, 130, 450, 900)     # uneven partitions; the second has no rows near the cutoff


def pieces(seed=5, jump=0.3):
    rng = np.random.default_rng(seed)
    out = []
    for k, size in enumerate(SIZES):
        x = rng.uniform(-0.99, -0.8, size) if k == 1 else rng.uniform(-1, 1, size)
        y = 0.5 + 0.7 * x + jump * (x >= 0) + rng.normal(0, 0.3, size)
        frame = pd.DataFrame({"x": x, "y": y, "note": ["invented"] * size})
        frame.loc[frame.index[::97], "y"] = np.nan
        out.append(frame)
    return out


def write(folder, frames):
    folder.mkdir(exist_ok=True)
    for k, frame in enumerate(frames):
        pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), folder / f"part-{k}.parquet")


@pytest.fixture
def folder(tmp_path):
    write(tmp_path / "pupils", pieces())
    return tmp_path / "pupils"


@pytest.fixture
def designs(monkeypatch):
    """Counts the Designs the boards build (each one reads every partition)."""
    built = []
    real = scheduler.Design

    def counting(data, **kwargs):
        built.append(type(data).__name__)
        return real(data, **kwargs)

    monkeypatch.setattr(scheduler, "Design", counting)
    return built


def headline(b):
    fit = b.fit
    return (fit.estimate, *fit.robust_conf_int, *fit.bandwidth, *fit.n_used, *fit.n_total, fit.n_dropped)


def memory_headline():
    return headline(seamline.board(pd.concat(pieces(), ignore_index=True), panels=["fit"], **KW))


def test_parquet_glob_folder_and_dask_frame_equal_the_in_memory_board(folder):
    want = memory_headline()
    dask_frame = dd.from_pandas(pd.concat(pieces(), ignore_index=True), npartitions=3)
    for data in (str(folder / "*.parquet"), folder, dask_frame):
        got = headline(seamline.board(data, panels=["fit"], **KW))
        assert got[5:] == want[5:]                                         # counts identical
        np.testing.assert_allclose(got[:5], want[:5], rtol=1e-10, atol=0)  # the gathered route is exact


def test_every_panel_equals_the_in_memory_board(folder):
    b = seamline.board(str(folder / "*.parquet"), panels=["fit", "bins", "density", "bandwidths"], **KW)
    m = seamline.board(pd.concat(pieces(), ignore_index=True), panels=["fit", "bins", "density", "bandwidths"], **KW)
    b.wait(), m.wait()
    assert not b.errors and not m.errors
    pd.testing.assert_frame_equal(b.results["bins"].table(), m.results["bins"].table())
    assert b.results["density"].p_value == pytest.approx(m.results["density"].p_value, rel=1e-10)
    pd.testing.assert_frame_equal(b.results["bandwidths"], m.results["bandwidths"])


def test_an_unrelated_check_reads_nothing_and_a_touched_file_recomputes(folder, designs):
    b = seamline.board(str(folder / "*.parquet"), panels=["fit"], **KW)
    first = b.fit
    assert designs == ["str"]
    assert b.check_inputs() == set()                     # an unrelated cell: same files, same mtimes
    assert b.fit is first and designs == ["str"]
    # rewrite one file with a larger jump: new size/mtime -> the board rebuilds and follows the rows
    frames = pieces()
    frames[2] = pieces(jump=1.3)[2]
    write(folder, frames)
    later = os.stat(folder / "part-2.parquet").st_mtime_ns + 10**9
    os.utime(folder / "part-2.parquet", ns=(later, later))
    assert b.check_inputs() == {"column:x", "column:y"}
    want = headline(seamline.board(pd.concat(frames, ignore_index=True), panels=["fit"], **KW))
    assert headline(b)[5:] == want[5:]
    np.testing.assert_allclose(headline(b)[:5], want[:5], rtol=1e-10)
    assert b.fit.estimate != first.estimate
    assert designs.count("str") == 2
    # only touching a file (same bytes, new mtime) counts as a change too: metadata, not rows, decide
    os.utime(folder / "part-0.parquet", ns=(later + 10**9, later + 10**9))
    assert b.check_inputs() == {"column:x", "column:y"}
    b.wait()
    assert designs.count("str") == 3


def test_a_dask_variable_rebound_to_a_new_collection_recomputes(ip, folder, designs):
    ip.user_ns["pupils_dd"] = dd.read_parquet(str(folder / "*.parquet"))
    result = ip.run_cell('%%cutoff tutoring\ndata: pupils_dd\nscore: x\ncutoff: 0\noutcome: y\n', store_history=False)
    assert result.success, result.error_in_exec
    b = ip.user_ns["tutoring"]
    b.wait("fit")
    first, built = b.fit, len(designs)
    assert ip.run_cell("unrelated = 1 + 1", store_history=False).success
    assert b.fit is first and len(designs) == built                 # nothing rebuilt, no rows read
    # the same collection made again has the same dask token: the new object, nothing recomputed
    ip.user_ns["pupils_dd"] = dd.read_parquet(str(folder / "*.parquet"))
    assert "data" not in b.check_inputs()
    assert b.fit is first and len(designs) == built
    # a different collection (another token): the board follows it
    frame = ip.user_ns["pupils_dd"]
    ip.user_ns["pupils_dd"] = frame[frame.x > -0.5]
    assert "data" in b.check_inputs()
    rows = pd.concat(pieces(), ignore_index=True)
    want = seamline.Design(rows[rows.x > -0.5].reset_index(drop=True), **KW).fit()
    assert b.fit.estimate == pytest.approx(want.estimate, rel=1e-10)
    assert (b.fit.n_used, b.fit.n_total) == (want.n_used, want.n_total)
    assert len(designs) == built + 1


def test_the_magic_takes_a_quoted_parquet_path(ip, folder):
    cell = f'%%cutoff parquet_board\ndata: "{folder}/*.parquet"\nscore: x\ncutoff: 0\noutcome: y\n'
    result = ip.run_cell(cell, store_history=False)
    assert result.success, result.error_in_exec
    b = ip.user_ns["parquet_board"]
    assert b.data == f"{folder}/*.parquet"
    assert headline(b) == pytest.approx(memory_headline(), rel=1e-10)


def test_the_magic_refuses_other_quoted_strings_and_names_missing_columns(ip, folder):
    result = ip.run_cell('%%cutoff b1\ndata: "pupils.csv"\nscore: x\ncutoff: 0\noutcome: y\n', store_history=False)
    assert isinstance(result.error_in_exec, DesignSpecError)
    assert str(result.error_in_exec).startswith("line 2: `data` in quotes must be a Parquet path")
    result = ip.run_cell(f'%%cutoff b2\ndata: "{folder}/nothing-*.parquet"\nscore: x\ncutoff: 0\noutcome: y\n',
                         store_history=False)
    assert isinstance(result.error_in_exec, DesignSpecError)
    assert "line 2: `data` path" in str(result.error_in_exec)
    assert "must match at least one Parquet file" in str(result.error_in_exec)
    # column names are checked from the files' schema, with the usual pointed message
    result = ip.run_cell(f'%%cutoff b3\ndata: "{folder}"\nscore: xx\ncutoff: 0\noutcome: y\n', store_history=False)
    assert isinstance(result.error_in_exec, DesignSpecError)
    assert str(result.error_in_exec).startswith("line 3: `score` must name a column of the data")


def test_a_bad_path_shows_its_error_on_the_board_and_files_appearing_heal_it(tmp_path):
    path = str(tmp_path / "later" / "*.parquet")
    b = seamline.board(path, panels=["fit"], **KW)
    assert b.status == "error"
    assert "must match at least one Parquet file" in b.errors["fit"]
    assert "must match at least one Parquet file" in static.header_html(b.state())
    write(tmp_path / "later", pieces())
    assert b.check_inputs()                              # files appeared: a new identity
    assert headline(b) == pytest.approx(memory_headline(), rel=1e-10)
    assert b.status == "fresh"


def test_the_header_counts_partitions_while_reading(folder):
    seen = []
    b = Board("reader", KW, data=str(folder / "*.parquet"), panels=["fit"], autorun=False)
    b.on_change(lambda board, changed: seen.append((board.reading, static._status_text(board.state()))))
    b.refresh()
    b.wait()
    readings = [r for r, _ in seen if r and r[1]]
    assert readings and readings[-1] == (len(SIZES), len(SIZES))
    texts = [t for r, t in seen if r and r[1]]
    assert f"reading partitions: {len(SIZES)} of {len(SIZES)}..." in texts
    assert b.reading is None and b.status == "fresh"
    assert b.summary()["reading"] is None
