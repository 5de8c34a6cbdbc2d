"""How a design reads the user's data: only the declared columns, the cutoff layout (one cutoff,
a cutoff column or cumulative cutoffs), and the route they take: gathered into pandas and
validated (seamline.data), or kept on the bounded-memory route (seamline.streaming), where a fit
reads a window around the cutoff and the gathered columns are read only if asked for.

Functions of a ``Design`` (seamline.estimate.design), which reads its data through them.
"""
from __future__ import annotations

import weakref

from ..core.window_side import WindowSide
from ..data import DesignData, Prepared, as_frame, check_columns, column_names
from ..streaming import StreamingData
from ..streaming_route import STREAMED_RULES, streamable_frame
from ..time_score import looks_like_date
from .multiple_cutoffs import CutoffNotChosen, CutoffPlan, plan_cutoffs
from .options import FitSpec


def read_data(design, data, score, cutoff, takeup, cluster, weights, score_unit) -> None:
    """Read the user's data: the declared columns, the cutoff layout, the validated arrays."""
    # Only the declared columns are read (a lazy frame computes nothing else); a pandas frame is
    # used as it is. Several cutoffs (a column, or cumulative numbers) are read in
    # seamline.estimate.multiple_cutoffs; a date score takes one cutoff date (seamline.time_score).
    design._source = data
    columns = (*design.outcomes, *(c for c in (takeup, cluster, weights) if c), *design.covariates)
    names = column_names(data)
    # A text cutoff names a column of per-unit cutoffs, unless it is an ISO date (a date score's cutoff).
    cutoff_column = (cutoff,) if isinstance(cutoff, str) and (
        cutoff in names if names is not None else not looks_like_date(cutoff)) else ()
    roles = {score: "score", **dict.fromkeys(cutoff_column, "cutoff"),
             **{o: "outcome" for o in design.outcomes}, **({takeup: "takeup"} if takeup else {}),
             **{c: "covariates" for c in design.covariates}, **({cluster: "cluster"} if cluster else {}),
             **({weights: "weights"} if weights else {})}
    check_columns(data, roles)
    design._declared = dict(score=score, cutoff=cutoff, outcome=design.outcomes, treated=design.treated,
                          takeup=takeup, covariates=design.covariates, cluster=cluster, weights=weights,
                          score_unit=score_unit)
    frame = streamable_frame(data, roles, design.reading, cutoff=cutoff, takeup=takeup, cluster=cluster,
                             score_unit=score_unit)
    if frame is not None:
        # The bounded-memory route (seamline.streaming): nothing is gathered now; the gathered
        # columns are read only if a result off that route asks for them.
        design._frame_loader = lambda: as_frame(data, list(roles), roles)
        design._plan = CutoffPlan("single", (float(cutoff),), None, score, float(cutoff), None)
        design.cutoff_layout, design.cutoffs, design.cutoff_column = "single", (float(cutoff),), None
        design._subsets = {}
        design._data = StreamingData(frame, score=score, cutoff=cutoff, outcomes=design.outcomes,
                                   covariates=design.covariates, weights=weights, gathered=lambda: DesignData(
                                       design._frame, score=score, cutoff=cutoff, outcomes=design.outcomes,
                                       takeup=None, covariates=design.covariates, cluster=None,
                                       weights=weights))
        design._data.on_release.append(_window_dropper(design))
        design.cutoff, design.time_scale = design._data.cutoff, None
        return
    design._frame = as_frame(data, list(roles), roles)
    design._plan = plan = plan_cutoffs(design._frame, score, cutoff, columns, score_unit)
    design.cutoff_layout, design.cutoffs, design.cutoff_column = plan.layout, plan.cutoffs, plan.column
    design.score = plan.score          # a cutoff column: score - cutoff, at 0
    design._subsets: dict = {}
    design.time_scale = None
    if plan.layout == "cumulative":
        design._data = CutoffNotChosen(plan.cutoffs)
        design.cutoff = None
    else:
        design._data = DesignData(plan.frame, score=plan.score, cutoff=plan.cutoff, outcomes=design.outcomes,
                                takeup=takeup, covariates=design.covariates, cluster=cluster, weights=weights,
                                score_unit=score_unit if plan.layout == "single" else None)
        # A date score is measured as the distance from the cutoff date: the numeric cutoff is 0.
        design.cutoff = design._data.cutoff
        design.time_scale = design._data.time_scale


def _window_dropper(design):
    """What the design drops when the streamed window's rows are let go of (seamline.streaming_memory):
    the engines fitted on it (made again, on the window gathered again, when next asked for) and the
    per-side pair of bandwidth selections that is not read yet (its closure holds the window's
    sides; ``bandwidth_choice.selection`` selects it again on the new window if it is read)."""
    ref = weakref.ref(design)               # the data must not keep the design alive

    def drop() -> None:
        d = ref()
        if d is None:
            return
        for key in [k for k, engine in d._engines.items() if isinstance(engine.prep.below, WindowSide)]:
            del d._engines[key]
        for sel, _ in d._selections.values():
            if sel._split_value is None:
                sel.split = None
    return drop


def prepared_sides(design, spec: FitSpec, variables: tuple[str, ...]) -> Prepared:
    """The prepared sides of a fit: a window of the streamed data when the fit can use one."""
    if design.streamed and spec.donut == 0 and (isinstance(spec.bandwidth, tuple) or spec.bandwidth in STREAMED_RULES):
        return design._data.window(variables, radius=design._needed.get(variables))
    return design._data.prepare(variables, spec.donut)
