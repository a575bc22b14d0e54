"""Rarefaction and counting noise: the pieces that let shape and spread tests ignore size.

A sample of N individuals drawn from a community of composition q is (to a good
approximation) multinomial(N, q): its profile x / N is q plus counting noise of variance
q(1 - q) / N per taxon. Groups that differ only in their totals therefore differ in how
noisy their profiles are (Warton, Wright & Wang 2012), and a test of shape or spread that
reads profiles as they are mistakes that for a difference in composition.

Rarefaction (Sanders 1968; Hurlbert 1971) removes the difference exactly: a subsample of m
individuals drawn without replacement from a multinomial(N, q) sample is multinomial(m, q),
whatever N was. After one rarefaction of every sample to a common depth m, samples whose
communities follow the same law of composition are exchangeable, so a permutation test of
any statistic computed from them holds its level, whatever the law of the biology. The
hypergeometric thinning is the only kernel with that property (the degree-m Bernstein
polynomials are a basis, so the kernel taking binomial(N, q) to binomial(m, q) for every q is
unique), so no exchangeable representation keeps more than m individuals of a sample.

Several independent rarefactions give several valid p-values; they are combined without any
assumption on their dependence by Rueger's (1978) rule: (K / k) times the k-th smallest of K
p-values is a valid p-value (k = ceil(K / 2): about twice the median).

References
----------
Hurlbert, S. H. (1971). The nonconcept of species diversity: a critique and alternative
parameters. Ecology 52, 577-586.
Rueger, B. (1978). Das maximale Signifikanzniveau des Tests "Lehne H0 ab, wenn k unter n
gegebenen Tests zur Ablehnung fuehren". Metrika 25, 171-178.
Sanders, H. L. (1968). Marine benthic diversity: a comparative study. American Naturalist
102, 243-282.
Warton, D. I., Wright, S. T. & Wang, Y. (2012). Distance-based multivariate analyses
confound location and dispersion effects. Methods Ecol. Evol. 3, 89-101.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd

from .errors import InputError
from .random import as_rng
from .table import CommunityTable, as_table

__all__ = ["rarefied_table", "rarefied_counts", "multinomial_noise", "combine_draws",
           "MAX_TOTAL"]

#: Largest sample total the hypergeometric sampler takes (numpy's limit is 10**9).
MAX_TOTAL = 10**9 - 1


def _whole_counts(values: np.ndarray, labels=None) -> np.ndarray:
    """int64 copy of whole-number counts, or InputError naming the first fractional sample."""
    v = np.asarray(values, dtype=np.float64)
    frac = v != np.round(v)
    if frac.any():
        i, j = np.argwhere(frac)[0]
        where = f"sample {labels[i]!r}" if labels is not None else f"row {i + 1}"
        raise InputError(f"rarefaction draws individuals, so it needs whole-number counts; "
                         f"{where} holds {v[i, j]:g} ({int(frac.sum())} fractional cell(s)).",
                         hint="Use the raw counts (not biomass, cover, or already rarefied "
                              "or relative values).")
    totals = v.sum(axis=1)
    if totals.max(initial=0) > MAX_TOTAL:
        i = int(np.argmax(totals))
        where = f"sample {labels[i]!r}" if labels is not None else f"row {i + 1}"
        raise InputError(f"{where} has a total of {totals[i]:.4g} individuals; rarefaction "
                         f"handles totals up to {MAX_TOTAL + 1:.0e}.",
                         hint="Such totals carry no counting noise worth removing; compare "
                              "with adjust='none'.")
    return np.rint(v).astype(np.int64)


#: Samples with at most this many individuals are drawn individual by individual; larger
#: ones taxon by taxon (each way is exact; this is only the faster one for the size).
_SMALL_TOTAL = 4096


def rarefied_counts(counts, depth: int, rng) -> np.ndarray:
    """Draw ``depth`` individuals without replacement from every row of ``counts``.

    Parameters
    ----------
    counts : ndarray of int, shape (n, p)
        Whole-number counts; every row total must be at least ``depth``.
    depth : int
    rng : numpy.random.Generator

    Returns
    -------
    ndarray of int64, shape (n, p)
        Rows summing to ``depth``, never above the observed counts.

    Notes
    -----
    Both ways below give the multivariate hypergeometric law (every subset of ``depth``
    individuals equally likely). Small samples: the individuals are numbered taxon by taxon,
    ``depth`` distinct numbers are drawn uniformly and mapped back to their taxa through the
    cumulative counts. Large samples: taxon by taxon, the number drawn from taxon j given
    the individuals still to draw and those not yet considered is hypergeometric (the chain
    rule of the multivariate hypergeometric law), vectorised over samples.
    """
    x = np.asarray(counts, dtype=np.int64)
    depth = int(depth)
    n, p = x.shape
    totals = x.sum(axis=1)
    if np.any(totals < depth):
        raise InputError(f"every row needs at least {depth} individuals to draw {depth}; "
                         f"the smallest has {int(totals.min())}.")
    out = x.copy()                                  # rows already at the depth stay as they are
    small = np.flatnonzero((totals > depth) & (totals <= _SMALL_TOTAL))
    for i in small:
        cum = np.cumsum(x[i])
        picked = rng.choice(int(totals[i]), size=depth, replace=False, shuffle=False)
        out[i] = np.bincount(np.searchsorted(cum, picked, side="right"), minlength=p)
    large = np.flatnonzero(totals > max(depth, _SMALL_TOTAL))
    if large.size:
        xl = x[large]
        left = totals[large].copy()
        need = np.full(large.size, depth, dtype=np.int64)
        yl = np.zeros_like(xl)
        for j in range(p):
            good = xl[:, j]
            active = (need > 0) & (good > 0)
            if active.any():
                take = rng.hypergeometric(good[active], left[active] - good[active],
                                          need[active])
                yl[active, j] = take
                need[active] -= take
            left -= good
        out[large] = yl
    return out


def rarefied_table(table, *, depth: int | None = None, rng=None) -> CommunityTable:
    """One rarefaction of every sample to a common number of individuals.

    Parameters
    ----------
    table : CommunityTable, DataFrame or array
        Whole-number counts.
    depth : int, optional
        Individuals kept per sample; default the smallest sample total. Samples with fewer
        individuals are left out (listed in the table's notes).
    rng : None, int or numpy.random.Generator

    Returns
    -------
    CommunityTable
        Every sample with ``depth`` individuals; taxa no longer seen in any sample are
        dropped (``table.dropped``); sample information is kept.

    Raises
    ------
    InputError
        Fractional counts, a depth below 1 or above the largest total.

    References
    ----------
    Sanders, H. L. (1968). American Naturalist 102, 243-282. Hurlbert, S. H. (1971).
    Ecology 52, 577-586.

    Examples
    --------
    >>> tab = CommunityTable([[5, 3, 0], [40, 10, 50]])          # synthetic
    >>> tab2 = rarefied_table(tab, rng=1)
    >>> tab2.totals.tolist()
    [8.0, 8.0]
    """
    tab = as_table(table)
    labels = tab.sample_labels
    x = whole_counts(tab)
    depth, keep, notes = check_depth(x.sum(axis=1), depth, labels)
    rng = as_rng(rng)
    y = rarefied_counts(x[keep], depth, rng)
    kept = labels[keep]
    frame = pd.DataFrame(y.astype(np.float64), index=kept, columns=tab.taxon_labels)
    info = tab.samples.loc[list(kept)]
    # rarefied reads stay relative data (their totals are the chosen depth, not sizes)
    out = CommunityTable(frame, info if info.shape[1] else None,
                         tab.taxa if tab.taxa.shape[1] else None, empty="drop",
                         abundance="relative" if tab.reads is not None else "absolute")
    out._notes = tuple(tab.notes) + tuple(notes) + (
        f"Rarefied: {depth} individuals drawn without replacement from every sample.",)
    return out


def check_depth(totals: np.ndarray, depth, labels) -> tuple[int, np.ndarray, list[str]]:
    """(depth, kept samples mask, notes) for a requested depth (None: the smallest total)."""
    totals = np.asarray(totals)
    if depth is None:
        depth = int(totals.min())
    else:
        if isinstance(depth, (bool, np.bool_)) or not float(depth).is_integer():
            raise InputError(f"`depth` must be a whole number of individuals; got {depth!r}.")
        depth = int(depth)
        if depth < 1:
            raise InputError(f"`depth` must be at least 1; got {depth}.")
        if depth > totals.max():
            raise InputError(f"`depth` {depth} is above the largest sample total "
                             f"({int(totals.max())}).",
                             hint="Leave depth=None to use the smallest sample total.")
    keep = totals >= depth
    notes = []
    if not keep.all():
        out = [str(s) for s in np.asarray(labels)[~keep]]
        shown = ", ".join(repr(s) for s in out[:8]) + (" ..." if len(out) > 8 else "")
        notes.append(f"{len(out)} sample(s) hold fewer than {depth} individuals and were left "
                     f"out: {shown}.")
    return depth, keep, notes


def multinomial_noise(counts, weights=None) -> np.ndarray:
    """Unbiased estimate of each sample's counting noise, sum_j w_j q_j (1 - q_j) / N.

    For a multinomial(N, q) sample with profile a = x / N,
    E ||a - q||_w^2 = sum_j w_j q_j (1 - q_j) / N, and since
    E[a_j (1 - a_j)] = q_j (1 - q_j) (N - 1) / N, the estimate
    sum_j w_j a_j (1 - a_j) / (N - 1) is unbiased (common practice).

    Parameters
    ----------
    counts : array_like, shape (n, p)
        Whole-number counts, every total at least 2.
    weights : array_like, shape (p,), optional
        Taxon weights w_j (1 / c_j for chi-square distances); default 1.

    Returns
    -------
    ndarray, shape (n,)
    """
    x = np.asarray(counts, dtype=np.float64)
    N = x.sum(axis=1)
    if np.any(N < 2):
        raise InputError("the noise estimate divides by N - 1, so every sample needs at "
                         "least 2 individuals.")
    a = x / N[:, None]
    w = np.ones(x.shape[1]) if weights is None else np.asarray(weights, dtype=np.float64)
    return (a * (1.0 - a)) @ w / (N - 1.0)


def combine_draws(pvalues) -> tuple[float, int]:
    """Rueger's (1978) combination of K p-values with any dependence: (K / k) p_(k).

    k = ceil(K / 2), so about twice the median; for K = 1 the p-value itself. Returns the
    combined p-value (capped at 1) and the index of the draw that gave p_(k).

    Examples
    --------
    >>> combine_draws([0.01, 0.04, 0.02])        # (3 / 2) * 0.02
    (0.03, 2)
    """
    p = np.asarray(pvalues, dtype=np.float64)
    K = p.size
    if K == 0 or np.isnan(p).any():
        return float("nan"), -1
    k = math.ceil(K / 2)
    order = np.argsort(p, kind="stable")
    which = int(order[k - 1])
    return float(min(1.0, K / k * p[which])), which


def whole_counts(table: CommunityTable) -> np.ndarray:
    """The table's counts as int64, or InputError (fractions, totals too large). For relative
    data these are the reads (a load gives sizes, not individuals to draw from)."""
    reads = table.reads
    values = table.values if reads is None else reads.to_numpy(dtype=np.float64)
    return _whole_counts(values, table.sample_labels)


__all__ += ["check_depth", "whole_counts"]
