"""The board's background computation: the worker thread, what it computes next, and waiting.

A board's inputs are frozen into ``Inputs`` snapshots; the worker computes toward the newest one
(the *target*) in three tiers: the headline and panels code waits for at once, the panels a view
shows after ``SETTLE_DELAY`` without changes, the rest after ``IDLE_DELAY``. It checks between two
intermediate results whether a newer target superseded its snapshot; results are published
only for the target they were computed for. ``Scheduler`` holds this logic as a base class of
``Board`` (``board.py`` holds the public actions, ``board_inputs`` the inputs and ``board_outputs``
the presentation). All state is guarded by the board's lock; ``wait`` blocks on its condition.

Nothing here imports IPython or widgets.
"""
from __future__ import annotations

import datetime as _dt
import logging
import sys
import threading
import time
from collections import Counter
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from ..errors import InvalidOptionError, SeamlineError, WaitTimeoutError, shown
from ..core.interrupt import Interrupted, stop_when
from ..estimate.design import Design
from ..partitioned import is_partitioned, reading_progress
from .compute import Computation, panel_order
from .exports import LABELS
from .reactive import DependencyGraph
from .spec import Failure

__all__ = ["IDLE_DELAY", "SETTLE_DELAY", "BoardState", "Inputs", "Scheduler", "live_front_end"]

log = logging.getLogger("seamline")

#: Seconds without a change before the worker computes the open tab's panels (the headline is
#: computed at once) and before it computes panels nobody is looking at.
SETTLE_DELAY = 0.15
IDLE_DELAY = 0.4
#: Seconds between two header updates while partitions are read (the last one is always sent).
READING_NOTE_EVERY = 0.2

def live_front_end() -> bool:
    """Whether seamline's JupyterLab front end is connected to this kernel (its channel is open).

    With a live front end, boards update their views from the worker thread and the kernel never
    waits for them. Without one (nbclient, nbconvert, a script, a plain IPython shell), each cell
    waits until the boards it changed are complete, so headless runs are deterministic.
    """
    channel = sys.modules.get(f"{__package__}.channel")
    return bool(channel is not None and channel.channels())


@dataclass(frozen=True)
class Inputs:
    """Everything a board reads, frozen: the worker computes from one of these while the notebook
    moves on. ``keys`` holds each panel's key for these inputs (None when they cannot be used)."""

    generation: int
    data: Any
    data_version: int
    spec: Mapping[str, Any]
    options: Mapping[str, Any]
    selected: str
    fingerprints: Mapping[str, bytes]
    error: str | None
    graph: DependencyGraph | None = None
    values: Mapping[str, Any] = field(default_factory=dict)
    keys: Mapping[str, tuple] = field(default_factory=dict)

    def design_kwargs(self) -> dict[str, Any]:
        s = self.spec
        return dict(score=s["score"], cutoff=s["cutoff"], outcome=list(s["outcome"]), treated=s["treated"],
                    takeup=s["takeup"], covariates=list(s["covariates"]) or None, cluster=s["cluster"],
                    weights=s["weights"], score_unit=s.get("score_unit"))


@dataclass(frozen=True)
class BoardState:
    """What a view shows, read at one moment without waiting.

    ``results`` and ``errors`` hold the last published value of each panel; ``pending`` names the
    panels whose value does not (yet) belong to the current inputs -- a view must say so rather
    than show their numbers as current.
    """

    name: str
    results: Mapping[str, Any]
    errors: Mapping[str, str]
    pending: frozenset
    status: str
    paused: bool
    stale: bool
    updated_at: _dt.datetime | None
    options: Mapping[str, Any]
    spec: Mapping[str, Any]
    outcomes: tuple[str, ...]
    reading: tuple[int, int] | None = None     # (done, total) partitions while a partitioned input is read




class Scheduler:
    """The worker and the waiting of a board (a base class of ``Board``, which sets the state)."""

    def _current(self, panel: str) -> bool:
        return self._keys.get(panel) == self._target.keys[panel]

    def _pending(self) -> frozenset:
        return frozenset(p for p in self._panels if not self._current(p))

    def _wanted(self) -> set[str]:
        wanted = {"fit", *(p for p, n in self._awaited.items() if n > 0)}
        for panels in self._watched.values():
            wanted.update(panels)
        return wanted & set(self._panels)

    def _status(self) -> str:
        if self._target is not self._inputs and self.paused:
            return "stale"
        if self._target.error is not None:
            return "error"
        if any(not self._current(p) for p in self._wanted()):
            return "recomputing" if self._started else "stale"
        return "error" if "fit" in self._errors else "fresh"

    def wait(self, *panels: str, timeout: float | None = None) -> "Board":
        """Block until the named panels (every panel when none is named) hold their results for
        the current inputs, and return the board.

        Parameters
        ----------
        *panels : names among ``board.panels``
        timeout : seconds, optional
            Give up after this long.

        Returns
        -------
        Board

        Raises
        ------
        WaitTimeoutError
            When the timeout passes first (a ``TimeoutError``); the computation goes on.
        """
        names = tuple(panels) or self._panels
        bad = [p for p in names if p not in self._panels]
        if bad:
            raise InvalidOptionError(f"`panels` must be among this board's panels ({', '.join(self._panels)}); got "
                                     f"{shown(bad)}. Name computed panels or none.")
        if threading.current_thread() is self._worker:
            return self                      # a subscriber on the worker must never wait for it
        deadline = None if timeout is None else time.monotonic() + float(timeout)
        with self._lock:
            if self.closed or not self._started:
                return self
            self._awaited.update(names)
            self._changed.notify_all()
            try:
                while not self.closed and not (all(self._current(p) for p in names) and not self._notifying):
                    self._start_worker()
                    remaining = None if deadline is None else deadline - time.monotonic()
                    if remaining is not None and remaining <= 0:
                        pending = [p for p in names if not self._current(p)]
                        raise WaitTimeoutError(
                            f"`timeout` must leave time for the panels to finish; got {shown(timeout)} s with "
                            f"{', '.join(pending)} still computing. Wait longer, or call wait() without a "
                            "timeout (the computation goes on in the background).")
                    self._changed.wait(remaining if remaining is not None else 1.0)
            finally:
                self._awaited.subtract(names)
                self._awaited += Counter()          # drop the zero counts
        return self

    def _kick(self) -> None:
        with self._lock:
            self._started = True
            self._start_worker()
            self._changed.notify_all()

    def _start_worker(self) -> None:
        if self._worker is None and not self.closed:
            self._worker = threading.Thread(target=self._loop, name=f"seamline-board-{self.name}", daemon=True)
            self._worker.start()

    def _todo(self) -> tuple[list[str], float | None]:
        """(panels to compute now, in order; seconds until more may start) -- under the lock.

        Three tiers by how long the inputs have been still: the headline and awaited panels at
        once; watched panels after ``SETTLE_DELAY`` (so a slider being dragged costs one fit per
        move, not the open tab's diagnostics); the rest after ``IDLE_DELAY``."""
        pending = self._pending()
        if not pending or not self._started:
            return [], None
        age = time.monotonic() - self._target_since
        awaited = {p for p, n in self._awaited.items() if n > 0}
        watched = set().union(*self._watched.values()) if self._watched else set()
        tiers = ((0.0, {"fit", "first_stage"} | awaited), (SETTLE_DELAY, watched), (IDLE_DELAY, set(self._panels)))
        allowed: set[str] = set()
        later = None
        for delay, panels in tiers:
            if age >= delay:
                allowed |= panels
            elif panels & pending - allowed:
                later = delay - age if later is None else min(later, delay - age)
        return panel_order(self._wanted(), pending & allowed), later

    def _loop(self) -> None:
        while True:
            with self._lock:
                while True:
                    if self.closed:
                        return
                    todo, idle_in = self._todo()
                    if todo:
                        break
                    self._changed.wait(idle_in)
                target = self._target
            try:
                self._work(target, todo)
            except Exception:       # never into the kernel: the panels show their own errors
                log.exception("seamline: the background computation of board %r failed", self.name)
                time.sleep(0.05)
            self._after_work()

    def _design_for(self, target: Inputs) -> Design:
        key = target.graph.key("design", target.values)
        with self._lock:
            if self._design is not None and self._design_key == key:
                return self._design
        if is_partitioned(target.data):
            design = self._read_partitions(target)
        else:
            design = Design(target.data, **target.design_kwargs())
        with self._lock:
            self._design, self._design_key = design, key
        return design

    def _read_partitions(self, target: Inputs) -> Design:
        """Build the Design of a dask DataFrame or Parquet input, reporting "done of total"
        partitions to the header (``reading``) and the progress bar while they are read."""
        last = [0.0]

        def report(done: int, total: int) -> None:
            with self._lock:
                self._reading = (int(done), int(total))
            now = time.monotonic()
            if done >= total or now - last[0] >= READING_NOTE_EVERY:    # a header per partition is too many
                last[0] = now
                self._notify({"status"})
                self._progress(done, total, "partitions read")

        with self._lock:
            self._reading = (0, 0)
        self._notify({"status"})
        try:
            with reading_progress(report):
                return Design(target.data, **target.design_kwargs())
        finally:
            with self._lock:
                self._reading = None
            self._notify({"status"})

    def _work(self, target: Inputs, todo: list[str]) -> None:
        if target.error is not None:
            self._publish_all(target, target.error)
            return
        try:
            design = self._design_for(target)
        except Exception as exc:
            self._publish_all(target, _message(exc, self._spec_variables))
            return

        def still_wanted() -> bool:
            return self._target.data_version == target.data_version

        comp = Computation(design, target.graph, target.values, target.spec, target.options, target.selected,
                           self._cache, lambda exc: _message(exc, self._spec_variables), store=still_wanted)
        total = sum(1 for p in todo if not comp.is_cached(p))
        done = 0
        for panel in todo:
            with self._lock:
                if self._target is not target or self.closed:
                    return                      # superseded: the loop takes the newest inputs
                if self._current(panel):
                    continue
            cached = comp.is_cached(panel)
            if not cached:
                self._progress(done, total, LABELS[panel])
            try:
                # a newer change or a closed board stops a long computation between its blocks of work
                with stop_when(lambda: self._target is not target or self.closed):
                    value = comp.panel(panel)
            except Interrupted:
                return                          # nothing stored; the loop takes the newest inputs
            done += 0 if cached else 1
            self._publish(target, {panel: value})
        if total:
            self._progress(total, total, "done")

    def _publish(self, target: Inputs, values: Mapping[str, Any]) -> None:
        changed: set[str] = set()
        with self._lock:
            if self._target is not target:
                return                          # inputs moved on: the result is discarded
            for panel, value in values.items():
                old_result, old_error = self._results.get(panel), self._errors.get(panel)
                was_current = self._current(panel)
                if isinstance(value, Failure):
                    self._results[panel] = None
                    self._errors[panel] = value.message
                else:
                    self._results[panel] = value
                    self._errors.pop(panel, None)
                self._keys[panel] = target.keys[panel]
                # also when only its pending mark goes: the same object again (a cached node) must
                # still take the "updating" note and the cleared charts off the panels showing it
                if (self._results[panel] is not old_result or self._errors.get(panel) != old_error
                        or not was_current):
                    changed.add(panel)
            self.updated_at = _dt.datetime.now().astimezone()
            self._fallback_dirty = True
            self._notifying += 1          # wait() returns only once subscribers have heard of it
        try:
            self._notify(changed | {"status"})
        finally:
            with self._lock:
                self._notifying -= 1
                self._changed.notify_all()

    def _publish_all(self, target: Inputs, message: str) -> None:
        with self._lock:
            if self._target is target:
                self._design, self._design_key = None, None
        self._publish(target, {p: Failure(message) for p in self._panels})

    def _after_work(self) -> None:
        """Once every panel is current for the newest inputs: refresh a displayed static copy
        (live front end only; headless runs do it after each cell, on the main thread)."""
        with self._lock:
            settled = not self._pending() and self._settled_generation != self._target.generation
            if settled:
                self._settled_generation = self._target.generation
        if settled and self._handles and live_front_end():
            self._update_displays()



def _message(exc: BaseException, spec_variables: Mapping[str, str]) -> str:
    """The message shown in a panel: our errors as they are; others with their type, since they
    point at a bug rather than at the input."""
    text = str(exc) if isinstance(exc, SeamlineError) else f"{type(exc).__name__}: {exc}"
    if isinstance(exc, SeamlineError) and text.startswith("`"):
        key = text[1:].split("`", 1)[0]
        if key in spec_variables:
            text += f" (`{key}` comes from the notebook variable `{spec_variables[key]}`.)"
    return text
