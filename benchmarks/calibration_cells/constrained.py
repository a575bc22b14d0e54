"""Constrained ordinations: permutation tests of CCA, RDA and db-RDA (constraint_test).

Every study is synthetic: counts from one of the generators of between-sample variation in
``generators.py`` (one composition law, or a real gradient where a cell says so), with
totals that vary between samples (log-normal, sd 0.5) and, where said, differ between the
groups of the tested factor. The tested constraints (a noise factor with unbalanced groups,
or a noise covariate) have no effect on composition. RDA runs on Hellinger-transformed
counts; db-RDA on Bray-Curtis dissimilarities of raw counts (the Gower path: a measure with
negative eigenvalues). Reference rows (``check=False``) show what the unadjusted alternative
does.

Totals that differ between groups: no transform makes such samples exchangeable (profiles
keep the counting noise, whose variance falls with the total; non-linear transforms such as
Hellinger also move the centroids), so the checked cells subsample every sample to the smallest
total first, which makes them exchangeable whatever their totals (Sanders 1968; Hurlbert
1971). Reference rows show profiles without rarefaction (RDA on profiles, db-RDA on
Bray-Curtis of profiles; Bray-Curtis of raw counts would rightly see the size difference),
with many and with few individuals per sample, and Hellinger RDA.
"""
from __future__ import annotations

import zlib

import numpy as np
import pandas as pd

from tallyform.core.constrained import cca, db_rda, rda
from tallyform.core.constraint_tests import constraint_test
from tallyform.core.dissimilarity import dissimilarity
from tallyform.core.rarefaction import rarefied_table
from tallyform.core.table import CommunityTable

from .base import Cell
from .generators import base_profile, counts_from

PERMS = 199
TAXA = 20


def _seed(cid: str) -> int:
    """A stable seed of its own for every cell, so that cells do not share their studies."""
    return 20261203 + zlib.crc32(cid.encode()) % 10**6


def _sizes(n: int) -> tuple:
    return (3, 4, 5) if n == 12 else (6, 10, 14)


def _counts(rng, gen, totals, shift=None):
    """Counts for the totals; ``shift`` (n x p) multiplies each sample's base profile."""
    base = base_profile(TAXA, rng)
    kw = {}
    if gen == "multinomial":                 # counting noise only (no biology)
        gen, kw = "lognormal", {"sd": 0.0}
    if shift is None:
        x = counts_from(gen, totals, base, rng, **kw)
    else:
        x = np.vstack([counts_from(gen, totals[i:i + 1], base * shift[i] / np.sum(
            base * shift[i]), rng, **kw) for i in range(len(totals))])
    x[:, x.sum(axis=0) == 0] = 0.0
    empty = x.sum(axis=1) == 0
    x[empty, 0] = 1.0
    keep = x.sum(axis=0) > 0
    return x[:, keep]


def _frame(rng, n, *, real=0.0, heavy=1.0, axis_effect=0.0, heavy_group="c", scale=300.0):
    """Sample information and the per-sample composition shift and mean total.

    ``g``: noise factor (unbalanced), ``x``: noise covariate, ``z``: covariate with a real
    effect ``real`` on composition (and on totals), ``f``: factor whose level 'c' moves
    composition along one gradient (``axis_effect``: one real constrained axis).
    """
    sizes = _sizes(n)
    g = np.repeat(["a", "b", "c"], sizes)
    f = np.array(["a", "b", "c"] * (n // 3))
    rng.shuffle(f)
    info = pd.DataFrame({"g": g, "x": rng.standard_normal(n), "z": rng.standard_normal(n),
                         "f": f}, index=[f"s{i:02d}" for i in range(n)])
    grad = rng.standard_normal(TAXA)
    grad2 = rng.standard_normal(TAXA)
    shift = np.exp(real * info["z"].to_numpy()[:, None] * grad[None, :] +
                   axis_effect * (f == "c")[:, None] * grad2[None, :])
    mean_total = scale * np.exp(0.5 * rng.standard_normal(n) + 0.3 * real * info["z"].to_numpy())
    mean_total = mean_total * np.where(g == heavy_group, heavy, 1.0)
    totals = np.maximum(rng.poisson(mean_total), 5)
    return info, shift, totals


def _ordination(method, x, info, terms, conditions, *, profile=False, transform="hellinger",
                subsample=None):
    tab = CommunityTable(pd.DataFrame(x, index=info.index,
                                      columns=[f"t{j}" for j in range(x.shape[1])]), info)
    if subsample is not None:                # the generator of the subsampling
        tab = rarefied_table(tab, rng=subsample)
    if method == "CCA":
        return cca(tab, terms=terms, conditions=conditions)
    if method == "RDA":
        return rda(tab, terms=terms, conditions=conditions, transform=transform)
    d = dissimilarity(tab, "bray_curtis", transform="profile" if profile else None)
    return db_rda(d, info, terms, conditions=conditions)


def _study(rng, *, method, n, gen, terms, row, scope="all", ss="sequential", conditions=None,
           real=0.0, heavy=1.0, axis_effect=0.0, heavy_group="c", scale=300.0,
           transform="hellinger", subsample=False):
    info, shift, totals = _frame(rng, n, real=real, heavy=heavy, axis_effect=axis_effect,
                                 heavy_group=heavy_group, scale=scale)
    x = _counts(rng, gen, totals, shift if (real or axis_effect) else None)
    o = _ordination(method, x, info, terms, conditions, profile=heavy != 1.0,
                    transform=transform, subsample=rng if subsample else None)
    ct = constraint_test(o, scope, n_permutations=PERMS, rng=rng, ss=ss, units=False)
    if row not in ct.table.index:
        # an axis with no positive eigenvalue (db-RDA) has no test, so it cannot be rejected
        return 1.0 if scope == "each_axis" else float("nan")
    return float(ct.table.loc[row, "pvalue"])


def _tanks(rng, *, method, gen, units):
    """10 tanks x 3 visits, treatment applied to tanks (5 + 5), strong tank effects on
    composition, no treatment effect."""
    tanks, visits = 10, 3
    n = tanks * visits
    code = np.repeat(np.arange(tanks), visits)
    info = pd.DataFrame({"treatment": np.where(code < 5, "control", "warm"),
                         "tank": [f"T{c}" for c in code]}, index=[f"s{i:02d}" for i in range(n)])
    tank_grad = rng.standard_normal((tanks, TAXA))
    shift = np.exp(0.8 * tank_grad[code])
    totals = np.maximum(rng.poisson(300.0 * np.exp(0.5 * rng.standard_normal(n))), 5)
    x = _counts(rng, gen, totals, shift)
    o = _ordination(method, x, info, ["treatment"], None)
    ct = constraint_test(o, "all", n_permutations=PERMS, rng=rng, units=units)
    return float(ct.pvalue)


def _cell(cid, method, design, *, reps=1000, short=40, check=True, **kw):
    what = {"all": "all terms", "each_term": "each term", "each_axis": "each axis"}
    scope = kw.get("scope", "all")
    full = f"constrained/{method.lower()}-{cid}"
    return Cell(full, "constrained ordination",
                f"constraint_test({method}, scope='{scope}'), {what[scope]}", design,
                lambda rng: _study(rng, method=method, **kw), reps=reps, short_reps=short,
                check=check, seed=_seed(full))


def _method_cells(method):
    m = method
    cells = [
        _cell("factor-n12", m, "noise factor, groups 3/4/5 (n = 12), log-normal biology",
              n=12, gen="lognormal", terms=["g"], row="all terms"),
        _cell("covariate-n12", m, "noise covariate, n = 12, Dirichlet-multinomial",
              n=12, gen="dirichlet", terms=["x"], row="all terms"),
        _cell("factor-cond-n30", m, "noise factor (6/10/14) given a real covariate "
              "(composition and totals), n = 30, gamma-Poisson", n=30, gen="gamma_poisson",
              terms=["g"], conditions=["z"], real=0.8, row="all terms"),
        _cell("covariate-cond-n12", m, "noise covariate given a real covariate, n = 12, "
              "two-state mixture", n=12, gen="mixture", terms=["x"], conditions=["z"],
              real=0.8, row="all terms"),
        _cell("term-seq-n30", m, "sequential: noise factor after a real covariate, n = 30, "
              "log-normal", n=30, gen="lognormal", terms=["z", "g"], scope="each_term",
              real=0.8, row="g"),
        _cell("term-marg-n12", m, "marginal: noise covariate given a real covariate, "
              "n = 12, Dirichlet-multinomial", n=12, gen="dirichlet", terms=["x", "z"],
              scope="each_term", ss="marginal", real=0.8, row="x"),
        _cell("axis1-null-n12", m, "first axis, noise factor (3/4/5), n = 12, gamma-Poisson",
              n=12, gen="gamma_poisson", terms=["g"], scope="each_axis",
              row=f"{m}1"),
        _cell("axis2-n30", m, "second axis when the first is real (one level of a factor "
              "moves composition along one gradient, effect 1.5), n = 30, log-normal", n=30,
              gen="lognormal", terms=["f"], scope="each_axis", axis_effect=1.5,
              row=f"{m}2"),
        _cell("axis2-cond-n12", m, "second axis when the first is real (effect 2), given a "
              "real covariate, n = 12, Dirichlet-multinomial", n=12, gen="dirichlet",
              terms=["f"], conditions=["z"], real=0.8, scope="each_axis", axis_effect=2.0,
              row=f"{m}2"),
        _cell("axis2-weak-n30", m, "second axis when the first is real but moderate "
              "(effect 1), n = 30, log-normal", n=30, gen="lognormal", terms=["f"],
              scope="each_axis", axis_effect=1.0, row=f"{m}2", reps=400, check=False),
    ]
    # Totals that differ between groups. Profiles remove the totals from the means but not
    # from the counting noise (variance q(1 - q) / N per taxon), so samples of a group with
    # higher totals are less spread out and the samples are not exchangeable: no true null of
    # a permutation test. The checked cells subsample every sample to the smallest total first
    # (then exchangeable whatever the totals; Sanders 1968, Hurlbert 1971); the reference rows
    # show profiles without rarefaction (liberal when the largest group has the higher
    # totals, conservative when the smallest has; Behrens-Fisher-like, more so with fewer
    # individuals per sample).
    which = {"db-RDA": " (Bray-Curtis of profiles)", "RDA": " (profiles)", "CCA": ""}[m]
    rarefied = {"db-RDA": "Bray-Curtis", "RDA": "profiles", "CCA": "CCA"}[m]
    cells.append(_cell("totals-differ-rarefied-n30", m, "noise factor, totals 3x higher in "
                       "the largest group (14 of 30), log-normal, counts rarefied to the "
                       f"smallest total, then {rarefied}", n=30, gen="lognormal",
                       terms=["g"], heavy=3.0, row="all terms", transform="profile",
                       subsample=True))
    cells.append(_cell("totals-differ-n30", m, "noise factor, totals 3x higher in the "
                       "largest group (14 of 30), log-normal" + which + ", not rarefied",
                       n=30, gen="lognormal", terms=["g"], heavy=3.0, row="all terms",
                       check=False, transform="profile"))
    cells.append(_cell("totals-differ-small-n30", m, "noise factor, totals 3x higher in the "
                       "smallest group (6 of 30), log-normal" + which + ", not rarefied",
                       n=30, gen="lognormal", terms=["g"], heavy=3.0, heavy_group="a",
                       row="all terms", check=False, reps=400 if m == "CCA" else 1000,
                       transform="profile"))
    if m != "CCA":
        cells.append(_cell("totals-differ-few-n30", m, "noise factor, totals 3x higher in "
                           "the largest group (14 of 30), about 30 individuals in the other "
                           "samples, log-normal" + which + ", not rarefied", n=30,
                           gen="lognormal", terms=["g"], heavy=3.0, scale=30.0,
                           row="all terms", check=False, transform="profile"))
    if m == "RDA":
        cells.append(_cell("hellinger-totals-differ-n30", m, "noise factor, totals 3x higher "
                           "in the largest group (14 of 30), log-normal, Hellinger: depth "
                           "moves the centroids", n=30, gen="lognormal", terms=["g"],
                           heavy=3.0, row="all terms", reps=1000, check=False))
    if m == "CCA":
        cells.append(_cell("totals-differ-sparse-n12", m, "noise factor (3/4/5), totals "
                           "5x higher in the largest group, about 20 individuals per "
                           "sample, counting noise only", n=12, gen="multinomial",
                           terms=["g"], heavy=5.0, scale=20.0, row="all terms", reps=400,
                           check=False))
    cells.append(Cell(f"constrained/{m.lower()}-tanks-units", "constrained ordination",
                      f"constraint_test({m}, units='tank')",
                      "10 tanks x 3 visits, treatment on tanks, tank effects, log-normal",
                      lambda rng: _tanks(rng, method=m, gen="lognormal", units="tank"),
                      reps=1000, short_reps=40, seed=_seed(f"{m}-tanks-units")))
    cells.append(Cell(f"constrained/{m.lower()}-tanks-no-units", "constrained ordination",
                      f"constraint_test({m}, units=False)",
                      "10 tanks x 3 visits, treatment on tanks, tank effects, log-normal",
                      lambda rng: _tanks(rng, method=m, gen="lognormal", units=False),
                      reps=400, short_reps=40, check=False, seed=_seed(f"{m}-tanks")))
    return cells


CELLS = [c for m in ("CCA", "RDA", "db-RDA") for c in _method_cells(m)]
