"""The arithmetic of the Welch-type test on a dissimilarity, batched over relabellings.

In the Gower form (G = -1/2 C D^2 C, or G = F F' for centred features F) with the group
indicator matrix E: B = E' G E, t_j = sum_{i in j} G_ii; the within-group sum of squares is
t_j - B_jj / n_j (= sum_{i<l in j} d_il^2 / n_j), and the squared distance between centroids
D_jl = B_jj / n_j^2 + B_ll / n_l^2 - 2 B_jl / (n_j n_l). Since G 1 = 0, k - 1 indicator
columns determine B, so a batch of relabellings costs one (k - 1) P x n by n x n product
(n x q on the feature path), as a one-factor PERMANOVA does. Formulas and references:
:mod:`tallyform.core.welch`.
"""
from __future__ import annotations

import numpy as np
from scipy import stats

from .errors import Cancelled
from .permutation import Permutations, Response, default_batch_size, nested_bases, prepare_response
from .units import unit_centroid_gower

__all__ = ["welch_statistic", "statistic_batch", "gram_blocks", "run_permutations",
           "effective_dims", "calibrate", "equivalent", "unit_response", "remove_blocks"]

#: Within-group sums of squares below this share of the total count as no spread at all.
_SPREAD_RTOL = 1e-12


def statistic_batch(B: np.ndarray, t: np.ndarray, sizes: np.ndarray, total: float):
    """W_d from group Gram blocks B (P, k, k) and diagonal sums t (P, k).

    Returns (statistic (P,), spread (P, k), weight (P, k), Welch df nu (P,)). A
    relabelling in which a group has no spread gives +inf (its weight is infinite).
    """
    k = sizes.size
    diag = np.diagonal(B, axis1=1, axis2=2)                     # (P, k)
    ss = t - diag / sizes
    ss = np.where(np.abs(ss) <= _SPREAD_RTOL * abs(total), 0.0, ss)
    spread = ss / (sizes - 1)
    nn = diag / sizes ** 2
    dist = nn[:, :, None] + nn[:, None, :] - 2 * B / np.outer(sizes, sizes)
    with np.errstate(divide="ignore", invalid="ignore"):
        w = sizes / spread
        big_w = w.sum(axis=1)
        num = np.einsum("pj,pjl,pl->p", w, dist, w) / 2 / big_w / (k - 1)
        h = ((1 - w / big_w[:, None]) ** 2 / (sizes - 1)).sum(axis=1)
        stat = num / (1 + 2 * (k - 2) / (k * k - 1) * h)
        nu = (k * k - 1) / (3 * h)
    stat = np.where((spread > 0).all(axis=1), stat, np.inf)
    return stat, spread, w, nu


def gram_blocks(resp: Response, onehot: np.ndarray, idx: np.ndarray, diag_g: np.ndarray):
    """B = E' G E (P, k, k) and t (P, k) for the relabellings ``idx`` (P, n).

    ``onehot`` (k - 1, n) holds the indicators of the first k - 1 groups; the last group's
    blocks follow from G 1 = 0 (rows and columns of G sum to zero).
    """
    km1, n = onehot.shape
    P = idx.shape[0]
    u = np.take(onehot, idx, axis=1)                            # (k-1, P, n)
    flat = u.reshape(km1 * P, n)
    if resp.features is not None:
        s = (flat @ resp.features).reshape(km1, P, -1)          # group sums of features
        part = np.einsum("jpq,lpq->pjl", s, s)
    else:
        v = (flat @ resp.gower).reshape(km1, P, n)
        part = np.einsum("jpn,lpn->pjl", v, u)
    B = np.empty((P, km1 + 1, km1 + 1))
    B[:, :km1, :km1] = (part + part.transpose(0, 2, 1)) / 2
    B[:, :km1, km1] = B[:, km1, :km1] = -part.sum(axis=2)
    B[:, km1, km1] = part.sum(axis=(1, 2))
    t = np.empty((P, km1 + 1))
    t[:, :km1] = np.einsum("jpn,n->pj", u, diag_g)
    t[:, km1] = diag_g.sum() - t[:, :km1].sum(axis=1)
    return B, t


def diagonal(resp: Response) -> np.ndarray:
    """G_ii for every sample (squared norms of the centred features)."""
    if resp.features is not None:
        return np.einsum("ij,ij->i", resp.features, resp.features)
    return np.ascontiguousarray(np.diagonal(resp.gower))


def welch_statistic(data, codes) -> float:
    """W_d of the grouping ``codes`` (integers 0..k-1, every group >= 2 members).

    ``data``: a Dissimilarity, a feature matrix (n x q) or a vector (one variable).
    """
    resp = prepare_response(data)
    codes = np.asarray(codes, dtype=np.intp)
    k = int(codes.max()) + 1
    sizes = np.bincount(codes, minlength=k).astype(float)
    onehot = (codes[None, :] == np.arange(k - 1)[:, None]).astype(float)
    B, t = gram_blocks(resp, onehot, np.arange(resp.n)[None, :], diagonal(resp))
    return float(statistic_batch(B, t, sizes, float(diagonal(resp).sum()))[0][0])


def run_permutations(resp: Response, codes: np.ndarray, perms: Permutations, progress, cancel):
    """Observed W_d, spreads, weights, group sizes and Welch df, and the permuted W_d with
    their Welch df."""
    k = int(codes.max()) + 1
    sizes = np.bincount(codes, minlength=k).astype(float)
    onehot = (codes[None, :] == np.arange(k - 1)[:, None]).astype(float)
    diag_g = diagonal(resp)
    total = float(diag_g.sum())
    B, t = gram_blocks(resp, onehot, np.arange(resp.n)[None, :], diag_g)
    stat, spread, weight, nu = (a[0] for a in statistic_batch(B, t, sizes, total))
    q = None if resp.features is None else resp.features.shape[1]
    size = default_batch_size(resp.n, k - 1, q)
    null = np.empty((2, perms.total))
    done = 0
    for idx in perms.batches(size):
        if cancel is not None and cancel():
            raise Cancelled(f"stopped after {done} of {perms.total} permutations; "
                            "no result was produced.")
        b = idx.shape[0]
        out = statistic_batch(*gram_blocks(resp, onehot, idx, diag_g), sizes, total)
        null[0, done:done + b], null[1, done:done + b] = out[0], out[3]
        done += b
        if progress is not None:
            progress(done, perms.total)
    return float(stat), spread, weight, sizes, float(nu), null[0], null[1]


def effective_dims(resp: Response, codes: np.ndarray, sizes: np.ndarray) -> float:
    """f = tr(V)^2 / tr(V^2), V = sum_j S_j / n_j the covariance of the centroid
    differences (S_j the covariance of group j, from the within-group residuals):
    the degrees of freedom of a chi-square that matches the first two moments of a
    quadratic form in normal variables (Box 1954). 1 for one variable; at least 1.

    With residuals r_i (sample minus its group centroid) and a_i = 1 / (n_j (n_j - 1)):
    tr V = sum_i a_i ||r_i||^2 and tr V^2 = sum_il a_i a_l (r_i . r_l)^2. On the distance
    path the residual Gower matrix is built a block of rows at a time (O(n^2) time,
    O(n * rows) memory).
    """
    k = sizes.size
    a = 1.0 / (sizes * (sizes - 1))[codes]                    # weight of each sample
    scaled = (codes[:, None] == np.arange(k)[None, :]) / sizes  # n x k, columns average
    if resp.features is not None and resp.features.shape[1] <= resp.n:
        r = resp.features - (scaled.T @ resp.features)[codes]
        tr_v = float(np.einsum("i,ij,ij->", a, r, r))
        v = r.T @ (a[:, None] * r)
        tr_v2 = float(np.einsum("ij,ij->", v, v))
    else:
        if resp.features is not None:                          # more features than samples
            f = resp.features - (scaled.T @ resp.features)[codes]

            def rows_of(sl):
                return f[sl] @ f.T
        else:
            g = resp.gower
            m = g @ scaled                                     # n x k: row means by group
            means = scaled.T @ m                               # k x k: block means

            def rows_of(sl):                                   # rows of (I - H) G (I - H)
                return (g[sl] - m[sl][:, codes] - m[:, codes[sl]].T
                        + means[codes[sl]][:, codes])
        tr_v = tr_v2 = 0.0
        step = max(1, int(2**22 // max(resp.n, 1)))
        for start in range(0, resp.n, step):
            sl = slice(start, min(resp.n, start + step))
            r = rows_of(sl)
            tr_v += float(a[sl] @ r[np.arange(r.shape[0]), np.arange(sl.start, sl.stop)])
            r *= r
            tr_v2 += float(a[sl] @ (r @ a))
    if not (tr_v > 0 and tr_v2 > 0):
        return 1.0
    return max(1.0, tr_v * tr_v / tr_v2)


def calibrate(stat, nu, dims: float, k: int):
    """-log P(F > W) with F ~ F((k - 1) f, nu f): Welch's (1951) F reference widened to f
    dimensions (Box 1954), evaluated with each relabelling's own nu (prepivoting, Beran
    1988). Larger is more extreme; +inf for an infinite statistic."""
    stat = np.asarray(stat, dtype=float)
    nu = np.where(np.isfinite(nu) & (nu > 0), nu, 1.0)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        out = -stats.f.logsf(np.where(np.isfinite(stat), stat, 0.0), (k - 1) * dims,
                             nu * dims)
    return np.where(np.isinf(stat) & (stat > 0), np.inf, out)


def equivalent(level, nu: float, dims: float, k: int):
    """The W_d that, with the observed nu, has the calibrated tail -log P = ``level``."""
    with np.errstate(over="ignore", under="ignore"):
        return stats.f.isf(np.exp(-np.asarray(level, dtype=float)), (k - 1) * dims,
                           nu * dims)


def unit_response(resp: Response, level) -> Response:
    """The response of the unit centroids, centred again (unit sizes may differ)."""
    m = level.m
    if resp.features is not None:
        sums = np.zeros((m, resp.features.shape[1]))
        np.add.at(sums, level.codes, resp.features)
        f = sums / level.sizes[:, None]
        return Response(m, features=f - f.mean(axis=0))
    g = unit_centroid_gower(resp.gower, level)
    g = g - g.mean(axis=0)
    g = g - g.mean(axis=1, keepdims=True)
    return Response(m, gower=(g + g.T) / 2)


def remove_blocks(resp: Response, blocks) -> Response:
    """The response with every block's centroid removed: (I - H_b) G (I - H_b).

    Relabelling within blocks leaves block membership unchanged, so the residuals are
    computed once. Without this, block-to-block variation would enter every group's spread
    but not the difference of the group centroids (each block is represented in each group),
    and the studentised statistic would lose its calibration.
    """
    codes = np.unique(np.asarray(blocks).astype(str), return_inverse=True)[1].ravel()
    indicators = (codes[:, None] == np.arange(codes.max() + 1)[None, :]).astype(float)
    _, q, _ = nested_bases(None, indicators)
    return resp.residual(q)
