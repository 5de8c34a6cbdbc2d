"""Cooperative interruption (core/interrupt.py): checkpoints stop only inside a stop_when block.

Reference: the contract written in the module (common practice for cooperative cancellation: a
flag polled between blocks of work); the randomization result is checked against the same call
made without any stop_when block.
"""
from __future__ import annotations

import threading

import numpy as np
import pytest

from seamline.core import randomization
from seamline.core.interrupt import Interrupted, checkpoint, stop_when


def test_a_checkpoint_outside_a_block_does_nothing():
    checkpoint()


def test_a_checkpoint_raises_once_the_condition_holds_and_the_block_restores_the_outer_one():
    stop = threading.Event()
    with stop_when(stop.is_set):
        checkpoint()
        with stop_when(lambda: True):
            with pytest.raises(Interrupted):
                checkpoint()
        checkpoint()                     # the outer condition again: not yet
        stop.set()
        with pytest.raises(Interrupted):
            checkpoint()
    checkpoint()


def test_interrupted_passes_handlers_of_ordinary_errors():
    with pytest.raises(Interrupted):
        with stop_when(lambda: True):
            try:
                checkpoint()
            except Exception:            # what a panel's error handler catches
                pytest.fail("Interrupted must not be an Exception")


def test_a_condition_on_another_thread_does_not_reach_this_one():
    seen = []

    def other():
        with stop_when(lambda: True):
            try:
                checkpoint()
            except Interrupted:
                seen.append("stopped")

    t = threading.Thread(target=other)
    t.start()
    t.join()
    assert seen == ["stopped"]
    checkpoint()                         # this thread has no block


def test_randomization_draws_stop_inside_a_block_and_are_unchanged_outside():
    rng = np.random.default_rng(3)
    cols = rng.normal(size=(400, 2))
    windows = [(200, 90, cols[:200]), (400, 180, cols)]
    want = randomization.prefix_treated_sums(windows, 2000, seed=7)
    with pytest.raises(Interrupted):
        with stop_when(lambda: True):
            randomization.prefix_treated_sums(windows, 2000, seed=7)
    got = randomization.prefix_treated_sums(windows, 2000, seed=7)
    for a, b in zip(want, got):
        np.testing.assert_array_equal(a, b)
