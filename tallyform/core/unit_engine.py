"""The between-unit stratum computed on unit means: weighted sequential pseudo-F under
whole-unit relabelling, and the precision weights of unbalanced units.

A term constant within units has sample-level sums of squares equal to weighted unit-level
ones (weights = samples per unit), so a between-unit stratum needs only the m unit means.
With unbalanced units (missing visits) the means are weighted by their estimated precision
(:func:`precision_weights`), and a whole-unit relabelling moves each unit's mean together
with its weight to another design row: the weighted cross-products, and the Cholesky factor
that turns them into sequential contributions, are recomputed for every permutation, in
batches, with no array of size permutations x units x coordinates.

References
----------
Freedman, D. & Lane, D. (1983). J. Bus. Econ. Stat. 1, 292-298.
Searle, S. R., Casella, G. & McCulloch, C. E. (1992). Variance Components, ch. 3. Wiley.
"""
from __future__ import annotations

from typing import Callable

import numpy as np
import scipy.linalg

from .errors import Cancelled, DesignError
from .permutation import Response, clean_ss, pseudo_f_ratio

__all__ = ["unit_f", "full_rank_columns", "precision_weights", "unit_residual"]

_BATCH_BYTES = 48 * 2**20


def full_rank_columns(blocks, *, tol: float = 1e-9) -> tuple[np.ndarray, list]:
    """The columns of ``blocks`` (a list of (m, c) arrays, in nested order) that add to the
    span of the columns before them; returns (X, counts per block)."""
    m = next(np.asarray(b).shape[0] for b in blocks)
    q = np.empty((m, 0))
    kept, counts = [], []
    for b in blocks:
        x = np.asarray(b, dtype=np.float64).reshape(m, -1)
        if x.shape[1] == 0:
            counts.append(0)
            continue
        norms = np.sqrt((x ** 2).sum(axis=0))
        xn = x / np.where(norms > 0, norms, 1.0)
        r = xn - q @ (q.T @ xn)
        r -= q @ (q.T @ r)
        _, rr, piv = scipy.linalg.qr(r, mode="economic", pivoting=True)
        k = int(np.sum(np.abs(np.diag(rr)) > tol))
        sel = np.sort(piv[:k])
        kept.append(x[:, sel])
        counts.append(k)
        if k:
            q = np.linalg.qr(np.hstack([q, r[:, sel]]))[0]
    X = np.hstack(kept) if kept else np.empty((m, 0))
    return X, counts


def unit_f(y: np.ndarray, signs: np.ndarray, weights: np.ndarray, base, before, tested,
           later, reduced, perms, *, batch_size: int | None = None,
           progress: Callable[[int, int], None] | None = None,
           cancel: Callable[[], bool] | None = None, offset: int = 0,
           grand_total: int | None = None) -> tuple:
    """Pseudo-F of a between-unit term and its distribution under whole-unit relabelling.

    Parameters
    ----------
    y : ndarray (m, r)
        Coordinates of the unit means (signed axes: ``signs``), see
        :meth:`tallyform.core.permutation.Response.unit_means`.
    weights : ndarray (m,)
        Weight of every unit mean (its number of samples, or its precision).
    base, before, tested, later : ndarray (m, c)
        Unit-level columns: the base of the stratum (intercept, or parent-unit indicators),
        the terms the numerator conditions on, the tested term, later terms.
    reduced : ndarray (m, c)
        The reduced model (base included) whose weighted residuals are permuted.
    perms : scheme over the m units (``batches`` yield (B, m) index arrays).

    Returns
    -------
    (observed, null, ss_t, ss_res, df_t, df_res)

    Notes
    -----
    Relabelling ``idx`` gives unit u the design row of unit idx[u]; equivalently the data
    and the weight of unit idx^-1[u] move to position u. The permuted data are
    Y* = Yhat_Z + (I - H*_Z) e_Z[idx^-1] (Freedman & Lane 1983, the permuted residuals
    projected back onto the residual space of Z, as for samples) with weights w[idx^-1],
    H*_Z the projection onto Z under those weights, and the weighted sequential statistic
    is computed on them, the permuted residuals rescaled by sqrt((m - k_base) / (m - k_Z))
    as for samples (:mod:`tallyform.core.permutation`). With the reduced model equal to the
    base (no other term in the stratum) the factor is 1 and Y* equals the relabelled data up
    to the base, which every model contains, so the test is the exact randomisation test of
    whole-unit assignment, whatever the unit sizes and weights.

    Every quantity is a small weighted cross-product: with X the (full-rank) design,
    X' W* Y* = X' W* Yhat_Z + X[idx]' W e_Z - (X' W* Z)(Z' W* Z)^-1 Z[idx]' W e_Z, and the
    Cholesky factor L of X' W* X turns it into the sequential contributions of the columns,
    c = L^-1 X' W* Y* (the R factor of the weighted QR). Cost O(B m k (k + r)) per batch
    of B permutations; nothing of size B x m x r is formed.
    """
    y = np.asarray(y, dtype=np.float64)
    m, r = y.shape
    w = np.asarray(weights, dtype=np.float64)
    X, counts = full_rank_columns([base, before, tested, later])
    k0, k1, kt, kw = counts
    kb, k = k0 + k1, sum(counts)
    df_t, df_res = kt, m - k
    if df_t == 0:
        raise DesignError("the tested term adds nothing to the between-unit terms before it "
                          "(its columns are aliased with theirs).")
    if df_res <= 0:
        raise DesignError(f"the between-unit terms use all {m} units, leaving no replicate "
                          "units to test them against.",
                          hint="Use fewer between-unit terms or levels, or more units.")
    Z, _ = full_rank_columns([reduced])
    sw = np.sqrt(w)
    beta = np.linalg.lstsq(sw[:, None] * Z, sw[:, None] * y, rcond=None)[0]
    fitted = Z @ beta
    e = y - fitted
    f2 = (fitted ** 2) @ signs                                   # ||Yhat_u||^2, signed
    e2 = float(w @ ((e ** 2) @ signs))
    ident = np.arange(m)[None, :]
    obs = _unit_batch(ident, X, Z, w, fitted, e, f2, e2, signs, 1.0)
    c2 = (m - k0) / (m - Z.shape[1])            # residual variance correction (see notes)
    base_ss = obs[2][0, :k0].sum()
    scale = abs(float(obs[1][0]) - float(base_ss))
    ss_t = clean_ss(float(obs[2][0, kb:kb + kt].sum()), scale)
    ss_res = clean_ss(float(obs[1][0] - obs[2][0].sum()), scale)
    observed = pseudo_f_ratio(ss_t, ss_res, df_t, df_res)
    size = batch_size or max(16, int(_BATCH_BYTES // (8 * m * (2 * k + 2 * Z.shape[1] + 2))))
    null = np.empty(perms.total)
    done = 0
    grand = grand_total if grand_total is not None else perms.total
    for idx in perms.batches(size):
        if cancel is not None and cancel():
            raise Cancelled(f"stopped after {offset + done} of {grand} permutations; "
                            "no result was produced.")
        b = idx.shape[0]
        _, tot, sq = _unit_batch(idx, X, Z, w, fitted, e, f2, e2, signs, c2)
        num = sq[:, kb:kb + kt].sum(axis=1)
        den = tot - sq.sum(axis=1)
        null[done:done + b] = pseudo_f_ratio(clean_ss(num, scale), clean_ss(den, scale), df_t, df_res)
        done += b
        if progress is not None:
            progress(offset + done, grand)
    return observed, null, float(ss_t), float(ss_res), int(df_t), int(df_res)


def _chol(a: np.ndarray) -> np.ndarray:
    """Cholesky factors of a stack (B, k, k) of small positive definite matrices, vectorised
    over the stack (k is a handful of design columns)."""
    k = a.shape[1]
    low = np.zeros_like(a)
    for j in range(k):
        d = a[:, j, j] - (low[:, j, :j] ** 2).sum(axis=1)
        low[:, j, j] = np.sqrt(np.maximum(d, 1e-300))
        for i in range(j + 1, k):
            low[:, i, j] = (a[:, i, j] - (low[:, i, :j] * low[:, j, :j]).sum(axis=1)) \
                / low[:, j, j]
    return low


def _forward(low: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve L c = b for a stack of lower-triangular L (B, k, k) and b (B, k, r)."""
    c = np.empty_like(b)
    for i in range(low.shape[1]):
        acc = b[:, i, :] - np.einsum("bp,bpr->br", low[:, i, :i], c[:, :i, :])
        c[:, i, :] = acc / low[:, i, i, None]
    return c


def _backward(low: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve L' c = b for a stack of lower-triangular L."""
    k = low.shape[1]
    c = np.empty_like(b)
    for i in range(k - 1, -1, -1):
        acc = b[:, i, :] - np.einsum("bp,bpr->br", low[:, i + 1:, i], c[:, i + 1:, :])
        c[:, i, :] = acc / low[:, i, i, None]
    return c


def _unit_batch(idx, X, Z, w, fitted, e, f2, e2, signs, c2) -> tuple:
    """(weights*, total*, signed sequential contributions (B, k)) for a batch of unit
    relabellings (see :func:`unit_f`). Cross-products are single matrix products: the
    weights at each position times per-unit outer products, and gathered design rows times
    the weighted residuals."""
    b, m = idx.shape
    k, kz, r = X.shape[1], Z.shape[1], e.shape[1]
    inv = np.argsort(idx, axis=1)
    ws = w[inv]                                                  # weight at each position
    outer = np.hstack([np.einsum("mi,mj->mij", X, X).reshape(m, -1),
                       np.einsum("mi,mj->mij", X, Z).reshape(m, -1),
                       np.einsum("mi,mj->mij", Z, Z).reshape(m, -1),
                       np.einsum("mi,mr->mir", X, fitted).reshape(m, -1)])
    prods = ws @ outer
    gx = prods[:, :k * k].reshape(b, k, k)                       # X' W* X
    o = k * k
    gxz = prods[:, o:o + k * kz].reshape(b, k, kz)
    o += k * kz
    gz = prods[:, o:o + kz * kz].reshape(b, kz, kz)              # Z' W* Z
    o += kz * kz
    xf = prods[:, o:].reshape(b, k, r)                           # X' W* Yhat_Z
    we = w[:, None] * e
    xe = (np.ascontiguousarray(np.transpose(X[idx], (0, 2, 1))).reshape(b * k, m)
          @ we).reshape(b, k, r)                                 # X' W* e[idx^-1]
    ze = (np.ascontiguousarray(np.transpose(Z[idx], (0, 2, 1))).reshape(b * kz, m)
          @ we).reshape(b, kz, r)
    lz = _chol(gz)
    v = _forward(lz, ze)                                         # Z-fit of the permuted e
    rhs = xf + np.sqrt(c2) * (xe - gxz @ _backward(lz, v))      # X' W* Y*
    c = _forward(_chol(gx), rhs)                                 # B x k x r
    sq = (c * c) @ signs
    tot = ws @ f2 + c2 * (e2 - ((v * v) @ signs).sum(axis=1))
    return ws, tot, sq


def precision_weights(resp: Response, codes: np.ndarray, y: np.ndarray, signs: np.ndarray,
                      parent: np.ndarray | None = None) -> tuple[np.ndarray, tuple]:
    """Weights of the unit means: their estimated precision 1 / (s2_u + s2_e / n_u).

    s2_e: the pooled variance of samples about their unit mean, tr((I - H_u) G) / (n - m);
    s2_u: the variance of unit effects, by the method of moments of the unbalanced one-way
    layout within parent units (Searle, Casella & McCulloch 1992, ch. 3), set to 0 when
    negative. Both use the unit structure only (never the tested terms), so relabelling
    units, which moves each unit's data together with its weight, leaves them unchanged.
    The weights are scaled to sum to n: with equal unit sizes they are the unit sizes, and
    every sum of squares is the classical sample-level one; with unequal sizes they move
    from the unit sizes (no unit effects) towards equal weights (unit effects dominate).

    Returns (weights, (s2_u, s2_e)).
    """
    codes = np.asarray(codes, dtype=np.intp)
    m = int(codes.max()) + 1
    size = np.bincount(codes, minlength=m).astype(np.float64)
    n = float(size.sum())
    if size.min() == size.max() or n <= m:
        return size.copy(), (np.nan, np.nan)
    s2e = max(resp.centred_within(codes).total(), 0.0) / (n - m)
    p = np.zeros(m, dtype=np.intp) if parent is None else np.asarray(parent, dtype=np.intp)
    base = np.eye(int(p.max()) + 1)[p]
    ss_b, df_b = unit_residual(y, signs, size, base)
    n_p = np.bincount(p, weights=size)
    sq_p = np.bincount(p, weights=size ** 2)
    n0 = n - float((sq_p / n_p).sum())
    s2u = max((ss_b - df_b * s2e) / n0, 0.0) if n0 > 0 else 0.0
    if s2e <= 0:
        return np.full(m, n / m), (s2u, s2e)
    w = 1.0 / (s2u + s2e / size)
    return w * (n / w.sum()), (s2u, s2e)


def unit_residual(y, signs, weights, X) -> tuple[float, int]:
    """Weighted residual sum of squares of the unit means after the unit-level columns X
    (with X the base alone: the total of a between-unit stratum) and its degrees of
    freedom."""
    w = np.asarray(weights, dtype=np.float64)
    Xs, (k,) = full_rank_columns([X])
    sw = np.sqrt(w)
    q = np.linalg.qr(sw[:, None] * Xs)[0]
    yw = sw[:, None] * np.asarray(y, dtype=np.float64)
    raw = float(((yw ** 2) @ signs).sum())
    return raw - float((((q.T @ yw) ** 2) @ signs).sum()), int(len(w) - k)
