"""Shape and spread tests under pure size differences (counting noise).

Every study is synthetic: samples of ONE law of composition (generators.py: log-normal,
Dirichlet-multinomial, gamma-Poisson, two-state mixture), in two groups whose totals differ
1- to 10-fold, so that any difference the tests find is counting noise. Checked rows:
``shape_test`` / ``spread_test`` with their defaults (one rarefaction to the smallest total);
reference rows: the same statistics on the counts as observed (``adjust='none'``).
benchmarks/counting.py reuses :func:`size_only_table` for its null and power tables.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from tallyform.core.counting import shape_test, spread_test
from tallyform.core.table import CommunityTable

from .base import Cell
from .generators import base_profile, counts_from

PERMS = 199
N_TAXA = 40


def size_only_table(rng, generator="lognormal", sizes=(10, 10), totals=(50, 500), *,
                    p=N_TAXA, group_kw=None, shift=None, units=None):
    """A synthetic table of two groups ('a', 'b') that differ in their totals.

    ``group_kw``: per-group options of the generator (e.g. ``({"sd": 0.5}, {"sd": 0.8})``
    for a real difference in spread); ``shift``: factor applied in group 'b' to 5 of the
    taxa (a real difference in composition); ``units``: samples per unit (tanks), with a
    unit effect of log-normal sd 0.3 on every taxon. Without these, every sample is drawn
    in one call of the generator, so all samples follow one law (the groups differ in their
    totals only). The mixture generator draws its second state per call, so it is used
    without ``group_kw``, ``shift`` or ``units``.
    """
    if generator == "mixture" and not (group_kw is None and shift is None and units is None):
        raise ValueError("the mixture generator draws its states per call; use it for "
                         "size-only designs (no group_kw, shift or units).")
    base = base_profile(p, rng)
    parts = []
    if group_kw is None and shift is None and units is None:
        # one call: every sample from the same law (the mixture's second state, for one, is
        # drawn once per call)
        parts.append(counts_from(generator, np.repeat(totals, sizes), base, rng))
        sizes_iter = []
    else:
        sizes_iter = list(zip(sizes, totals))
    for k, (n, tot) in enumerate(sizes_iter):
        b = base.copy()
        if shift is not None and k == 1:
            b[np.arange(5, p, p // 5)[:5]] *= shift
            b /= b.sum()
        kw = {} if group_kw is None else dict(group_kw[k])
        if units is None:
            parts.append(counts_from(generator, np.full(n, tot), b, rng, **kw))
        else:
            for _ in range(n):
                bu = b * np.exp(0.3 * rng.standard_normal(p))
                parts.append(counts_from(generator, np.full(units, tot), bu / bu.sum(),
                                         rng, **kw))
    x = np.vstack(parts)
    n = x.shape[0]
    labels = [f"s{i:03d}" for i in range(n)]
    reps = [units or 1] * 2
    g = np.repeat(["a", "b"], [sizes[0] * reps[0], sizes[1] * reps[1]])
    info = pd.DataFrame({"g": g}, index=labels)
    if units is not None:
        info["tank"] = [f"t{i // units:02d}" for i in range(n)]
    frame = pd.DataFrame(x, index=labels, columns=[f"t{j:02d}" for j in range(p)])
    return CommunityTable(frame, info, empty="drop")


def _rep(aspect, measure, adjust, generator, sizes, totals, **kw):
    test = shape_test if aspect == "shape" else spread_test
    units = kw.pop("units", None)
    opts = kw.pop("opts", {})

    def replicate(rng):
        tab = size_only_table(rng, generator, sizes, totals, units=units)
        res = test(tab, "g", measure=measure, adjust=adjust, n_permutations=PERMS,
                   units="tank" if units else False, rng=rng, **opts)
        return res.pvalue
    return replicate


#: (short id, generator, group sizes, totals, words)
DESIGNS = [
    ("ratio1", "lognormal", (10, 10), (200, 200), "log-normal sd 0.5, 10 + 10, totals 200/200"),
    ("ratio2", "lognormal", (10, 10), (150, 300), "log-normal sd 0.5, 10 + 10, totals 150/300"),
    ("ratio4", "lognormal", (10, 10), (100, 400), "log-normal sd 0.5, 10 + 10, totals 100/400"),
    ("ratio10", "lognormal", (10, 10), (50, 500), "log-normal sd 0.5, 10 + 10, totals 50/500"),
    ("ratio10-large", "lognormal", (10, 10), (500, 5000),
     "log-normal sd 0.5, 10 + 10, totals 500/5000"),
    ("unbalanced-6-14", "lognormal", (6, 14), (50, 500),
     "log-normal sd 0.5, 6 (50) + 14 (500): the small group has the small totals"),
    ("unbalanced-14-6", "lognormal", (14, 6), (50, 500),
     "log-normal sd 0.5, 14 (50) + 6 (500): the small group has the large totals"),
    ("dm-ratio10", "dirichlet", (10, 10), (50, 500),
     "Dirichlet-multinomial icc 0.05, 10 + 10, totals 50/500"),
    ("dm-ratio10-large", "dirichlet", (10, 10), (500, 5000),
     "Dirichlet-multinomial icc 0.05, 10 + 10, totals 500/5000"),
    ("dm-unbalanced", "dirichlet", (6, 14), (50, 500),
     "Dirichlet-multinomial icc 0.05, 6 (50) + 14 (500)"),
    ("dm-small", "dirichlet", (5, 12), (100, 400),
     "Dirichlet-multinomial icc 0.05, 5 (100) + 12 (400)"),
    ("gp-ratio10", "gamma_poisson", (10, 10), (50, 500),
     "gamma-Poisson k = 2, 10 + 10, mean totals 50/500"),
    ("gp-unbalanced", "gamma_poisson", (6, 14), (50, 500),
     "gamma-Poisson k = 2, 6 (50) + 14 (500)"),
    ("mix-ratio10", "mixture", (10, 10), (50, 500),
     "two-state mixture, 10 + 10, totals 50/500"),
]
#: Designs whose short run in the suite is longer (the hardest ones).
_KEY = {"ratio10", "unbalanced-6-14", "dm-unbalanced", "gp-unbalanced"}
_LABEL = {"chi_square": "chi-square", "hellinger": "Hellinger"}


def _cells():
    out = []
    for aspect in ("shape", "spread"):
        fn = f"{aspect}_test"
        for measure in ("chi_square", "hellinger"):
            for short, gen, sizes, totals, words in DESIGNS:
                out.append(Cell(
                    f"counting/{aspect}-{measure}-{short}", "counting noise",
                    f"{fn}(measure='{measure}') (default: one rarefaction)", words,
                    _rep(aspect, measure, "rarefaction", gen, sizes, totals),
                    reps=1000, short_reps=40 if short in _KEY else 15))
                out.append(Cell(
                    f"counting/{aspect}-{measure}-{short}-unadjusted", "counting noise",
                    f"{fn}(measure='{measure}', adjust='none')", words,
                    _rep(aspect, measure, "none", gen, sizes, totals),
                    reps=400, short_reps=15, check=False))
    # any measure; several draws; PERMANOVA's pseudo-F; whole units
    for aspect in ("shape", "spread"):
        fn = f"{aspect}_test"
        for measure in ("aitchison", "bray_curtis"):
            out.append(Cell(
                f"counting/{aspect}-{measure}-ratio10", "counting noise",
                f"{fn}(measure='{measure}')", "log-normal sd 0.5, 10 + 10, totals 50/500",
                _rep(aspect, measure, "rarefaction", "lognormal", (10, 10), (50, 500)),
                reps=400, short_reps=15))
        out.append(Cell(
            f"counting/{aspect}-chi_square-dm-unbalanced-draws5", "counting noise",
            f"{fn}(n_draws=5) (Rueger's combination of 5 rarefactions)",
            "Dirichlet-multinomial icc 0.05, 6 (50) + 14 (500); band [0, 0.07]: the "
            "combination is valid for any dependence, hence conservative",
            _rep(aspect, "chi_square", "rarefaction", "dirichlet", (6, 14), (50, 500),
                 opts={"n_draws": 5}), band=(0.0, 0.07), reps=400, short_reps=10))
        out.append(Cell(
            f"counting/{aspect}-chi_square-units", "counting noise",
            f"{fn}(units='tank')",
            "2 groups x 6 tanks x 3 samples, tank effects, totals 50/500",
            _rep(aspect, "chi_square", "rarefaction", "lognormal", (6, 6), (50, 500),
                 units=3), reps=400, short_reps=15))
    out.append(Cell(
        "counting/shape-chi_square-unbalanced-6-14-pseudo_f", "counting noise",
        "shape_test(statistic='pseudo_f')", "log-normal sd 0.5, 6 (50) + 14 (500)",
        _rep("shape", "chi_square", "rarefaction", "lognormal", (6, 14), (50, 500),
             opts={"statistic": "pseudo_f"}), reps=1000, short_reps=15))
    return out


CELLS = _cells()
