"""Per-taxon terms behind :func:`tallyform.core.contributions.taxon_contributions`.

The shape side's exact split (feature centroids) and average over between-group pairs, the
size side's ratios of mean abundance, and the bootstrap they share: the resamples are counts
(how often each sample is drawn, ``rng.multinomial``), so a bootstrap centroid is one matrix
product and never copies the samples.
"""
from __future__ import annotations

import warnings

import numpy as np

from .errors import Cancelled, InputError
from .memory import check_memory
from .table import CommunityTable, _listing

__all__ = ["SPLIT_MEASURES", "PAIR_MEASURES", "boot_weights", "centroid_noise", "interval",
           "Ticker", "split_terms", "pair_terms", "size_ratios"]

SPLIT_MEASURES = ("hellinger", "chi_square", "chord", "aitchison", "euclidean")
# measures that are, for one pair, a sum over taxa: (on presence?, denominator of the pair)
PAIR_MEASURES = {
    "bray_curtis": (False, "sum"),
    "sorensen": (True, "sum"),
    "quantitative_jaccard": (False, "max"),
    "jaccard": (True, "max"),
    "manhattan": (False, None),
    "canberra": (False, "taxon"),
}
_BLOCK_BYTES = 32e6


def boot_weights(rng, codes: np.ndarray, n_boot: int) -> np.ndarray:
    """n_boot x n resampling weights: how often each sample's unit is drawn.

    ``codes`` numbers the units of one group's samples 0..m-1 (``arange(n)`` when every
    sample is its own unit); the m units are drawn with replacement and a sample weighs as
    often as its unit was drawn, so samples of one unit stay together.
    """
    m = int(codes.max()) + 1
    counts = rng.multinomial(m, np.full(m, 1.0 / m), size=n_boot).astype(np.float64)
    return counts[:, codes]


def centroid_noise(F: np.ndarray, codes: np.ndarray) -> np.ndarray:
    """Sampling variance of a group centroid, per column, from m independent units.

    Linearised variance of the ratio mean sum_u S_u / sum_u n_u (S_u the column sums of unit
    u, n_u its samples): m / (m - 1) * sum_u (S_u - n_u fbar)^2 / N^2, N = sum_u n_u. With
    one sample per unit it is the usual s^2 / n (divisor n - 1 in s^2).
    """
    m = int(codes.max()) + 1
    if m < 2:
        return np.full(F.shape[1], np.nan)
    fbar = F.mean(axis=0)
    S = np.zeros((m, F.shape[1]))
    np.add.at(S, codes, F)
    nu = np.bincount(codes, minlength=m).astype(np.float64)
    dev = S - nu[:, None] * fbar
    return m / (m - 1) * np.sum(dev * dev, axis=0) / F.shape[0] ** 2


def interval(draws: np.ndarray, level: float) -> tuple[np.ndarray, np.ndarray]:
    """Percentile interval along axis 0, the (B+1)-rule order statistics.

    No interpolation, so infinite draws give infinite bounds rather than NaN; NaN draws
    (a ratio 0/0 in some resamples) are left out, and a column of NaN gives NaN bounds.
    """
    lo, hi = (1 - level) / 2, 1 - (1 - level) / 2
    with warnings.catch_warnings():     # an all-NaN column gives NaN bounds, handled by callers
        warnings.simplefilter("ignore", RuntimeWarning)
        q = np.nanquantile(draws, [lo, hi], axis=0, method="inverted_cdf")
    return q[0], q[1]


def _chunks(n_boot: int, bytes_per_draw: float):
    step = int(max(1, min(n_boot, _BLOCK_BYTES // max(bytes_per_draw, 1.0))))
    return [(s, min(s + step, n_boot)) for s in range(0, n_boot, step)]


class Ticker:
    """Progress and cancellation over the bootstrap blocks of both sides."""

    def __init__(self, total: int, progress, cancel):
        self.done, self.total, self.progress, self.cancel = 0, total, progress, cancel

    def check(self):
        if self.cancel is not None and self.cancel():
            raise Cancelled(f"taxon contributions stopped after {self.done} of {self.total} "
                            "bootstrap resamples.")

    def step(self, k: int):
        self.done += k
        if self.progress is not None:
            self.progress(self.done, self.total)


# ============================================================================== shape: split
def split_terms(sub: CommunityTable, ia, ib, measure, transform, params, Wa, Wb, ticker, *,
                codes_a, codes_b):
    """Exact split of ||fbar_a - fbar_b||^2 over the columns of the feature matrix."""
    from .dissimilarity import dissimilarity
    d = dissimilarity(sub, measure, transform=transform, **params)
    F = np.asarray(d.features, dtype=np.float64)
    if F.shape[1] != sub.n_taxa:   # every registered feature map keeps one column per taxon
        raise InputError(f"the {measure} features do not have one column per taxon.")
    Fa, Fb = F[ia], F[ib]
    ca, cb = Fa.mean(axis=0), Fb.mean(axis=0)
    diff = cb - ca
    terms = diff * diff
    noise = centroid_noise(Fa, codes_a) + centroid_noise(Fb, codes_b)
    boot_terms = boot_total = None
    if Wa is not None:
        B = Wa.shape[0]
        boot_terms = np.empty((B, F.shape[1]))
        for s, e in _chunks(B, 8.0 * 2 * F.shape[1]):
            ticker.check()
            wa, wb = Wa[s:e], Wb[s:e]
            dd = (wb @ Fb) / wb.sum(axis=1)[:, None] - (wa @ Fa) / wa.sum(axis=1)[:, None]
            boot_terms[s:e] = dd * dd
            ticker.step(e - s)
        boot_total = boot_terms.sum(axis=1)
    extra = {"params": dict(d.params), "notes": d.notes, "size_free": bool(
        d.properties.get("size_free", False)), "feature_a": ca, "feature_b": cb,
        "noise": noise, "diff": diff}
    return terms, boot_terms, boot_total, extra


# ============================================================================== shape: average
def pair_terms(sub: CommunityTable, ia, ib, rec, transform, Wa, Wb, ticker):
    """Per-taxon terms of each between-group pair, averaged over the n_a n_b pairs."""
    from .transforms import get_transform
    tr = get_transform(transform)
    x = tr.apply(sub.values, labels=sub.sample_labels)
    if rec.nonnegative and np.any(x < 0):
        raise InputError(f"the {rec.label} measure needs values >= 0, but the transformation "
                         f"{tr.name!r} gives negative values.")
    presence, den = PAIR_MEASURES[rec.name]
    if presence:
        x = (x > 0).astype(np.float64)
    empty = ~(x != 0).any(axis=1)
    if rec.empty_samples == "error" and empty.any():
        names = [str(sub.sample_labels[i]) for i in np.flatnonzero(empty)]
        raise InputError(f"the {rec.label} measure is undefined for samples with nothing in "
                         f"them; {len(names)} sample(s) of the two groups are all 0 after "
                         f"the transformation {tr.name!r}: {_listing(names)}.",
                         hint="Remove them or choose another measure.")
    xa, xb = x[ia], x[ib]
    na, nb, p = len(ia), len(ib), x.shape[1]
    check_memory(na * nb * p * 8.0 * 2, f"the per-taxon terms of {na} x {nb} between-group "
                 f"pairs and {p} taxa",
                 alternatives="Use a measure with an exact split (hellinger, chi_square, "
                              "aitchison), or fewer taxa.")
    T = np.abs(xa[:, None, :] - xb[None, :, :])           # na x nb x p
    if den == "sum":
        T /= (xa.sum(axis=1)[:, None] + xb.sum(axis=1)[None, :])[:, :, None]
    elif den == "max":
        T /= np.maximum(xa[:, None, :], xb[None, :, :]).sum(axis=2)[:, :, None]
    elif den == "taxon":
        s = np.abs(xa)[:, None, :] + np.abs(xb)[None, :, :]
        np.divide(T, s, out=T, where=s > 0)
        T[s == 0] = 0.0
    terms = T.mean(axis=(0, 1))
    boot_terms = boot_total = None
    if Wa is not None:
        B = Wa.shape[0]
        boot_terms = np.empty((B, p))
        flat = T.reshape(na, nb * p)
        for s, e in _chunks(B, 8.0 * nb * p):
            ticker.check()
            tmp = (Wa[s:e] @ flat).reshape(e - s, nb, p)
            pairs = Wa[s:e].sum(axis=1) * Wb[s:e].sum(axis=1)
            boot_terms[s:e] = np.einsum("bk,bkj->bj", Wb[s:e], tmp) / pairs[:, None]
            ticker.step(e - s)
        boot_total = boot_terms.sum(axis=1)
    extra = {"params": {}, "notes": (), "size_free": bool(rec.size_free),
             "feature_a": xa.mean(axis=0), "feature_b": xb.mean(axis=0), "noise": None,
             "diff": xb.mean(axis=0) - xa.mean(axis=0)}
    return terms, boot_terms, boot_total, extra


# ============================================================================== size side
def size_ratios(x, e, ia, ib, pseudocount, Wa, Wb, ticker):
    """Per-taxon log2 ratios of mean abundance (per unit effort), b over a."""
    r = x.sum(axis=1)
    rbar = r.mean()
    pseudo = pseudocount * r / rbar                    # per sample, proportional to its total
    xp = x + pseudo[:, None]
    Ea, Eb = e[ia].sum(), e[ib].sum()
    mean_a, mean_b = x[ia].sum(axis=0) / Ea, x[ib].sum(axis=0) / Eb
    tot_a, tot_b = r[ia].sum() / Ea, r[ib].sum() / Eb
    with np.errstate(divide="ignore"):
        ratio = np.log2(xp[ib].sum(axis=0) / Eb) - np.log2(xp[ia].sum(axis=0) / Ea)
    ref = float(np.log2(tot_b / tot_a))
    out = {"mean_a": mean_a, "mean_b": mean_b, "log2_ratio": ratio, "ref": ref,
           "tot_a": tot_a, "tot_b": tot_b}
    if Wa is not None:
        B, p = Wa.shape[0], x.shape[1]
        boot = np.empty((B, p))
        boot_ref = np.empty(B)
        for s, e_ in _chunks(B, 8.0 * 2 * p):
            ticker.check()
            ea, eb = Wa[s:e_] @ e[ia], Wb[s:e_] @ e[ib]
            with np.errstate(divide="ignore", invalid="ignore"):
                boot[s:e_] = (np.log2(Wb[s:e_] @ xp[ib] / eb[:, None])
                              - np.log2(Wa[s:e_] @ xp[ia] / ea[:, None]))
                boot_ref[s:e_] = (np.log2(Wb[s:e_] @ r[ib] / eb)
                                  - np.log2(Wa[s:e_] @ r[ia] / ea))
            ticker.step(e_ - s)
        out["boot"], out["boot_ref"] = boot, boot_ref
    return out
