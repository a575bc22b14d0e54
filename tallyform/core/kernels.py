"""Low-level distance kernels (the hot loops). Pure functions on float64 arrays.

Every kernel returns the condensed vector of all pairs in scipy order, as float64 or float32.
Two implementations give the same numbers (to rounding): numba loops compiled on first use
(parallel over rows, cached on disk) and a numpy fallback used when numba is missing, or
when the environment variable ``TALLYFORM_NUMBA=0`` is set, or after ``use_numba(False)``.
In automatic mode small problems (fewer than about a million pair-by-taxon operations) take
the numpy path too: it is as fast there and needs no compilation. Calls into the compiled
parallel loops are serialised by a lock, so that threads (a dashboard's background worker)
never launch two parallel regions at once.

Euclidean distances use the Gram form d^2 = |x|^2 + |y|^2 - 2 x.y on BLAS, in blocks of rows
(no n x n temporary), on column-centred features (distances do not change, cancellation
shrinks); pairs where cancellation could still cost precision (d^2 below 1 % of
|x|^2 + |y|^2) are recomputed directly from the uncentred rows, and tiny negative squares
are clamped to 0.
"""
from __future__ import annotations

import os
import threading

import numpy as np

__all__ = ["euclidean_condensed", "sqeuclidean_condensed", "abs_condensed",
           "kulczynski_condensed",
           "canberra_condensed", "jensen_shannon_condensed", "use_numba", "numba_enabled",
           "squared_square", "gower_centre", "fill_square",
           "RAW", "RATIO", "RUZICKA", "KULCZYNSKI", "SQRT", "SCALE", "SPARSE_DENSITY"]

# post-processing modes for the per-pair sums (same values as in _numba_kernels)
RAW, RATIO, RUZICKA, KULCZYNSKI, SQRT, SCALE = 0, 1, 2, 3, 4, 5
_GRAM_TOL = 1e-2          # recompute pairs with d^2 < _GRAM_TOL * (|x|^2 + |y|^2)
_BLOCK_BYTES = 32e6       # size of one block of the Gram matrix
_SMALL = 1e6              # pair-by-taxon operations below which numpy is used (automatic mode)

_state: dict = {"wanted": None, "module": None, "failed": False}
_LOCK = threading.Lock()


def use_numba(flag: bool | None) -> None:
    """Force (True), forbid (False) or reset to automatic (None) the numba kernels."""
    _state["wanted"] = flag


def numba_ready(work: float = np.inf):
    """The compiled-kernel module, or None (numpy path) for a problem of ``work`` operations."""
    wanted = _state["wanted"]
    if wanted is None:
        wanted = os.environ.get("TALLYFORM_NUMBA", "1").strip().lower() not in ("0", "false",
                                                                                 "no", "off")
        wanted = wanted and work >= _SMALL
    if not wanted or _state["failed"]:
        return None
    if _state["module"] is None:
        try:
            from . import _numba_kernels
        except Exception:  # numba absent or broken: the numpy path gives the same numbers
            _state["failed"] = True
            return None
        _state["module"] = _numba_kernels
    return _state["module"]


def numba_enabled() -> bool:
    """True when the numba kernels are in use (for problems that are not tiny)."""
    return numba_ready() is not None


def _prepare(x) -> np.ndarray:
    return np.ascontiguousarray(x, dtype=np.float64)


def _work(x) -> float:
    n, p = x.shape
    return n * (n - 1) / 2 * max(p, 1)


def _empty_out(n: int, dtype) -> np.ndarray:
    return np.empty(n * (n - 1) // 2, dtype=np.dtype(dtype))


def _combine(mode: int, s: np.ndarray, ti, tj, scale: float) -> np.ndarray:
    if mode == RAW:
        return s
    if mode == RATIO:
        return s / (ti + tj)
    if mode == RUZICKA:
        return 2.0 * s / (ti + tj + s)
    if mode == KULCZYNSKI:
        return np.maximum((s * (ti + tj) - (ti - tj) ** 2) / (4.0 * ti * tj), 0.0)
    if mode == SQRT:
        return np.sqrt(s)
    return s * scale


def _rowwise(x: np.ndarray, out: np.ndarray, pair_sums, mode: int, t, scale: float):
    """numpy fallback: one row against all later rows at a time."""
    n = x.shape[0]
    pos = 0
    for i in range(n - 1):
        s = pair_sums(x[i], x[i + 1:])
        k = n - 1 - i
        out[pos:pos + k] = _combine(mode, s, t[i], t[i + 1:], scale)
        pos += k
    return out


def _totals(t, n):
    return np.zeros(n) if t is None else np.ascontiguousarray(t, dtype=np.float64)


# ---------------------------------------------------------------------- sparse tables
#: Share of non-zero cells under which the sparse kernels are used (measured on
#: benchmarks/measures.py at 2000 x 300: the dense kernels win above about a fifth).
SPARSE_DENSITY = 0.2


def _sparse_parts(x):
    """CSR + CSC arrays (with each CSR entry's position in its column) of a non-negative
    table when the sparse kernels should be used for it, else None.

    Used when numba is available, the table is large enough to bother, every value is
    non-negative and at most ``SPARSE_DENSITY`` of the cells are non-zero; ``x`` may be a
    numpy array or a scipy.sparse matrix.
    """
    import scipy.sparse as sp
    n, p = x.shape
    if n < 3:
        return None
    if sp.issparse(x):
        if x.nnz > SPARSE_DENSITY * n * p or numba_ready(_work(x)) is None:
            return None
        coo = sp.coo_matrix(x)
        coo.sum_duplicates()                    # row-major order, zeros kept out below
        keep = coo.data != 0
        rows, cols = coo.row[keep].astype(np.int64), coo.col[keep].astype(np.int64)
        data = np.ascontiguousarray(coo.data[keep], dtype=np.float64)
    else:
        x = np.asarray(x)
        if np.count_nonzero(x) > SPARSE_DENSITY * n * p or numba_ready(_work(x)) is None:
            return None
        rows, cols = np.nonzero(x)              # row-major: CSR order, columns sorted
        data = np.ascontiguousarray(x[rows, cols], dtype=np.float64)
    if data.size and (data.min() < 0 or not np.isfinite(data).all()):
        return None
    indptr = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(np.bincount(rows, minlength=n), out=indptr[1:])
    order = np.argsort(cols, kind="stable")     # column-major, rows still ascending
    cptr = np.zeros(p + 1, dtype=np.int64)
    np.cumsum(np.bincount(cols, minlength=p), out=cptr[1:])
    cpos = np.empty(data.size, dtype=np.int64)
    cpos[order] = np.arange(data.size, dtype=np.int64)
    r = np.bincount(rows, weights=data, minlength=n)
    return (n, indptr, np.ascontiguousarray(cols, dtype=np.int64), data, cptr,
            np.ascontiguousarray(rows[order]), np.ascontiguousarray(data[order]), cpos, r)


def _sparse_run(parts, *, mode, t, scale, kind, dtype):
    import numba
    from . import _numba_sparse
    n = parts[0]
    out = _empty_out(n, dtype)
    t = parts[-1] if t is None else np.ascontiguousarray(t, dtype=np.float64)
    with _LOCK:
        return _numba_sparse.sparse_abs_condensed(*parts, t, mode, float(scale), kind, out,
                                                  numba.get_num_threads())


def _dense(x) -> np.ndarray:
    import scipy.sparse as sp
    return _prepare(x.toarray() if sp.issparse(x) else x)


def abs_condensed(x, *, mode: int = RAW, t=None, scale: float = 1.0,
                  dtype=np.float64) -> np.ndarray:
    """Per-pair s = sum_k |x_ik - x_jk|, post-processed by ``mode``.

    Modes: RAW s (Manhattan); RATIO s / (t_i + t_j) (Bray-Curtis with t the totals);
    RUZICKA 2 s / (t_i + t_j + s) (= 1 - sum min / sum max); KULCZYNSKI
    (s (t_i + t_j) - (t_i - t_j)^2) / (4 t_i t_j) (= 1 - (m / t_i + m / t_j) / 2, m the sum of
    minima, using 2 m = t_i + t_j - s); SCALE s * scale. A sparse non-negative table (numpy
    or scipy.sparse) takes the sparse kernels (work proportional to shared taxa).
    """
    parts = _sparse_parts(x)
    if parts is not None:
        return _sparse_run(parts, mode=mode, t=t, scale=scale, kind=0, dtype=dtype)
    x = _dense(x)
    n = x.shape[0]
    t = _totals(t, n)
    out = _empty_out(n, dtype)
    nbk = numba_ready(_work(x))
    if nbk is not None:
        with _LOCK:
            return nbk.abs_condensed(x, out, mode, t, float(scale))
    return _rowwise(x, out, lambda a, b: np.abs(b - a).sum(axis=1), mode, t, scale)


def kulczynski_condensed(x, t, *, dtype=np.float64) -> np.ndarray:
    """Quantitative Kulczynski, 1 - (m / t_i + m / t_j) / 2 with m = sum_k min(x_ik, x_jk),
    computed as (p / t_i + q / t_j) / 2 from the one-sided sums p = sum_k (x_ik - x_jk)+ and
    q = sum_k (x_jk - x_ik)+ (t_i - m = p exactly): sums of non-negative terms, so a pair of
    very unequal totals (10^15 against 10) keeps full precision, which the algebraic form
    (s (t_i + t_j) - (t_i - t_j)^2) / (4 t_i t_j) loses to cancellation. Sparse tables take
    the sparse kernels (p = t_i - m recomputed directly where it is small)."""
    parts = _sparse_parts(x)
    if parts is not None:
        return _sparse_run(parts, mode=RAW, t=t, scale=1.0, kind=1, dtype=dtype)
    x = _dense(x)
    n = x.shape[0]
    t = _totals(t, n)
    out = _empty_out(n, dtype)
    nbk = numba_ready(_work(x))
    if nbk is not None:
        with _LOCK:
            return nbk.kulczynski_condensed(x, out, t)
    pos = 0
    for i in range(n - 1):
        d = x[i] - x[i + 1:]
        p = np.where(d > 0, d, 0.0).sum(axis=1)
        q = np.where(d < 0, -d, 0.0).sum(axis=1)
        k = n - 1 - i
        out[pos:pos + k] = 0.5 * (p / t[i] + q / t[i + 1:])
        pos += k
    return out


def sqeuclidean_condensed(x, *, mode: int = RAW, t=None, scale: float = 1.0,
                          dtype=np.float64) -> np.ndarray:
    """Per-pair s = sum_k (x_ik - x_jk)^2 computed directly (no cancellation), then ``mode``
    (RATIO with t = squared norms of profiles gives Morisita-Horn; SQRT the Euclidean)."""
    x = _prepare(x)
    n = x.shape[0]
    t = _totals(t, n)
    out = _empty_out(n, dtype)
    nbk = numba_ready(_work(x))
    if nbk is not None:
        with _LOCK:
            return nbk.sq_condensed(x, out, mode, t, float(scale))

    def sums(a, b):
        d = b - a
        return np.einsum("ij,ij->i", d, d)
    return _rowwise(x, out, sums, mode, t, scale)


def canberra_condensed(x, *, dtype=np.float64) -> np.ndarray:
    """Canberra: sum_k |x_ik - x_jk| / (|x_ik| + |x_jk|), terms with both 0 omitted (a
    sparse non-negative table takes the sparse kernels)."""
    parts = _sparse_parts(x)
    if parts is not None:
        return _sparse_run(parts, mode=RAW, t=None, scale=1.0, kind=2, dtype=dtype)
    x = _dense(x)
    n = x.shape[0]
    out = _empty_out(n, dtype)
    nbk = numba_ready(_work(x))
    if nbk is not None:
        with _LOCK:
            return nbk.canberra_condensed(x, out)

    def sums(a, b):
        den = np.abs(a) + np.abs(b)
        return (np.abs(b - a) / np.where(den > 0, den, 1.0)).sum(axis=1)
    return _rowwise(x, out, sums, RAW, np.zeros(n), 1.0)


def jensen_shannon_condensed(profiles, *, dtype=np.float64) -> np.ndarray:
    """Jensen-Shannon distance (square root of the divergence, natural log) between rows
    that each sum to 1.

    With m = (a + b) / 2 and d = (a - b) / (a + b) per taxon, a log(a / m) + b log(b / m)
    = m g(d), g(d) = (1 + d) log(1 + d) + (1 - d) log(1 - d) >= 0, so the divergence is
    sum_k m_k g(d_k) / 2: a sum of non-negative terms that depend only on the differences.
    The first-order terms of the plain form, which cancel in exact arithmetic but not after
    rounding (a near-identical pair of samples dominated by one taxon), never appear; g is
    summed from its series for |d| < 0.1."""
    p = _prepare(profiles)
    n = p.shape[0]
    out = _empty_out(n, dtype)
    nbk = numba_ready(_work(p))
    if nbk is not None:
        with _LOCK:
            return nbk.js_condensed(p, out)

    def sums(a, b):
        m = 0.5 * (a + b)
        with np.errstate(divide="ignore", invalid="ignore"):
            delta = np.where(m > 0, 0.5 * (a - b) / np.where(m > 0, m, 1.0), 0.0)
        s = 0.5 * (m * _js_g(delta)).sum(axis=1)
        return np.sqrt(np.maximum(s, 0.0))
    return _rowwise(p, out, sums, RAW, np.zeros(n), 1.0)


# g(delta) = sum_k delta^(2k) / (k (2k - 1)): coefficients for |delta| < 0.1 (8 terms reach
# 1e-16 relative there)
_JS_SERIES = np.array([1.0 / (k * (2 * k - 1)) for k in range(8, 0, -1)])


def _js_g(delta: np.ndarray) -> np.ndarray:
    """g(d) = (1 + d) log(1 + d) + (1 - d) log(1 - d), exact also for tiny |d|."""
    d = np.abs(delta)
    inner = d < 1.0
    direct = (1 + d) * np.log1p(d) + np.where(inner, (1 - d) * np.log1p(-np.where(inner, d, 0.0)),
                                              0.0)
    d2 = d * d
    series = np.polyval(np.append(_JS_SERIES, 0.0), d2)
    return np.where(d < 0.1, series, direct)


def euclidean_condensed(features, *, dtype=np.float64) -> np.ndarray:
    """Condensed Euclidean distances between the rows of ``features`` (Gram form on BLAS).

    Parameters
    ----------
    features : array_like, shape (n, q)
    dtype : float64 or float32
        Type of the returned vector (the arithmetic is always float64).
    """
    raw = _prepare(features)
    n, q = raw.shape
    out = _empty_out(n, dtype)
    if n < 2:
        return out
    f = raw - raw.mean(axis=0)                 # translation leaves distances unchanged
    sq = np.einsum("ij,ij->i", f, f)
    block = int(max(16, min(256, _BLOCK_BYTES // (8 * n))))
    nbk = numba_ready(_work(f))
    for i0 in range(0, n - 1, block):
        i1 = min(i0 + block, n - 1)
        g = f[i0:i1] @ f[i0:].T                # (b, n - i0): rows i0..i1-1 against j >= i0
        # doubtful pairs are recomputed from the rows as given, not the centred ones:
        # centring rounds too, and a column in which one sample is huge would blur the
        # small differences between the others
        if nbk is not None:
            nbk.gram_fill(g, i0, sq, raw, out, _GRAM_TOL)
        else:
            _gram_fill_numpy(g, i0, sq, raw, out)
    return out


def _gram_fill_numpy(g, i0, sq, f, out):
    n = f.shape[0]
    for r in range(g.shape[0]):
        i = i0 + r
        j0 = i + 1
        d2 = sq[i] + sq[j0:] - 2.0 * g[r, j0 - i0:]
        redo = np.flatnonzero(d2 < _GRAM_TOL * (sq[i] + sq[j0:]))
        if redo.size:
            d = f[j0 + redo] - f[i]
            d2[redo] = np.einsum("ij,ij->i", d, d)
        start = i * n - i * (i + 1) // 2
        out[start:start + n - j0] = np.sqrt(np.maximum(d2, 0.0))


# ---------------------------------------------------------------------- Gower matrix
def squared_square(c: np.ndarray, n: int) -> np.ndarray:
    """The n x n float64 matrix of squared distances from a condensed vector (any float)."""
    out = np.empty((n, n), dtype=np.float64)
    nb_mod = numba_ready(n * n)
    if nb_mod is not None:
        with _LOCK:
            return nb_mod.squared_square(np.ascontiguousarray(c), out)
    return fill_square(c, out, squared=True)


def fill_square(c: np.ndarray, out: np.ndarray, *, squared: bool = False) -> np.ndarray:
    """Write the symmetric matrix of a condensed vector into ``out`` (n x n), its values
    squared in float64 when ``squared``; row by row, so no converted copy of ``c`` is made
    (float32 distances into a float64 matrix)."""
    n = out.shape[0]
    pos = 0
    for i in range(n):
        out[i, i] = 0
        row = c[pos:pos + n - 1 - i]
        if squared:
            row = np.asarray(row, dtype=np.float64)
            row = row * row
        out[i, i + 1:] = row
        pos += n - 1 - i
    block = 512
    for i0 in range(0, n, block):           # lower triangle from the upper one
        i1 = min(i0 + block, n)
        out[i0:i1, :i0] = out[:i0, i0:i1].T
        sub = out[i0:i1, i0:i1]
        low = np.tril_indices(i1 - i0, -1)
        sub[low] = sub.T[low]
    return out


def gower_centre(a: np.ndarray) -> np.ndarray:
    """G = -1/2 C A C in place for a symmetric A (Gower 1966), exactly symmetric.

    With r the row means of A and m their mean, G_ij = -1/2 (A_ij - (r_i + r_j) + m): the
    same double centring in one pass, and r_i + r_j = r_j + r_i keeps G symmetric to the bit.
    """
    n = a.shape[0]
    r = a.sum(axis=1) / n
    m = float(r.mean())
    nb_mod = numba_ready(n * n)
    if nb_mod is not None:
        with _LOCK:
            return nb_mod.centre_squares(a, r, m)
    for i0 in range(0, n, 256):             # by blocks of rows: no n x n temporary
        i1 = min(i0 + 256, n)
        blk = a[i0:i1]
        blk -= r[i0:i1, None] + r[None, :]
        blk += m
        blk *= -0.5
    return a
