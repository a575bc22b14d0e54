"""Relative data (sequencing reads): size tests on loads from qPCR or a spike-in.

Each study simulates absolute abundances (about 10^5 individuals per sample, the same law of
totals in both groups) with one of the shared generators of between-sample variation, then
sequences them: multinomial reads at random depths, group b 2.5 times deeper than group a
(a batch effect, the usual threat to size tests on reads). Loads are either measured (qPCR,
10 % multiplicative error) or estimated from a spike-in added in a known amount (about 5 %
of the reads): load = added x (reads - spike-in reads) / spike-in reads (Stammler et al.
2016). The size test on the loads must hold its level, and its ratio interval must cover
the true ratio of geometric mean totals; the reference rows run the same test on the read
totals, which is what a relative table read as absolute does.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from tallyform.core.size_tests import size_test
from tallyform.core.table import CommunityTable

from .base import Cell
from .generators import base_profile, counts_from

PERMS = 199
P_TAXA = 40
DEEPER = 2.5              # depth of group b over group a
SPIKE_SHARE = 0.05        # spike-in copies added, as a share of the mean total


def _sequenced(rng, sizes, generator, ratio=1.0):
    """(absolute counts, reads including a spike-in column, amounts added, info)."""
    n_a, n_b = sizes
    n = n_a + n_b
    g = np.array(["a"] * n_a + ["b"] * n_b)
    base = base_profile(P_TAXA, rng)
    totals = np.rint(1e5 * np.where(g == "b", ratio, 1.0) * np.exp(rng.normal(0, 0.5, n)))
    absolute = counts_from(generator, totals, base, rng)
    added = SPIKE_SHARE * 1e5 * rng.uniform(0.8, 1.2, n)
    depth = rng.integers(5000, 20000, n) * np.where(g == "b", DEEPER, 1.0)
    extract = np.column_stack([absolute, added])
    reads = rng.multinomial(depth.astype(np.int64), extract / extract.sum(axis=1)[:, None])
    labels = [f"s{i}" for i in range(n)]
    qpcr = absolute.sum(axis=1) * np.exp(rng.normal(0.0, 0.1, n))
    info = pd.DataFrame({"g": g, "qpcr": qpcr, "added": added}, index=labels)
    frame = pd.DataFrame(reads.astype(float), index=labels,
                         columns=[f"t{j}" for j in range(P_TAXA)] + ["spike"])
    return absolute, frame, info


def _table(frame, info, loads):
    if loads == "qpcr":
        return CommunityTable(frame.drop(columns="spike"), info, abundance="relative",
                              load="qpcr", empty="drop")
    if loads == "spike":
        return CommunityTable(frame, info, abundance="relative", empty="drop",
                              spike_in={"taxon": "spike", "added": "added"})
    # reference: the reads read as absolute abundances (their totals are the depths)
    return CommunityTable(frame.drop(columns="spike"), info, empty="drop")


def _level(rng, *, sizes, generator, loads, method):
    _, frame, info = _sequenced(rng, sizes, generator)
    tab = _table(frame, info, loads)
    kw = {"n_permutations": PERMS, "rng": rng} if method == "permutation" else {}
    return float(size_test(tab, "g", method=method, **kw).pvalue)


def _coverage(rng, *, sizes, generator, loads, ratio=0.5):
    # the truth: totals are log-normal with the same sd, so the ratio of the groups'
    # geometric mean totals is ``ratio`` (the multinomial counting keeps each total)
    _, frame, info = _sequenced(rng, sizes, generator, ratio=ratio)
    res = size_test(_table(frame, info, loads), "g", method="welch")
    lo, hi = res.summary.loc["b", ["ci_low", "ci_high"]]
    return bool(lo <= ratio <= hi)


def _shape(rng, *, sizes, generator, aspect):
    """Composition (PERMANOVA) or spread (dispersion test) on the reads, chi-square."""
    from tallyform.core.dispersion import dispersion_test
    from tallyform.core.dissimilarity import dissimilarity
    from tallyform.core.inference import permanova
    _, frame, info = _sequenced(rng, sizes, generator)
    tab = CommunityTable(frame.drop(columns="spike"), info, abundance="relative", empty="drop")
    d = dissimilarity(tab, "chi_square")
    if aspect == "shape":
        return float(permanova(d, tab, ["g"], n_permutations=PERMS, rng=rng).pvalue["g"])
    return float(dispersion_test(d, tab.samples["g"], n_permutations=PERMS, rng=rng).pvalue)


def _cell(id_, what, design, fn, **kw):
    return Cell(f"relative/{id_}", "size test on relative data", what, design,
                lambda rng, _kw=kw: fn(rng, **_kw), reps=400 if fn is _shape else 1000,
                short_reps=200,
                kind="coverage" if fn is _coverage else "level",
                check=kw.get("loads") != "reads" and fn is not _shape)


CELLS = [
    _cell("welch-qpcr-lognormal", "size_test(method='welch'), load='qpcr'",
          "8 vs 12, log-normal biology, qPCR loads (10 % error), b sequenced 2.5x deeper",
          _level, sizes=(8, 12), generator="lognormal", loads="qpcr", method="welch"),
    _cell("welch-spike-dirichlet", "size_test(method='welch'), spike_in=",
          "6 vs 10, Dirichlet-multinomial biology, spike-in loads, b 2.5x deeper",
          _level, sizes=(6, 10), generator="dirichlet", loads="spike", method="welch"),
    _cell("anova-spike-gamma-poisson", "size_test(method='anova'), spike_in=",
          "5 vs 5, gamma-Poisson biology, spike-in loads, b 2.5x deeper",
          _level, sizes=(5, 5), generator="gamma_poisson", loads="spike", method="anova"),
    _cell("permutation-spike-mixture", "size_test(method='permutation'), spike_in=",
          "7 vs 11, two-state mixture biology, spike-in loads, b 2.5x deeper",
          _level, sizes=(7, 11), generator="mixture", loads="spike", method="permutation"),
    _cell("kruskal-qpcr-gamma-poisson", "size_test(method='kruskal'), load='qpcr'",
          "10 vs 6, gamma-Poisson biology, qPCR loads, b 2.5x deeper",
          _level, sizes=(10, 6), generator="gamma_poisson", loads="qpcr", method="kruskal"),
    _cell("welch-ratio-ci-spike-lognormal", "size_test(method='welch') ratio interval, "
          "spike_in=", "8 vs 12, log-normal biology, true ratio 0.5, spike-in loads, "
          "b 2.5x deeper", _coverage, sizes=(8, 12), generator="lognormal", loads="spike"),
    _cell("welch-ratio-ci-qpcr-dirichlet", "size_test(method='welch') ratio interval, "
          "load='qpcr'", "5 vs 9, Dirichlet-multinomial biology, true ratio 0.5, qPCR loads, "
          "b 2.5x deeper", _coverage, sizes=(5, 9), generator="dirichlet", loads="qpcr"),
    # reference: what the same test does on the read totals (the depths)
    _cell("welch-reads-as-totals-lognormal", "size_test(method='welch') on read totals",
          "8 vs 12, log-normal biology, no loads (reads read as absolute), b 2.5x deeper",
          _level, sizes=(8, 12), generator="lognormal", loads="reads", method="welch"),
    # reference: composition and spread on reads whose depths differ between groups (counting
    # noise ~ 1 / depth differs too, Warton et al. 2012); shown, not checked here
    _cell("shape-permanova-reads-dirichlet", "permanova(chi_square) on reads",
          "8 vs 12, Dirichlet-multinomial biology, one composition, b 2.5x deeper",
          _shape, sizes=(8, 12), generator="dirichlet", aspect="shape"),
    _cell("spread-dispersion-reads-dirichlet", "dispersion_test(chi_square) on reads",
          "8 vs 12, Dirichlet-multinomial biology, one composition, b 2.5x deeper",
          _shape, sizes=(8, 12), generator="dirichlet", aspect="spread"),
    _cell("shape-permanova-reads-lognormal", "permanova(chi_square) on reads",
          "8 vs 12, log-normal biology, one composition, b 2.5x deeper",
          _shape, sizes=(8, 12), generator="lognormal", aspect="shape"),
]
