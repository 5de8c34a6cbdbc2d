"""Nearest-neighbour residuals (Abadie & Imbens 2006): hand-derived check values and the definition itself."""
import numpy as np
import pytest

from seamline.core.neighbors import neighbor_residuals


# Hand-found neighbour sets (indices) of X = (1, 2, 2, 4, 6); ties at the J-th distance are kept:
# J = 1: row 0 (x=1) -> both x=2 rows; rows 1, 2 -> each other; row 3 (x=4) -> x=2, x=2, x=6 (all at 2);
# row 4 (x=6) -> x=4. J = 2: row 1 -> {2, 0}, row 2 -> {1, 0}, row 4 -> {3, 1, 2} (x=2 twice at 4). J = 3:
# each row has exactly three neighbours, no further ties.
NEIGHBOUR_SETS = {
    1: [[1, 2], [2], [1], [1, 2, 4], [3]],
    2: [[1, 2], [2, 0], [1, 0], [1, 2, 4], [3, 1, 2]],
    3: [[1, 2, 3], [2, 0, 3], [1, 0, 3], [1, 2, 4], [3, 1, 2]],
}


@pytest.mark.parametrize("neighbors", [1, 2, 3])
def test_hand_check_values(neighbors):
    """sigma_i^2 = M/(M+1) (Y_i - mean of the neighbours)^2 (Abadie & Imbens 2006), from the sets above."""
    x = np.array([1, 2, 2, 4, 6.0])
    y = np.array([1, 2, 4, 3, 5.0])
    sets = NEIGHBOUR_SETS[neighbors]
    want = [len(s) / (len(s) + 1) * (y[i] - y[s].mean()) ** 2 for i, s in enumerate(sets)]
    resid, m = neighbor_residuals(x, y[:, None], neighbors)
    assert resid[:, 0] ** 2 == pytest.approx(want, rel=1e-12)
    assert list(m) == [len(s) for s in sets]


def brute_force(x, v, neighbors, tol):
    """The definition (Abadie & Imbens 2006) computed literally (all ties at the J-th distance kept)."""
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
