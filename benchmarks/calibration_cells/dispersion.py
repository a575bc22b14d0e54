"""Dispersion test (distances to group centres): groups of very different sizes with equal
spread, with and without the sqrt(n_g / (n_g - 1)) correction, for centroids and spatial
medians, on Euclidean data and on counts; with sampling units (tanks with unit effects, the
same spread in both treatments), whole units permuted, against the same data analysed as
independent samples. All data are synthetic."""
from __future__ import annotations

import numpy as np
import pandas as pd

from tallyform.core.dispersion import centroid_distances_squared, dispersion_test
from tallyform.core.dissimilarity import Dissimilarity, dissimilarity
from tallyform.core.permutation import permutation_f_test
from tallyform.core.schemes import UnitPermutations

from .base import Cell
from .generators import base_profile, counts_from

PERMS = 199


def unequal(rng, *, sizes=(8, 30), centre="mean", correction=True, counts=None, q=5):
    n = sum(sizes)
    labels = [f"s{i}" for i in range(n)]
    g = np.repeat([f"g{k}" for k in range(len(sizes))], sizes)
    if counts:
        x = counts_from(counts, np.full(n, 400), base_profile(30, rng), rng)
        d = dissimilarity(x, "hellinger")
        d = Dissimilarity(d.condensed, labels, measure="hellinger")
    else:
        d = Dissimilarity.from_features(rng.standard_normal((n, q)), labels)
    return dispersion_test(d, g, centre=centre, group_size_correction=correction,
                           n_permutations=PERMS, rng=rng).pvalue


def former(rng, *, sizes=(8, 30), q=40):
    """The former test: uncorrected distances, their residuals about the group means
    permuted (ter Braak 1992), centroids never recomputed."""
    n = sum(sizes)
    g = np.repeat(np.arange(len(sizes)), sizes)
    d = Dissimilarity.from_features(rng.standard_normal((n, q)))
    z = np.sqrt(np.clip(centroid_distances_squared(d, g), 0, None))
    X = np.column_stack([np.ones(n), g])
    return permutation_f_test(z, X, None, residuals="full", n_permutations=PERMS,
                              rng=rng).pvalue


def _tanks(rng, tanks=(6, 6), visits=4, missing=0.0):
    rows, k = [], 0
    for g, m in enumerate(tanks):
        for _ in range(m):
            keep = rng.random(visits) >= missing
            if keep.sum() < 2:
                keep[rng.choice(visits, 2, replace=False)] = True
            rows += [dict(treatment=f"t{g}", tank=f"T{k:02d}") for _ in range(keep.sum())]
            k += 1
    info = pd.DataFrame(rows, index=[f"s{i}" for i in range(len(rows))])
    codes = pd.factorize(info["tank"])[0]
    x = rng.standard_normal((k, 5))[codes] + 0.7 * rng.standard_normal((len(info), 5))
    return info, Dissimilarity.from_features(x, list(info.index))


def with_units(rng, *, tanks=(6, 6), missing=0.0, units="tank"):
    info, d = _tanks(rng, tanks, missing=missing)
    return dispersion_test(d, "treatment", samples=info, units=units, n_permutations=PERMS,
                           rng=rng).pvalue


def sample_distances_whole_units(rng, *, tanks=(6, 6)):
    """The other candidate statistic: distances of the samples to their group centroid,
    whole units relabelled (balanced units), for comparison with the unit centroids."""
    info, d = _tanks(rng, tanks)
    codes = pd.factorize(info["tank"])[0]
    g = (info["treatment"] == "t1").to_numpy().astype(int)
    z2 = centroid_distances_squared(d, g)
    size = np.bincount(g).astype(float)
    z = np.sqrt(np.clip(z2, 0, None)) * np.sqrt(size / (size - 1))[g]
    unit_g = g[np.unique(codes, return_index=True)[1]]
    perms = UnitPermutations(codes, PERMS, rng, unit_name="tank", design=unit_g[:, None])

    class Samples:
        total, exact = perms.total, perms.exact
        n_distinct, min_pvalue = perms.n_distinct, perms.min_pvalue

        def batches(self, size):
            return perms.sample_batches(size)

        def describe(self):
            return perms.describe()

        def note(self):
            return None

    X = np.column_stack([np.ones(len(g)), g])
    return permutation_f_test(z, X, None, permutations=Samples(), residuals="full").pvalue


CELLS = [
    Cell("dispersion/8-vs-30", "dispersion", "dispersion_test (corrected distances)",
         "groups of 8 and 30, equal spread, Euclidean, 5 normal variables", unequal,
         reps=1000, short_reps=200),
    Cell("dispersion/8-vs-30-uncorrected", "dispersion",
         "dispersion_test(group_size_correction=False)",
         "groups of 8 and 30, equal spread, Euclidean, 5 normal variables",
         lambda rng: unequal(rng, correction=False), reps=400, check=False),
    Cell("dispersion/8-vs-30-40d", "dispersion", "dispersion_test (corrected distances)",
         "groups of 8 and 30, equal spread, Euclidean, 40 normal variables",
         lambda rng: unequal(rng, q=40), reps=1000, short_reps=100),
    Cell("dispersion/8-vs-30-40d-uncorrected", "dispersion",
         "dispersion_test(group_size_correction=False)",
         "groups of 8 and 30, equal spread, Euclidean, 40 normal variables",
         lambda rng: unequal(rng, q=40, correction=False), reps=400, check=False),
    Cell("dispersion/8-vs-30-40d-former", "dispersion",
         "former test: uncorrected distances, residual distances permuted",
         "groups of 8 and 30, equal spread, Euclidean, 40 normal variables", former,
         reps=400, check=False),
    Cell("dispersion/8-vs-30-40d-median", "dispersion",
         "dispersion_test(centre='median') (corrected distances)",
         "groups of 8 and 30, equal spread, Euclidean, 40 normal variables",
         lambda rng: unequal(rng, q=40, centre="median"), reps=1000, short_reps=100),
    Cell("dispersion/8-vs-30-median", "dispersion",
         "dispersion_test(centre='median') (corrected distances)",
         "groups of 8 and 30, equal spread, Euclidean, 5 normal variables",
         lambda rng: unequal(rng, centre="median"), reps=1000, short_reps=100),
    Cell("dispersion/8-vs-30-median-uncorrected", "dispersion",
         "dispersion_test(centre='median', group_size_correction=False)",
         "groups of 8 and 30, equal spread, Euclidean, 5 normal variables",
         lambda rng: unequal(rng, centre="median", correction=False), reps=400,
         check=False),
    Cell("dispersion/8-vs-30-counts", "dispersion", "dispersion_test (corrected), Hellinger",
         "groups of 8 and 30, equal totals (400), log-normal biology, counts",
         lambda rng: unequal(rng, counts="lognormal"), reps=1000, short_reps=100),
    Cell("dispersion/8-vs-30-counts-dm", "dispersion", "dispersion_test (corrected), Hellinger",
         "groups of 8 and 30, equal totals (400), Dirichlet-multinomial biology, counts",
         lambda rng: unequal(rng, counts="dirichlet"), reps=1000, short_reps=100),
    Cell("dispersion/units-balanced", "dispersion",
         "dispersion_test(units='tank'): unit centroids, whole units",
         "2 treatments x 6 tanks x 4 visits, tank effects, equal spread", with_units,
         reps=1000, short_reps=150),
    Cell("dispersion/units-unbalanced", "dispersion",
         "dispersion_test(units='tank'): unit centroids, whole units",
         "4 and 8 tanks, 2-4 of 4 visits, tank effects, equal spread",
         lambda rng: with_units(rng, tanks=(4, 8), missing=0.3), reps=1000, short_reps=150),
    Cell("dispersion/units-ignored", "dispersion", "dispersion_test(units=False)",
         "4 and 8 tanks, 2-4 of 4 visits, tank effects, equal spread",
         lambda rng: with_units(rng, tanks=(4, 8), missing=0.3, units=False), reps=400,
         check=False),
    Cell("dispersion/units-sample-distances", "dispersion",
         "sample distances, whole units relabelled (the alternative statistic)",
         "2 treatments x 6 tanks x 4 visits, tank effects, equal spread",
         sample_distances_whole_units, reps=400, check=False),
]
