"""Change detection for live boards: column fingerprints, data identity and the dependency graph.

A board depends on a few *sources*: the content of each column it uses, the names and numbers of
the design (score, cutoff, treated side, ...) and the fit options (bandwidth, kernel, level, ...).
``DependencyGraph`` holds which computed results read which sources (the board's own graph is laid
out in ``compute.compute_graph``); a change to some sources marks exactly their descendants stale,
and each result is cached under the values of the sources it reads, so a result whose inputs did
not change is never recomputed and switching an option back finds the earlier result in the cache.

Whether stale results rerun at once or wait (a paused board) is the board's policy; this module
only holds the topology and the fingerprints. Nothing here imports IPython or widgets.
"""
from __future__ import annotations

import hashlib
import os
import weakref
import zlib
from collections.abc import Callable, Hashable, Iterable, Mapping
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from typing import Any

import numpy as np
import pandas as pd

from ..errors import InvalidOptionError, shown
from ..partitioned import data_identity, is_partitioned

__all__ = [
    "DataIdentity",
    "DependencyGraph",
    "PANELS",
    "column_fingerprint",
    "column_node",
    "fingerprints",
    "fingerprint_algorithm",
    "shared_fingerprints",
    "use_fingerprint_algorithm",
]

#: The result panels of a board, in the order they are computed (the headline first).
PANELS: tuple[str, ...] = ("fit", "first_stage", "bins", "first_stage_bins", "bandwidths", "density",
                           "balance", "sensitivity", "placebo", "donut", "score_profile",
                           "by_cutoff", "subgroups", "power",     # designs_graph
                           "checks",
                           "bias_aware", "weak_iv", "local_randomization")   # compute_inference

def column_node(name: str) -> str:
    """Name of the graph source holding the content fingerprint of column ``name``."""
    return f"column:{name}"


# ---- fingerprints ----------------------------------------------------------------------------
# A column's fingerprint has two levels. Its bytes are cut into 1 MiB chunks and each chunk gets a
# checksum computed straight from memory (a memoryview: no copy; zlib and hashlib release the GIL,
# so the chunks of all used columns are checked on every core at once). Then blake2b folds the
# algorithm's name, the column's header (dtype, length, layout) and the chunk checksums into one
# 16-byte fingerprint.
#
# Chunk checksum: CRC-32 by default. A change confined to 32 consecutive bits (any single 32-bit
# value, any single flipped bit) is always detected; any other change of a chunk goes unnoticed
# with probability about 2**-32. That is the price of meeting the cost target: a full
# cryptographic digest (sha256 or blake2b) reads memory at 1-2 GB/s per core and costs 8-12 ms
# for two 1e6-row float columns, about a tenth of a default fit; CRC-32 costs about 2 ms. Call
# ``use_fingerprint_algorithm("sha256")`` (or "blake2b") for digests of cryptographic strength.
_CHUNK = 1 << 20
_CHECKS: dict[str, Callable[[Any], bytes]] = {
    "crc32": lambda data: zlib.crc32(data).to_bytes(4, "little"),
    "blake2b": lambda data: hashlib.blake2b(data, digest_size=16).digest(),
    "sha256": lambda data: hashlib.sha256(data).digest(),
}
_ALGORITHM = "crc32"
_POOL: ThreadPoolExecutor | None = None


def fingerprint_algorithm() -> str:
    """The chunk checksum fingerprints use in this process ("crc32", "blake2b" or "sha256")."""
    return _ALGORITHM


def use_fingerprint_algorithm(name: str) -> None:
    """Choose the chunk checksum for fingerprints made from now on (process-wide).

    Parameters
    ----------
    name : "crc32" (default, fastest), "blake2b" or "sha256" (cryptographic digests)

    Notes
    -----
    Fingerprints made with different algorithms never compare equal (the name is folded into
    each one), so after a switch every live board sees its columns as changed once and
    recomputes its results.
    """
    global _ALGORITHM
    if name not in _CHECKS:
        choices = ", ".join(f'"{k}"' for k in _CHECKS)
        raise InvalidOptionError(f"`name` must be one of {choices}; got {shown(name)}. Use \"crc32\" unless "
                                 "you need a cryptographic digest.")
    _ALGORITHM = name


def _pool() -> ThreadPoolExecutor | None:
    global _POOL
    workers = min(4, os.cpu_count() or 1)
    if workers < 2:
        return None
    if _POOL is None:
        _POOL = ThreadPoolExecutor(max_workers=workers, thread_name_prefix="seamline-fingerprint")
    return _POOL


def _numpy_bytes(values: np.ndarray) -> memoryview:
    if values.dtype.kind in "mM":          # datetimes have no buffer format; their int64 view does
        values = values.view(np.int64)
    if not values.flags.c_contiguous:      # a strided view: the only case that copies
        values = np.ascontiguousarray(values)
    return memoryview(values).cast("B")


def _arrow_bytes(chunked) -> tuple[bytes, list[memoryview]]:
    head, buffers = [], []
    for chunk in getattr(chunked, "chunks", [chunked]):
        head.append(f"{chunk.offset}:{len(chunk)}")
        buffers += [memoryview(b).cast("B") for b in chunk.buffers() if b is not None]
    return "|".join(head).encode(), buffers


def _column_bytes(column: Any) -> tuple[bytes, list[memoryview]]:
    """A header (dtype, length, layout) and the memory holding a column's values, without copying
    numeric, boolean, datetime, categorical-code or Arrow data."""
    array = column.array if isinstance(column, pd.Series) else column
    head = f"{getattr(column, 'dtype', type(column).__name__)}|{len(column)}|".encode()
    if isinstance(array, np.ndarray) and array.dtype != object:
        return head, [_numpy_bytes(array)]
    if isinstance(array, pd.arrays.NumpyExtensionArray) and array.dtype.numpy_dtype != object:
        return head, [_numpy_bytes(array.to_numpy())]       # a view of the backing ndarray
    if isinstance(array, pd.Categorical):
        cat_head, cat_buffers = _column_bytes(pd.Series(array.categories))
        return head + cat_head, [_numpy_bytes(array.codes), *cat_buffers]
    if hasattr(array, "chunks") and hasattr(array, "num_chunks"):  # a pyarrow ChunkedArray
        arrow_head, buffers = _arrow_bytes(array)
        return head + arrow_head, buffers
    if hasattr(array, "__arrow_array__"):
        try:
            arrow_head, buffers = _arrow_bytes(array.__arrow_array__())
            return head + arrow_head, buffers
        except (TypeError, ValueError, NotImplementedError):
            pass
    if isinstance(array, np.ndarray):      # object dtype: hash the values, not the pointers
        return head, [_numpy_bytes(pd.util.hash_array(array))]
    hashed = pd.util.hash_pandas_object(pd.Series(array), index=False).to_numpy()
    return head, [_numpy_bytes(hashed)]


def _fold(name: str, head: bytes, checks: list[bytes]) -> bytes:
    return hashlib.blake2b(b"|".join([name.encode(), head, *checks]), digest_size=16).digest()


def _fingerprint_all(parts: list[tuple[bytes, list[memoryview]]]) -> list[bytes]:
    name = _ALGORITHM
    check = _CHECKS[name]
    pieces = [(i, b[k:k + _CHUNK]) for i, (_, buffers) in enumerate(parts) for b in buffers
              for k in range(0, max(len(b), 1), _CHUNK)]
    pool = _pool() if len(pieces) > 1 else None
    checks = (pool.map(lambda piece: check(piece[1]), pieces) if pool is not None
              else (check(piece[1]) for piece in pieces))
    per_column: list[list[bytes]] = [[] for _ in parts]
    for (i, _), value in zip(pieces, checks):
        per_column[i].append(value)
    return [_fold(name, head, per_column[i]) for i, (head, _) in enumerate(parts)]


def column_fingerprint(column: Any) -> bytes:
    """A content fingerprint of one column (pandas Series, pyarrow array or 1-d numpy array).

    Numeric, boolean and datetime columns are hashed straight from their memory (``memoryview``
    of the numpy data, no copy); Arrow-backed columns (pandas' default strings) from their Arrow
    buffers; categorical columns from their codes and categories. Other extension types fall back
    to ``pandas.util.hash_pandas_object``. The dtype and length are part of the fingerprint, so
    ``1`` and ``1.0`` differ.

    Parameters
    ----------
    column : pandas.Series, pandas extension array, pyarrow array or numpy.ndarray

    Returns
    -------
    bytes
        Equal for equal content; any change of a value, the dtype or the length changes it.
    """
    return _fingerprint_all([_column_bytes(column)])[0]


def _column(data: Any, name: str):
    if isinstance(data, pd.DataFrame):
        column = data[name]
        if isinstance(column, pd.DataFrame):          # a duplicated name: let Design say so
            raise KeyError(name)
        return column
    if hasattr(data, "column") and hasattr(data, "schema"):    # a pyarrow Table
        return data.column(name)
    return data[name]


_SHARED: dict[tuple, bytes] | None = None


@contextmanager
def shared_fingerprints():
    """Within this block, a column read by several boards (same data object, same memory) is
    hashed once. Used for one after-cell pass over all boards; nothing is kept afterwards."""
    global _SHARED
    outer, _SHARED = _SHARED, {} if _SHARED is None else _SHARED
    try:
        yield
    finally:
        _SHARED = outer


def _address(parts: tuple[bytes, list[memoryview]]) -> tuple:
    head, buffers = parts
    return (head, *((np.frombuffer(b, dtype=np.uint8).ctypes.data if len(b) else 0, len(b)) for b in buffers))


def fingerprints(data: Any, columns: Iterable[str]) -> dict[str, bytes]:
    """Fingerprints of the named columns of ``data`` (only those; other columns are never read).

    The chunks of all the columns are hashed in parallel. A column that is missing (or
    duplicated) gets a fingerprint of the lookup failure, so a later validation reports it and a
    repaired column counts as a change.

    A partitioned input (a dask DataFrame or a Parquet path) is never read here: every column's
    fingerprint is the input's ``partitioned.data_identity`` -- dask's token of the collection, or
    a hash of the matched files' paths, sizes and modification times.
    """
    names = list(dict.fromkeys(columns))
    if is_partitioned(data):
        try:
            identity = data_identity(data).encode()
        except OSError as exc:        # a file removed between listing and stat: the Design will say so
            identity = f"unreadable|{type(exc).__name__}|{exc}".encode()
        return {name: identity for name in names}
    parts, done = {}, {}
    for name in names:
        try:
            parts[name] = _column_bytes(_column(data, name))
        except (KeyError, IndexError, TypeError, ValueError) as exc:
            done[name] = _fold(_ALGORITHM, f"missing|{type(exc).__name__}".encode(), [])
    keys = {}
    if _SHARED is not None:
        for name, part in parts.items():
            keys[name] = (_ALGORITHM, id(data), name, _address(part))
            if keys[name] in _SHARED:
                done[name] = _SHARED[keys[name]]
    todo = [name for name in parts if name not in done]
    for name, fp in zip(todo, _fingerprint_all([parts[n] for n in todo])):
        done[name] = fp
        if _SHARED is not None:
            _SHARED[keys[name]] = fp
    return {name: done[name] for name in names}


class DataIdentity:
    """Remembers which object a board's data is, without keeping it alive when possible.

    ``same(obj)`` answers whether ``obj`` is the object seen last: rebinding a notebook
    variable to a new frame (``df = df.dropna()``) is caught by identity at no cost; in-place
    edits are the fingerprints' job.
    """

    def __init__(self, data: Any):
        try:
            self._ref = weakref.ref(data)
        except TypeError:                   # objects without weak references: hold them
            self._ref = lambda data=data: data
        self._id = id(data)

    def same(self, data: Any) -> bool:
        return self._id == id(data) and self._ref() is data


# ---- the dependency graph -------------------------------------------------------------------
class DependencyGraph:
    """A small directed acyclic graph: each node lists the nodes it reads (its parents).

    Nodes that appear only as parents are *sources* (inputs from the notebook). The graph
    answers which nodes go stale after some sources change and builds each node's cache key
    from the values of its source ancestors.

    Parameters
    ----------
    parents : mapping of node name to the names of the nodes it depends on

    Examples
    --------
    >>> g = DependencyGraph({"fit": ["data", "kernel"], "report": ["fit", "level"]})
    >>> sorted(g.stale_after({"level"}))
    ['report']
    >>> sorted(g.stale_after({"kernel"}))
    ['fit', 'report']
    """

    def __init__(self, parents: Mapping[str, Iterable[str]]):
        self._parents = {node: tuple(dict.fromkeys(ps)) for node, ps in parents.items()}
        nodes = set(self._parents)
        for ps in self._parents.values():
            nodes.update(ps)
        self._children: dict[str, set[str]] = {n: set() for n in nodes}
        for node, ps in self._parents.items():
            for p in ps:
                self._children[p].add(node)
        self._order = self._topological()
        self._sources_cache: dict[str, frozenset[str]] = {}

    @property
    def nodes(self) -> frozenset[str]:
        return frozenset(self._children)

    @property
    def sources(self) -> frozenset[str]:
        """Inputs: nodes that depend on nothing."""
        return frozenset(n for n in self._children if not self._parents.get(n))

    def parents(self, node: str) -> tuple[str, ...]:
        return self._parents.get(node, ())

    def _topological(self) -> list[str]:
        order, state = [], {}

        def visit(node: str, path: tuple[str, ...]) -> None:
            if state.get(node) == "done":
                return
            if state.get(node) == "open":
                raise ValueError(f"`parents` must describe an acyclic graph; got the cycle "
                                 f"{' -> '.join(path + (node,))}. Remove one of these edges.")
            state[node] = "open"
            for p in self._parents.get(node, ()):
                visit(p, path + (node,))
            state[node] = "done"
            order.append(node)

        for node in sorted(self._children):
            visit(node, ())
        return order

    def order(self, nodes: Iterable[str] | None = None) -> list[str]:
        """Nodes (all, or the given ones) with every node after the nodes it depends on."""
        if nodes is None:
            return list(self._order)
        wanted = set(nodes)
        return [n for n in self._order if n in wanted]

    def sources_of(self, node: str) -> frozenset[str]:
        """The sources a node depends on, directly or through other nodes."""
        if node not in self._sources_cache:
            ps = self._parents.get(node, ())
            if not ps:
                found = frozenset([node])
            else:
                found = frozenset().union(*(self.sources_of(p) for p in ps))
            self._sources_cache[node] = found
        return self._sources_cache[node]

    def stale_after(self, changed: Iterable[str]) -> set[str]:
        """Every non-source node downstream of the changed nodes (names not in the graph are ignored:
        a column the board does not use has no node)."""
        stale: set[str] = set()
        todo = [c for c in changed if c in self._children]
        while todo:
            node = todo.pop()
            for child in self._children[node]:
                if child not in stale:
                    stale.add(child)
                    todo.append(child)
        return stale

    def key(self, node: str, values: Mapping[str, Hashable]) -> tuple:
        """The cache key of ``node``: the current values of its sources, in a fixed order."""
        return (node,) + tuple((s, values[s]) for s in sorted(self.sources_of(node)))
