"""Cooperative interruption of long computations.

A board's worker thread computes one result at a time; a newer change must not wait behind a long
one (local randomization draws ten thousand assignments per window). The numerical core calls
:func:`checkpoint` between blocks of work; inside a :func:`stop_when` block on the same thread it
raises :class:`Interrupted` once the block's condition holds, and elsewhere it does nothing, so
direct engine calls never stop. Nothing is stored by an interrupted computation: results and caches
are written only when a computation completes.
"""
from __future__ import annotations

import threading
from collections.abc import Callable, Iterator
from contextlib import contextmanager

__all__ = ["Interrupted", "checkpoint", "stop_when"]


class Interrupted(BaseException):
    """The result being computed is no longer wanted (newer inputs arrived).

    A ``BaseException``, like ``KeyboardInterrupt``, so the handlers that turn an engine error into
    a panel's message let it pass to the worker, which drops the computation."""


_local = threading.local()


@contextmanager
def stop_when(should_stop: Callable[[], bool]) -> Iterator[None]:
    """Within this block, on this thread, :func:`checkpoint` raises once ``should_stop()`` is true."""
    previous = getattr(_local, "should_stop", None)
    _local.should_stop = should_stop
    try:
        yield
    finally:
        _local.should_stop = previous


def checkpoint() -> None:
    """Raise :class:`Interrupted` if the enclosing :func:`stop_when` condition holds; else nothing."""
    should_stop = getattr(_local, "should_stop", None)
    if should_stop is not None and should_stop():
        raise Interrupted()
