"""The score profile: distinct values and mass points of the score per side, overall and inside
the bandwidth, with a check for heaping at round values.

What reads the score alone (the census) is kept on the design, so a profile at another bandwidth
only counts inside the new window.
"""
from __future__ import annotations

import numpy as np

from ..errors import SeamlineError
from ..results.diagnostics import ScoreProfile


def _clean_score(design) -> np.ndarray:
    x = design._data.arrays[design.score]
    return x[~np.isnan(x)]


def score_profile(design, **fit_options) -> ScoreProfile:
    """Distinct values and mass points of the score per side, overall and inside the bandwidth."""
    census = _score_census(design)
    try:
        h = design.fit(**fit_options).bandwidth
    except SeamlineError:
        h = (float("nan"), float("nan"))
    x, split = census["x"], census["split"]
    rows = []
    # distances from the cutoff, each side monotone, so equal values sit next to each other; the
    # window of each side is a run of them, found by one search (bisection, not a pass over the side)
    for side, bw, every in (("below", h[0], census["below"]), ("above", h[1], census["above"])):
        if not np.isfinite(bw):
            values = x[:0]
        elif side == "below":
            values = -x[int(np.searchsorted(x[:split], -bw, side="left")):split]
        else:
            values = x[split:split + int(np.searchsorted(x[split:], bw, side="right"))]
        rows += [every, _run_row(side, "window", values)]
    heaping, warnings = census["heaping"], list(census["warnings"])
    window = [r for r in rows if r["scope"] == "window"]
    few = [f"{r['side']} ({r['distinct_values']})" for r in window if r["distinct_values"] < 10]
    if few:
        warnings.append(f"Few distinct score values inside the bandwidth: {', '.join(few)}. With a discrete score "
                        "the fit extrapolates between mass points: widen the window if the design allows, report "
                        "the mass points, and prefer bias-aware inference for discrete scores (planned). Clustering "
                        "by score value is sometimes used but does not protect coverage (Kolesar & Rothe 2018).")
    return ScoreProfile(rows=tuple(rows), score=design.score, bandwidth=h, resolution=census["resolution"],
                        heaping=tuple(heaping), warnings=tuple(warnings))


def _run_row(side: str, scope: str, values: np.ndarray) -> dict:
    counts = _run_lengths(values)
    mass = counts >= 2
    return {"side": side, "scope": scope, "observations": int(len(values)),
            "distinct_values": int(len(counts)), "mass_points": int(mass.sum()),
            "share_at_mass_points": float(counts[mass].sum() / len(values)) if len(values) else 0.0,
            "largest_mass": int(counts.max()) if len(counts) else 0}


def _score_census(design) -> dict:
    """What the score profile reads from the score alone (no fit option): the sorted centred score,
    each side's overall row, the resolution and the heaping check; kept on the design, so a
    profile at another bandwidth only counts inside the new window."""
    census = design._diagnostics.get(("score_census",))
    if census is None:
        census = design._diagnostics[("score_census",)] = _census(design)
    return census


def _census(design) -> dict:
    xs = _sorted_score(design)
    data = design._data
    if xs is data._ordered:
        # the preparations' centred score and below distances, shared (read-only; no n-long copy)
        x, split, below = data._distances_of((), data._score_order())
    else:
        x = xs - design.cutoff                       # ascending
        split = int(np.searchsorted(x, 0.0, side="left"))
        below = -x[:split]
    starts, counts = _runs(xs)
    uniq = xs[starts]                            # sorted distinct values
    gaps = np.diff(uniq)
    resolution = float(gaps[gaps > 0].min()) if np.any(gaps > 0) else 0.0
    heaping, warnings = _heaping(xs, uniq, counts, resolution)
    return {"x": x, "split": split, "below": _run_row("below", "all", below),
            "above": _run_row("above", "all", x[split:]), "resolution": resolution,
            "heaping": tuple(heaping), "warnings": tuple(warnings)}


def _sorted_score(design) -> np.ndarray:
    """Every non-missing score in ascending order, from the design's one sort when it covers them
    (the sorted score the design keeps, when it is that sort's)."""
    data = design._data
    if data.weights is None and data.cluster_codes is None:
        rows = data.sorted_rows()[0]
        if data._parent is None and rows is data._score_order():
            return data._ordered_score()
        return data.arrays[design.score][rows]
    return np.sort(_clean_score(design))


def _run_lengths(monotone: np.ndarray) -> np.ndarray:
    """Sizes of the runs of equal values of a sorted (ascending or descending) array."""
    return _runs(monotone)[1]


def _runs(monotone: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(first position, size) of each run of equal values of a sorted array."""
    if len(monotone) == 0:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    starts = np.flatnonzero(np.r_[True, monotone[1:] != monotone[:-1]])
    return starts, np.diff(np.append(starts, len(monotone)))


def _heaping(xs: np.ndarray, uniq: np.ndarray, counts: np.ndarray,
             resolution: float) -> tuple[list[dict], list[str]]:
    """Share of observations at round values against what a smooth score would put there.

    ``xs``: the sorted scores; ``uniq``, ``counts``: their distinct values and how often each
    occurs. Whether a value is round is asked once per distinct value, and the share is the count
    of observations at round values over n (the same number as asking each observation)."""
    out, warnings = [], []
    if len(xs) < 200 or len(uniq) < 20:
        return out, warnings
    on_grid = resolution > 0 and np.allclose(uniq / resolution, np.round(uniq / resolution), atol=1e-6)
    steps = [resolution * 5, resolution * 10] if on_grid else [10.0 ** np.floor(np.log10(np.std(xs)))]
    for step in steps:
        at = np.isclose(uniq / step, np.round(uniq / step), atol=1e-9, rtol=0)
        share = float(counts[at].sum() / len(xs))
        expected = (resolution / step) if on_grid else 0.0
        out.append({"step": float(step), "share": share, "expected": expected})
        if share > max(2.0 * expected, 0.05) and share - expected > 0.02:
            warnings.append(f"Heaping: {share:.1%} of scores sit at multiples of {step:g} (about {expected:.1%} "
                            "expected). Heaped values near the cutoff can bias estimates; compare donut estimates "
                            "and consider excluding the heaps (Barreca, Lindo & Waddell 2016).")
            break
    return out, warnings
