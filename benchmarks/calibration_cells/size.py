"""Size tests: levels under unequal variability, small samples, other models of the totals,
negative-binomial totals with unequal dispersions, and sampling units (all synthetic).

Nulls: log-normal totals with EQUAL GEOMETRIC MEANS (the null of the default Welch test),
gamma totals with equal mean log, NB totals with EQUAL ARITHMETIC MEANS and unequal
dispersions (the null of the negative-binomial test). "variance ratio r" is the ratio of the
variances of log totals (log-normal: sd 0.3 sqrt(r) against 0.3); "v9 first" means the first
group is the variable one. Reference rows (check=False) show plain ANOVA, Kruskal-Wallis,
the negative-binomial test off its model, a permutation version of Welch's test at very small
n, power, and the pseudoreplicated analysis of units.

The negative-binomial cells use 39 bootstrap draws (the package default is 999): a Monte
Carlo test has exact level floor(alpha (B + 1)) / (B + 1) whatever B (Barnard 1963; Hope
1968), here 2 / 40 = 0.05, so B changes the power, not the level being checked.
"""
from __future__ import annotations

import itertools
import zlib

import numpy as np
import pandas as pd
from scipy import special, stats

from tallyform.core.size_tests import size_test
from tallyform.core.table import CommunityTable

from .base import Cell as _BaseCell


def Cell(id, *args, **kw):                                       # noqa: N802
    """A cell with its own random streams (seed from its id), so that cells do not share
    their Monte Carlo error."""
    kw.setdefault("seed", zlib.crc32(id.encode()))
    return _BaseCell(id, *args, **kw)

_LEVELS = "abcdefgh"
_BASE = 0.3            # sd of log totals of the steady groups
_MU = 400.0


def _table(totals, groups, extra=None) -> CommunityTable:
    labels = [f"s{i}" for i in range(len(totals))]
    t = np.asarray(totals, dtype=float)
    counts = pd.DataFrame({"ta": np.floor(t / 2), "tb": t - np.floor(t / 2)}, index=labels)
    info = pd.DataFrame({"g": groups}, index=labels)
    if extra:
        for k, v in extra.items():
            info[k] = v
    return CommunityTable(counts, info, empty="keep")


def _groups(sizes):
    return np.repeat(list(_LEVELS[: len(sizes)]), sizes)


# ---------------------------------------------------------------------------- generators
def _lognormal_totals(rng, sizes, ratios):
    """Equal geometric means (exp(mean log) = _MU), log sd 0.3 sqrt(ratio) per group."""
    sd = _BASE * np.sqrt(np.repeat(ratios, sizes))
    return np.maximum(np.round(np.exp(np.log(_MU) + sd * rng.standard_normal(sd.size))), 1)


def _gamma_totals(rng, sizes, shapes):
    """Gamma totals with equal mean log: E log X = digamma(k) + log(scale) (fixed)."""
    k = np.repeat(shapes, sizes).astype(float)
    scale = np.exp(np.log(_MU) - special.digamma(k))
    return np.maximum(np.round(rng.gamma(k, scale)), 1)


def _nb_totals(rng, sizes, nb_sizes, mean=200.0):
    """NB totals with equal arithmetic means and a size (1 / dispersion) per group."""
    s = np.repeat(nb_sizes, sizes).astype(float)
    y = rng.negative_binomial(s, s / (s + mean)).astype(float)
    return y


def _nb_lognormal(rng, sizes, sds, mean=200.0):
    """Log-normal totals with equal ARITHMETIC means (the negative-binomial null)."""
    sd = np.repeat(sds, sizes)
    return np.round(np.exp(np.log(mean) - sd ** 2 / 2 + sd * rng.standard_normal(sd.size)))


# ---------------------------------------------------------------------------- replicates
def _welch_lognormal(sizes, ratios, method="welch"):
    def rep(rng):
        y = _lognormal_totals(rng, sizes, ratios)
        return float(size_test(_table(y, _groups(sizes)), "g", method=method,
                               units=False).pvalue)
    return rep


def _welch_gamma(sizes, shapes):
    def rep(rng):
        y = _gamma_totals(rng, sizes, shapes)
        return float(size_test(_table(y, _groups(sizes)), "g", units=False).pvalue)
    return rep


def _power(sizes, method, ratio=1.5, sd=0.5):
    def rep(rng):
        g = _groups(sizes)
        y = np.exp(np.log(_MU) + np.log(ratio) * (g == "b") + sd * rng.standard_normal(g.size))
        return float(size_test(_table(np.round(y), g), "g", method=method,
                               units=False).pvalue)
    return rep


def _welch_f(y, codes, k):
    return stats.f_oneway(*[y[codes == j] for j in range(k)], equal_var=False).statistic


def _welch_permutation(sizes, ratios):
    """Welch's F referred to its permutation distribution (every distinct split of the
    labels: 20 for 3 + 3): measured here, not shipped."""
    def rep(rng):
        y = np.log(_lognormal_totals(rng, sizes, ratios))
        n = y.size
        codes = np.repeat(np.arange(len(sizes)), sizes)
        obs = _welch_f(y, codes, len(sizes))
        null = []
        for first in itertools.combinations(range(n), sizes[0]):
            c = np.ones(n, dtype=int)
            c[list(first)] = 0
            null.append(_welch_f(y, c, 2))
        null = np.asarray(null)
        return float(np.mean(null >= obs * (1 - 1e-12)))
    return rep


def _negbin(sizes, nb_sizes, reference="bootstrap", n_boot=39):
    def rep(rng):
        y = _nb_totals(rng, sizes, nb_sizes)
        if any(y[_groups(sizes) == lv].sum() == 0 for lv in _LEVELS[: len(sizes)]):
            return 1.0                             # a group without counts: no test
        return float(size_test(_table(y, _groups(sizes)), "g", method="negbin",
                               units=False, nb_reference=reference, n_boot=n_boot,
                               rng=rng).pvalue)
    return rep


def _negbin_off_model(sizes, sds, fired=False):
    def rep(rng):
        y = _nb_lognormal(rng, sizes, sds)
        res = size_test(_table(y, _groups(sizes)), "g", method="negbin", units=False,
                        nb_reference="F" if fired else "bootstrap", n_boot=39, rng=rng)
        if fired:                                   # "p" 0 when the fit check fired
            return 0.0 if res.too_skewed else 1.0
        return float(res.pvalue)
    return rep


def _kruskal(sizes, ratios):
    def rep(rng):
        y = _lognormal_totals(rng, sizes, ratios)
        return float(size_test(_table(y, _groups(sizes)), "g", method="kruskal",
                               units=False).pvalue)
    return rep


def _blocked(n_blocks, per_cell, ratios, method="welch", block_sd=0.5):
    """Blocks x groups with ``per_cell`` samples per group in every block, additive block
    effects on log totals, equal geometric means, variance ratio per group."""
    def rep(rng):
        k = len(ratios)
        g = np.tile(np.repeat(np.arange(k), per_cell), n_blocks)
        b = np.repeat(np.arange(n_blocks), k * per_cell)
        sd = _BASE * np.sqrt(np.asarray(ratios, dtype=float))[g]
        y = np.exp(np.log(_MU) + block_sd * rng.standard_normal(n_blocks)[b]
                   + sd * rng.standard_normal(g.size))
        tab = _table(np.maximum(np.round(y), 1), np.asarray(list(_LEVELS))[g],
                     {"bench": [f"b{i}" for i in b]})
        return float(size_test(tab, "g", method=method, blocks="bench",
                               units=False).pvalue)
    return rep


def _covers(res, level_name, truth):
    lo, hi = res.summary.loc[level_name, ["ci_low", "ci_high"]]
    return bool(lo <= truth <= hi)


def _welch_coverage(sizes, ratios, effect=1.5):
    def rep(rng):
        y = _lognormal_totals(rng, sizes, ratios) * np.where(_groups(sizes) == "b", effect, 1)
        res = size_test(_table(np.round(y), _groups(sizes)), "g", units=False)
        return _covers(res, "b", effect)
    return rep


def _negbin_coverage(sizes, nb_sizes, effect=1.5):
    def rep(rng):
        g = _groups(sizes)
        s = np.repeat(nb_sizes, sizes).astype(float)
        mu = 200.0 * np.where(g == "b", effect, 1.0)
        y = rng.negative_binomial(s, s / (s + mu)).astype(float)
        res = size_test(_table(y, g), "g", method="negbin", units=False, nb_reference="F")
        return _covers(res, "b", effect)
    return rep


# ---------------------------------------------------------------------------- units
def _unit_data(rng, tanks_per_group=(5, 5), visits=4, missing=0.0, tank_sd=0.5,
               resid_sd=0.3, within_sd=None):
    """Tanks with a random tank effect on log totals, visited ``visits`` times, no effect of
    treatment or visit; ``missing``: chance that a visit is lost; ``within_sd``: residual sd
    per visit (unequal variability between visits)."""
    groups = np.repeat(list(_LEVELS[: len(tanks_per_group)]), tanks_per_group)
    m = groups.size
    tank = np.repeat(np.arange(m), visits)
    visit = np.tile(np.arange(visits), m)
    sd = resid_sd if within_sd is None else np.asarray(within_sd)[visit]
    logt = (np.log(_MU) + tank_sd * rng.standard_normal(m)[tank]
            + sd * rng.standard_normal(tank.size))
    keep = rng.random(tank.size) >= missing
    for u in range(m):                               # every tank keeps 2 visits or more
        idx = np.flatnonzero(tank == u)
        if keep[idx].sum() < 2:
            keep[idx[:2]] = True
    for v in range(visits):                          # every visit is seen in 2 tanks or more
        idx = np.flatnonzero(visit == v)
        if keep[idx].sum() < 2:
            keep[idx[:2]] = True
    t = np.maximum(np.round(np.exp(logt)), 1)[keep]
    extra = {"tank": [f"T{u:02d}" for u in tank[keep]],
             "visit": [f"v{v}" for v in visit[keep]]}
    return _table(t, groups[tank][keep], extra)


def _between_units(tanks_per_group, missing, units="tank", method="welch"):
    def rep(rng):
        tab = _unit_data(rng, tanks_per_group, missing=missing)
        return float(size_test(tab, "g", units=units, method=method, n_boot=39,
                               rng=rng).pvalue)
    return rep


def _within_units(tanks, missing, within_sd=None, units="tank"):
    def rep(rng):
        tab = _unit_data(rng, (tanks,), missing=missing, within_sd=within_sd)
        return float(size_test(tab, "visit", units=units).pvalue)
    return rep


# ---------------------------------------------------------------------------- the table
def _lognormal_cells():
    out = []
    designs = [
        ((8, 8), (1, 1), "8 + 8, variance ratio 1"),
        ((8, 8), (3, 1), "8 + 8, variance ratio 3"),
        ((8, 8), (9, 1), "8 + 8, variance ratio 9"),
        ((5, 5), (9, 1), "5 + 5, variance ratio 9"),
        ((5, 20), (1, 1), "5 + 20, variance ratio 1"),
        ((5, 20), (3, 1), "5 + 20, variance ratio 3, small group variable"),
        ((5, 20), (9, 1), "5 + 20, variance ratio 9, small group variable"),
        ((5, 20), (1, 3), "5 + 20, variance ratio 3, large group variable"),
        ((5, 20), (1, 9), "5 + 20, variance ratio 9, large group variable"),
        ((6, 18), (9, 1), "6 + 18, variance ratio 9, small group variable"),
        ((5, 5, 5), (1, 1, 1), "5 + 5 + 5, variance ratio 1"),
        ((5, 5, 5), (9, 1, 1), "5 + 5 + 5, variance ratio 9"),
        ((5, 10, 20), (9, 3, 1), "5 + 10 + 20, variances 9:3:1 (small group variable)"),
        ((5, 10, 20), (1, 3, 9), "5 + 10 + 20, variances 1:3:9 (large group variable)"),
    ]
    for sizes, ratios, words in designs:
        key = "x".join(map(str, sizes)) + "-v" + "".join(map(str, ratios))
        out.append(Cell(f"size/welch/{key}", "size test", "size_test (welch, default)",
                        f"log-normal totals, equal geometric means; {words}",
                        _welch_lognormal(sizes, ratios), reps=1000, short_reps=50))
    for sizes, ratios, words in [((3, 3), (9, 1), "3 + 3, variance ratio 9"),
                                 ((4, 4), (9, 1), "4 + 4, variance ratio 9"),
                                 ((3, 12), (9, 1), "3 + 12, variance ratio 9, small variable"),
                                 ((3, 12), (1, 9), "3 + 12, variance ratio 9, large variable"),
                                 ((3, 3, 3), (9, 1, 1), "3 + 3 + 3, variance ratio 9")]:
        key = "x".join(map(str, sizes)) + "-v" + "".join(map(str, ratios))
        out.append(Cell(f"size/welch-small/{key}", "size test", "size_test (welch), n < 5",
                        f"log-normal totals, equal geometric means; {words}",
                        _welch_lognormal(sizes, ratios), reps=1000, check=False))
    for nb, per, ratios, method, words in [
            (6, 1, (9, 1, 1), "welch", "6 blocks x 3 groups, 1 sample per group and block, "
                                       "variance ratio 9"),
            (4, 2, (9, 1), "welch", "4 blocks x 2 groups, 2 samples per group and block, "
                                    "variance ratio 9"),
            (5, 2, (1, 3, 9), "welch", "5 blocks x 3 groups, 2 samples per group and block, "
                                       "variances 1:3:9"),
            (6, 1, (1, 1, 1), "anova", "6 blocks x 3 groups, 1 sample per group and block, "
                                       "equal variances"),
            (10, 1, (9, 1), "welch", "10 blocks x 2 groups, 1 sample per group and block, "
                                     "variance ratio 9 (paired)"),
            (8, 1, (1, 9, 1, 1), "welch", "8 blocks x 4 groups, 1 sample per group and "
                                          "block, variances 1:9:1:1")]:
        key = f"{nb}x{per}-v" + "".join(map(str, ratios))
        out.append(Cell(f"size/blocks-{method}/{key}", "size test",
                        f"size_test ({method}, blocks=...)",
                        f"log-normal totals, block effects sd 0.5, equal geometric means; "
                        f"{words}", _blocked(nb, per, ratios, method), reps=1000,
                        short_reps=40))
    for sizes, shapes, words in [((5, 20), (1.5, 8), "5 + 20, gamma shapes 1.5 and 8"),
                                 ((20, 5), (1.5, 8), "20 + 5, gamma shapes 1.5 and 8")]:
        key = "x".join(map(str, sizes))
        out.append(Cell(f"size/welch-gamma/{key}", "size test", "size_test (welch, default)",
                        f"gamma totals, equal mean log; {words}",
                        _welch_gamma(sizes, shapes), reps=1000, short_reps=50))
    return out


def _reference_cells():
    out = [
        Cell("size/anova/6x18-v91", "size test", "size_test (anova)",
             "log-normal totals, equal geometric means; 6 + 18, variance ratio 9, small group "
             "variable", _welch_lognormal((6, 18), (9, 1), "anova"), reps=1000, check=False),
        Cell("size/anova/12x12-v91", "size test", "size_test (anova)",
             "log-normal totals, equal geometric means; 12 + 12, variance ratio 9",
             _welch_lognormal((12, 12), (9, 1), "anova"), reps=1000, check=False),
        Cell("size/kruskal/6x18-v91", "size test", "size_test (kruskal)",
             "log-normal totals, equal geometric means; 6 + 18, variance ratio 9, small group "
             "variable", _kruskal((6, 18), (9, 1)), reps=1000, check=False),
        Cell("size/permutation-welch/3x3-v91", "size test",
             "Welch F by permutation (measured, not shipped)",
             "log-normal totals, equal geometric means; 3 + 3, variance ratio 9",
             _welch_permutation((3, 3), (9, 1)), reps=400, check=False),
        Cell("size/permutation-welch/4x4-v91", "size test",
             "Welch F by permutation (measured, not shipped)",
             "log-normal totals, equal geometric means; 4 + 4, variance ratio 9",
             _welch_permutation((4, 4), (9, 1)), reps=400, check=False),
        Cell("size/permutation-welch/4x4-v11", "size test",
             "Welch F by permutation (measured, not shipped)",
             "log-normal totals, equal geometric means; 4 + 4, variance ratio 1",
             _welch_permutation((4, 4), (1, 1)), reps=400, check=False),
    ]
    for sizes in [(8, 8), (5, 20)]:
        key = "x".join(map(str, sizes))
        for method in ("welch", "anova"):
            out.append(Cell(f"size/power/{method}-{key}", "size test",
                            f"size_test ({method}), POWER",
                            f"log-normal totals, sd 0.5, ratio of geometric means 1.5; "
                            f"{' + '.join(map(str, sizes))}; rate = power (same data sets "
                            "for welch and anova)",
                            _power(sizes, method), reps=1000, check=False,
                            seed=zlib.crc32(f"size/power/{key}".encode())))
    return out


def _negbin_cells():
    out = []
    designs = [
        ((8, 8), (3, 3), "8 + 8, sizes 3 and 3"),
        ((8, 8), (1.5, 5), "8 + 8, sizes 1.5 and 5 (variance ratio about 3)"),
        ((8, 8), (1.5, 20), "8 + 8, sizes 1.5 and 20 (variance ratio about 12)"),
        ((5, 5), (1.5, 20), "5 + 5, sizes 1.5 and 20"),
        ((5, 20), (1.5, 20), "5 + 20, small group over-dispersed"),
        ((20, 5), (1.5, 20), "20 + 5, large group over-dispersed"),
        ((5, 20), (3, 3), "5 + 20, sizes 3 and 3"),
        ((5, 5, 5), (3, 3, 3), "5 + 5 + 5, sizes 3"),
        ((5, 10, 20), (1.5, 5, 20), "5 + 10 + 20, sizes 1.5, 5, 20"),
        ((5, 10, 20), (20, 5, 1.5), "5 + 10 + 20, sizes 20, 5, 1.5"),
    ]
    for sizes, shapes, words in designs:
        key = "x".join(map(str, sizes)) + "-k" + "-".join(f"{s:g}" for s in shapes)
        out.append(Cell(f"size/negbin/{key}", "size test",
                        "size_test (negbin, bootstrap reference, 39 draws)",
                        f"NB totals, mean 200 in every group; {words}",
                        _negbin(sizes, shapes), reps=400, short_reps=12))
        if shapes in ((1.5, 20), (3, 3, 3)) or sizes == (5, 10, 20):
            out.append(Cell(f"size/negbin-F/{key}", "size test",
                            "size_test (negbin, nb_reference='F')",
                            f"NB totals, mean 200 in every group; {words}",
                            _negbin(sizes, shapes, "F"), reps=1000, check=False))
    for sizes, shapes, words in [((3, 3), (1.5, 20), "3 + 3, sizes 1.5 and 20"),
                                 ((4, 4), (1.5, 20), "4 + 4, sizes 1.5 and 20")]:
        key = "x".join(map(str, sizes))
        out.append(Cell(f"size/negbin-small/{key}", "size test", "size_test (negbin), n < 5",
                        f"NB totals, mean 200 in every group; {words}",
                        _negbin(sizes, shapes), reps=400, check=False))
    for sizes, sds in [((7, 7), (0.9, 0.9)), ((7, 7), (0.9, 0.3)), ((20, 20), (0.9, 0.3))]:
        key = "x".join(map(str, sizes)) + "-sd" + "-".join(f"{s:g}" for s in sds)
        words = (f"log-normal totals, equal ARITHMETIC means, log sd {sds[0]:g} and "
                 f"{sds[1]:g}; {' + '.join(map(str, sizes))}")
        out.append(Cell(f"size/negbin-lognormal/{key}", "size test",
                        "size_test (negbin) off its model", words,
                        _negbin_off_model(sizes, sds), reps=400, check=False))
        out.append(Cell(f"size/negbin-fitcheck/{key}", "size test",
                        "negbin fit check: share of data sets flagged too skewed", words,
                        _negbin_off_model(sizes, sds, fired=True), reps=400, check=False))
    out.append(Cell("size/negbin-fitcheck/nb-8x8", "size test",
                    "negbin fit check: share of data sets flagged too skewed",
                    "NB totals (its own model), 8 + 8, sizes 1.5 and 20",
                    _negbin_fitcheck_on_nb((8, 8), (1.5, 20)), reps=400, check=False))
    return out


def _negbin_fitcheck_on_nb(sizes, shapes):
    def rep(rng):
        y = _nb_totals(rng, sizes, shapes)
        res = size_test(_table(y, _groups(sizes)), "g", method="negbin", units=False,
                        nb_reference="F")
        return 0.0 if res.too_skewed else 1.0
    return rep


def _unit_cells():
    return [
        Cell("size/units/between-5x5-balanced", "size test", "size_test(units='tank')",
             "2 treatments x 5 tanks x 4 visits, tank effects (sd 0.5 on log), no effect",
             _between_units((5, 5), 0.0), reps=1000, short_reps=40),
        Cell("size/units/between-5x5-missing", "size test", "size_test(units='tank')",
             "2 treatments x 5 tanks x 4 visits, 25 % of visits missing, tank effects",
             _between_units((5, 5), 0.25), reps=1000, short_reps=40),
        Cell("size/units/between-3x5-detected", "size test", "size_test (units detected)",
             "3 treatments x 5 tanks x 4 visits, 25 % of visits missing, tank effects",
             _between_units((5, 5, 5), 0.25, units=None), reps=1000, short_reps=40),
        Cell("size/units/between-5x5-negbin", "size test",
             "size_test(units='tank', method='negbin')",
             "2 treatments x 5 tanks x 4 visits, tank effects, NB-like log-normal totals",
             _between_units((5, 5), 0.0, method="negbin"), reps=400, check=False),
        Cell("size/units/within-8-balanced", "size test", "size_test(units='tank'), mixed",
             "visit effect tested within 8 tanks x 4 visits, tank effects, no effect",
             _within_units(8, 0.0), reps=400, short_reps=15),
        Cell("size/units/within-8-missing", "size test", "size_test(units='tank'), mixed",
             "visit effect within 8 tanks x 4 visits, 20 % of visits missing, tank effects",
             _within_units(8, 0.2), reps=400, short_reps=15),
        Cell("size/units/within-8-unequal", "size test", "size_test(units='tank'), mixed",
             "visit effect within 8 tanks x 4 visits, residual sd 0.15-0.6 by visit",
             _within_units(8, 0.0, within_sd=(0.15, 0.3, 0.45, 0.6)), reps=400,
             check=False),
        Cell("size/units/between-no-units", "size test", "size_test(units=False)",
             "2 treatments x 5 tanks x 4 visits, tank effects, samples as replicates",
             _between_units((5, 5), 0.0, units=False), reps=1000, check=False),
    ]


def _coverage_cells():
    out = []
    for sizes, ratios, words in [((5, 20), (9, 1), "5 + 20, variance ratio 9, small variable"),
                                 ((5, 20), (1, 9), "5 + 20, variance ratio 9, large variable"),
                                 ((8, 8), (1, 1), "8 + 8, equal variances")]:
        key = "x".join(map(str, sizes)) + "-v" + "".join(map(str, ratios))
        out.append(Cell(f"size/welch-interval/{key}", "size test",
                        "size_test (welch): 95 % interval of the ratio of geometric means",
                        f"log-normal totals, true ratio 1.5; {words}",
                        _welch_coverage(sizes, ratios), kind="coverage", reps=1000,
                        short_reps=50))
    for sizes, shapes, words in [((8, 8), (1.5, 20), "8 + 8, NB sizes 1.5 and 20"),
                                 ((20, 5), (1.5, 20), "20 + 5, NB sizes 1.5 and 20"),
                                 ((5, 20), (1.5, 20), "5 + 20, NB sizes 1.5 and 20")]:
        key = "x".join(map(str, sizes)) + "-k" + "-".join(f"{x:g}" for x in shapes)
        out.append(Cell(f"size/negbin-interval/{key}", "size test",
                        "size_test (negbin): 95 % interval of the ratio of mean totals",
                        f"NB totals, true ratio 1.5; {words}",
                        _negbin_coverage(sizes, shapes), kind="coverage", reps=400,
                        short_reps=20))
    return out


CELLS = _coverage_cells() + _lognormal_cells() + _reference_cells() + _negbin_cells() + _unit_cells()
