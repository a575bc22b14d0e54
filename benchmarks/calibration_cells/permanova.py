"""PERMANOVA: one-way designs with independent samples (the baseline every other family
builds on), the repeated-visits design analysed without its units (reference rows
showing pseudoreplication), and term order: a null term tested beside a strong effect of
another factor, listed first or second, in balanced and unbalanced two-way designs (every
term is tested by permuting residuals of the model without it; the reference rows show
the former test of the first term, which permuted raw samples). All data are synthetic."""
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


def _two_way(rng, *, order, cells=(4, 4, 4, 4, 4, 4), effect_a=2.0, effect_b=0.0,
             test="b", raw_first=False):
    """a (3 levels) x b (2 levels), ``cells`` samples per cell (a0b0, a0b1, a1b0, ...);
    a strong effect of a (on every variable), ``effect_b`` of b; 5 normal variables."""
    a, b = [], []
    for k, m in enumerate(cells):
        a += [f"a{k // 2}"] * m
        b += [f"b{k % 2}"] * m
    a, b = np.array(a), np.array(b)
    n = a.size
    x = rng.standard_normal((n, 5))
    x += effect_a * (a == "a1")[:, None] - effect_a * (a == "a2")[:, None]
    x += effect_b * (b == "b1")[:, None]
    labels = [f"s{i}" for i in range(n)]
    info = pd.DataFrame({"a": a, "b": b}, index=labels)
    d = Dissimilarity.from_features(x, labels)
    if raw_first:
        # the former test of the first term: raw samples permuted, later terms as covariables
        # in the residual only (reference rows)
        from tallyform.core.design import model_matrix
        from tallyform.core.permutation import permutation_f_test
        mm = model_matrix(info, order)
        first = mm.submatrix([order[0]])
        rest = mm.X[:, [c for t in order[1:] for c in mm.term_columns[t]]]
        return permutation_f_test(d, first, None, X_later=rest, n_permutations=PERMS,
                                  rng=rng).pvalue
    return float(permanova(d, info, order, n_permutations=PERMS, rng=rng).pvalue[test])


_UNBALANCED = (3, 6, 5, 2, 4, 6)


def _order_cells():
    out = []
    for design, cells in (("balanced 3 x 2, 4 per cell", (4,) * 6),
                          ("unbalanced 3 x 2, 2-6 per cell", _UNBALANCED)):
        tag = "balanced" if cells == (4,) * 6 else "unbalanced"
        for order in (["a", "b", "a:b"], ["b", "a", "a:b"]):
            name = "-".join(o.replace(":", "") for o in order[:2])
            out.append(Cell(f"permanova/order-{tag}-{name}", "PERMANOVA",
                            f"permanova(terms={order}), null b",
                            f"{design}, strong effect of a (2 sd), none of b, Euclidean",
                            lambda rng, o=order, c=cells: _two_way(rng, order=o, cells=c),
                            reps=1000, short_reps=100))
            out.append(Cell(f"permanova/order-{tag}-{name}-power", "PERMANOVA",
                            f"power: permanova(terms={order}), b",
                            f"{design}, strong effect of a (2 sd), b shifted by 0.6 sd",
                            lambda rng, o=order, c=cells: _two_way(rng, order=o, cells=c,
                                                                   effect_b=0.6),
                            reps=400, check=False))
        out.append(Cell(f"permanova/order-{tag}-b-first-raw", "PERMANOVA",
                        "former test of the first term (raw permutation), null b",
                        f"{design}, strong effect of a (2 sd), none of b, b listed first",
                        lambda rng, c=cells: _two_way(rng, order=["b", "a", "a:b"], cells=c,
                                                      raw_first=True),
                        reps=400, check=False))
        out.append(Cell(f"permanova/order-{tag}-b-first-raw-power", "PERMANOVA",
                        "power: former test of the first term (raw permutation), b",
                        f"{design}, strong effect of a (2 sd), b shifted by 0.6 sd, b first",
                        lambda rng, c=cells: _two_way(rng, order=["b", "a", "a:b"], cells=c,
                                                      effect_b=0.6, raw_first=True),
                        reps=400, check=False))
    return out


CELLS = [
    Cell("permanova/oneway-balanced", "PERMANOVA", "permanova, one factor",
         "3 groups x 10, Euclidean, 5 normal variables", _euclidean_oneway),
    Cell("permanova/oneway-unbalanced", "PERMANOVA", "permanova, one factor",
         "groups of 5, 10, 20, Euclidean, 5 normal variables",
         lambda rng: _euclidean_oneway(rng, (5, 10, 20))),
    Cell("permanova/visits-no-units", "PERMANOVA", "permanova, samples as replicates",
         "3 treatments x 5 tanks x 4 visits, tank effects, no treatment effect",
         _repeated_visits_no_units, check=False),
] + _order_cells()
