"""The shared Legendre basis (core/legendre.py) against numpy's own Legendre Vandermonde matrix
(numpy.polynomial.legendre.legvander, a general-purpose reference)."""
import numpy as np
import pytest

from seamline.core.legendre import legendre_rows


@pytest.mark.parametrize("deg", range(0, 9))
def test_rows_match_numpy_legvander(deg):
    t = np.linspace(-1.0, 1.0, 1001)
    want = np.polynomial.legendre.legvander(t, deg).T
    np.testing.assert_allclose(legendre_rows(t, deg), want, rtol=0, atol=1e-13)


def test_reused_buffers_give_the_same_rows():
    rng = np.random.default_rng(4)
    t = rng.uniform(-1.0, 1.0, 300)
    out, scratch = np.full((5, 500), np.nan), np.full(500, np.nan)   # larger buffers, views of them filled
    got = legendre_rows(t, 4, out=out[:, :300], scratch=scratch[:300])
    assert got.base is out
    np.testing.assert_array_equal(got, legendre_rows(t, 4))
    assert np.isnan(out[:, 300:]).all()          # nothing written beyond the view
