"""Welch-type test (welch_permanova): equal centroids, unequal spreads (all data synthetic).

The null is "the group centroids are equal" while the groups' spreads differ. Euclidean
cells draw isotropic variables (normal, or skewed log-normal) with a group-specific standard
deviation. Count cells keep the centroids in chi-square space equal by construction: every
generator has the same expected profile in every group (Dirichlet-multinomial with a
group-specific intra-class correlation; log-normal or gamma-Poisson biology counted at
group-specific totals, where smaller totals add counting noise), and the chi-square distance
with fixed column masses (the generating profile) is linear in the profiles.

With the table's own column masses it is not: the masses depend on the data, and a group of
sparse, highly variable profiles then sits, on average, away from the other group in the
measured space (the ``table-masses`` reference rows: PERMANOVA and the Welch-type test both
reject about a quarter of balanced data sets). The same holds for Hellinger, whose square
root moves the centroid when the spread changes. That is a real difference of centroids in
the measure's space, which any location test reports; it is not a failure of the test.

Reference rows (``check=False``) run, on the same data sets, PERMANOVA and the raw
permutation test of the Welch-type statistic (``small_sample=False``: the published form,
liberal with few samples in a widely spread group), and show the designs above analysed
without their sampling units.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from tallyform.core.dissimilarity import Dissimilarity, dissimilarity
from tallyform.core.inference import permanova
from tallyform.core.welch import welch_permanova

from .base import Cell
from .generators import base_profile, counts_from

PERMS = 199
P_TAXA = 30


def _frame(sizes):
    n = int(sum(sizes))
    labels = [f"s{i}" for i in range(n)]
    info = pd.DataFrame({"g": np.repeat([f"g{k}" for k in range(len(sizes))], sizes)},
                        index=labels)
    return labels, info


def _pvalue(d, info, test, rng):
    if test in ("welch", "welch_raw"):
        return float(welch_permanova(d, info, "g", n_permutations=PERMS, rng=rng,
                                     units=False, small_sample=test == "welch").pvalue)
    return float(permanova(d, info, ["g"], n_permutations=PERMS, rng=rng).pvalue["g"])


def euclidean(sizes, sds, *, q=5, test="welch", law="normal"):
    """Isotropic variables, group sd ``sds``; 'lognormal' law: centred skewed variables."""
    def replicate(rng):
        labels, info = _frame(sizes)
        parts = []
        for n_g, sd in zip(sizes, sds):
            if law == "normal":
                z = rng.standard_normal((n_g, q))
            else:                                    # skewed, mean 0, variance 1
                s = 0.8
                z = (rng.lognormal(0.0, s, (n_g, q)) - np.exp(s * s / 2)) / np.sqrt(
                    (np.exp(s * s) - 1) * np.exp(s * s))
            parts.append(sd * z)
        d = Dissimilarity.from_features(np.vstack(parts), labels)
        return _pvalue(d, info, test, rng)
    return replicate


def counts(sizes, generator, per_group, *, test="welch", total=3000, masses="fixed"):
    """Counts from one generator with group-specific options ``per_group`` (dicts; key
    ``total`` sets the group's sample totals), chi-square distance on the profiles with
    fixed column masses (the generating profile: the distance is then linear in the
    profiles and equal expected profiles mean equal centroids) or the table's masses."""
    def replicate(rng):
        labels, info = _frame(sizes)
        base = base_profile(P_TAXA, rng)
        parts = []
        for n_g, opts in zip(sizes, per_group):
            opts = dict(opts)
            tot = opts.pop("total", total)
            parts.append(counts_from(generator, np.full(n_g, tot), base, rng, **opts))
        x = np.vstack(parts)
        if masses == "fixed":
            d = dissimilarity(pd.DataFrame(x, index=labels), "chi_square",
                              column_masses=base)
        else:
            keep = x.sum(axis=0) > 0
            d = dissimilarity(pd.DataFrame(x[:, keep], index=labels), "chi_square")
        return _pvalue(d, info, test, rng)
    return replicate


def _pair(id_, design, make, *, reps=1000, short=60, reference=True, check=True,
          raw=False, method="welch_permanova", band=None):
    """A Welch cell, optionally with reference rows on the same data: PERMANOVA, and the
    raw permutation test (small_sample=False, the published form)."""
    out = [Cell(f"welch/{id_}", "Welch-type", method, design, make("welch"),
                reps=reps, short_reps=short, check=check, band=band)]
    if raw:
        out.append(Cell(f"welch/{id_}-raw", "Welch-type",
                        "welch_permanova(small_sample=False) (reference)", design,
                        make("welch_raw"), reps=reps, short_reps=short, check=False))
    if reference:
        out.append(Cell(f"welch/{id_}-permanova", "Welch-type",
                        "permanova (reference)", design, make("permanova"), reps=reps,
                        short_reps=short, check=False))
    return out


def units_design(rng, test="welch", units="tank"):
    """2 treatments applied to tanks (6 impacted, 18 control), 3 visits per tank; tank
    effects with sd 4 (impacted) and 1 (control), visit noise sd 0.5, no treatment effect."""
    q, visits = 5, 3
    spread = np.repeat([4.0, 1.0], [6, 18])
    tank = spread[:, None] * rng.standard_normal((24, q))
    codes = np.repeat(np.arange(24), visits)
    x = tank[codes] + 0.5 * rng.standard_normal((24 * visits, q))
    labels = [f"s{i}" for i in range(x.shape[0])]
    info = pd.DataFrame({"g": np.where(codes < 6, "impacted", "control"),
                         "tank": [f"T{c:02d}" for c in codes]}, index=labels)
    d = Dissimilarity.from_features(x, labels)
    if test == "welch":
        return float(welch_permanova(d, info, "g", units=units, n_permutations=PERMS,
                                     rng=rng).pvalue)
    return float(permanova(d, info, ["g"], n_permutations=PERMS, rng=rng).pvalue["g"])


def blocks_design(rng):
    """4 blocks of 10 (block effects sd 2) holding 2, 3, 3 and 4 impacted samples (sd 4x)
    among controls; relabelled within blocks."""
    q = 5
    impacted = np.concatenate([np.arange(10) < m for m in (2, 3, 3, 4)])
    sd = np.where(impacted, 4.0, 1.0)
    block = np.repeat(np.arange(4), 10)
    x = 2.0 * rng.standard_normal((4, q))[block] + sd[:, None] * rng.standard_normal((40, q))
    labels = [f"s{i}" for i in range(40)]
    info = pd.DataFrame({"g": np.where(sd > 1, "impacted", "control"),
                         "block": [f"b{b}" for b in block]}, index=labels)
    d = Dissimilarity.from_features(x, labels)
    return float(welch_permanova(d, info, "g", blocks="block", units=False,
                                 n_permutations=PERMS, rng=rng).pvalue)


# Dirichlet-multinomial: Var(x_j / N) = pi_j (1 - pi_j) (1 + (N - 1) icc) / N, so at
# N = 3000 an icc of 0.02 against 0.081 (0.325) gives 4 (16) times the variance: 2x (4x) sd.
DM_BASE, DM_2X, DM_4X = 0.02, 0.081, 0.325
# Sparse, heavy-tailed profiles in the spread group: the Welch-type test is conservative
# there (its raw permutation form too), with f estimated without bias (welch_kernel); the
# result's notes say so (welch.SPREAD_NOTE), so only rejecting too often fails these rows.
_CONSERVATIVE = ("welch_permanova (conservative here, as the result's notes say: "
                 "band [0, 0.07])")
_E5 = "Euclidean, 5 normal variables"

CELLS = [
    *_pair("euclid-2g-10v30-sd4", f"2 groups 10 / 30, small group sd 4x, {_E5}",
           lambda t: euclidean((10, 30), (4.0, 1.0), test=t), raw=True),
    *_pair("euclid-2g-10v30-sd2", f"2 groups 10 / 30, small group sd 2x, {_E5}",
           lambda t: euclidean((10, 30), (2.0, 1.0), test=t)),
    *_pair("euclid-2g-30v10-sd4", f"2 groups 30 / 10, large group sd 4x, {_E5}",
           lambda t: euclidean((30, 10), (4.0, 1.0), test=t)),
    *_pair("euclid-2g-15v15-sd4", f"2 groups 15 / 15, one sd 4x, {_E5}",
           lambda t: euclidean((15, 15), (4.0, 1.0), test=t), raw=True),
    *_pair("euclid-2g-6v18-sd4", f"2 groups 6 / 18, small group sd 4x, {_E5}",
           lambda t: euclidean((6, 18), (4.0, 1.0), test=t), raw=True),
    *_pair("euclid-2g-5v15-sd4", f"2 groups 5 / 15, small group sd 4x, {_E5}",
           lambda t: euclidean((5, 15), (4.0, 1.0), test=t), raw=True, reference=False),
    *_pair("euclid-2g-4v12-sd4", f"2 groups 4 / 12, small group sd 4x, {_E5}",
           lambda t: euclidean((4, 12), (4.0, 1.0), test=t), raw=True, reference=False),
    *_pair("euclid1-2g-6v18-sd4", "2 groups 6 / 18, small group sd 4x, one normal variable",
           lambda t: euclidean((6, 18), (4.0, 1.0), q=1, test=t), raw=True, reference=False),
    *_pair("euclid1-2g-4v12-sd4", "2 groups 4 / 12, small group sd 4x, one normal variable",
           lambda t: euclidean((4, 12), (4.0, 1.0), q=1, test=t), raw=True, reference=False),
    *_pair("euclid-3g-8v16v24-sd4", f"3 groups 8 / 16 / 24, sd 4x / 2x / 1x, {_E5}",
           lambda t: euclidean((8, 16, 24), (4.0, 2.0, 1.0), test=t), raw=True),
    *_pair("euclid-3g-5v10v15-sd4", f"3 groups 5 / 10 / 15, sd 4x / 2x / 1x, {_E5}",
           lambda t: euclidean((5, 10, 15), (4.0, 2.0, 1.0), test=t), raw=True,
           reference=False),
    *_pair("euclid-3g-10-sd4", f"3 groups 10 / 10 / 10, sd 4x / 1x / 1x, {_E5}",
           lambda t: euclidean((10, 10, 10), (4.0, 1.0, 1.0), test=t)),
    *_pair("euclid-2g-10v30-sd4-skewed", "2 groups 10 / 30, small group sd 4x, Euclidean, 5 "
           "skewed (log-normal) variables",
           lambda t: euclidean((10, 30), (4.0, 1.0), test=t, law="lognormal"), raw=True),
    *_pair("dm-2g-10v30-sd2", "2 groups 10 / 30 at 3000 counts, Dirichlet-multinomial, small "
           "group sd 2x (icc 0.081 vs 0.02), chi-square (fixed masses)",
           lambda t: counts((10, 30), "dirichlet", ({"icc": DM_2X}, {"icc": DM_BASE}), test=t)),
    *_pair("dm-2g-10v30-sd4", "2 groups 10 / 30 at 3000 counts, Dirichlet-multinomial, small "
           "group sd 4x (icc 0.325 vs 0.02), chi-square (fixed masses)",
           lambda t: counts((10, 30), "dirichlet", ({"icc": DM_4X}, {"icc": DM_BASE}), test=t),
           raw=True, band=(0.0, 0.07), method=_CONSERVATIVE),
    *_pair("dm-2g-6v18-sd4", "2 groups 6 / 18 at 3000 counts, Dirichlet-multinomial, small "
           "group sd 4x (icc 0.325 vs 0.02), chi-square (fixed masses)",
           lambda t: counts((6, 18), "dirichlet", ({"icc": DM_4X}, {"icc": DM_BASE}), test=t),
           raw=True, reference=False, band=(0.0, 0.07), method=_CONSERVATIVE),
    *_pair("dm-3g-8v16v24-sd4", "3 groups 8 / 16 / 24 at 3000 counts, Dirichlet-multinomial, "
           "icc 0.325 / 0.081 / 0.02, chi-square (fixed masses)",
           lambda t: counts((8, 16, 24), "dirichlet", ({"icc": DM_4X}, {"icc": DM_2X},
                                                        {"icc": DM_BASE}), test=t)),
    *_pair("lognormal-2g-10v30-totals", "2 groups 10 / 30, same log-normal biology, small "
           "group counted at 400 vs 20000 (counting noise), chi-square (fixed masses)",
           lambda t: counts((10, 30), "lognormal", ({"sd": 0.3, "total": 400},
                                                    {"sd": 0.3, "total": 20000}), test=t),
           raw=True),
    *_pair("lognormal-2g-10v30-totals100", "2 groups 10 / 30, same log-normal biology, small "
           "group counted at 100 vs 20000 (sparse, heavy-tailed profiles), chi-square (fixed "
           "masses)",
           lambda t: counts((10, 30), "lognormal", ({"sd": 0.3, "total": 100},
                                                    {"sd": 0.3, "total": 20000}), test=t),
           check=False, raw=True, reference=False,
           method="welch_permanova (reference: conservative with 100-count samples)"),
    *_pair("gamma-poisson-3g-totals", "3 groups 8 / 12 / 20, gamma-Poisson k = 2, totals "
           "150 / 1000 / 10000, chi-square (fixed masses)",
           lambda t: counts((8, 12, 20), "gamma_poisson", ({"k": 2.0, "total": 150},
                                                           {"k": 2.0, "total": 1000},
                                                           {"k": 2.0, "total": 10000}),
                            test=t)),
    *_pair("dm-2g-15v15-sd4-table-masses", "2 groups 15 / 15, Dirichlet-multinomial icc "
           "0.325 vs 0.02, chi-square with the table's column masses (centroids differ in "
           "the measured space)",
           lambda t: counts((15, 15), "dirichlet", ({"icc": DM_4X}, {"icc": DM_BASE}), test=t,
                            masses="table"), check=False, reps=400),
    Cell("welch/units-6v18-tanks-sd4", "Welch-type", "welch_permanova(units='tank')",
         "6 impacted / 18 control tanks x 3 visits, tank effects sd 4x in impacted tanks, "
         f"{_E5}", units_design, reps=1000, short_reps=60),
    Cell("welch/units-6v18-tanks-sd4-no-units", "Welch-type",
         "welch_permanova(units=False) (reference: visits as replicates)",
         "6 impacted / 18 control tanks x 3 visits, tank effects sd 4x in impacted tanks, "
         f"{_E5}", lambda rng: units_design(rng, units=False), reps=1000, check=False),
    Cell("welch/blocks-4x10-sd4", "Welch-type", "welch_permanova(blocks='block')",
         "4 blocks of 10 (effects sd 2) with 2 / 3 / 3 / 4 impacted samples (sd 4x) among "
         f"controls, relabelled within blocks, {_E5}", blocks_design, reps=1000,
         short_reps=60),
]
