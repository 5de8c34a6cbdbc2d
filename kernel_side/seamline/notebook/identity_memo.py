"""Values kept by the identity of the results they are made from (chart specs, panel tables).

Board results are never changed once made, so a value built from some of them stays right for as
long as those very objects are the board's results: a live view re-renders a panel each time one of
its results arrives, and what the others feed it is read from here. Entries hold their results (so
an id is never reused while its entry lives); the oldest go first.
"""
from __future__ import annotations

import threading
from collections import OrderedDict
from collections.abc import Callable
from typing import Any

__all__ = ["IdentityMemo"]


class IdentityMemo:
    """At most ``size`` values, each under a tag and the identities of the results it reads."""

    def __init__(self, size: int):
        self.size = size
        self._entries: OrderedDict = OrderedDict()
        self._lock = threading.Lock()

    def get(self, tag: Any, results: tuple, make: Callable[[], Any]) -> Any:
        """The value ``make()`` gave for these very ``results``, or ``make()`` now (an exception
        it raises is not kept)."""
        key = (tag, *(id(r) for r in results))
        with self._lock:
            hit = self._entries.get(key)
            if hit is not None and all(a is b for a, b in zip(hit[0], results)):
                self._entries.move_to_end(key)
                return hit[1]
        value = make()
        with self._lock:
            hit = self._entries.get(key)
            if hit is not None and all(a is b for a, b in zip(hit[0], results)):
                # another thread made it meanwhile (a view's painter and a reader): keep the first,
                # so every caller gets the very object that is shown
                self._entries.move_to_end(key)
                return hit[1]
            self._entries[key] = (results, value)
            while len(self._entries) > self.size:
                self._entries.popitem(last=False)
        return value

    def __len__(self) -> int:
        return len(self._entries)
