"""numba kernel of :mod:`tallyform.core.single_precision`: one block row of the quadratic
forms u' G u, float32 inputs, float64 accumulation.

Each product of two float32 numbers is exact in float64 (24 + 24 significant bits <= 53), so
the only rounding is in the float64 sums. 'reassoc' lets the loops vectorise: it changes the
order of the sums, and the error bound used (Higham 2002, ch. 3) holds for any order;
'contract' (fused multiply-add) changes nothing since the products are exact. ``nogil``: the
batches of a test run on several Python threads.
"""
from __future__ import annotations

import numba as nb
import numpy as np


@nb.njit(fastmath={"reassoc", "contract"}, cache=True, nogil=True)
def add_block_row(u, v, start, width, out):
    """out[i] += sum_{j < width} u[i, start + j] v[i, j]
                 + 2 sum_{j >= width} u[i, start + j] v[i, j]

    with ``v = u[:, start:start + width] @ G[start:start + width, start:]``: the diagonal
    block of a symmetric G once, the blocks right of it twice (for those left of it)."""
    m = v.shape[1]
    for i in range(v.shape[0]):
        ui = u[i, start:]
        vi = v[i]
        s = 0.0
        for j in range(np.uint64(width)):       # unsigned: no negative-index wraparound,
            s += np.float64(ui[j]) * np.float64(vi[j])      # so the loops vectorise
        s2 = 0.0
        for j in range(np.uint64(width), np.uint64(m)):
            s2 += np.float64(ui[j]) * np.float64(vi[j])
        out[i] += s + 2.0 * s2
    return out
