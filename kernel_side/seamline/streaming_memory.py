"""What a streamed design holds between calls, and what it lets go of to stay within its budget.

A streamed design (``streaming.StreamingData``) keeps two kinds of per-row data for later calls:
the fits' window (``StreamingData.window``: 8 bytes a row per distance, variable and weight) and the
density test's and bins' sorted scores (``streaming_diagnostics.sorted_scores``: 8 bytes a row).
Each alone fits the issue's memory bound, both together may not: at 1e8 uniform scores the window
holds 43 M rows (0.69 GB) and the sorted scores 1e8 (0.80 GB), 1.49 GB of the 1.80 GB the whole
run may take. So before one kind is gathered, the other is let go of when both together would pass
``HOLD_SHARE`` times the design's columns' in-memory size (8 bytes a row per column; never below
``HOLD_FLOOR``):

* a window let go of keeps everything but its rows (the order statistics, the pilot sums, its
  radius): asked for again, its rows come back in one pass (``StreamingData._widen`` from radius
  -inf to the radius it had), the same rows in the same order, so the fits on it are the same up
  to the last digit of the re-centred values. The design's engines and unevaluated bandwidth
  selections on the old window are dropped with it (``on_release``: they hold its arrays);
* sorted scores let go of are gathered again by one score pass when next asked for.

Nothing computed changes: every result is made by the same code on the same rows; what it costs is
the passes that gather the dropped data again (a design whose calls alternate between fits and
density tests or bins pays one pass each time it switches).
"""
from __future__ import annotations

import gc

import numpy as np

from .partitioned import release_memory

HOLD_SHARE = 0.75        # per-row data held between calls: at most this share of the columns' size,
HOLD_FLOOR = 64 << 20    # or this many bytes: below it a pass to gather again costs more than the memory


def budget(data) -> float:
    """Bytes of per-row data ``data`` may hold between calls."""
    return max(HOLD_SHARE * 8.0 * data.n_rows * len(data.columns), HOLD_FLOOR)


def held_bytes(held: dict) -> int:
    """Bytes of one window's rows (``StreamingData._windows`` entry)."""
    return sum(side.distance.nbytes + side.values.nbytes + (0 if side.weights is None else side.weights.nbytes)
               for side in held.get("sides") or ())


def window_bytes(data) -> int:
    return sum(held_bytes(held) for held in data._windows.values())


def score_bytes(data) -> int:
    return sum(below.nbytes + above.nbytes for below, above, _ in data._scores.values())


def rows_within(hist: np.ndarray, radius: float) -> int:
    """An upper bound on a side's rows with distance <= ``radius``, from its summary histogram of
    distances (16-bit ``top_bins`` of |x|): every row of the bins up to the one ``radius`` falls in."""
    from .streaming import top_bins
    if not radius >= 0:
        return 0
    top = int(top_bins(np.array([min(radius, np.finfo(float).max)]), non_negative=True)[0])
    return int(hist[:top + 1].sum())


def release_windows(data) -> None:
    """Let go of every held window's rows (kept: what gathers them again in one pass)."""
    released = False
    for held in data._windows.values():
        if held.get("sides") is None:
            continue
        limit = min(side.limit for side in held["sides"])
        held["released"] = (held["radius"], limit)
        held.pop("sides")
        held.pop("prepared", None)
        held["rows"], held["radius"], held["limit"] = None, -np.inf, -np.inf
        released = True
    if released:
        for drop in data.on_release:
            drop()
        _let_go(data)


def release_scores(data) -> None:
    if data._scores:
        data._scores.clear()
        _let_go(data)


def _let_go(data) -> None:
    # the engines of earlier results sit in reference cycles (a density test's window engine and
    # its closures, a fit's sides and fits) that would keep the arrays until the collector ran
    gc.collect()
    data.released += 1
    release_memory()


def make_room(data, kind: str, nbytes: float) -> None:
    """Before ``nbytes`` of ``kind`` ("window" or "scores") are gathered: let go of the other kind
    when both together would pass the budget."""
    windows, scores = window_bytes(data), score_bytes(data)
    other, release = (scores, release_scores) if kind == "window" else (windows, release_windows)
    if other and windows + scores + nbytes > budget(data):
        release(data)
