"""Nearest-neighbour residuals: METHODS 2.2 hand-derived check values and the definition itself."""
import numpy as np
import pytest

from seamline.core.neighbors import neighbor_residuals


@pytest.mark.parametrize("neighbors, sigma2, sets", [
    # METHODS 2.2 (derived by hand + num-checked): X = (1, 2, 2, 4, 6), Y = (1, 2, 4, 3, 5)
    (1, [2.666667, 2, 2, 0.333333, 2], [2, 1, 1, 3, 1]),
    (2, [2.666667, 0.166667, 4.166667, 0.333333, 3], [2, 2, 2, 3, 3]),
    (3, [3, 0.333333, 3, 0.333333, 3], [3, 3, 3, 3, 3]),
])
def test_methods_check_values(neighbors, sigma2, sets):
    x = np.array([1, 2, 2, 4, 6.0])
    y = np.array([1, 2, 4, 3, 5.0])
    resid, m = neighbor_residuals(x, y[:, None], neighbors)
    assert resid[:, 0] ** 2 == pytest.approx(sigma2, abs=1e-6)
    assert list(m) == sets


def brute_force(x, v, neighbors, tol):
    """The definition of METHODS 2.2 computed literally (all ties at the J-th distance kept)."""
    out, counts = np.empty_like(v), np.empty(len(x), dtype=int)
    for i in range(len(x)):
        dist = np.abs(x - x[i])
        dist[i] = np.inf
        radius = np.sort(dist)[min(neighbors, len(x) - 1) - 1]
        near = np.flatnonzero(dist <= radius + tol)
        counts[i] = len(near)
        out[i] = np.sqrt(len(near) / (len(near) + 1)) * (v[i] - v[near].mean(axis=0))
    return out, counts


@pytest.mark.parametrize("seed", range(12))
def test_matches_definition_with_and_without_ties(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(5, 80))
    x = rng.normal(size=n)
    if seed % 2:
        x = np.round(x, 1)  # mass points
    x = np.sort(x)
    v = rng.normal(size=(n, 2)) + 1e6 * (seed == 3)  # one case with a large offset
    neighbors = int(rng.integers(1, 5))
    got, m = neighbor_residuals(x, v, neighbors)
    tol = 1e-12 * (x[-1] - x[0])
    want, m_want = brute_force(x, v, neighbors, tol)
    assert np.array_equal(m, m_want)
    np.testing.assert_allclose(got, want, rtol=1e-9, atol=1e-9)


def test_chunked_path_equals_whole(monkeypatch):
    import seamline.core.neighbors as nb
    rng = np.random.default_rng(0)
    x = np.sort(rng.normal(size=5000))
    v = rng.normal(size=(5000, 1))
    whole = nb.neighbor_residuals(x, v, 3)
    monkeypatch.setattr(nb, "CHUNK", 97)
    chunked = nb.neighbor_residuals(x, v, 3)
    assert np.array_equal(whole[0], chunked[0]) and np.array_equal(whole[1], chunked[1])


@pytest.mark.parametrize("values", ["mass points", "near ties", "mixed"])
def test_chunked_groups_of_ties_equal_whole(monkeypatch, values):
    # Chunks of tied groups with a J-group halo must give exactly the one-chunk result.
    import seamline.core.neighbors as nb
    rng = np.random.default_rng(3)
    if values == "mass points":
        x = np.sort(rng.integers(0, 40, 3000).astype(float))
    elif values == "near ties":
        x = np.sort(np.round(rng.uniform(0, 1, 3000), 3) + rng.uniform(0, 1e-14, 3000))
    else:
        x = np.sort(np.r_[rng.uniform(0, 1, 2000), np.full(700, 0.25), np.full(300, 0.75)])
    v = rng.normal(size=(x.size, 2)) + 1e3
    whole = nb.neighbor_residuals(x, v, 3)
    for size in (1, 2, 5, 97):
        monkeypatch.setattr(nb, "CHUNK", size)
        chunked = nb.neighbor_residuals(x, v, 3)
        assert np.array_equal(whole[0], chunked[0], equal_nan=True) and np.array_equal(whole[1], chunked[1])
