"""The identity memo behind the live view's chart specs and panel tables (notebook/identity_memo.py).

References: first principles (identity of Python objects, a threading.Barrier to force the race).
"""
from __future__ import annotations

import threading

from seamline.notebook.identity_memo import IdentityMemo


def test_values_are_kept_by_the_identity_of_their_results_and_the_oldest_go_first():
    memo = IdentityMemo(2)
    a, b, c = object(), object(), object()
    first = memo.get("chart", (a,), lambda: ["for a"])
    assert memo.get("chart", (a,), lambda: ["again"]) is first        # the same results: kept
    assert memo.get("table", (a,), lambda: ["other tag"]) is not first
    memo.get("chart", (b,), lambda: ["for b"])
    memo.get("chart", (c,), lambda: ["for c"])                          # size 2: the oldest went
    assert len(memo) == 2 and memo.get("chart", (a,), lambda: ["made again"]) == ["made again"]


def test_two_threads_making_one_value_at_once_get_the_same_object():
    # A live view's painter and a reader (a test, a benchmark, another subscriber) may ask for the
    # same spec while neither is kept yet: both must end with the object that is kept (shown).
    memo = IdentityMemo(8)
    results = (object(), object())
    barrier = threading.Barrier(2)
    got = []

    def make():
        barrier.wait(timeout=5)          # both threads are inside make() before either stores
        return {"spec": threading.get_ident()}

    threads = [threading.Thread(target=lambda: got.append(memo.get("estimate", results, make))) for _ in range(2)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=10)
    assert len(got) == 2 and got[0] is got[1] is memo.get("estimate", results, lambda: None)
