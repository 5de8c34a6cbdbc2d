"""Legendre polynomials P_0 .. P_deg at points of [-1, 1], by their three-term recurrence.

The global polynomial pilots (the bin-number constants, the bias-aware smoothness rule of thumb)
are fitted in this basis: its Gram matrix on a side mapped onto [-1, 1] is well conditioned, so
normal equations in one pass over the data lose no accuracy that matters.
"""
from __future__ import annotations

import numpy as np


def legendre_rows(t: np.ndarray, deg: int, out: np.ndarray | None = None,
                  scratch: np.ndarray | None = None) -> np.ndarray:
    """P_k(t) for k = 0..deg as the rows of a (deg + 1, len(t)) array.

    P_(k+1) = ((2k + 1) t P_k - k P_(k-1)) / (k + 1), computed in place: ``out`` (shape
    (deg + 1, len(t))) and ``scratch`` (len(t)) may be given to reuse buffers chunk after chunk.
    """
    if out is None:
        out = np.empty((deg + 1, t.size))
    if scratch is None:
        scratch = np.empty(t.size)
    out[0] = 1.0
    if deg >= 1:
        out[1] = t
    for k in range(1, deg):
        np.multiply(t, out[k], out=scratch)
        scratch *= (2 * k + 1) / (k + 1)
        np.multiply(out[k - 1], k / (k + 1), out=out[k + 1])
        np.subtract(scratch, out[k + 1], out=out[k + 1])
    return out
