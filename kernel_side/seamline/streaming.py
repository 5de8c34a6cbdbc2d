"""The bounded-memory route for partitioned inputs: streaming passes, then only a window in memory.

A dask DataFrame or Parquet dataset is never gathered whole on this route. Passes over its
partitions, one task per partition on the active dask scheduler, compute what the fits and the MSE
bandwidth selectors need from the whole sample; then only the rows nearest the cutoff are gathered,
and the existing engine runs on them (``core.window_side``).

Passes (for one set of variables; each reads only the design's columns)
-----------------------------------------------------------------------
1. Summary: rows, missing rows, per side the count, largest and smallest distance and the means of
   the variables; the centred score's mean and sum of squares (its sd, combined partition by
   partition); 16-bit histograms of order-preserving keys of the centred score and of each side's
   distances. The checks of the in-memory adapter (infinite values, empty columns, negative
   weights, the cutoff inside the score's range) are made in the same pass.
2. Exact order statistics by histogram refinement: the score's quartiles and each side's median
   distance lie in one bin of pass 1; the values of that bin are gathered (or, when it holds more
   than ``GATHER_LIMIT`` values, refined on the next 16 bits of the key first), sorted, and read.
   Exact: these are the very order statistics a sort of all rows gives.
3. Pilot sums and window: per side, the sums sum w u^m and sum w u^m (v - mean) of the curvature
   pilot over its nearer half (and the whole side, for the two-step pilot), u = sign d / top (made
   block by block, ``_power_sums``); in the same pass the rows with distance <= R (the window) are
   gathered, each partition's rows sorted by distance in the worker, so that the caller's stable
   sort only merges runs.
   A result that needs rows beyond the window's exact part asks for a wider window: one more pass
   gathers the rows between the old and the new radius (appended after the held rows, which are
   all nearer and are not sorted again).
Before and after every pass freed memory is handed back to the system (``partitioned.release_memory``).

What is exact: fits at manual bandwidths and at the "mse", "mse-split", "coverage" and "ik" rules with
the "nearer-half" or "two-step" pilot, with any variance, equal the in-memory results up to the
order of floating-point sums (relative differences ~1e-12; counts identical). Everything else
(donuts, fuzzy designs, clusters, placebo cutoffs, balance tables ...) is
computed on the gathered route (``partitioned.gather_frame``), exactly, the first time it is asked for;
except density tests and bins, which gather only the sorted score (``streaming_diagnostics``).

Memory bound: the window (per row 8 bytes x (1 + variables), plus 8 with weights: no neighbour
residuals or group starts are held, ``core.window_side``; moment tables of about (degree + 1) / 512
numbers per row per series), the histograms (3 x 65536 counts per partition in flight), the
partitions being read at that moment (as arrays PART_ROWS rows at a time), and at most
GATHER_LIMIT values per order statistic. The window holds the rows within the widest bandwidth the results use plus J groups of
neighbours; when a bandwidth reaches the whole side (no curvature signal), the whole side is held.
Held beside the density test's and bins' sorted scores only within ``streaming_memory``'s budget.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd

from .core.kernels import normal_reference_constant
from .core.window_side import WindowSide
from .errors import (CutoffOutOfRangeError, EmptyColumnError, InvalidWeightsError, NonFiniteValueError,
                     OneSidedDataError, shown)
from .partitioned import _partition_arrays, release_memory
from .streaming_memory import held_bytes, make_room, rows_within

BITS = 16                    # bits of the key resolved per refinement pass
GATHER_LIMIT = 1 << 21       # values gathered at most per order statistic (16 MB)
PILOT_DEGREE = 6             # pilot sums kept up to this polynomial degree (bias degree + 2 <= 6)
FIRST_WINDOW = 4.0           # the first window's radius, in rule-of-thumb pilot bandwidths
WIDEN = 1.25                 # a wider window reaches this much past the radius asked for
TAKE_ROWS = 1 << 20          # rows reordered per call when a window is built ("clip": no buffered copy)


def sort_keys(x: np.ndarray) -> np.ndarray:
    """Order-preserving uint64 keys of float64 values (IEEE bit trick: flip negatives, set the sign bit)."""
    u = np.ascontiguousarray(x, dtype=np.float64).view(np.uint64)
    flip = (u.view(np.int64) >> np.int64(63)).view(np.uint64)    # all ones for a negative value, else 0
    flip |= np.uint64(1 << 63)
    flip ^= u
    return flip


def top_bins(x: np.ndarray, non_negative: bool = False) -> np.ndarray:
    """``sort_keys(x) >> 48`` (the first refinement level, BITS = 16) as intp, without the 64-bit keys.
    ``non_negative``: x holds no negative value and no -0.0 (distances from ``np.abs``)."""
    top = (np.ascontiguousarray(x, dtype=np.float64).view(np.uint64) >> np.uint64(48)).astype(np.intp)
    if non_negative:
        top += 1 << 15
        return top
    return np.where(top >= 1 << 15, (1 << 16) - 1 - top, top + (1 << 15))


def _from_key(k: int) -> float:
    k = np.uint64(k)
    u = k & np.uint64((1 << 63) - 1) if k >> np.uint64(63) else ~k
    return float(np.array([u], dtype=np.uint64).view(np.float64)[0])


# ---- per-partition arithmetic (each runs as one dask task) --------------------------------------
def _columns(part: pd.DataFrame, plan: dict, arrays: dict | None = None) -> tuple:
    """(centred score, variables (n, k), weights or None, usable mask, dropped count, the columns as
    arrays) of one partition (``arrays``: its columns already read, for a second plan)."""
    if arrays is None:
        arrays = _partition_arrays(part, plan["columns"])
    x = arrays[plan["score"]] - plan["cutoff"]
    keep = ~np.isnan(x)
    values = np.empty((len(x), len(plan["variables"])), order="F")
    for j, v in enumerate(plan["variables"]):
        values[:, j] = arrays[v]
        keep &= ~np.isnan(values[:, j])
    w = arrays[plan["weights"]] if plan["weights"] else None
    if w is not None:
        keep &= ~np.isnan(w)
    dropped = int(len(x) - keep.sum())
    if w is not None:
        keep &= w > 0
    return x, values, w, keep, dropped, arrays


def _summary_part(part: pd.DataFrame, plan: dict) -> dict:
    x, values, w, keep, dropped, arrays = _columns(part, plan)
    out = {"rows": len(x), "dropped": dropped, "checks": {}}
    for name in plan["columns"]:
        a = arrays[name]
        inf = np.flatnonzero(np.isinf(a))
        out["checks"][name] = (int(np.count_nonzero(~np.isnan(a))), int(inf[0]) if len(inf) else -1,
                               float(np.nanmin(a)) if np.any(~np.isnan(a)) else np.nan,
                               float(np.nanmax(a)) if np.any(~np.isnan(a)) else np.nan,
                               bool(np.any(a > 0)))
    # the density test keeps every row with a score, whatever the outcome and weights (as in memory)
    out["score_below"] = int(np.count_nonzero(arrays[plan["score"]] < plan["cutoff"]))
    every = bool(keep.all())
    xs = x if every else x[keep]
    vk = values if every else values[keep]
    out["n"] = len(xs)
    out["mean"] = float(xs.mean()) if len(xs) else 0.0
    out["m2"] = float(np.sum((xs - out["mean"]) ** 2)) if len(xs) else 0.0
    # both 16-bit histograms from the top bits of |x| (``top_bins`` without an abs or 64-bit keys):
    # the score's key flips the bits of a negative value (sign bit set, -0.0 included)
    bits = np.ascontiguousarray(xs).view(np.uint64)
    top = ((bits >> np.uint64(48)) & np.uint64(0x7FFF)).astype(np.intp)
    negative = (bits >> np.uint64(63)).astype(bool)
    out["score_hist"] = np.bincount(np.where(negative, 0x7FFF - top, 0x8000 + top), minlength=1 << BITS)
    above = xs >= 0                                      # the sides as the fits split them (-0.0 above)
    top += 0x8000 + (above << BITS)
    hist = np.bincount(top, minlength=2 << BITS)
    del top, negative
    n_above = int(np.count_nonzero(above))
    share = above.astype(np.float64)
    sums = {"above": np.einsum("i,ij->j", share, vk)}
    np.subtract(1.0, share, out=share)
    sums["below"] = np.einsum("i,ij->j", share, vk)
    del share
    for name, n_side, h in (("below", len(xs) - n_above, hist[:1 << BITS]), ("above", n_above, hist[1 << BITS:])):
        if not n_side:
            far, near = -np.inf, np.inf
        elif name == "above":
            far, near = abs(float(xs.max())), abs(float(np.min(xs, where=above, initial=np.inf)))
        else:
            far, near = -float(xs.min()), -float(np.max(xs, where=~above, initial=-np.inf))
        out[name] = {"n": n_side, "sum": sums[name], "far": far, "near": near, "hist": h}
    return out


def _merge_summaries(a: dict, b: dict) -> dict:
    """Combine two partitions' summaries (Chan et al.'s pairwise update for the sum of squares)."""
    n = a["n"] + b["n"]
    delta = b["mean"] - a["mean"]
    out = {"rows": a["rows"] + b["rows"], "dropped": a["dropped"] + b["dropped"], "n": n,
           "score_below": a["score_below"] + b["score_below"],
           "mean": a["mean"] + delta * b["n"] / n if n else 0.0,
           "m2": a["m2"] + b["m2"] + (delta ** 2 * a["n"] * b["n"] / n if n else 0.0),
           "score_hist": a["score_hist"] + b["score_hist"], "checks": {}}
    for name, (ca, cb) in ((k, (a["checks"][k], b["checks"][k])) for k in a["checks"]):
        inf = ca[1] if ca[1] >= 0 else (a["rows"] + cb[1] if cb[1] >= 0 else -1)
        out["checks"][name] = (ca[0] + cb[0], inf, np.fmin(ca[2], cb[2]), np.fmax(ca[3], cb[3]), ca[4] or cb[4])
    for side in ("below", "above"):
        sa, sb = a[side], b[side]
        out[side] = {"n": sa["n"] + sb["n"], "sum": sa["sum"] + sb["sum"], "far": max(sa["far"], sb["far"]),
                     "near": min(sa["near"], sb["near"]), "hist": sa["hist"] + sb["hist"]}
    return out


def _side_array(x: np.ndarray, keep: np.ndarray, which: str) -> np.ndarray:
    if which == "score":
        return x[keep]
    return np.abs(x[keep & ((x < 0) if which == "below" else (x >= 0))])


def _refine_part(part: pd.DataFrame, plan: dict, queries: list) -> list:
    """Per query (array, prefix, bits, gather): the matching values, or the next 16 bits' histogram."""
    x, _, _, keep, _, _ = _columns(part, plan)
    out, cache = [], {}
    for which, prefix, bits, gather in queries:
        keys = cache.get(which)
        if keys is None:                         # one key array per array kind, shared by its queries
            keys = cache[which] = sort_keys(_side_array(x, keep, which))
        match = keys[(keys >> np.uint64(64 - bits)) == np.uint64(prefix)] if bits else keys
        if gather:
            out.append(match)
        else:
            nxt = ((match >> np.uint64(64 - bits - BITS)) & np.uint64((1 << BITS) - 1)).astype(np.int64)
            out.append(np.bincount(nxt, minlength=1 << BITS))
    return out


POWER_ROWS = 1 << 14          # rows per block of the power sums (their powers stay in cache)


def _power_sums(u: np.ndarray, w: np.ndarray | None, v: np.ndarray, moments: int, cross: int) -> tuple:
    """(sum w u^m for m <= moments, sum w u^m v for m <= cross), block by block: the powers of a block
    of rows are made by repeated multiplication, as the in-memory pilot makes them, and summed there.
    Products by einsum, not BLAS: the tasks already run on the scheduler's threads, and a threaded
    BLAS call inside each took 1.5 to 3 times as long on this machine (measured per partition)."""
    out_m = np.zeros(moments + 1)
    out_c = np.zeros((cross + 1, v.shape[1]))
    block = np.empty((min(POWER_ROWS, len(u)), moments + 1), order="F")
    for a in range(0, len(u), POWER_ROWS):
        uc = u[a:a + POWER_ROWS]
        powers = block[:len(uc)]
        powers[:, 0] = 1.0 if w is None else w[a:a + POWER_ROWS]
        for m in range(1, moments + 1):
            np.multiply(powers[:, m - 1], uc, out=powers[:, m])
        out_m += powers.sum(axis=0)
        out_c += np.einsum("im,ij->mj", powers[:, :cross + 1], v[a:a + POWER_ROWS])
    return out_m, out_c


PART_ROWS = 1 << 19           # rows of a partition read into arrays at a time by the larger passes


def blocks(part: pd.DataFrame):
    """The partition in blocks of PART_ROWS rows (views): a task's arrays (the columns as float64,
    masks, the rows kept) are then a block long, not a partition long (2e6 rows: about 0.2 GB)."""
    for a in range(0, max(len(part), 1), PART_ROWS):
        yield part.iloc[a:a + PART_ROWS]


def _window_part(part: pd.DataFrame, plan: dict, sides: dict) -> dict:
    """Per side: pilot sums (when asked) and the rows with inner < distance <= radius, as a list of
    pieces each sorted by distance (one per block, in input order)."""
    out = None
    for block in blocks(part):
        got = _window_block(block, plan, sides)
        if out is None:
            out = {name: dict(piece, rows=[piece["rows"]]) for name, piece in got.items()}
            continue
        for name, piece in got.items():
            held = out[name]
            held["rows"].append(piece["rows"])
            for key, value in piece.items():
                if key == "cubic":
                    held[key] = {k: held[key][k] + v for k, v in value.items()}
                elif key != "rows":
                    held[key] = (held[key][0] + value[0], held[key][1] + value[1])
    return out


def _window_block(part: pd.DataFrame, plan: dict, sides: dict) -> dict:
    x, values, w, keep, _, _ = _columns(part, plan)
    out = {}
    if not any(ask["pilots"] or ask.get("cubic") is not None for ask in sides.values()):
        # a widening: only the rows of a band of distances, picked from the whole partition at once
        # (the same rows, values and order as the side arrays below would give)
        ax = np.abs(x)
        for name, sign in (("below", -1.0), ("above", 1.0)):
            ask = sides[name]
            rows = np.flatnonzero(keep & (ax > ask["inner"]) & (ax <= ask["radius"]) & ((x < 0) if sign < 0 else (x >= 0)))
            rows = rows[np.argsort(ax[rows], kind="stable")]
            out[name] = {"rows": (ax[rows], values[rows], None if w is None else w[rows])}
        return out
    for name, sign in (("below", -1.0), ("above", 1.0)):
        ask = sides[name]
        mask = keep & ((x < 0) if sign < 0 else (x >= 0))
        d = np.abs(x[mask])
        raw = values[mask]
        ws = None if w is None else w[mask]
        piece = {}
        if ask["pilots"] or ask.get("cubic") is not None:
            vals = raw - ask["offsets"]           # centred as the in-memory side centres them
        for share, top in ask["pilots"].items():
            inside = d <= top
            every = bool(inside.all())
            u = sign * (d if every else d[inside]) / top
            moments, cross = _power_sums(u, None if ws is None else (ws if every else ws[inside]),
                                         vals if every else vals[inside], 2 * PILOT_DEGREE, PILOT_DEGREE)
            gram = moments[np.add.outer(np.arange(PILOT_DEGREE + 1), np.arange(PILOT_DEGREE + 1))]
            piece[share] = (gram, cross)
        if ask.get("cubic") is not None:                  # IK's global cubic over the nearer n // 2 + 1 rows
            top, score_sd = ask["cubic"]
            inside = d <= top
            xs = sign * d[inside] / score_sd
            term = np.ones(len(xs)) if ws is None else ws[inside]
            inner = vals[inside]
            piece["cubic"] = {"rows": int(inside.sum()), "w": float(term.sum()),
                              "w2": float(np.einsum("i,i->", term, term)), "wv": np.einsum("i,ij->j", term, inner),
                              "wvv": np.einsum("ij,i,ik->jk", inner, term, inner)}
            piece["cubic"]["moments"], piece["cubic"]["xv"] = _power_sums(xs, None if ws is None else term, inner,
                                                                          6, 3)
        rows = np.flatnonzero((d > ask["inner"]) & (d <= ask["radius"]))
        rows = rows[np.argsort(d[rows], kind="stable")]    # sorted here, in parallel: the caller merges runs
        piece["rows"] = (d[rows], raw[rows], None if ws is None else ws[rows])
        out[name] = piece
    return out


# ---- scheduling -----------------------------------------------------------------------------------
def _tree(tasks: list, merge):
    """Reduce delayed partition results pairwise (a tree: no one task holds every partition's result)."""
    import dask
    merge = dask.delayed(merge, pure=True)
    while len(tasks) > 1:
        tasks = [merge(tasks[i], tasks[i + 1]) if i + 1 < len(tasks) else tasks[i] for i in range(0, len(tasks), 2)]
    return tasks[0]


def _compute(*tasks, name: str, total: int | None = None):
    """Compute on the active scheduler; ``reading_progress`` hears of each partition done. Memory
    freed by the calling thread is handed back first: the workers' threads allocate from arenas of
    their own, where it could not be reused."""
    from .partitioned import _compute as compute
    release_memory()
    try:
        return compute(list(tasks), name, total)
    finally:
        release_memory()


class StreamingData:
    """The design's columns of a partitioned input, summarised in passes; windows gathered on demand.

    Stands in for ``data.DesignData``: ``window(variables, ...)`` prepares bounded-memory sides;
    every other attribute is served by a ``DesignData`` on the gathered columns, built (one pass)
    the first time it is asked for.
    """

    def __init__(self, frame, *, score: str, cutoff: float, outcomes: tuple[str, ...], covariates: tuple[str, ...],
                 weights: str | None, gathered):
        self.frame = frame                       # a dask DataFrame of the design's columns
        self.score_name = score
        self.weights_name = weights
        self.columns = list(dict.fromkeys([score, *outcomes, *covariates, *([weights] if weights else [])]))
        self.cutoff = float(cutoff)
        self.time_scale = None
        self._gathered_loader = gathered         # () -> DesignData on the gathered columns
        self._gathered = None
        self._summaries: dict[tuple, dict] = {}
        self._windows: dict[tuple, object] = {}
        self._scores: dict = {}                  # sorted scores per row set (streaming_diagnostics)
        self._pilots: dict = {}                  # the bins' pilot sums per outcome, made in the score pass
        self.passes = 0                          # passes over the data so far (benchmarks report it)
        # what is let go of between calls to stay within the budget (streaming_memory)
        self.on_release: list = []               # called when windows are let go of (the design's engines)
        self.released = 0                        # how many times held data were let go of
        self._check(self._summary(outcomes[:1]))

    # ---- the gathered fallback --------------------------------------------------------------
    @property
    def gathered(self):
        if self._gathered is None:
            self._gathered = self._gathered_loader()
            self.passes += 1
        return self._gathered

    def __getattr__(self, name):
        if name.startswith("__") or name in ("_gathered", "_gathered_loader", "_scores", "_pilots", "_windows",
                                              "on_release", "released"):
            raise AttributeError(name)
        return getattr(self.gathered, name)

    def prepare(self, variables, donut: float = 0.0, neighbors: int = 3):
        return self.gathered.prepare(variables, donut, neighbors)

    @property
    def n_rows(self) -> int:
        return next(iter(self._summaries.values()))["rows"]

    # ---- passes -----------------------------------------------------------------------------
    def _plan(self, variables: tuple[str, ...]) -> dict:
        return {"columns": self.columns, "score": self.score_name, "cutoff": self.cutoff,
                "variables": list(variables), "weights": self.weights_name}

    def _parts(self):
        return self.frame.to_delayed()

    def _summary(self, variables: tuple[str, ...]) -> dict:
        if variables not in self._summaries:
            import dask
            plan = self._plan(variables)
            task = _tree([dask.delayed(_summary_part, pure=True)(p, plan) for p in self._parts()], _merge_summaries)
            (summary,) = _compute(task, name="_summary_part", total=self.frame.npartitions)
            self.passes += 1
            self._summaries[variables] = summary
        return self._summaries[variables]

    def _check(self, s: dict) -> None:
        """The in-memory adapter's checks, on the summary (messages as in seamline.data)."""
        roles = {self.score_name: "score"}
        for name, (count, inf, lo, hi, positive) in s["checks"].items():
            role = roles.get(name, "weights" if name == self.weights_name else "outcome")
            if inf >= 0:
                raise NonFiniteValueError(f"`{role}` column {shown(name)} must be finite; got infinite values "
                                          f"(first at row {inf}). Replace them with NaN (dropped) or a finite value.")
            if count == 0:
                raise EmptyColumnError(f"`{role}` column {shown(name)} must have non-missing values; got only "
                                       "missing values. Choose a column with data.")
            if name == self.weights_name:
                if lo < 0:
                    raise InvalidWeightsError(f"`weights` column {shown(name)} must be non-negative; got "
                                              f"{shown(lo)}. Use sampling weights >= 0.")
                if not positive:
                    raise InvalidWeightsError(f"`weights` column {shown(name)} must have a positive value; got "
                                              "all zeros or missing. Choose another weights column.")
        _, _, lo, hi, _ = s["checks"][self.score_name]
        if self.cutoff < lo or self.cutoff > hi:
            raise CutoffOutOfRangeError(f"`cutoff` must lie within the range of score {shown(self.score_name)} "
                                        f"[{lo:g}, {hi:g}]; got {shown(self.cutoff)}. Check the cutoff and its units.")

    def _order_statistics(self, variables, wanted: list[tuple[str, int]]) -> dict:
        """Exact order statistics {(array, rank): value} by histogram refinement (pass 2 and on)."""
        import dask
        s = self._summary(variables)
        hist = {"score": s["score_hist"], "below": s["below"]["hist"], "above": s["above"]["hist"]}
        state = {}                                   # (array, rank) -> (prefix, bits, rank within bin, count)
        for which, rank in wanted:
            cum = np.cumsum(hist[which])
            b = int(np.searchsorted(cum, rank, side="right"))
            state[(which, rank)] = (b, BITS, rank - (int(cum[b - 1]) if b else 0), int(hist[which][b]))
        found: dict = {}
        plan = self._plan(variables)
        while len(found) < len(state):
            todo = [k for k in state if k not in found]
            queries = []
            for k in todo:
                prefix, bits, _, count = state[k]
                if bits == 64:
                    found[k] = _from_key(prefix)
                    continue
                queries.append((k[0], prefix, bits, count <= GATHER_LIMIT))
            todo = [k for k in todo if k not in found]
            if not todo:
                break
            parts = _compute(*[dask.delayed(_refine_part, pure=True)(p, plan, queries) for p in self._parts()],
                             name="_refine_part")
            self.passes += 1
            for i, k in enumerate(todo):
                prefix, bits, within, count = state[k]
                pieces = [r[i] for r in parts]
                if queries[i][3]:
                    keys = np.sort(np.concatenate(pieces))
                    found[k] = _from_key(int(keys[within]))
                else:
                    h = np.sum(pieces, axis=0)
                    cum = np.cumsum(h)
                    b = int(np.searchsorted(cum, within, side="right"))
                    state[k] = ((prefix << BITS) | b, bits + BITS, within - (int(cum[b - 1]) if b else 0), int(h[b]))
        return found

    # ---- windows ------------------------------------------------------------------------------
    def window(self, variables: tuple[str, ...], neighbors: int = 3, radius: float | None = None):
        """Prepared bounded-memory sides for ``variables`` (no donut), holding at least ``radius``."""
        from .data import Prepared
        key = (variables, neighbors)
        held = self._windows.get(key)
        if held is not None and "released" not in held and (radius is None or radius < held["limit"]):
            return held["prepared"]
        s = self._summary(variables)
        if variables != next(iter(self._summaries)):
            self._check(s)
        n = s["n"]
        if n < 2:
            raise OneSidedDataError(f"the design must keep observations on both sides of the cutoff; got {n} usable "
                                    f"rows after dropping missing values in {shown([self.score_name, *variables])}. "
                                    "Check for missing data.")
        for name in ("below", "above"):
            if s[name]["n"] == 0:
                raise OneSidedDataError(f"the design must have observations {name} the cutoff; got none (score "
                                        f"{shown(self.score_name)}, cutoff {self.cutoff:g}). Check the cutoff, the "
                                        "treated side, or reduce the donut radius.")
        if held is None:
            ranks = [("score", r) for q in (0.25, 0.75) for r in _quantile_ranks(n, q)]
            halves = {name: max(math.ceil(0.5 * s[name]["n"]), 1) - 1 for name in ("below", "above")}
            ik_rows = {name: max(s[name]["n"] // 2 + 1, min(s[name]["n"], 4)) for name in ("below", "above")}
            stats = self._order_statistics(variables, ranks + [(k, r) for k, r in halves.items()]
                                           + [(k, r - 1) for k, r in ik_rows.items()])
            sd = math.sqrt(s["m2"] / (n - 1))
            q25, q75 = (_interpolated(n, q, lambda r: stats[("score", r)]) for q in (0.25, 0.75))
            scale = min(sd, (q75 - q25) / 1.349) if q75 > q25 else sd
            pilot_c = max(normal_reference_constant(k) for k in ("triangular", "uniform", "epanechnikov")) \
                * scale * n ** (-0.2)
            first = FIRST_WINDOW * pilot_c if radius is None else radius
            tops = {name: {0.5: stats[(name, r)], 1.0: s[name]["far"]} for name, r in halves.items()}
            held = {"sd": sd, "scale": scale, "tops": tops, "pilots": None, "radius": -np.inf, "rows": None,
                    "cubic_tops": {k: stats[(k, r - 1)] for k, r in ik_rows.items()}, "ik_rows": ik_rows}
            radius = first
        elif "released" in held:       # its rows were let go of (streaming_memory): the same radius, one pass
            was, limit = held.pop("released")
            radius = was if radius is None or radius < limit else max(radius * WIDEN, was * WIDEN)
        else:
            radius = max(radius * WIDEN, held["radius"] * WIDEN)
        per_row = 8.0 * (1 + len(variables) + (self.weights_name is not None))
        wanted = per_row * sum(rows_within(s[name]["hist"], radius) for name in ("below", "above"))
        make_room(self, "window", max(0.0, wanted - held_bytes(held)))
        self._widen(variables, s, held, radius)
        sides = []
        for name, sign in (("below", -1), ("above", 1)):
            d, vals, w = held["rows"][name]
            complete = len(d) == s[name]["n"]
            # the side centres ``vals`` in place; a wider window adds the offsets back (``_widen``)
            sides.append(WindowSide(sign, d, vals, w, neighbors=neighbors, n_side=s[name]["n"],
                                    far=s[name]["far"], offsets=s[name]["sum"] / s[name]["n"], complete=complete,
                                    pilots=held["pilots"][name], cubic=held["cubic"][name]))
            held["rows"][name] = (d, None, w)
        held["limit"] = min(side.limit for side in sides)
        held["sides"] = sides
        held["prepared"] = Prepared(sides[0], sides[1], variables, s["dropped"], 0, held["sd"], held["scale"], None)
        self._windows[key] = held
        return held["prepared"]

    def _widen(self, variables, s: dict, held: dict, radius: float) -> None:
        """Gather the rows between the held radius and ``radius`` (with the pilot sums, the first time)."""
        import dask
        plan = self._plan(variables)
        want_pilots = held["pilots"] is None
        ask = {name: {"offsets": s[name]["sum"] / s[name]["n"], "inner": held["radius"], "radius": radius,
                      "pilots": held["tops"][name] if want_pilots else {},
                      "cubic": (held["cubic_tops"][name], held["sd"]) if want_pilots else None}
               for name in ("below", "above")}
        parts = _compute(*[dask.delayed(_window_part, pure=True)(p, plan, ask) for p in self._parts()],
                         name="_window_part")
        self.passes += 1
        if want_pilots:
            held["pilots"] = {name: {share: (top, sum(p[name][share][0] for p in parts),
                                             sum(p[name][share][1] for p in parts))
                                     for share, top in held["tops"][name].items()} for name in ("below", "above")}
            held["cubic"] = {}
            for name, sign in (("below", 0.0), ("above", 1.0)):
                total = {key: sum(p[name]["cubic"][key] for p in parts) for key in parts[0][name]["cubic"]}
                if total["rows"] != held["ik_rows"][name]:
                    held["cubic"][name] = None        # ties at the median: which tied rows count is the sort's
                    continue
                expo, coef = np.array([0, 0, 1, 2, 3]), np.array([1.0, sign, 1.0, 1.0, 1.0])
                total["gram"] = np.outer(coef, coef) * total.pop("moments")[np.add.outer(expo, expo)]
                total["cross"] = coef[:, None] * total.pop("xv")[expo]
                held["cubic"][name] = total
        rows = held["rows"] or {}
        old = dict(zip(("below", "above"), held.pop("sides", (None, None))))
        held.pop("prepared", None)
        for name in ("below", "above"):
            pieces = [piece for p in parts for piece in p[name].pop("rows")]
            # each piece is sorted by distance, the pieces in input order: a stable sort of their
            # concatenation merges the runs (timsort), and ties keep the input order, as one stable
            # sort of the new rows would.
            # The pieces are copied into the new arrays and freed one by one, then each column is
            # reordered there through one temporary, by an order kept as int32: about 28 bytes a
            # new row at most (the argsort's int64 result and its merge buffer, 12, beside the
            # columns, 16; then the int32 order and the temporary, 12)
            side = old[name]
            held_rows = 0 if side is None else len(side.distance)
            total = held_rows + sum(len(p[0]) for p in pieces)
            d = np.empty(total)
            vals = np.empty((total, pieces[0][1].shape[1]), order="F")
            w = None if pieces[0][2] is None else np.empty(total)
            at = held_rows
            while pieces:                          # in partition order, each freed once copied
                piece_d, piece_v, piece_w = pieces.pop(0)
                rows_at = slice(at, at + len(piece_d))
                d[rows_at], vals[rows_at] = piece_d, piece_v
                if w is not None:
                    w[rows_at] = piece_w
                at = rows_at.stop
                del piece_d, piece_v, piece_w
            # the pieces were made by the workers' threads, in their malloc arenas: freed, their
            # pages stay resident until trimmed, beside the sort's temporaries (at 1e8 rows a window
            # gathered again in one pass peaked 0.3 GB above the fit's own gathering)
            release_memory()
            order = np.argsort(d[held_rows:], kind="stable")
            if len(order) < 1 << 31:
                order = order.astype(np.int32)
            spare = np.empty(total - held_rows)
            for column in [d, w] + [vals[:, j] for j in range(vals.shape[1])]:
                if column is not None:
                    source = column[held_rows:]
                    for a in range(0, len(order), TAKE_ROWS):   # int32 indices are widened per call
                        np.take(source, order[a:a + TAKE_ROWS], out=spare[a:a + TAKE_ROWS], mode="clip")
                    column[held_rows:] = spare
            del spare, order
            if side is not None:
                # the rows held already come first: all are nearer than the new ones (distance <= the
                # held radius < theirs), so they are not sorted again. Their values were centred by
                # the side, so the offsets are added back (into the new array: fitted engines may
                # still hold the old side; equal to the values read up to the last digit)
                d[:held_rows] = side.distance
                for j in range(vals.shape[1]):
                    vals[:held_rows, j] = side.values[:, j] + side.offsets[j]
                if w is not None:
                    w[:held_rows] = side.weights
                old[name] = side = None
            rows[name] = (d, vals, w)
        held["rows"], held["radius"] = rows, radius


def _interpolated(n: int, q: float, value) -> float:
    """numpy's default (linear) quantile from the order statistics ``value(rank)`` (as data._sorted_quantile)."""
    pos = q * (n - 1)
    lo = int(np.floor(pos))
    hi = min(lo + 1, n - 1)
    return float(value(lo) + (pos - lo) * (value(hi) - value(lo)))


def _quantile_ranks(n: int, q: float) -> list[int]:
    pos = q * (n - 1)
    lo = int(np.floor(pos))
    return sorted({lo, min(lo + 1, n - 1)})
