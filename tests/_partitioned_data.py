"""Test data and checks shared by the partitioned-input tests (tests/test_dask_inputs.py,
tests/test_dask_streaming.py); their fixtures are in tests/conftest.py.

Reference: the in-memory pandas path on the same rows (``pandas.concat`` of the pieces written to
Parquet). The data are generated here (seeded).
"""
from __future__ import annotations

import numpy as np
import pandas as pd

REL = 1e-8          # the agreement the partitioned route promises (issue target)
KWARGS = dict(score="x", cutoff=0.0, outcome=["y", "z"], covariates=["c"], treated="above")
SIZES = (1700, 260, 900, 2100)       # uneven partitions; the second holds no rows near the cutoff


def pieces(seed=12):
    """Test data generated here (seeded): missing values in the outcome, the score and a covariate."""
    rng = np.random.default_rng(seed)
    out = []
    for k, size in enumerate(SIZES):
        x = rng.uniform(-0.99, -0.8, size) if k == 1 else rng.uniform(-1, 1, size)
        c = rng.normal(size=size)
        y = 1.0 + 0.8 * x - 0.5 * x ** 2 + 0.25 * (x >= 0) + 0.2 * c + rng.normal(0, 0.3, size)
        z = rng.poisson(3, size).astype(np.int64)           # an integer outcome, converted like pandas does
        frame = pd.DataFrame({"x": x, "y": y, "z": z, "c": c, "note": ["text"] * size})
        frame.loc[frame.index[::89], "y"] = np.nan
        frame.loc[frame.index[5::211], "x"] = np.nan
        frame.loc[frame.index[7::301], "c"] = np.nan
        out.append(frame)
    return out


def results(design):
    """Every result the issue names, as tables (plus the fits' own fields)."""
    fit = design.fit()
    manual = design.fit(bandwidth=(0.3, 0.4), pilot_bandwidth=0.6, variance="hc2")
    tables = {
        "fit": fit.table(), "manual": manual.table(),
        "fit-ik": design.fit(bandwidth="ik").table(),
        "fit-adjusted": design.fit(adjust=True, variance="hc1").table(),
        "integer outcome": design.fit("z", bandwidth="coverage").table(),
        "bandwidths": design.bandwidths(),
        "density local-cdf": design.density_test().table(),
        "density binned": design.density_test("binned").table(),
        "bins": design.bins().table(),
        "balance": design.balance().table(),
        "sensitivity": design.sensitivity().table(),
        "placebo": design.placebo_cutoffs().table(),
        "donut": design.donut().table(),
    }
    counts = {"n_used": fit.n_used, "n_total": fit.n_total, "n_dropped": fit.n_dropped,
              "manual n_used": manual.n_used, "manual n_dropped": manual.n_dropped}
    return tables, counts


def assert_same(got, want):
    got_tables, got_counts = got
    want_tables, want_counts = want
    assert got_counts == want_counts
    for name, table in want_tables.items():
        other = got_tables[name]
        assert list(other.columns) == list(table.columns), name
        for column in table.columns:
            a, b = other[column].to_numpy(), table[column].to_numpy()
            if pd.api.types.is_integer_dtype(table[column]):
                np.testing.assert_array_equal(a, b, err_msg=f"{name}: {column}")      # counts identical
            elif pd.api.types.is_float_dtype(table[column]):
                np.testing.assert_allclose(a, b, rtol=REL, atol=0, equal_nan=True, err_msg=f"{name}: {column}")
            else:
                assert [str(v) for v in a] == [str(v) for v in b], f"{name}: {column}"
