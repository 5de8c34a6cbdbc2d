"""The shared Monte Carlo draws' treated sums (core/randomization.py ``prefix_treated_sums``).

Reference: a direct computation, window by window: each window's assignments drawn on their own
(``prefix_assignments``: the n_treated smallest keys of its prefix, selected in float64 when
rounding ties), then the sums over the treated of each assignment by a plain product (numpy, to
rounding) and by einsum over the same mask (bit for bit: the block-wise pass must give the very
same numbers, so a seed's results do not depend on how the work is blocked).
"""
from __future__ import annotations

import numpy as np
import pytest

from seamline.core import randomization as r


def direct_sums(n, n_treated, cols, permutations, seed):
    assign = r.prefix_assignments(n, n_treated, permutations, seed)
    # each draw treats the n_treated units of the prefix with the smallest keys (a full sort here)
    keys = r.prefix_keys(seed, slice(0, 64), n)
    smallest = np.argsort(keys, axis=1)[:, :n_treated]
    want = np.zeros_like(keys, dtype=bool)
    np.put_along_axis(want, smallest, True, axis=1)
    np.testing.assert_array_equal(assign[:64], want)
    return assign, np.einsum("rn,kn->rk", assign, np.ascontiguousarray(cols.T))


def columns(n, rng):
    return np.column_stack([
        np.round(rng.normal(50, 10, n), 2),        # a measured covariate
        rng.integers(15, 19, n).astype(float),     # whole numbers (an age)
        rng.normal(size=n),                        # an outcome
        (rng.random(n) < 0.5).astype(float),       # the treatment indicator (0/1)
    ])


@pytest.mark.parametrize("permutations", [999, 2_500])
def test_block_wise_sums_equal_the_direct_computation_bit_for_bit(permutations, monkeypatch):
    rng = np.random.default_rng(4)
    cols = columns(1_300, rng)
    # windows in no particular order (the pass takes them smallest first), one of them tiny
    windows = [(900, 430, cols[:900]), (40, 25, cols[:40]), (1_300, 610, cols), (301, 150, cols[:301])]
    monkeypatch.setattr(r, "KEY_MEMORY", 64 * 16 * 1_300 * 3)      # blocks of 192 draws: many steps
    assert len(r._draw_steps(permutations, 1_300)) > 5
    got = r.prefix_treated_sums(windows, permutations, seed=11)
    for (n, n_treated, c), sums in zip(windows, got):
        assign, want = direct_sums(n, n_treated, c, permutations, 11)
        np.testing.assert_array_equal(sums, want)
        np.testing.assert_allclose(sums, assign.astype(float) @ c, rtol=1e-12, atol=1e-9)
    # a window alone gets the same draws as in the sequence
    alone = r.prefix_treated_sums([windows[0]], permutations, seed=11)[0]
    np.testing.assert_array_equal(alone, got[0])


def test_keys_filled_in_place_are_the_prefix_keys():
    draws = slice(128, 128 + 150)         # two whole blocks of 64 draws and part of a third
    blocks = 3
    out = np.empty((blocks, 150, r.KEY_BLOCK))
    blocked = r._blocked_keys(5, draws, blocks, out)
    plain = r.prefix_keys(5, draws, blocks * r.KEY_BLOCK)
    np.testing.assert_array_equal(blocked.transpose(1, 0, 2).reshape(150, -1), plain)


def test_a_float32_tie_is_resolved_on_the_exact_keys():
    # 0.5 and 0.5 + 1e-12 round to the same float32: the float32 threshold cannot tell them apart
    keys = np.array([[0.5 + 1e-12, 0.9, 0.5, 0.1],
                     [0.3, 0.2, 0.8, 0.7]])
    treated = r._treated_by_keys(keys, 2)
    np.testing.assert_array_equal(treated, [[False, False, True, True], [True, True, False, False]])
    # with the keys of tied rows given by a function (as the block-wise pass does)
    rounded = keys.astype(np.float32)
    treated = r._treated_by_keys(lambda rows: keys[rows], 2, rounded, rounded.copy())
    np.testing.assert_array_equal(treated, [[False, False, True, True], [True, True, False, False]])


def test_a_float32_tie_inside_the_block_wise_pass(monkeypatch):
    # the first draw's keys all round to the float32 0.5 (0.5 + i 1e-12 for unit i): every window's
    # threshold is tied there, so that row is selected on its float64 keys: its first n_treated units
    rng = np.random.default_rng(8)
    cols = columns(700, rng)
    windows = [(300, 140, cols[:300]), (700, 330, cols)]
    plain = r.prefix_treated_sums(windows, 300, seed=2)
    original = r._blocked_keys

    def tied_first_draw(seed, draws, blocks, out):
        keys = original(seed, draws, blocks, out)
        if draws.start == 0:
            keys[:, 0, :] = 0.5 + 1e-12 * np.arange(blocks * r.KEY_BLOCK).reshape(blocks, r.KEY_BLOCK)
        return keys
    monkeypatch.setattr(r, "_blocked_keys", tied_first_draw)
    got = r.prefix_treated_sums(windows, 300, seed=2)
    for (n, n_treated, c), sums, before in zip(windows, got, plain):
        first = np.zeros((1, n), dtype=bool)
        first[0, :n_treated] = True
        np.testing.assert_array_equal(sums[0], np.einsum("rn,kn->rk", first, np.ascontiguousarray(c.T))[0])
        np.testing.assert_array_equal(sums[1:], before[1:])
