"""PERMANOVA: one-way designs with independent samples (the baseline every other family
builds on), and the repeated-visits design analysed without its units (reference rows
showing pseudoreplication)."""
from __future__ import annotations

import numpy as np
import pandas as pd

from tallyform.core.dissimilarity import Dissimilarity
from tallyform.core.inference import permanova

from .base import Cell

PERMS = 199


def _euclidean_oneway(rng, sizes=(10, 10, 10), q=5):
    n = sum(sizes)
    x = rng.standard_normal((n, q))
    labels = [f"s{i}" for i in range(n)]
    info = pd.DataFrame({"g": np.repeat([f"g{k}" for k in range(len(sizes))], sizes)},
                        index=labels)
    d = Dissimilarity.from_features(x, labels)
    return float(permanova(d, info, ["g"], n_permutations=PERMS, rng=rng).pvalue["g"])


def _repeated_visits_no_units(rng):
    # 3 treatments x 5 tanks x 4 visits, tank random effect (sd 1 on every variable), no
    # treatment effect; tested as if the 60 samples were replicates
    tanks, visits, q = 15, 4, 5
    tank_eff = rng.standard_normal((tanks, q))
    codes = np.repeat(np.arange(tanks), visits)
    x = tank_eff[codes] + 0.5 * rng.standard_normal((tanks * visits, q))
    labels = [f"s{i}" for i in range(x.shape[0])]
    info = pd.DataFrame({"treatment": np.repeat(["a", "b", "c"], 5 * visits)}, index=labels)
    d = Dissimilarity.from_features(x, labels)
    return float(permanova(d, info, ["treatment"], n_permutations=PERMS, rng=rng,
                           ).pvalue["treatment"])


CELLS = [
    Cell("permanova/oneway-balanced", "PERMANOVA", "permanova, one factor",
         "3 groups x 10, Euclidean, 5 normal variables", _euclidean_oneway),
    Cell("permanova/oneway-unbalanced", "PERMANOVA", "permanova, one factor",
         "groups of 5, 10, 20, Euclidean, 5 normal variables",
         lambda rng: _euclidean_oneway(rng, (5, 10, 20))),
    Cell("permanova/visits-no-units", "PERMANOVA", "permanova, samples as replicates",
         "3 treatments x 5 tanks x 4 visits, tank effects, no treatment effect",
         _repeated_visits_no_units, check=False),
]
