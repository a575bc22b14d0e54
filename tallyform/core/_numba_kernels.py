"""numba versions of the hot loops (imported lazily by :mod:`tallyform.core.kernels`).

Never imported by ``import tallyform``. Each public kernel writes the condensed vector of all
pairs (scipy order) into ``out`` (float64 or float32). Rows are handled four at a time so that
each partner row is read once for four sums; blocks of rows are paired from both ends of the
triangle (block t with block nb - 1 - t) so the two halves of a parallel loop get equal work.
Compiled on first use and cached on disk (``cache=True``).
"""
from __future__ import annotations

import numba as nb
import numpy as np

# No 'afn' (approximate functions): logarithms stay exact. No NaN/inf reach these loops
# (inputs are checked finite), so 'nnan'/'ninf' are safe and let min/abs/select vectorise.
_FM = {"reassoc", "nsz", "contract", "arcp", "nnan", "ninf"}

# post-processing of a per-pair sum s, given per-row values t_i, t_j (see kernels.py)
RAW, RATIO, RUZICKA, KULCZYNSKI, SQRT, SCALE = 0, 1, 2, 3, 4, 5


@nb.njit(inline="always")
def _start(i, n):
    """Condensed position of pair (i, j) is _start(i, n) + j."""
    return i * n - i * (i + 1) // 2 - i - 1


@nb.njit(inline="always", fastmath=_FM)
def _combine(mode, s, ti, tj, scale):
    if mode == RAW:
        return s
    if mode == RATIO:          # s / (t_i + t_j): Bray-Curtis, Sorensen, Morisita-Horn
        return s / (ti + tj)
    if mode == RUZICKA:        # 2 s / (t_i + t_j + s): quantitative Jaccard, Jaccard
        return 2.0 * s / (ti + tj + s)
    if mode == KULCZYNSKI:     # (s (t_i + t_j) - (t_i - t_j)^2) / (4 t_i t_j)
        v = (s * (ti + tj) - (ti - tj) * (ti - tj)) / (4.0 * ti * tj)
        return v if v > 0.0 else 0.0
    if mode == SQRT:
        return np.sqrt(s)
    return s * scale            # SCALE: Gower


@nb.njit(fastmath=_FM, cache=True)
def _abs_rows(X, i, m, out, mode, t, scale):
    """Sums of |x_ik - x_jk| for rows i..i+m-1 (m <= 4) against all j > i."""
    n, p = X.shape
    for j in range(i + 1, n):
        s0 = 0.0
        s1 = 0.0
        s2 = 0.0
        s3 = 0.0
        if m == 4:
            for k in range(p):
                y = X[j, k]
                s0 += abs(X[i, k] - y)
                s1 += abs(X[i + 1, k] - y)
                s2 += abs(X[i + 2, k] - y)
                s3 += abs(X[i + 3, k] - y)
        else:
            for k in range(p):
                s0 += abs(X[i, k] - X[j, k])
        tj = t[j]
        out[_start(i, n) + j] = _combine(mode, s0, t[i], tj, scale)
        if m == 4:
            if j > i + 1:
                out[_start(i + 1, n) + j] = _combine(mode, s1, t[i + 1], tj, scale)
            if j > i + 2:
                out[_start(i + 2, n) + j] = _combine(mode, s2, t[i + 2], tj, scale)
            if j > i + 3:
                out[_start(i + 3, n) + j] = _combine(mode, s3, t[i + 3], tj, scale)


@nb.njit(fastmath=_FM, cache=True)
def _sq_rows(X, i, m, out, mode, t, scale):
    """Sums of (x_ik - x_jk)^2 for rows i..i+m-1 against all j > i."""
    n, p = X.shape
    for j in range(i + 1, n):
        s0 = 0.0
        s1 = 0.0
        s2 = 0.0
        s3 = 0.0
        if m == 4:
            for k in range(p):
                y = X[j, k]
                d0 = X[i, k] - y
                d1 = X[i + 1, k] - y
                d2 = X[i + 2, k] - y
                d3 = X[i + 3, k] - y
                s0 += d0 * d0
                s1 += d1 * d1
                s2 += d2 * d2
                s3 += d3 * d3
        else:
            for k in range(p):
                d0 = X[i, k] - X[j, k]
                s0 += d0 * d0
        tj = t[j]
        out[_start(i, n) + j] = _combine(mode, s0, t[i], tj, scale)
        if m == 4:
            if j > i + 1:
                out[_start(i + 1, n) + j] = _combine(mode, s1, t[i + 1], tj, scale)
            if j > i + 2:
                out[_start(i + 2, n) + j] = _combine(mode, s2, t[i + 2], tj, scale)
            if j > i + 3:
                out[_start(i + 3, n) + j] = _combine(mode, s3, t[i + 3], tj, scale)


@nb.njit(fastmath=_FM, cache=True)
def _canberra_rows(X, i, m, out):
    """Canberra sums |x - y| / (|x| + |y|) (0 where both are 0) for rows i..i+m-1."""
    n, p = X.shape
    for j in range(i + 1, n):
        s0 = 0.0
        s1 = 0.0
        s2 = 0.0
        s3 = 0.0
        if m == 4:
            for k in range(p):
                y = X[j, k]
                ay = abs(y)
                a = X[i, k]
                d = abs(a) + ay
                s0 += abs(a - y) / (d if d > 0.0 else 1.0)
                a = X[i + 1, k]
                d = abs(a) + ay
                s1 += abs(a - y) / (d if d > 0.0 else 1.0)
                a = X[i + 2, k]
                d = abs(a) + ay
                s2 += abs(a - y) / (d if d > 0.0 else 1.0)
                a = X[i + 3, k]
                d = abs(a) + ay
                s3 += abs(a - y) / (d if d > 0.0 else 1.0)
        else:
            for k in range(p):
                a = X[i, k]
                y = X[j, k]
                d = abs(a) + abs(y)
                s0 += abs(a - y) / (d if d > 0.0 else 1.0)
        out[_start(i, n) + j] = s0
        if m == 4:
            if j > i + 1:
                out[_start(i + 1, n) + j] = s1
            if j > i + 2:
                out[_start(i + 2, n) + j] = s2
            if j > i + 3:
                out[_start(i + 3, n) + j] = s3


@nb.njit(fastmath=_FM, cache=True)
def _kul_rows(X, i, m, out, t):
    """Kulczynski for rows i..i+m-1 against all j > i, from the one-sided sums
    p = sum_k max(x_ik - x_jk, 0) and q = sum_k max(x_jk - x_ik, 0):
    d = (p / t_i + q / t_j) / 2, two sums of non-negative terms (no cancellation)."""
    n, p = X.shape
    for j in range(i + 1, n):
        p0 = 0.0
        p1 = 0.0
        p2 = 0.0
        p3 = 0.0
        q0 = 0.0
        q1 = 0.0
        q2 = 0.0
        q3 = 0.0
        if m == 4:
            for k in range(p):
                y = X[j, k]
                a = X[i, k] - y
                p0 += a if a > 0.0 else 0.0
                q0 += -a if a < 0.0 else 0.0
                a = X[i + 1, k] - y
                p1 += a if a > 0.0 else 0.0
                q1 += -a if a < 0.0 else 0.0
                a = X[i + 2, k] - y
                p2 += a if a > 0.0 else 0.0
                q2 += -a if a < 0.0 else 0.0
                a = X[i + 3, k] - y
                p3 += a if a > 0.0 else 0.0
                q3 += -a if a < 0.0 else 0.0
        else:
            for k in range(p):
                a = X[i, k] - X[j, k]
                p0 += a if a > 0.0 else 0.0
                q0 += -a if a < 0.0 else 0.0
        tj = t[j]
        out[_start(i, n) + j] = 0.5 * (p0 / t[i] + q0 / tj)
        if m == 4:
            if j > i + 1:
                out[_start(i + 1, n) + j] = 0.5 * (p1 / t[i + 1] + q1 / tj)
            if j > i + 2:
                out[_start(i + 2, n) + j] = 0.5 * (p2 / t[i + 2] + q2 / tj)
            if j > i + 3:
                out[_start(i + 3, n) + j] = 0.5 * (p3 / t[i + 3] + q3 / tj)


@nb.njit(inline="always", fastmath=_FM)
def _js_g(d):
    """g(d) = (1 + d) log(1 + d) + (1 - d) log(1 - d) for 0 <= d <= 1 (series below 0.1)."""
    if d < 0.1:
        d2 = d * d
        return d2 * (1.0 + d2 * (1.0 / 6.0 + d2 * (1.0 / 15.0 + d2 * (1.0 / 28.0 + d2 * (
            1.0 / 45.0 + d2 * (1.0 / 66.0 + d2 * (1.0 / 91.0 + d2 / 120.0)))))))
    if d >= 1.0:
        return 2.0 * np.log(2.0)
    return (1.0 + d) * np.log1p(d) + (1.0 - d) * np.log1p(-d)


@nb.njit(fastmath=_FM, cache=True)
def _js_row(P, i, out):
    """Jensen-Shannon distances (natural log) from profile row i to every j > i, as
    sqrt(sum_k m_k g(d_k) / 2), m = (a + b) / 2, d = |a - b| / (a + b) (see kernels.py)."""
    n, p = P.shape
    base = _start(i, n)
    for j in range(i + 1, n):
        s = 0.0
        for k in range(p):
            a = P[i, k]
            b = P[j, k]
            t = a + b
            if t > 0.0:
                s += 0.5 * t * _js_g(abs(a - b) / t)
        s *= 0.5
        out[base + j] = np.sqrt(s) if s > 0.0 else 0.0


@nb.njit(parallel=True, cache=True)
def abs_condensed(X, out, mode, t, scale):
    n = X.shape[0]
    nblk = n // 4
    for b in nb.prange((nblk + 1) // 2):
        _abs_rows(X, 4 * b, 4, out, mode, t, scale)
        c = nblk - 1 - b
        if c != b:
            _abs_rows(X, 4 * c, 4, out, mode, t, scale)
    for i in range(4 * nblk, n):
        _abs_rows(X, i, 1, out, mode, t, scale)
    return out


@nb.njit(parallel=True, cache=True)
def kulczynski_condensed(X, out, t):
    n = X.shape[0]
    nblk = n // 4
    for b in nb.prange((nblk + 1) // 2):
        _kul_rows(X, 4 * b, 4, out, t)
        c = nblk - 1 - b
        if c != b:
            _kul_rows(X, 4 * c, 4, out, t)
    for i in range(4 * nblk, n):
        _kul_rows(X, i, 1, out, t)
    return out


@nb.njit(parallel=True, cache=True)
def sq_condensed(X, out, mode, t, scale):
    n = X.shape[0]
    nblk = n // 4
    for b in nb.prange((nblk + 1) // 2):
        _sq_rows(X, 4 * b, 4, out, mode, t, scale)
        c = nblk - 1 - b
        if c != b:
            _sq_rows(X, 4 * c, 4, out, mode, t, scale)
    for i in range(4 * nblk, n):
        _sq_rows(X, i, 1, out, mode, t, scale)
    return out


@nb.njit(parallel=True, cache=True)
def canberra_condensed(X, out):
    n = X.shape[0]
    nblk = n // 4
    for b in nb.prange((nblk + 1) // 2):
        _canberra_rows(X, 4 * b, 4, out)
        c = nblk - 1 - b
        if c != b:
            _canberra_rows(X, 4 * c, 4, out)
    for i in range(4 * nblk, n):
        _canberra_rows(X, i, 1, out)
    return out


@nb.njit(parallel=True, cache=True)
def js_condensed(P, out):
    n = P.shape[0]
    for b in nb.prange((n + 1) // 2):
        _js_row(P, b, out)
        c = n - 1 - b
        if c != b:
            _js_row(P, c, out)
    return out


@nb.njit(fastmath=_FM, cache=True)
def gram_fill(G, i0, sq, F, out, tol):
    """Distances of rows i0..i0+b-1 to every j > i from a block of the Gram matrix.

    d^2 = sq_i + sq_j - 2 G_ij. Where d^2 < tol * (sq_i + sq_j) cancellation could cost
    precision, the pair is recomputed directly from the rows of F. Deliberately serial: a
    parallel loop here would fight the BLAS threads that computed G.
    """
    n, p = F.shape
    b = G.shape[0]
    for r in range(b):
        i = i0 + r
        base = _start(i, n)
        si = sq[i]
        suspect = 0
        for j in range(i + 1, n):          # vectorised pass: no inner loop, no branch
            d2 = si + sq[j] - 2.0 * G[r, j - i0]
            suspect += d2 < tol * (si + sq[j])
            out[base + j] = np.sqrt(d2 if d2 > 0.0 else 0.0)
        if suspect:                        # rare: recompute the doubtful pairs directly
            for j in range(i + 1, n):
                d2 = si + sq[j] - 2.0 * G[r, j - i0]
                if d2 < tol * (si + sq[j]):
                    d2 = 0.0
                    for k in range(p):
                        d = F[i, k] - F[j, k]
                        d2 += d * d
                    out[base + j] = np.sqrt(d2)


# ---------------------------------------------------------------------- Gower matrix
@nb.njit(cache=True)
def _squares_block(c, out, n, i0, i1, j0, j1):
    for i in range(i0, i1):
        s = _start(i, n)
        if j0 <= i < j1:
            out[i, i] = 0.0
        for j in range(max(j0, i + 1), j1):
            v = np.float64(c[s + j])
            v = v * v
            out[i, j] = v
            out[j, i] = v


@nb.njit(parallel=True, cache=True)
def squared_square(c, out):
    """The full n x n matrix of squared distances from the condensed vector, by 64 x 64
    blocks of the upper triangle (each written to both triangles); block rows are paired
    from both ends so the parallel halves get equal work."""
    n = out.shape[0]
    B = 64
    nblk = (n + B - 1) // B
    for t in nb.prange((nblk + 1) // 2):
        for h in range(2):
            bi = t if h == 0 else nblk - 1 - t
            if h == 1 and bi == t:
                break
            i0 = bi * B
            i1 = min(i0 + B, n)
            for bj in range(bi, nblk):
                j0 = bj * B
                _squares_block(c, out, n, i0, i1, j0, min(j0 + B, n))
    return out


@nb.njit(parallel=True, cache=True)
def centre_squares(a, r, m):
    """a_ij <- -1/2 (a_ij - (r_i + r_j) + m) in place; exactly symmetric when a is (no
    fastmath: the order of operations is the numpy fallback's)."""
    n = a.shape[0]
    for i in nb.prange(n):
        ri = r[i]
        for j in range(n):
            a[i, j] = -0.5 * ((a[i, j] - (ri + r[j])) + m)
    return a
