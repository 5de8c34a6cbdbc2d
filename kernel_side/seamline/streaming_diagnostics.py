"""The density test and bins of a streamed design: the sorted score in memory, the outcome in passes.

On the bounded-memory route (``streaming.StreamingData``) these two results do not gather the
design's columns. They need the score in ascending order on each side (ranks, ties, spacings), and
nothing else that a pass could not sum, so:

* one pass gathers only the score column of the rows the in-memory result keeps, straight into two
  preallocated float64 arrays (one per side; their sizes come from the summary pass), then sorted
  in place. The density test keeps every row with a score (in memory it ignores the
  outcome and the weights too); bins keep the rows with a score, an outcome and a positive weight
  (as ``estimate.diagnostics.bins``), and share the density test's arrays when those are the same
  rows. Partitions are computed a few at a time (twice the scheduler's threads), so no more than
  that many partitions' scores wait beside the arrays. The same pass reads the design's first
  outcome too and makes the bins' pilot sums (``bins_streamed.pilot_chunk``: they need only each
  side's largest distance, known from the summary), so the bins need no pass of their own for it;
* the density test is ``core.density.density_test_sorted`` on them (local-CDF: the in-memory result bit
  for bit; binned with the default bin width: its sd summed in sorted order, equal up to rounding);
* bins are ``core.bins_streamed.binned_means_streamed`` with ``passes`` over the partitions on the
  active dask scheduler: one task per partition (the score, outcome and weight columns only) running
  our chunk function, then a tree of its ``combine``. Two passes (the pilot's residuals, the bin
  sums with their squared deviations) when the pilot sums came with the scores, else three.
  Counts and edges exact, sums equal up to their order.

Memory bound: 8 bytes per kept row (the sorted scores, kept on the design for later calls unless a
window needs the room, and gathered only after the fits' window made room: ``streaming_memory``), plus the
partitions in flight; the bins' passes add per partition a few arrays of BINS_ROWS rows in the workers.
The chunk functions close over the sorted scores: on a distributed cluster they travel to each
worker once per pass (one graph key), which costs the score's size in network and worker memory.
"""
from __future__ import annotations

import os
import uuid

import numpy as np

from .core.at_once import at_once
from .core.bins_streamed import binned_means_streamed, combine, pilot_chunk
from .core.density import density_test_sorted
from .errors import DataSourceError
from .partitioned import _REPORT
from .streaming import _columns, _compute, _tree, blocks
from .streaming_memory import make_room


def _plan(data, variables: tuple[str, ...] | None) -> dict:
    """The columns and row rule of a pass: ``variables`` None is every row with a score."""
    if variables is None:
        return {"columns": [data.score_name], "score": data.score_name, "cutoff": data.cutoff,
                "variables": [], "weights": None}
    weights = [data.weights_name] if data.weights_name else []
    return {"columns": list(dict.fromkeys([data.score_name, *variables, *weights])), "score": data.score_name,
            "cutoff": data.cutoff, "variables": list(variables), "weights": data.weights_name}


def _score_part(part, plan: dict, pilot) -> tuple:
    """(rows read, kept scores below the cutoff, kept scores at or above it, the bins' pilot sums or
    None) of one partition, the scores as one piece per block of rows; ``pilot``: (the bins' plan,
    ``pilot_chunk``) or None."""
    below, above, sums = [], [], None
    for block in blocks(part):
        _, _, _, keep, _, arrays = _columns(block, plan)
        raw = arrays[plan["score"]]
        below.append(raw[keep & (raw < plan["cutoff"])])
        above.append(raw[keep & (raw >= plan["cutoff"])])
        if pilot is not None:
            bins_plan, chunk = pilot
            _, values, w, rows, _, arrays = _columns(block, bins_plan, arrays)     # columns read once
            got = chunk(arrays[plan["score"]][rows], values[rows, 0], None if w is None else w[rows], 0)
            sums = got if sums is None else combine(sums, got)
    return len(part), below, above, sums


# input rows per call of a bins chunk function: its temporaries stay bounded, and fewer rows search
# the sorted side less locally (per 2.2e6 scores on a 5e7-score side: 0.63 s at 2^19, 0.52 s here)
BINS_ROWS = 1 << 20


def _bins_part(part, plan: dict, chunk, start: int) -> dict:
    """One of ``binned_means_streamed``'s chunk functions on one partition's kept rows, a block of
    BINS_ROWS input rows at a time (folded with ``combine``): the block's arrays and the chunk's
    temporaries (masks, sort orders, ranks) are a few arrays of that many rows instead of the
    partition's length. ``start`` + i numbers the i-th kept row: increasing, as the chunk functions
    need."""
    out = None
    for a in range(0, max(len(part), 1), BINS_ROWS):
        _, values, w, keep, _, arrays = _columns(part.iloc[a:a + BINS_ROWS], plan)
        if keep.all():                      # no copies of a block without missing values
            x, y = arrays[plan["score"]], values[:, 0]
        else:
            x, y = arrays[plan["score"]][keep], values[keep, 0]
            w = None if w is None else w[keep]
        got = chunk(x, y, w, start)
        start += len(x)
        out = got if out is None else combine(out, got)
    return out


def _in_flight() -> int:
    """Partitions computed at a time while the scores are gathered: twice the scheduler's threads."""
    try:
        from distributed import default_client
        threads = sum(default_client().nthreads().values())
    except (ImportError, ValueError):           # no distributed client: a local scheduler is active
        import dask
        threads = dask.config.get("num_workers", None) or os.cpu_count() or 1
    return max(2, 2 * int(threads))


def _row_set(data, variables: tuple[str, ...] | None):
    """The key of the rows a result keeps, and (below, above) counts from the summaries.

    Bins' rows (score, outcome and weight usable) are a subset of the density test's (score usable);
    when the summary counts as many, they are the same rows and share one gathered array.
    """
    s = next(iter(data._summaries.values()))     # the first summary: every partition's score counts
    score_count = s["checks"][data.score_name][0]
    every = (s["score_below"], score_count - s["score_below"])
    if variables is None:
        return None, every
    own = data._summary(variables)
    if own["n"] == score_count:
        return None, every
    return variables, (own["below"]["n"], own["above"]["n"])


def sorted_scores(data, variables: tuple[str, ...] | None = None):
    """(below, above, rows per partition): each side's kept scores in ascending order, gathered once.

    ``variables`` None: every row with a score; otherwise the rows usable for ``variables``.
    """
    import dask
    key, (n_below, n_above) = _row_set(data, variables)
    held = data._scores.get(key)
    if held is not None:
        return held
    plan = _plan(data, key)
    # the bins' pilot sums (pass 1 of binned_means_streamed) ride on this pass, for the first outcome
    outcome = next(iter(data._summaries))
    pilot, s = None, data._summaries[outcome]
    if outcome not in data._pilots and s["below"]["n"] and s["above"]["n"]:
        bins_plan = _plan(data, outcome)
        pilot = (bins_plan, pilot_chunk(data.cutoff, s["below"]["far"], s["above"]["far"]))
        plan["columns"] = list(dict.fromkeys(plan["columns"] + bins_plan["columns"]))
    parts = data.frame[plan["columns"]].to_delayed()       # only these columns are read
    sums = None
    make_room(data, "scores", 8.0 * (n_below + n_above))      # may let the fits' window go (streaming_memory)
    below, above = np.empty(n_below), np.empty(n_above)
    lengths, at_below, at_above = [], 0, 0
    report, step = _REPORT.get(), _in_flight()
    for lo in range(0, len(parts), step):
        batch = parts[lo:lo + step]
        token = None
        if report is not None:          # progress over the whole pass, not per batch
            token = _REPORT.set(lambda done, total, lo=lo: report(lo + done, len(parts)))
        try:
            got = _compute(*[dask.delayed(_score_part, pure=True)(p, plan, pilot) for p in batch],
                           name="_score_part")
        finally:
            if token is not None:
                _REPORT.reset(token)
        for rows, pieces_below, pieces_above, part_sums in got:
            if pilot is not None:
                sums = part_sums if sums is None else combine(sums, part_sums)
            for b, a in zip(pieces_below, pieces_above):
                if at_below + len(b) <= n_below and at_above + len(a) <= n_above:   # else: counted below
                    below[at_below:at_below + len(b)] = b
                    above[at_above:at_above + len(a)] = a
                at_below, at_above = at_below + len(b), at_above + len(a)
            lengths.append(rows)
        del got
    if (at_below, at_above) != (n_below, n_above) or len(lengths) != len(parts):
        raise DataSourceError(f"the data must not change while a design reads them; got {at_below + at_above} "
                              f"rows with a score where the first pass counted {n_below + n_above}. Build the "
                              "Design again on data that stay fixed.")
    data.passes += 1
    if pilot is not None:
        data._pilots[outcome] = (s["below"]["far"], s["above"]["far"], sums)
    # in place: no copy of either side. numpy's default sort of float64 (vectorised quicksort) takes
    # 0.7 s for 5e7 scores here; sorting the partitions' pieces in the workers and merging their runs
    # with a stable sort took 0.6 + 1.8 s (measured), so the pieces come unsorted
    _sort_both(below, above)
    held = data._scores[key] = (below, above, np.asarray(lengths, dtype=np.int64))
    return held


SORT_APART_FROM = 1 << 20     # scores per side from which the two sides are sorted at the same time


def _sort_both(below: np.ndarray, above: np.ndarray) -> None:
    """Sort both sides in place, at the same time when both are long: numpy releases the interpreter
    lock while it sorts (2 x 1.5e7 scores: 2.1 s one after the other, 1.1-1.2 s at once, measured
    here). The sorted values are the same either way."""
    at_once(below.sort, above.sort, worth_it=min(below.size, above.size) >= SORT_APART_FROM)


def density_test(data, method: str, options: dict):
    """The density test of a streamed design (``core.density.density_test_sorted``)."""
    below, above, _ = sorted_scores(data)
    return density_test_sorted(below, above, data.cutoff, method=method, **options)


def binned_means(data, outcome: str, **options):
    """``binning.binned_means`` of a streamed design's rows for ``outcome``, the sums made in passes."""
    import dask
    variables = (outcome,)
    below, above, lengths = sorted_scores(data, variables)
    plan = _plan(data, variables)
    parts = data.frame[plan["columns"]].to_delayed()
    starts = np.concatenate(([0], np.cumsum(lengths)[:-1]))    # input row of each partition's first row

    def passes(chunk, combine):
        # the chunk function (it holds the sorted scores) is one graph key, not part of every task
        fn = dask.delayed(chunk, name=f"seamline-bins-chunk-{uuid.uuid4().hex}")
        tasks = [dask.delayed(_bins_part, pure=True)(p, plan, fn, int(start)) for p, start in zip(parts, starts)]
        (out,) = _compute(_tree(tasks, combine), name="_bins_part", total=len(parts))
        data.passes += 1
        return out

    return binned_means_streamed(below, above, data.cutoff, passes, weighted=data.weights_name is not None,
                                 pilot=data._pilots.get(variables), **options)
