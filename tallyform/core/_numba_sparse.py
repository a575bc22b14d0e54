"""numba kernels for sparse non-negative tables (imported lazily by :mod:`.kernels`).

Community tables are mostly zeros. For non-negative rows, |x - y| = x + y - 2 min(x, y), so

    sum_k |x_ik - x_jk| = t_i + t_j - 2 m_ij,   m_ij = sum over taxa present in BOTH samples
                                                        of min(x_ik, x_jk),

and only the taxa shared by a pair cost anything. Each row i walks its own non-zeros; for a
taxon k it visits only the later rows j > i in which k is present (the column lists of a CSC
copy, sorted by row), accumulating m_ij in a buffer of length n. The work is the number of
(pair, shared taxon) triples plus the n^2 / 2 outputs, instead of n^2 p / 2.

Precision: the identity subtracts. Where the difference is small against the totals
(s < 1e-3 (t_i + t_j), near-identical samples) the pair is recomputed directly from the two
sparse rows (a merge of their non-zeros), so the result agrees with the dense kernels to
rounding. Canberra needs no identity: a taxon present in one sample only adds exactly 1, so
s = (nnz_i - c_ij) + (nnz_j - c_ij) + sum over shared taxa of |x - y| / (x + y), with c_ij the
number of shared taxa.

Rows are handed out from both ends of the triangle (row t with row n - 1 - t) so the
threads get equal work; each thread owns its accumulation buffers.
"""
from __future__ import annotations

import numba as nb
import numpy as np

from ._numba_kernels import _FM, _combine, _start

_REDO = 1e-3


@nb.njit(fastmath=_FM, cache=True)
def _direct_abs(indptr, indices, data, i, j):
    """sum_k |x_ik - x_jk| by merging the non-zeros of rows i and j."""
    a, a_end = indptr[i], indptr[i + 1]
    b, b_end = indptr[j], indptr[j + 1]
    s = 0.0
    while a < a_end and b < b_end:
        ka, kb = indices[a], indices[b]
        if ka == kb:
            s += abs(data[a] - data[b])
            a += 1
            b += 1
        elif ka < kb:
            s += data[a]
            a += 1
        else:
            s += data[b]
            b += 1
    while a < a_end:
        s += data[a]
        a += 1
    while b < b_end:
        s += data[b]
        b += 1
    return s


@nb.njit(fastmath=_FM, cache=True)
def _direct_onesided(indptr, indices, data, i, j):
    """(sum_k (x_ik - x_jk)+, sum_k (x_jk - x_ik)+) by merging rows i and j."""
    a, a_end = indptr[i], indptr[i + 1]
    b, b_end = indptr[j], indptr[j + 1]
    p = 0.0
    q = 0.0
    while a < a_end and b < b_end:
        ka, kb = indices[a], indices[b]
        if ka == kb:
            d = data[a] - data[b]
            if d > 0.0:
                p += d
            else:
                q -= d
            a += 1
            b += 1
        elif ka < kb:
            p += data[a]
            a += 1
        else:
            q += data[b]
            b += 1
    while a < a_end:
        p += data[a]
        a += 1
    while b < b_end:
        q += data[b]
        b += 1
    return p, q


@nb.njit(fastmath=_FM, cache=True)
def _row_abs(i, n, indptr, indices, data, cptr, crows, cdata, cpos, r, t, mode, scale,
             kind, acc, cnt, out):
    """All pairs (i, j > i) of row i. kind 0: L1 family; 1: Kulczynski; 2: Canberra."""
    for e in range(indptr[i], indptr[i + 1]):
        k = indices[e]
        xv = data[e]
        for f in range(cpos[e] + 1, cptr[k + 1]):
            j = crows[f]
            y = cdata[f]
            if kind == 2:
                acc[j] += abs(xv - y) / (xv + y)
                cnt[j] += 1
            else:
                acc[j] += xv if xv < y else y
    base = _start(i, n)
    nnz_i = indptr[i + 1] - indptr[i]
    for j in range(i + 1, n):
        if kind == 2:
            c = cnt[j]
            nnz_j = indptr[j + 1] - indptr[j]
            out[base + j] = (nnz_i - c) + (nnz_j - c) + acc[j]
            cnt[j] = 0
        elif kind == 1:
            m = acc[j]
            p = r[i] - m
            q = r[j] - m
            if p < _REDO * r[i] or q < _REDO * r[j]:
                p, q = _direct_onesided(indptr, indices, data, i, j)
            out[base + j] = 0.5 * (p / r[i] + q / r[j])
        else:
            s = r[i] + r[j] - 2.0 * acc[j]
            if s < _REDO * (r[i] + r[j]):
                s = _direct_abs(indptr, indices, data, i, j)
            out[base + j] = _combine(mode, s, t[i], t[j], scale)
        acc[j] = 0.0


@nb.njit(parallel=True, fastmath=_FM, cache=True)
def sparse_abs_condensed(n, indptr, indices, data, cptr, crows, cdata, cpos, r, t, mode,
                         scale, kind, out, nt):
    """Condensed L1-family (kind 0, post-processed by ``mode``), Kulczynski (kind 1) or
    Canberra (kind 2) distances of a non-negative CSR table with its CSC copy; ``nt``
    rows are in flight at once (the number of threads)."""
    half = (n + 1) // 2
    for b in nb.prange(nt):
        acc = np.zeros(n)
        cnt = np.zeros(n, dtype=np.int64)
        for tt in range(b, half, nt):
            _row_abs(tt, n, indptr, indices, data, cptr, crows, cdata, cpos, r, t, mode,
                     scale, kind, acc, cnt, out)
            other = n - 1 - tt
            if other != tt:
                _row_abs(other, n, indptr, indices, data, cptr, crows, cdata, cpos, r, t,
                         mode, scale, kind, acc, cnt, out)
    return out
