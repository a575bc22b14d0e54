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
           "effective_dims", "residual_blocks", "noise_moments", "calibrate", "equivalent",
           "unit_response", "remove_blocks"]

#: Largest k x q x q stack of group covariances built at once (floats); beyond it the
#: residual Gram matrix is used a block of rows at a time.
_COV_FLOATS = 2 ** 22
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


def residual_blocks(resp: Response, codes: np.ndarray, sizes: np.ndarray):
    """(t, Q, P): t_j = sum_{i in j} ||r_i||^2, Q_jl = sum_{i in j, l in l} (r_i . r_l)^2
    and P_j = sum_{i in j} ||r_i||^4, r_i a sample minus its group centroid, from features
    or the Gower matrix.

    On the distance path the residual Gower matrix is built a block of rows at a time
    (O(n^2) time, O(n * rows) memory).
    """
    k = sizes.size
    member = (codes[:, None] == np.arange(k)[None, :]).astype(float)   # n x k
    scaled = member / sizes                                             # columns average
    q_dim = None if resp.features is None else resp.features.shape[1]
    if q_dim is not None and q_dim <= resp.n and k * q_dim * q_dim <= _COV_FLOATS:
        r = resp.features - (scaled.T @ resp.features)[codes]
        norms = np.einsum("ij,ij->i", r, r)
        c = np.stack([r[codes == j].T @ r[codes == j] for j in range(k)])  # k x q x q
        flat = c.reshape(k, -1)
        return member.T @ norms, flat @ flat.T, member.T @ norms ** 2
    if resp.features is not None:                  # many features: residual Gram rows
        f = resp.features - (scaled.T @ resp.features)[codes]

        def rows_of(sl):
            return f[sl] @ f.T
    else:
        g = resp.gower
        m = g @ scaled                                         # n x k: row means by group
        means = scaled.T @ m                                   # k x k: block means

        def rows_of(sl):                                       # rows of (I - H) G (I - H)
            return (g[sl] - m[sl][:, codes] - m[:, codes[sl]].T
                    + means[codes[sl]][:, codes])
    t, q, p4 = np.zeros(k), np.zeros((k, k)), np.zeros(k)
    step = max(1, int(2**22 // max(resp.n, 1)))
    for start in range(0, resp.n, step):
        sl = slice(start, min(resp.n, start + step))
        r = rows_of(sl)
        norms = r[np.arange(r.shape[0]), np.arange(sl.start, sl.stop)]
        t += member[sl].T @ norms
        p4 += member[sl].T @ norms ** 2
        r *= r
        q += member[sl].T @ (r @ member)
    return t, q, p4


def effective_dims(resp: Response, codes: np.ndarray, sizes: np.ndarray, *,
                   corrected: bool = True) -> float:
    """f = tr(V)^2 / tr(V^2), V = sum_j Sigma_j / n_j the covariance of the centroid
    differences: the degrees of freedom of a chi-square that matches the first two moments
    of a quadratic form in normal variables (Box 1954). 1 for one variable; at least 1.

    ``corrected=False`` plugs the groups' sample covariances S_j in for the Sigma_j. That
    estimate is biased low when a group has few samples or heavy-tailed scatter: S_j has
    rank at most n_j - 1 (4 samples make V look 3-dimensional whatever the data), and
    tr S_j^2 carries the fourth moments. The F reference of :func:`calibrate` then has too
    heavy a tail and the test turns conservative (measured: 2.7 % of null data sets
    rejected at 5 % with 4 vs 12 samples in 5 dimensions, 2.2-2.5 % with
    Dirichlet-multinomial counts, where the plug-in f was 3.6 for a true 29). By default
    the squares of group j's own terms are estimated by U-statistics, unbiased for any
    distribution with four moments (:func:`noise_moments`); cross terms between groups
    are unbiased as they are.
    """
    t, q, p4 = residual_blocks(resp, codes, sizes)
    num, den = noise_moments(t, q, p4, sizes, corrected=corrected)
    if corrected and not (num > 0 and den > 0):
        num, den = noise_moments(t, q, p4, sizes, corrected=False)
    if not (num > 0 and den > 0):
        return 1.0
    return max(1.0, num / den)


def noise_moments(t, q, p4, sizes, *, corrected: bool = True) -> tuple[float, float]:
    """Estimates of (tr V)^2 and tr V^2 from :func:`residual_blocks`.

    With n = n_j, T = t_j, F = Q_jj, P = P_j (a group's residual Gram matrix g: T = tr g,
    F = ||g||_F^2, P = sum_i g_ii^2), the U-statistics over distinct samples
    (1/4) E[||x_1 - x_2||^2 ||x_3 - x_4||^2] = (tr Sigma)^2 and
    (1/4) E[((x_1 - x_2)'(x_3 - x_4))^2] = tr Sigma^2 are (groups of 4 or more):

        (tr Sigma)^2 ~ ((n^2 - 3n + 1) T^2 - n (n - 1) P + 2 F) / (n (n - 1) (n - 2) (n - 3))
        tr Sigma^2   ~ ((n - 2) F + T^2 / (n - 1) - n P) / (n (n - 2) (n - 3))

    (the second is Himeno & Yamada's 2014 estimator; both are checked against the sums
    over all 4-tuples in tests/core/test_welch.py). Groups of 2 or 3 keep the plug-in
    terms (T / (n - 1))^2 and F / (n - 1)^2. Then (tr V)^2 = (sum_j tr S_j / n_j)^2 with
    each own square replaced, tr V^2 = sum_{j, l} tr(S_j S_l) / (n_j n_l) with each
    tr S_j^2 replaced.
    """
    t, q, p4, n = (np.asarray(v, dtype=float) for v in (t, q, p4, sizes))
    m = n - 1.0
    a = 1.0 / n
    tr_s = t / m                                               # tr S_j
    prod = q / (m[:, None] * m[None, :])                       # tr S_j S_l
    own = np.diag(prod).copy()                                 # tr S_j^2
    if not corrected:
        return float(tr_s @ a) ** 2, float(a @ prod @ a)
    big = n >= 4
    with np.errstate(divide="ignore", invalid="ignore"):
        four = n * (n - 1) * (n - 2) * (n - 3)
        sq_tr = np.where(big, ((n * n - 3 * n + 1) * t ** 2 - n * m * p4 + 2 * np.diag(q))
                         / four, tr_s ** 2)
        tr_sq = np.where(big, ((n - 2) * np.diag(q) + t ** 2 / m - n * p4) * m / four,
                         own)
    num = float(tr_s @ a) ** 2 - float(np.sum((tr_s ** 2 - sq_tr) * a ** 2))
    den = float(a @ prod @ a - np.sum((own - tr_sq) * a ** 2))
    return num, den


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
