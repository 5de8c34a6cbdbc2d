"""Change detection: column fingerprints, data identity and the dependency graph (table-driven).

References: fingerprints are checked against Python's own ``zlib`` / ``hashlib`` over the column
bytes (standard library); CRC-32 detecting every error burst of at most 32 bits is a textbook
property of cyclic redundancy checks (common practice); "which result goes stale for which change" follows from what each number
depends on (the definitions of the estimators: the density test reads the score only, balance reads the covariates,
the confidence level only rescales an interval) -- common practice of spreadsheet-style recompute.
"""
from __future__ import annotations

import hashlib
import tracemalloc
import zlib

import numpy as np
import pandas as pd
import pytest

from seamline.errors import InvalidOptionError
from seamline.notebook.reactive import (DataIdentity, DependencyGraph, column_fingerprint,
                                        fingerprint_algorithm, fingerprints,
                                        use_fingerprint_algorithm)


# ---- fingerprints ------------------------------------------------------------------------------
@pytest.fixture
def frame() -> pd.DataFrame:
    rng = np.random.default_rng(3)
    n = 500
    return pd.DataFrame({
        "x": rng.normal(size=n),
        "y": rng.normal(size=n),
        "k": rng.integers(0, 9, size=n),
        "flag": rng.random(n) < 0.5,
        "name": np.array(["a", "b", "c"])[rng.integers(0, 3, size=n)],
        "cat": pd.Categorical(np.array(["u", "v"])[rng.integers(0, 2, size=n)]),
        "when": pd.date_range("2020-01-01", periods=n, freq="D"),
        "nullable": pd.array(rng.integers(0, 5, size=n), dtype="Int64"),
    })


CHECKS = {  # Reference chunk checksums, straight from the standard library (zlib, hashlib).
    "crc32": lambda b: zlib.crc32(b).to_bytes(4, "little"),
    "blake2b": lambda b: hashlib.blake2b(b, digest_size=16).digest(),
    "sha256": lambda b: hashlib.sha256(b).digest(),
}


def _reference_fingerprint(column: pd.Series, name: str) -> bytes:
    # The documented two-level scheme, computed here without seamline's code: checksums of the raw
    # bytes in 1 MiB chunks, folded with the name and the header by blake2b (16 bytes).
    raw = column.to_numpy().tobytes()
    chunks = [raw[i:i + (1 << 20)] for i in range(0, len(raw), 1 << 20)]
    head = f"{column.dtype}|{len(column)}|".encode()
    return hashlib.blake2b(b"|".join([name.encode(), head, *(CHECKS[name](c) for c in chunks)]),
                           digest_size=16).digest()


@pytest.mark.parametrize("algorithm", ["crc32", "blake2b", "sha256"])
@pytest.mark.parametrize("n", [500, 3_000_000])
def test_numeric_fingerprint_is_the_documented_checksum_of_the_column_bytes(n, algorithm):
    col = pd.Series(np.random.default_rng(n).normal(size=n))
    assert fingerprint_algorithm() == "crc32"
    try:
        use_fingerprint_algorithm(algorithm)
        assert column_fingerprint(col) == _reference_fingerprint(col, algorithm)
        assert fingerprints(col.to_frame("x"), ["x"])["x"] == _reference_fingerprint(col, algorithm)
    finally:
        use_fingerprint_algorithm("crc32")


def test_an_unknown_algorithm_is_refused():
    with pytest.raises(InvalidOptionError, match='`name` must be one of "crc32", "blake2b", "sha256"'):
        use_fingerprint_algorithm("md5")


def test_every_single_value_change_of_a_large_column_is_seen():
    # CRC-32 detects every change confined to 32 consecutive bits; a float64 edit can span 64 bits,
    # so check a spread of realistic edits (tiny, sign, large, NaN) at chunk edges and inside.
    values = np.random.default_rng(9).normal(size=400_000)
    base = column_fingerprint(pd.Series(values))
    for position in (0, 131_071, 131_072, 262_143, 399_999):
        for new in (values[position] + 1e-12, -values[position], values[position] * 1e6, np.nan, 0.0):
            edited = values.copy()
            edited[position] = new
            assert column_fingerprint(pd.Series(edited)) != base, (position, new)


@pytest.mark.parametrize("column", ["x", "k", "flag", "name", "cat", "when", "nullable"])
def test_fingerprint_sees_one_changed_value_and_nothing_else(frame, column):
    before = column_fingerprint(frame[column])
    copy = frame.copy()
    assert column_fingerprint(copy[column]) == before          # equal content, new object: same print
    value = next(v for v in copy[column] if v != copy[column].iloc[0])
    copy.loc[0, column] = value
    assert copy[column].iloc[0] == value
    assert column_fingerprint(copy[column]) != before
    others = [c for c in frame.columns if c != column]
    assert fingerprints(copy, others) == fingerprints(frame, others)


def test_fingerprint_separates_dtype_and_length():
    ints = pd.Series([1, 2, 3])
    assert column_fingerprint(ints) != column_fingerprint(ints.astype(float))
    assert column_fingerprint(ints) != column_fingerprint(ints.iloc[:2])
    assert column_fingerprint(pd.Series([1.0, np.nan])) != column_fingerprint(pd.Series([1.0, 2.0]))


def test_fingerprint_of_a_float_column_makes_no_copy():
    big = pd.DataFrame({"x": np.random.default_rng(0).normal(size=1_000_000)})
    column = big["x"]
    tracemalloc.start()
    column_fingerprint(column)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    assert peak < 100_000, f"fingerprinting an 8 MB column allocated {peak} bytes"


def test_fingerprints_read_only_the_named_columns_and_flag_missing_ones(frame):
    prints = fingerprints(frame, ["x", "x", "y", "not_there"])
    assert list(prints) == ["x", "y", "not_there"]
    repaired = frame.assign(not_there=1.0)
    assert fingerprints(repaired, ["not_there"])["not_there"] != prints["not_there"]


def test_data_identity_follows_the_object_not_its_content(frame):
    identity = DataIdentity(frame)
    assert identity.same(frame)
    assert not identity.same(frame.copy())
    frame.loc[0, "x"] = 99.0                                   # in place: same object
    assert identity.same(frame)


# ---- the graph ------------------------------------------------------------------------------------
def test_graph_basics_and_cycle_error():
    g = DependencyGraph({"b": ["a"], "c": ["b", "s"], "d": ["a"]})
    assert g.sources == {"a", "s"}
    assert g.stale_after({"a"}) == {"b", "c", "d"}
    assert g.stale_after({"s"}) == {"c"}
    assert g.stale_after({"unknown"}) == set()
    assert g.order().index("a") < g.order().index("b") < g.order().index("c")
    assert g.key("c", {"a": 1, "s": 2, "b": 99}) == ("c", ("a", 1), ("s", 2))
    with pytest.raises(ValueError, match="acyclic graph; got the cycle"):
        DependencyGraph({"a": ["b"], "b": ["a"]})


def test_shared_fingerprints_hash_a_column_once_per_pass(frame, monkeypatch):
    from seamline.notebook import reactive
    calls = []
    real = reactive._fingerprint_all
    monkeypatch.setattr(reactive, "_fingerprint_all", lambda parts: calls.append(len(parts)) or real(parts))
    with reactive.shared_fingerprints():
        first = fingerprints(frame, ["x", "y"])
        again = fingerprints(frame, ["y", "k"])            # y is reused, k is new
    assert calls == [2, 1] and again["y"] == first["y"]
    fingerprints(frame, ["x"])                             # outside a pass nothing is remembered
    assert calls == [2, 1, 1]
