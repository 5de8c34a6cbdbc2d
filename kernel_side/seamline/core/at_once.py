"""Two independent calls at the same time, for work numpy does with the interpreter lock released.

Sorting a long array or building a side's window tables is numpy work on one side's arrays alone;
the two sides of a cutoff are independent, so on two CPUs they can run at once. Nothing here
changes a number: each call does exactly what it does alone. An exception in either call is raised
(the other thread's too), so a half-done result is never used.
"""
from __future__ import annotations

import os
import threading
from typing import Callable


def at_once(first: Callable[[], object], second: Callable[[], object], *, worth_it: bool = True) -> None:
    """Call ``first`` here and ``second`` in another thread, and wait for both; one after the other
    when not ``worth_it`` (short work: a thread costs more than it saves) or on one CPU."""
    if not worth_it or (os.cpu_count() or 1) < 2:
        first()
        second()
        return
    failed: list[BaseException] = []

    def run_second():
        try:
            second()
        except BaseException as exc:          # raised below, in the caller's thread
            failed.append(exc)
    other = threading.Thread(target=run_second, name="seamline-at-once")
    other.start()
    try:
        first()
    finally:
        other.join()
    if failed:
        raise failed[0]
