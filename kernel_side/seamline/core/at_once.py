"""Two independent calls at the same time, for work numpy does with the interpreter lock released.

Sorting a long array is numpy work with the lock released, on one side's arrays alone; the two
sides of a cutoff are independent, so on two CPUs they can sort at once (the streamed sorted
scores). Work that runs Python between small numpy calls gains nothing (the density test's block
tables were tried: DEVELOPERS.md). Nothing here changes a number: each call does exactly what it
does alone. An exception in either call is raised
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
