"""Choice-adjusted tests (choice_adjusted): the smallest p-value over a family of choices of
transform and measure, adjusted by single-step min-P (Westfall & Young 1993), under a clean
null of composition, for families of 5, 15 and 30 choices. All data are synthetic.

Designs: independent samples (groups of 8 and 12) and repeated visits (4 and 6 tanks per
treatment, 3 visits each, tank effects on composition; tested with ``units='tank'``).
Between-sample variation from the shared generators (log-normal, Dirichlet-multinomial,
gamma-Poisson, two-state mixture), 40 taxa. Totals: equal in law between the groups
(log-normal around 3000), or three times larger in the second group. With equal totals the
families mix size-free and other measures (the default family's measures); with unequal
totals only size-free choices are under their null, so those families are size-free
measures under powers (a choice that also reads totals would rightly see the size
difference).

Level cells: rejection of the choice with the smallest p-value at its *adjusted* p (band
[0.02, 0.07]). Reference rows on the same data sets: the same choice at its raw p (what
choosing after looking does). Power rows (shift of 5 of the 40 taxa by 1.8x in the second
group, the same data sets for the three rows of a trio): the adjusted smallest p, one
choice fixed in advance (chi-square, the default of compare_groups) and Bonferroni (K
times the smallest raw p).

The three rows of a trio, and a level cell with its reference row, share their data sets
(same seed) and, within one process, the computation (a small memo keyed by the replicate's
random state).
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from tallyform.core.choice_adjusted import choice_adjusted
from tallyform.core.choice_grid import as_choices, default_choices
from tallyform.core.table import CommunityTable

from .base import Cell
from .generators import base_profile, counts_from

PERMS = 199
P_TAXA = 40
GENERATORS = ("lognormal", "dirichlet", "gamma_poisson", "mixture")


# ---------------------------------------------------------------------------- families
def _nested(items) -> dict:
    """Families of 30, 15 and 5 distinct choices, each inside the larger one: chi-square
    (the choice fixed in advance of the power rows) first, the others in a fixed random
    order."""
    fam, _ = as_choices(items)
    if len(fam) < 30:
        raise ValueError(f"only {len(fam)} distinct choices")
    first = next(c for c in fam if c.name == "chi_square")
    rest = [c for c in fam if c is not first]
    order = np.random.default_rng(2024).permutation(len(rest))
    full = [first] + [rest[i] for i in order[:29]]
    return {k: [c.as_dict() for c in full[:k]] for k in (5, 15, 30)}


def _mixed():
    extra = [{"measure": m} for m in ("aitchison", "jensen_shannon", "morisita_horn")]
    return _nested(default_choices() + extra)


def _size_free():
    powers = (1.0, 0.75, 0.6, 0.5, 0.35, 0.25)
    items = [{"measure": m, "transform": a} for a in powers
             for m in ("chi_square", "hellinger", "aitchison", "jensen_shannon",
                       "morisita_horn", "chord")]
    return _nested(items)


FAMILIES = {"mixed": _mixed(), "size_free": _size_free()}


# ---------------------------------------------------------------------------- data
def _totals(rng, groups, ratio, depth, sd):
    t = rng.lognormal(np.log(depth), sd, size=int(np.sum(groups)))
    t[groups[0]:] *= ratio
    return np.round(t).astype(np.int64)


def _shift(base, shift):
    b = base.copy()
    if shift != 1.0:
        b[[1, 4, 8, 13, 21]] *= shift          # 5 of 40 taxa, common to rare
    return b / b.sum()


def independent(rng, *, generator, ratio=1.0, shift=1.0, groups=(8, 12), depth=3000,
                sd=0.3, subsample_to_smallest=False):
    """Two groups of independent samples from one law (``shift``: 5 taxa in group 2). One
    call of the generator for all samples under the null (the mixture draws its second
    state per call). ``subsample_to_smallest``: every sample subsampled without
    replacement to the smallest total (Sanders 1968; Hurlbert 1971)."""
    base = base_profile(P_TAXA, rng)
    totals = _totals(rng, groups, ratio, depth, sd)
    if shift == 1.0:
        parts = [counts_from(generator, totals, base, rng)]
    else:
        parts = [counts_from(generator, totals[:groups[0]], base, rng),
                 counts_from(generator, totals[groups[0]:], _shift(base, shift), rng)]
    n = int(np.sum(groups))
    labels = [f"s{i:02d}" for i in range(n)]
    info = pd.DataFrame({"g": np.repeat(["a", "b"], groups)}, index=labels)
    x = np.vstack(parts)
    if subsample_to_smallest:
        m = int(x.sum(axis=1).min())
        x = np.vstack([rng.multivariate_hypergeometric(row.astype(np.int64), m)
                       for row in x]).astype(float)
    return CommunityTable(pd.DataFrame(x, index=labels), info, empty="drop")


def visits(rng, *, generator, ratio=1.0, shift=1.0, tanks=(4, 6), n_visits=3,
           tank_sd=0.4, depth=3000, sd=0.3):
    """Treatments x tanks x visits: each tank its own composition (log-normal tank effect
    on the base profile), visits drawn around it by the generator."""
    base = base_profile(P_TAXA, rng)
    totals = _totals(rng, (tanks[0] * n_visits, tanks[1] * n_visits), ratio, depth, sd)
    rows, parts, k = [], [], 0
    for g, m in enumerate(tanks):
        b = _shift(base, shift if g == 1 else 1.0)
        for t in range(m):
            bt = b * np.exp(tank_sd * rng.standard_normal(P_TAXA))
            bt /= bt.sum()
            parts.append(counts_from(generator, totals[k:k + n_visits], bt, rng))
            rows += [dict(g="ab"[g], tank=f"T{g}{t}", visit=f"v{v}") for v in range(n_visits)]
            k += n_visits
    labels = [f"s{i:02d}" for i in range(len(rows))]
    info = pd.DataFrame(rows, index=labels)
    return CommunityTable(pd.DataFrame(np.vstack(parts), index=labels), info, empty="drop")


# ---------------------------------------------------------------------------- replicate
_MEMO: dict = {}


def _study(rng, design, fam, k, generator, data) -> dict:
    """p-values of one simulated study, computed once per random state in this process."""
    key = (design, fam, k, generator, tuple(sorted(data.items())),
           str(rng.bit_generator.state))
    if key not in _MEMO:
        if len(_MEMO) > 4000:
            _MEMO.clear()
        _MEMO[key] = _compute(rng, design, FAMILIES[fam][k], generator, data)
    return _MEMO[key]


def replicate(design, fam, k, generator, *, what="adjusted", **data):
    """One study's p-value: ``what`` in 'adjusted', 'raw', 'bonferroni', 'fixed';
    ``data``: ratio, shift, depth (see :func:`independent`, :func:`visits`)."""
    def run(rng):
        return _study(rng, design, fam, k, generator, data)[what]
    return run


def _compute(rng, design, family, generator, data):
    data = dict(data)
    perms = int(data.pop("perms", PERMS))
    make = independent if design == "independent" else visits
    tab = make(rng, generator=generator, **data)
    units = False if design == "independent" else "tank"
    res = choice_adjusted(tab, "g", family, n_permutations=perms, rng=rng, units=units,
                          progress=False)
    p, adj = res.pvalue.to_numpy(), res.pvalue_adjusted.to_numpy()
    best = int(np.nanargmin(p))
    return {"adjusted": float(adj[best]), "raw": float(p[best]),
            "bonferroni": float(min(1.0, res.n_choices * p[best])),
            "fixed": float(res.pvalue.get("chi_square", np.nan))}


# ---------------------------------------------------------------------------- cells
_DESIGNS = {"independent": "groups of 8 and 12 samples",
            "visits": "4 and 6 tanks x 3 visits, tank effects (units='tank')"}
_TOTALS = {"equal": (dict(sd=0.3), "totals log-normal around 3000 (sd 0.3), same law in "
                                   "both groups"),
           "varying": (dict(sd=0.8), "totals spread 10-fold (log-normal sd 0.8), same law "
                                     "in both groups")}
_FAMILY_WORDS = {"mixed": "the default family's measures (size-free or not)",
                 "size_free": "size-free measures under powers"}
# (design, totals, family, k, generator): every generator in every design
_LEVELS = [("independent", "equal", "mixed", 5, "lognormal"),
           ("independent", "equal", "mixed", 15, "dirichlet"),
           ("independent", "equal", "mixed", 30, "gamma_poisson"),
           ("independent", "varying", "size_free", 5, "mixture"),
           ("independent", "varying", "size_free", 15, "lognormal"),
           ("independent", "varying", "mixed", 30, "dirichlet"),
           ("visits", "equal", "mixed", 5, "gamma_poisson"),
           ("visits", "equal", "mixed", 15, "mixture"),
           ("visits", "equal", "mixed", 30, "lognormal"),
           ("visits", "varying", "size_free", 5, "dirichlet"),
           ("visits", "varying", "size_free", 15, "gamma_poisson"),
           ("visits", "varying", "mixed", 30, "mixture")]


def _level_cells() -> list:
    out = []
    for design, totals, fam, k, gen in _LEVELS:
        data, words = _TOTALS[totals]
        id_ = f"choice/{design}-{totals}-k{k}"
        units = ", units='tank'" if design == "visits" else ""
        where = f"{_DESIGNS[design]}, {P_TAXA} taxa, {gen} biology, {words}; {k} choices: " \
                f"{_FAMILY_WORDS[fam]}"
        out.append(Cell(id_, "choice-adjusted",
                        f"choice_adjusted({k} choices{units}), smallest p, adjusted",
                        where, replicate(design, fam, k, gen, **data), band=(0.02, 0.07),
                        reps=1000, short_reps=40 if design == "visits" else 60))
        out.append(Cell(id_ + "-raw", "choice-adjusted",
                        f"smallest raw p over {k} choices (choosing after looking)",
                        where, replicate(design, fam, k, gen, what="raw", **data),
                        reps=1000, check=False, seed=out[-1].seed))
    # min-P with 30 choices is coarse on 199 relabellings (up to 30 of them are each some
    # choice's most extreme one): the same cell with 999
    design, totals, fam, k, gen = _LEVELS[5]
    data, words = _TOTALS[totals]
    out.append(Cell(f"choice/{design}-{totals}-k{k}-999", "choice-adjusted",
                    f"choice_adjusted({k} choices, n_permutations=999), smallest p, adjusted",
                    f"{_DESIGNS[design]}, {P_TAXA} taxa, {gen} biology, {words}; {k} choices: "
                    f"{_FAMILY_WORDS[fam]}",
                    replicate(design, fam, k, gen, perms=999, **data), reps=400,
                    check=False,
                    seed=next(c.seed for c in out if c.id == f"choice/{design}-{totals}-k{k}")))
    return out


def _depth_cells() -> list:
    """Totals three times larger in one group: counts of one composition then differ in
    counting noise and zeros, to which the shape tests of counts themselves respond."""
    out = []
    for depth in (3000, 300000):
        data = dict(ratio=3.0, depth=depth)
        id_ = f"choice/independent-deeper-b-{depth}"
        where = (f"groups of 8 and 12, {P_TAXA} taxa, log-normal biology, totals 3x larger "
                 f"in one group (around {depth} and {3 * depth}); 30 size-free choices")
        out.append(Cell(id_, "choice-adjusted",
                        "choice_adjusted(30 choices), smallest p, adjusted", where,
                        replicate("independent", "size_free", 30, "lognormal", **data),
                        reps=1000, check=False))
        out.append(Cell(id_ + "-fixed", "choice-adjusted",
                        "one choice fixed in advance (chi-square), its own p", where,
                        replicate("independent", "size_free", 30, "lognormal",
                                  what="fixed", **data),
                        reps=1000, check=False, seed=out[-1].seed))
    data = dict(ratio=3.0, depth=3000, subsample_to_smallest=True)
    out.append(Cell("choice/independent-deeper-b-3000-rarefied", "choice-adjusted",
                    "choice_adjusted(30 choices) after rarefying to the smallest total, "
                    "smallest p, adjusted",
                    f"groups of 8 and 12, {P_TAXA} taxa, log-normal biology, totals 3x larger "
                    "in one group (around 3000 and 9000); 30 size-free choices",
                    replicate("independent", "size_free", 30, "lognormal", **data),
                    reps=1000, check=False))
    return out


def _power_cells() -> list:
    out = []
    for design, k in (("independent", 30), ("independent", 5), ("visits", 30)):
        id_ = f"choice/power-{design}-k{k}"
        where = (f"{_DESIGNS[design]}, {P_TAXA} taxa, log-normal biology, equal totals; 5 of "
                 f"the {P_TAXA} taxa 1.8x in one group; {k} choices of the default family")
        seed = None
        for what, method in (("adjusted", "smallest p, adjusted (min-P)"),
                             ("fixed", "one choice fixed in advance (chi-square)"),
                             ("bonferroni", f"smallest p x {k} (Bonferroni)")):
            cell = Cell(f"{id_}-{what}", "choice-adjusted", f"power: {method}", where,
                        replicate(design, "mixed", k, "lognormal", what=what, shift=1.8),
                        reps=400, check=False, seed=seed)
            seed = cell.seed
            out.append(cell)
    return out


CELLS = _level_cells() + _depth_cells() + _power_cells()
