"""The one place user data is touched: columns -> validated float64 arrays -> prepared Sides.

Nothing here modifies the user's DataFrame; arrays are read with ``to_numpy`` and every derived array
is a new one. Rows with missing values in the columns a fit uses are dropped and counted.
"""
from __future__ import annotations

import copy
import difflib
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .core.density_sample import array_std
from .core.side import Side
from .partitioned import gather_frame, is_partitioned
from .time_score import TimeScale, is_time_column, reject_time_cutoff, time_scale
from .errors import (ColumnNotFoundError, ColumnTypeError, CutoffOutOfRangeError,
                     DuplicateColumnError, EmptyColumnError, InvalidWeightsError,
                     NonFiniteValueError, OneSidedDataError, TakeupRangeError, TooFewClustersError,
                     shown)


def _column_names(data) -> list[str] | None:
    """Column names of a lazy or columnar input (polars, Arrow, dask), read from its schema: no data is read."""
    module = type(data).__module__.split(".")[0]
    if module == "dask" and hasattr(data, "columns"):      # a dask DataFrame: its metadata
        return [str(c) for c in data.columns]
    if module == "polars":
        schema = data.collect_schema() if hasattr(data, "collect_schema") else data.schema
        return [str(c) for c in schema.names()]
    if module == "pyarrow":
        if hasattr(data, "column_names"):          # Table, RecordBatch
            return list(data.column_names)
        if hasattr(data, "schema") and hasattr(data, "to_table"):    # dataset.Dataset
            return list(data.schema.names)
    return None


def as_frame(data, columns: list[str] | None = None, roles: dict[str, str] | None = None) -> pd.DataFrame:
    """The user's data as a pandas DataFrame, reading no more than the design needs.

    A pandas DataFrame is used as it is (never copied or modified). A polars ``LazyFrame`` or
    ``DataFrame`` and an Arrow ``Table``, ``RecordBatch`` or ``Dataset`` collect only ``columns``
    (so a lazy frame computes nothing else); anything with ``to_pandas`` or ``__dataframe__`` is
    converted whole. A dask DataFrame or a path / glob of Parquet files is read partition by partition
    on the active dask scheduler, only ``columns`` (seamline.partitioned).
    """
    if isinstance(data, pd.DataFrame):
        return data
    if is_partitioned(data):
        return gather_frame(data, columns, roles)
    names = _column_names(data)
    if names is not None:
        wanted = names if columns is None else [c for c in dict.fromkeys(columns) if c in names]
        module = type(data).__module__.split(".")[0]
        if module == "polars":
            part = data.select(wanted)
            part = part.collect() if hasattr(part, "collect") else part
            return part.to_pandas()
        if hasattr(data, "select"):
            return data.select(wanted).to_pandas()
        return data.to_table(columns=wanted).to_pandas()
    if hasattr(data, "to_pandas"):
        return data.to_pandas()
    if hasattr(data, "__dataframe__"):
        return pd.api.interchange.from_dataframe(data)
    raise TypeError(f"`data` must be a pandas DataFrame (or a polars or Arrow table, a dask DataFrame or a path of "
                    f"Parquet files); got {type(data).__name__}. Convert it with pandas.DataFrame(...) first.")


def check_columns(data, roles: dict[str, str]) -> None:
    """For a lazy or columnar input, check column names against its schema before reading anything.

    ``roles`` maps each needed column to its role in the design (for the message). pandas frames are
    checked later, column by column, where their values are read.
    """
    names = _column_names(data)
    if names is None:
        return
    dups = sorted({n for n in names if names.count(n) > 1})
    if dups:
        raise DuplicateColumnError(f"column names must be unique; got duplicates {shown(dups)}. "
                                   "Rename or drop the duplicated columns before declaring the design.")
    for name, role in roles.items():
        if name not in names:
            raise _missing_column(names, name, role)


def column_names(data) -> list[str] | None:
    """The column names of a lazy or columnar input from its schema (None for other inputs)."""
    return _column_names(data)


def _missing_column(names, name: str, role: str) -> ColumnNotFoundError:
    close = difflib.get_close_matches(str(name), [str(c) for c in names], n=3)
    hint = f" Did you mean {', '.join(repr(c) for c in close)}?" if close else \
        " Check the spelling against data.columns."
    return ColumnNotFoundError(f"`{role}` column {name!r} is not in the data.{hint}")


def numeric_column(frame: pd.DataFrame, name: str, role: str) -> np.ndarray:
    """A column as float64 (NaN for missing); errors name the column and the fix."""
    if name not in frame.columns:
        raise _missing_column(frame.columns, name, role)
    col = frame[name]
    if isinstance(col, pd.DataFrame):
        raise DuplicateColumnError(f"`{role}` column {shown(name)} appears more than once in the data; "
                                   "got duplicate column names. Rename or drop the duplicates.")
    if pd.api.types.is_bool_dtype(col):
        col = col.astype(float)
    elif not pd.api.types.is_numeric_dtype(col):
        coerced = pd.to_numeric(col, errors="coerce")
        bad = col[coerced.isna() & col.notna()]
        example = repr(bad.iloc[0]) if len(bad) else "non-numeric dtype"
        raise ColumnTypeError(f"`{role}` column {shown(name)} must be numeric; got dtype {col.dtype} "
                              f"(e.g. {example}). Convert it with pandas.to_numeric or choose a numeric column.")
    if col.dtype == np.float64:
        values = col.to_numpy()          # no copy: read-only use only
    else:
        values = col.to_numpy(dtype=float, na_value=np.nan)
    if np.isinf(values).any():
        row = col.index[np.flatnonzero(np.isinf(values))[0]]
        raise NonFiniteValueError(f"`{role}` column {shown(name)} must be finite; got infinite values "
                                  f"(first at row {shown(row)}). Replace them with NaN (dropped) or a finite value.")
    if np.isnan(values).all():
        raise EmptyColumnError(f"`{role}` column {shown(name)} must have non-missing values; got only "
                               "missing values. Choose a column with data.")
    return values


def _sorted_quantile(x_sorted: np.ndarray, q: float) -> float:
    """Linear-interpolation quantile (numpy's default) of an already sorted array."""
    pos = q * (len(x_sorted) - 1)
    lo = int(np.floor(pos))
    hi = min(lo + 1, len(x_sorted) - 1)
    return float(x_sorted[lo] + (pos - lo) * (x_sorted[hi] - x_sorted[lo]))


DONUT_PREPARATIONS = 6      # donut preparations kept per design (one ladder's five radii and one more)


@dataclass
class Prepared:
    """Both sides ready for estimation, for one set of variables and one donut radius."""
    below: Side
    above: Side
    variables: tuple[str, ...]
    n_dropped: int
    n_donut: int
    score_sd: float
    score_scale: float          # min(sd, IQR / 1.349): robust spread for rule-of-thumb pilots
    n_clusters: int | None

    @property
    def n_total(self) -> int:
        return self.below.n + self.above.n


class DesignData:
    """Validated columns of one design. Construct once; ``prepare`` builds Sides on demand (cached)."""

    def __init__(self, data, *, score: str, cutoff, outcomes: tuple[str, ...],
                 takeup: str | None, covariates: tuple[str, ...], cluster: str | None,
                 weights: str | None, score_unit: str | None = None):
        roles = {score: "score", **{o: "outcome" for o in outcomes}, **({takeup: "takeup"} if takeup else {}),
                 **{c: "covariates" for c in covariates}, **({cluster: "cluster"} if cluster else {}),
                 **({weights: "weights"} if weights else {})}
        check_columns(data, roles)
        frame = as_frame(data, list(roles), roles)
        dups = frame.columns[frame.columns.duplicated()].unique().tolist()
        if dups:
            raise DuplicateColumnError(f"column names must be unique; got duplicates {shown(dups)}. "
                                       "Rename or drop the duplicated columns before declaring the design.")
        self.index = frame.index
        self.n_rows = len(frame)
        self.score_name = score
        self.arrays: dict[str, np.ndarray] = {}
        self.roles: dict[str, str] = {}
        # A date score becomes its distance from the cutoff date; the cutoff is then 0.
        self.time_scale: TimeScale | None = None
        if score not in frame.columns:
            raise _missing_column(frame.columns, score, "score")
        if not isinstance(frame[score], pd.DataFrame) and is_time_column(frame[score]):
            self.time_scale, self.arrays[score] = time_scale(frame[score], cutoff, score_unit, score)
            cutoff = 0.0
        else:
            cutoff = reject_time_cutoff(cutoff, score, score_unit)
            self.arrays[score] = numeric_column(frame, score, "score")
        for name in outcomes:
            self.arrays[name] = numeric_column(frame, name, "outcome")
        if takeup is not None:
            t = numeric_column(frame, takeup, "takeup")
            outside = (t < 0) | (t > 1)
            if outside.any():
                raise TakeupRangeError(f"`takeup` column {shown(takeup)} must lie in [0, 1] (treatment received, "
                                       f"or its probability); got {shown(t[outside][0])} at row "
                                       f"{shown(frame.index[np.flatnonzero(outside)[0]])}. Recode it as 0/1.")
            self.arrays[takeup] = t
        for name in covariates:
            self.arrays[name] = numeric_column(frame, name, "covariates")
        self.weights = None
        if weights is not None:
            w = numeric_column(frame, weights, "weights")
            if (w < 0).any():
                raise InvalidWeightsError(f"`weights` column {shown(weights)} must be non-negative; got "
                                          f"{shown(w[w < 0][0])}. Use sampling weights >= 0.")
            if not (w > 0).any():
                raise InvalidWeightsError(f"`weights` column {shown(weights)} must have a positive value; got "
                                          "all zeros or missing. Choose another weights column.")
            self.weights = w
        self.cluster_codes = None
        if cluster is not None:
            if cluster not in frame.columns:
                raise _missing_column(frame.columns, cluster, "cluster")
            codes, _ = pd.factorize(frame[cluster], use_na_sentinel=True)
            self.cluster_codes = codes.astype(np.int64)
        x = self.arrays[score]
        finite = x[~np.isnan(x)]
        lo, hi = float(finite.min()), float(finite.max())
        if not np.isfinite(cutoff) or cutoff < lo or cutoff > hi:
            if self.time_scale is not None:
                ts = self.time_scale
                raise CutoffOutOfRangeError(f"`cutoff` must lie within the dates of score {shown(score)} "
                                            f"[{ts.label(lo)}, {ts.label(hi)}]; got {ts.label(0.0)}. Check the "
                                            "cutoff date.")
            raise CutoffOutOfRangeError(f"`cutoff` must lie within the range of score {shown(score)} "
                                        f"[{lo:g}, {hi:g}]; got {shown(cutoff)}. Check the cutoff and its units.")
        self.cutoff = float(cutoff)
        self._cache: dict[tuple, Prepared] = {}
        self._donuts: list[tuple] = []            # keys of donut preparations, oldest first
        self._sorted: dict[tuple, tuple[np.ndarray, int]] = {}
        self._order: np.ndarray | None = None     # the one sort of the score (``_score_order``)
        self._spreads: dict[int, tuple] = {}      # score spread per sorted row set (keyed by identity)
        self._distances: dict[int, tuple] = {}    # sorted distances per sorted row set (``_distances_of``)
        self._ordered: np.ndarray | None = None   # the score in that order (``_ordered_score``)
        self._spans: dict[tuple, tuple[int, int]] = {}   # a one-sided copy's run of the parent's order
        self._only: np.ndarray | None = None      # row filter of a one-sided copy (``one_side``)
        self._parent: DesignData | None = None    # whose sorted rows a one-sided copy reuses
        self._side: str | None = None             # which side of the parent's cutoff a copy keeps
        self._sides: dict[str, tuple] = {}        # what one-sided copies of each side share
        self._columns: dict[str, np.ndarray] = {}  # variables in the sorted order, for those copies

    def one_side(self, side: str, cutoff: float) -> "DesignData":
        """The same validated columns restricted to one side of this design's cutoff, with a new cutoff.

        Nothing is copied: the copy shares the arrays and filters rows when it prepares, and it takes
        its sorted order from this design's (a subsequence of a sorted order is sorted), so a placebo
        cutoff costs no sort. Prepared sides equal those of a design built from the side's rows.
        """
        shared = self._sides.get(side)
        if shared is None:
            # Every copy of one side (the placebo cutoffs of a ladder) keeps the same rows, so they
            # share the row filter, the sorted rows and their runs of this design's order.
            x = self.arrays[self.score_name]
            only = (x >= self.cutoff) if side == "above" else (x < self.cutoff)   # NaN scores fall out
            if self._only is not None:
                only &= self._only
            shared = self._sides[side] = (only, int(only.sum()), {}, {})
        only, n_rows, sorted_rows, spans = shared
        out = copy.copy(self)
        out.cutoff = float(cutoff)
        out.n_rows = n_rows
        out._only, out._parent, out._side = only, self, side
        out._cache, out._order, out._spreads, out._ordered, out._distances = {}, None, {}, None, {}
        out._sorted, out._spans = sorted_rows, spans
        out._donuts, out._sides, out._columns = [], {}, {}
        return out

    def prepare(self, variables: tuple[str, ...], donut: float = 0.0, neighbors: int = 3) -> Prepared:
        key = (variables, float(donut), neighbors)
        if key not in self._cache:
            stacked = self._stacked(variables, float(donut), neighbors)
            base = self._cache.get((variables, 0.0, neighbors)) if donut > 0 and stacked is None else None
            self._cache[key] = (stacked if stacked is not None
                                else self._prepare(variables, float(donut), neighbors) if base is None
                                else self._with_donut(base, float(donut)))
            if donut > 0:
                self._forget_donuts(key)
        return self._cache[key]

    def _stacked(self, variables: tuple[str, ...], donut: float, neighbors: int) -> Prepared | None:
        """Several variables' preparation from theirs one by one, when each is made on the same rows
        (a balance's joint test after its per-covariate fits): their sides' centred values side by
        side, with their offsets, instead of a second gather along the score's order (a random
        read that leaves the cache at 1e7 rows). None when not every one is there."""
        if len(variables) < 2:
            return None
        singles = [self._cache.get(((v,), donut, neighbors)) for v in variables]
        if any(p is None for p in singles):
            return None
        rows = self.sorted_rows(variables)[0]
        if any(self.sorted_rows((v,))[0] is not rows for v in variables):
            return None
        sides = []
        for parts in ([p.below for p in singles], [p.above for p in singles]):
            first = parts[0]
            values = np.empty((first.n, len(variables)), order="F")     # columns contiguous
            for j, part in enumerate(parts):
                values[:, j] = part.values[:, 0]
            # the values are centred already: centre on zeros, then record the singles' offsets
            side = Side(first.sign, first.distance, values, first.weights, first.clusters, neighbors,
                        rows=first.rows, offsets=np.zeros(len(variables)))
            side.offsets = np.array([part.offsets[0] for part in parts])
            sides.append(side)
        one = singles[0]
        return Prepared(sides[0], sides[1], variables, one.n_dropped, one.n_donut, one.score_sd, one.score_scale,
                        one.n_clusters)

    def _forget_donuts(self, newest: tuple) -> None:
        """Keep the DONUT_PREPARATIONS most recent donut preparations: a donut ladder's radii follow
        the bandwidth, so a slider would otherwise keep one full preparation per radius it passed."""
        self._donuts = [k for k in self._donuts if k != newest and k in self._cache] + [newest]
        while len(self._donuts) > DONUT_PREPARATIONS:
            self._cache.pop(self._donuts.pop(0), None)

    def sorted_rows(self, variables: tuple[str, ...] = ()) -> tuple[np.ndarray, int]:
        """Rows usable for ``variables`` in ascending score order, and the rows dropped as missing.

        The design sorts its score once (``_score_order``) and every set of variables without
        missing values of its own shares that order. A set that drops rows sorts its own rows (the
        order of tied scores then matches a design built on those rows alone, so every number is
        the same as before this sharing). A one-sided copy reads its order off its parent's: a
        subsequence of a sorted order is sorted (tied scores may come in another order, which
        changes sums only in the last digits).
        """
        if variables not in self._sorted:
            keep, n_dropped = self._usable(variables)
            if self._parent is not None:
                base = self._parent._score_order()
                whole = self._parent._side_span(self._side)
                if int(keep.sum()) == whole[1] - whole[0]:
                    # every usable row of the parent's side is kept (the kept rows are among them):
                    # the run of the parent's order that side is, found with no pass over the rows
                    self._spans[variables] = whole
                    rows = base[whole[0]:whole[1]]
                else:
                    kept = np.flatnonzero(keep[base])
                    if len(kept) and kept[-1] - kept[0] + 1 == len(kept):    # a run of the parent's order
                        self._spans[variables] = (int(kept[0]), int(kept[-1]) + 1)
                    rows = base[kept]
            else:
                base = self._score_order()
                rows = base if int(keep.sum()) == len(base) else self._argsort(keep)
            self._sorted[variables] = (rows, n_dropped)
        return self._sorted[variables]

    def _side_span(self, side: str) -> tuple[int, int]:
        """Positions of this design's score order below (score < cutoff) or above its cutoff."""
        cut = int(np.searchsorted(self._ordered_score(), self.cutoff, side="left"))
        return (0, cut) if side == "below" else (cut, len(self._score_order()))

    def _usable(self, variables: tuple[str, ...]) -> tuple[np.ndarray, int]:
        """Rows with every value a fit on ``variables`` needs, and how many were dropped as missing."""
        keep = ~np.isnan(self.arrays[self.score_name])
        for v in variables:
            keep &= ~np.isnan(self.arrays[v])
        if self.weights is not None:
            keep &= ~np.isnan(self.weights)
        if self.cluster_codes is not None:
            keep &= self.cluster_codes >= 0
        if self._only is not None:
            keep &= self._only
        n_dropped = int(self.n_rows - keep.sum())
        if self.weights is not None:
            keep &= self.weights > 0  # zero weight: no information, not "dropped"
        return keep, n_dropped

    def _score_order(self) -> np.ndarray:
        """Rows with a usable score (and weight and cluster), sorted by score: the design's one sort."""
        if self._order is None:
            self._order = self._argsort(self._usable(())[0])
        return self._order

    def _distances_of(self, variables: tuple[str, ...], rows: np.ndarray) -> tuple[np.ndarray, int, np.ndarray]:
        """(score - cutoff in the order of ``rows``, the split, the below side's distances: reversed
        and negated, a new array), made once per row set: every preparation on the same rows
        (outcome, covariates, the balance's) shares them, read-only (the above side's distances
        are a view of the first)."""
        key = id(rows)
        if key not in self._distances:
            x_sorted = self._centred_score(variables, rows)
            split = int(np.searchsorted(x_sorted, 0.0, side="left"))
            below = -x_sorted[split - 1::-1] if split else np.zeros(0)
            self._distances[key] = (rows, x_sorted, split, below)
        return self._distances[key][1:]

    def _centred_score(self, variables: tuple[str, ...], rows: np.ndarray) -> np.ndarray:
        """score[rows] - cutoff as a new array, in one pass. A one-sided copy whose rows are a run
        of its parent's sorted rows slices the parent's sorted score (the same values) instead of
        gathering row by row."""
        span = self._spans.get(variables)
        if span is not None:
            return np.subtract(self._parent._ordered_score()[span[0]:span[1]], self.cutoff)
        if self._parent is None and rows is self._score_order():
            return np.subtract(self._ordered_score(), self.cutoff)   # gathered once, kept for the binned means
        x = self.arrays[self.score_name][rows]
        x -= self.cutoff
        return x

    def _ordered_values(self, variables: tuple[str, ...], span: slice, part: slice, start: int) -> np.ndarray:
        """A one-sided copy's side values, sliced from the variables in this design's sorted order
        (gathered once, kept) instead of gathered row by row: ``arrays[v][order[span][part][start:]]``."""
        order = self._score_order()
        out = None
        for j, v in enumerate(variables):
            column = self._columns.get(v)
            if column is None:
                column = self._columns[v] = self.arrays[v][order]
            piece = column[span][part][start:]
            if out is None:
                out = np.empty((len(piece), len(variables)), order="F")   # columns contiguous
            out[:, j] = piece
        return out

    def _ordered_score(self) -> np.ndarray:
        """The score in the design's sorted order (built once: the preparation copies it, one-sided
        copies slice it, the binned means read it)."""
        if self._ordered is None:
            self._ordered = self.arrays[self.score_name][self._score_order()]
        return self._ordered

    def _argsort(self, keep: np.ndarray) -> np.ndarray:
        score = self.arrays[self.score_name]
        if keep.all():
            return np.argsort(score)
        kept = np.flatnonzero(keep)
        return kept[np.argsort(score[kept])]

    def _spread(self, rows: np.ndarray, x_sorted: np.ndarray) -> tuple[float, float]:
        """(sd, min(sd, IQR / 1.349)) of the sorted centred scores, computed once per row set."""
        key = id(rows)
        if key not in self._spreads:
            score_sd = array_std(x_sorted)          # np.std(ddof=1), without its n-long temporaries
            q25, q75 = _sorted_quantile(x_sorted, 0.25), _sorted_quantile(x_sorted, 0.75)
            self._spreads[key] = (rows, score_sd, min(score_sd, (q75 - q25) / 1.349) if q75 > q25 else score_sd)
        return self._spreads[key][1:]

    def _prepare(self, variables: tuple[str, ...], donut: float, neighbors: int) -> Prepared:
        rows, n_dropped = self.sorted_rows(variables)
        if len(rows) < 2:
            raise OneSidedDataError(f"the design must keep observations on both sides of the cutoff; got "
                                    f"{len(rows)} usable rows after dropping missing values in "
                                    f"{shown([self.score_name, *variables])}. Check for missing data.")
        x_sorted, split, below_distance = self._distances_of(variables, rows)
        score_sd, score_scale = self._spread(rows, x_sorted)
        n_donut = 0
        sides = []
        span = self._spans.get(variables)
        runs = (self._parent._runs_in_sides(variables, neighbors, span, split)
                if donut == 0 and span is not None and variables else (None, None))
        # below: walk outward from the cutoff, i.e. the sorted order reversed; above: as sorted
        for sign, part, run in ((-1, slice(split - 1, None, -1) if split else slice(0, 0), runs[0]),
                                (1, slice(split, None), runs[1])):
            dist = x_sorted[part] if sign > 0 else below_distance
            src = rows[part]
            start = 0
            if donut > 0:
                start = int(np.searchsorted(dist, donut, side="left"))
                n_donut += start
                src, dist = src[start:], dist[start:]
            self._check_side(len(src), sign, donut)
            if run is not None:          # a run of the parent's prepared side: views of its arrays
                sides.append(_run_side(sign, dist, run, neighbors, src))
                continue
            values = self._gather(variables, src) if span is None or not variables else \
                self._parent._ordered_values(variables, slice(*span), part, start)
            sides.append(Side(sign, dist, values, *self._row_arrays(src), neighbors, rows=src))
        del x_sorted
        return self._finish(sides, variables, n_dropped, n_donut, score_sd, score_scale)

    def _runs_in_sides(self, variables, neighbors, span: tuple[int, int], split: int) -> list:
        """Where the two sides of a one-sided copy (a placebo cutoff) lie in this design's prepared
        sides: per side, (this design's side, start, reversed) as ``Side.cut_from`` takes them, or
        None.

        The copy keeps positions ``span`` of this design's sorted order and splits them at
        ``split``: its above side is positions [span[0] + split, span[1]) ascending, its below side
        [span[0], span[0] + split) descending. Each lies inside one of this design's sides (at the
        same variables, no donut, sorted in the same order), either as a tail of it (same
        direction, to its far end) or as its head reversed (from its first row, at the cutoff).
        """
        own = self._cache.get((variables, 0.0, neighbors))
        if own is None or self.sorted_rows(variables)[0] is not self._score_order():
            return [None, None]
        below, above = own.below, own.above
        cut, total = below.n, below.n + above.n          # this design's split in its sorted order
        runs = []
        for (a, b), ascending in (((span[0], span[0] + split), False), ((span[0] + split, span[1]), True)):
            run = None
            if b <= a:
                pass
            elif a >= cut and ascending and b == total:          # a tail of the above side
                run = (above, a - cut, False)
            elif a == cut and not ascending and b <= total:      # the above side's head, reversed
                run = (above, b - cut, True)
            elif b == cut and ascending and a >= 0:              # the below side's head, reversed
                run = (below, cut - a, True)
            elif a == 0 and not ascending and b <= cut:          # a tail of the below side
                run = (below, cut - b, False)
            runs.append(run)
        return runs

    def _with_donut(self, base: Prepared, donut: float) -> Prepared:
        """``base`` (no donut) without the rows closer than ``donut`` to the cutoff: no sort, no copy,
        no search beyond one per side (``Side.without_nearest``); the score's spread is that of all
        usable rows, as in ``_prepare``."""
        sides, n_donut = [], 0
        for side in (base.below, base.above):
            start = int(np.searchsorted(side.distance, donut, side="left"))
            n_donut += start
            self._check_side(side.n - start, side.sign, donut)
            sides.append(side.without_nearest(start))
        return self._finish(sides, base.variables, base.n_dropped, n_donut, base.score_sd, base.score_scale)

    def _check_side(self, n_side: int, sign: int, donut: float) -> None:
        if n_side == 0:
            name = "below" if sign < 0 else "above"
            why = f" outside the donut of radius {donut:g}" if donut > 0 else ""
            raise OneSidedDataError(f"the design must have observations {name} the cutoff{why}; got none "
                                    f"(score {shown(self.score_name)}, cutoff {self.cutoff:g}). Check the cutoff, "
                                    "the treated side, or reduce the donut radius.")

    def _gather(self, variables: tuple[str, ...], src: np.ndarray) -> np.ndarray:
        values = np.empty((len(src), len(variables)), order="F")  # columns contiguous
        for j, v in enumerate(variables):
            np.take(self.arrays[v], src, out=values[:, j])
        return values

    def _row_arrays(self, src: np.ndarray) -> tuple[np.ndarray | None, np.ndarray | None]:
        return (None if self.weights is None else self.weights[src],
                None if self.cluster_codes is None else self.cluster_codes[src])

    def _finish(self, sides: list[Side], variables, n_dropped, n_donut, score_sd, score_scale) -> Prepared:
        n_clusters = None
        if self.cluster_codes is not None:
            for side, name in zip(sides, ("below", "above")):
                g = len(np.unique(side.clusters))
                if g < 2:
                    raise TooFewClustersError(f"`cluster` must have at least two clusters {name} the cutoff; "
                                              f"got {g}. Use a finer cluster variable or drop `cluster`.")
            n_clusters = int(len(np.unique(np.concatenate([s.clusters for s in sides]))))
        return Prepared(sides[0], sides[1], variables, n_dropped, n_donut, score_sd, score_scale, n_clusters)


def _run_side(sign: int, distance: np.ndarray, run: tuple[Side, int, bool], neighbors: int,
              rows: np.ndarray) -> Side:
    """A placebo cutoff's side that is a run of a prepared side (``DesignData._runs_in_sides``):
    its values, weights and clusters are views of that side's, centred on that side's means (no
    gather, no copy; the estimates equal a from-scratch preparation up to rounding), and its
    neighbour residuals are read off that side's (``Side.cut_from``)."""
    base, start, reversed_ = run
    part = slice(start - 1, None, -1) if reversed_ else slice(start, None)
    if reversed_ and start == 0:
        part = slice(0, 0)

    def view(a):
        return None if a is None else a[part]
    side = Side(sign, distance, base.values[part], view(base.weights), view(base.clusters), neighbors, rows=rows,
                offsets=base.offsets, centred=True)
    side.cut_from(base, start, reversed_)
    return side
