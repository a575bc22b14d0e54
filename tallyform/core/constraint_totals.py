"""What sample totals that go with the constraints do to a constraint test, in notes.

A permutation test of constraints holds its level exactly when the samples are exchangeable
under the null. Samples whose totals differ with the constraints are not, whatever the
transform: profiles keep the counting noise (variance q(1 - q) / N per taxon), and
non-linear transforms or non-Euclidean measures also move centroids. One rarefaction of
every sample to a common depth makes them exchangeable again (Sanders 1968; Hurlbert 1971).

References
----------
Hurlbert, S. H. (1971). The nonconcept of species diversity: a critique and alternative
parameters. Ecology 52, 577-586.
Sanders, H. L. (1968). Marine benthic diversity: a comparative study. American Naturalist
102, 243-282.
"""
from __future__ import annotations

import numpy as np
from scipy import stats

from .constraint_engine import ConstraintData
from .display import p_words

__all__ = ["totals_association", "totals_notes"]


def totals_association(data: ConstraintData):
    """(F, p) of the log sample totals against the terms (OLS), or None."""
    tot = data.totals
    if tot is None or np.any(tot <= 0):
        return None
    y = np.log(tot)
    X = np.column_stack([np.ones(data.n), data.X])
    beta, *_ = np.linalg.lstsq(X, y, rcond=None)
    rss = float(np.sum((y - X @ beta) ** 2))
    tss = float(np.sum((y - y.mean()) ** 2))
    k = np.linalg.matrix_rank(X) - 1
    df = data.n - 1 - k
    if tss <= 0 or df <= 0 or k <= 0:
        return None
    f = ((tss - rss) / k) / (rss / df) if rss > 0 else np.inf
    return f, float(stats.f.sf(f, k, df))


def totals_notes(data: ConstraintData) -> list:
    """Say when sample totals go with the constraints, and what that does to the test.

    A permutation test holds its level exactly when the samples are exchangeable under the
    null. When totals differ with the constraints they are not, whatever the transform: the
    counting noise of a profile has variance q(1 - q) / N per taxon, so a group with higher
    totals is less spread out (and non-linear transforms or non-Euclidean measures also move
    its centroid). Rarefying every sample to a common depth makes them exchangeable again (a
    subsample of m individuals of a multinomial(N, q) sample is multinomial(m, q) whatever N;
    Sanders 1968, Hurlbert 1971). Measured (benchmarks/calibration_cells/constrained.py,
    3 groups of 6/10/14, totals 3x higher in one group, no difference in composition, rate of
    p <= 0.05 in 1000 null studies unless said): RDA on profiles 6.3 % (largest group
    heavier), 4.3 % (smallest), 9.9 % (about 30 individuals in the lighter samples); db-RDA
    on Bray-Curtis of profiles 5.5 %, 5.4 %, 18.6 %; Hellinger RDA 8.2 % (largest); CCA 0.2 %
    and 2.8 % (400 studies); after one rarefaction to the smallest total: RDA 4.0 %, db-RDA
    5.1 %, CCA 5.2 %. db-RDA knows the totals only when its sample information was the
    table itself (a dissimilarity keeps no totals).
    """
    assoc = totals_association(data)
    if assoc is None or assoc[1] > 0.05:
        return []
    head = (f"Sample totals differ with the constraints (log totals against the terms: "
            f"F = {assoc[0]:.3g}, {p_words(assoc[1])}), so the samples are not "
            "exchangeable and the permutation test does not hold its level exactly. ")
    common = ("For a test that holds its level whatever the totals, subsample every sample to "
              "a common number of individuals first (tly.rarefied_table) and run the "
              "ordination and its test on that table (measured 4.0-5.2 % false positives "
              "at alpha 5 % in the same designs).")
    if data.method == "CCA":
        return [head + "CCA weights every sample by its total, and its permutation test "
                "(each sample moving with its weight) is then conservative: it keeps its "
                "false-positive rate below alpha but can lose most of its power (measured: "
                "0.2-2.8 % rejections at alpha 5 % with totals 3x higher in one of three "
                "groups). " + common]
    noise = ("a sample with fewer individuals has a noisier profile, and the test is then "
             "liberal when the larger groups have the higher totals")
    if data.method == "db-RDA":
        return [head + "Dissimilarities of profiles keep the counting noise: " + noise +
                ", all the more with few individuals per sample, because a non-Euclidean "
                "measure turns noisier profiles into distant centroids (measured for "
                "Bray-Curtis of profiles, totals 3x higher in the largest of three groups: "
                "5.5 % false positives at alpha 5 % with about 300 individuals per sample, "
                "18.6 % with about 30). Measures of abundances that are not profiles read "
                "the totals themselves as a difference. " + common]
    if data.transform == "profile":
        return [head + "Profiles take the totals out of the centroids but not out of the "
                "counting noise: " + noise + " (measured at alpha 5 %, totals 3x higher in "
                "the largest of three groups: 6.3 % with about 300 individuals per sample, "
                "9.9 % with about 30) and conservative in the opposite case. " + common]
    what = ("raw abundances differ with the totals by construction" if data.transform is None
            else f"the {data.transform} transform is not linear in the proportions, so "
                 "counting depth alone moves centroids and spreads (measured for Hellinger: "
                 "8.2 % false positives at alpha 5 % with totals 3x higher in the largest "
                 "of three groups)")
    return [head + f"RDA may then read depth as a difference: {what}. " + common]
