"""Valid but extreme inputs compute correctly (synthetic tables).

Counts of 10^15, one taxon holding 99.99 % of a sample, 5000 taxa each seen in only two
samples, two samples of 5000 taxa: every registered measure is checked against the same
formula evaluated in 60-digit decimal arithmetic (tests/reliability/highprec.py) and, where
scipy has the measure, against ``scipy.spatial.distance.pdist``; PCoA against an eigen-
decomposition of the reference Gower matrix; the partition and PERMANOVA against the scale
identities they must satisfy; the negative-binomial size test against the textbook
log-likelihood in high precision and against statsmodels on moderate counts.
"""
from __future__ import annotations

import itertools
from decimal import Decimal, localcontext

import numpy as np
import pandas as pd
import pytest
from scipy.spatial.distance import pdist

import tallyform as tly
from tallyform.core import kernels
from tallyform.core.dissimilarity import condensed_index

import highprec as H

RNG_SEED = 20260611


def _huge(rng):
    """Counts up to 10^15 (exact in float64), with zeros, a near-identical pair (one count
    apart), a sample dominated by one taxon, and a sample a million times smaller."""
    x = rng.integers(0, 10**15, size=(7, 7)).astype(float)
    x[rng.random(x.shape) < 0.3] = 0
    x[1] = x[0]
    x[1, 2] += 1.0
    x[2] = 0
    x[2, 0], x[2, 3] = 10**15, 7
    x[3] = np.round(x[3] / 1e9)
    x[:, 6] += 1
    return x


def _dominant(rng):
    """One taxon holds 99.99 % of every sample; samples 0 and 1 differ by a single count."""
    x = rng.poisson(5, size=(7, 8)).astype(float) + (rng.random((7, 8)) < 0.7)
    for i in range(len(x)):
        x[i, 0] = 0
        x[i, 0] = 9999 * x[i].sum()
    x[1] = x[0]
    x[1, 5] += 1
    return x


def _sparse_5000(rng, n=20, p=5000):
    """5000 taxa, each non-zero in exactly two samples."""
    x = np.zeros((n, p))
    for k in range(p):
        i, j = rng.choice(n, 2, replace=False)
        x[i, k], x[j, k] = rng.integers(1, 50, 2)
    return x


def _two_by_5000(rng):
    """Two samples, 5000 taxa, every value non-zero (long sums of small terms)."""
    return rng.gamma(0.3, 10, size=(2, 5000)) + 1e-3


TABLES = {"huge": _huge, "dominant": _dominant, "sparse_5000": _sparse_5000,
          "two_by_5000": _two_by_5000}


@pytest.fixture(scope="module")
def tables():
    rng = np.random.default_rng(RNG_SEED)
    return {k: f(rng) for k, f in TABLES.items()}


def test_reference_covers_every_measure():
    assert set(H.NAMES) == set(tly.MEASURES)


_REFERENCE: dict = {}


def _reference(x, name):
    """60-digit distances of a seeded sample of pairs, per measure (computed once)."""
    if name not in _REFERENCE:
        ref_tab = H.Table(x)
        pairs = list(itertools.combinations(range(len(x)), 2))
        if len(pairs) > 6:                  # the reference is slow: a sample of pairs
            pick = np.random.default_rng(1).choice(len(pairs), 3 if x.shape[1] > 100 else 6,
                                                   replace=False)
            pairs = [pairs[k] for k in pick] + [(0, 1)]
        _REFERENCE[name] = pairs, {m: np.array([float(ref_tab.pair(m, i, j))
                                                for i, j in pairs]) for m in H.NAMES}
    return _REFERENCE[name]


@pytest.mark.parametrize("name", list(TABLES))
@pytest.mark.parametrize("numba", [False, True], ids=["numpy", "numba"])
def test_measures_against_high_precision(tables, name, numba):
    x = tables[name]
    n = len(x)
    pairs, refs = _reference(x, name)
    kernels.use_numba(numba)
    try:
        for m in H.NAMES:
            got_all = tly.dissimilarity(x, m).condensed
            ref = refs[m]
            got = np.array([got_all[condensed_index(n, np.array(i), np.array(j))]
                            for i, j in pairs])
            scale = float(np.max(np.abs(ref)))
            # 10 significant digits, or 1e-12 of the largest distance for distances that
            # are themselves near the rounding of the profiles (Morisita-Horn of two
            # samples one count apart out of 10^15 is 1e-30)
            np.testing.assert_allclose(got, ref, rtol=1e-10, atol=1e-12 * scale,
                                       err_msg=f"{m} on {name}")
    finally:
        kernels.use_numba(None)


@pytest.mark.parametrize("name", ["huge", "sparse_5000", "two_by_5000"])
def test_measures_against_scipy(tables, name):
    x = tables[name]
    prof = x / x.sum(axis=1, keepdims=True)
    # scipy.spatial.distance: same definitions (Jensen-Shannon with natural log; Jaccard and
    # Dice on presence are our presence Jaccard and Sorensen)
    cases = {"bray_curtis": pdist(x, "braycurtis"), "euclidean": pdist(x, "euclidean"),
             "manhattan": pdist(x, "cityblock"), "canberra": pdist(x, "canberra"),
             "jensen_shannon": pdist(prof, "jensenshannon"),
             "jaccard": pdist(x > 0, "jaccard"), "sorensen": pdist(x > 0, "dice"),
             "hellinger": pdist(np.sqrt(prof), "euclidean")}
    for m, ref in cases.items():
        got = tly.dissimilarity(x, m).condensed
        assert np.isfinite(got).all(), m
        # scipy's Jensen-Shannon gives NaN for the pair one count apart out of 10^15 (the
        # square root of a rounding-negative divergence); ours is checked against the
        # 60-digit reference above, so compare where scipy has a number
        ok = np.isfinite(ref)
        assert ok.sum() >= len(ref) - 1, m
        np.testing.assert_allclose(got[ok], ref[ok], rtol=1e-9, atol=1e-12 * ref[ok].max(),
                                   err_msg=m)


def test_small_distance_keeps_precision_next_to_a_far_sample():
    # two samples dominated by one taxon of 10^15 and one count apart, beside a small even
    # sample: in chi-square features the small sample is ~10^14 times farther out, and
    # centring the features would blur the pair's tiny distance; the Gram kernel recomputes
    # such pairs from the rows as given (exact reference in 60 digits)
    x = np.array([[1e15, 3, 5, 1, 2], [1e15, 3, 6, 1, 2], [1, 1, 1, 1, 1]])
    ref_tab = H.Table(x)
    for m in ("chi_square", "hellinger", "chord", "euclidean", "aitchison",
              "jensen_shannon", "kulczynski", "bray_curtis", "canberra"):
        ref = float(ref_tab.pair(m, 0, 1))
        assert tly.dissimilarity(x, m).condensed[0] == pytest.approx(ref, rel=1e-7), m


def test_kulczynski_with_very_unequal_totals():
    # 1 - (m / r_x + m / r_y) / 2 for totals 1.3e15 and 10; the algebraic form through
    # sum |x - y| lost three digits to cancellation here (exact fractions as reference)
    from fractions import Fraction
    x = np.array([[1e15, 3e14, 7.0, 0.0], [3.0, 1.0, 2.0, 4.0], [1e15, 3e14 + 5, 7, 1]])

    def exact(a, b):
        a, b = [Fraction(int(v)) for v in a], [Fraction(int(v)) for v in b]
        m = sum(min(p, q) for p, q in zip(a, b))
        return 1 - (m / sum(a) + m / sum(b)) / 2
    ref = [float(exact(x[i], x[j])) for i, j in itertools.combinations(range(3), 2)]
    for numba in (False, True):
        kernels.use_numba(numba)
        try:
            got = tly.dissimilarity(x, "kulczynski").condensed
        finally:
            kernels.use_numba(None)
        np.testing.assert_allclose(got, ref, rtol=1e-14)


@pytest.mark.parametrize("name", ["huge", "dominant"])
@pytest.mark.parametrize("measure", ["bray_curtis", "hellinger", "jensen_shannon", "gower"])
def test_pcoa_against_reference_gower(tables, name, measure):
    # PCoA of the distances equals the eigen-decomposition of G = -1/2 C D^2 C built in
    # 60-digit arithmetic from the reference distances (Gower 1966); eigenvalues are well
    # conditioned (Weyl), so they must agree to the rounding of G
    x = tables[name]
    n = len(x)
    ref_tab = H.Table(x)
    with localcontext() as ctx:
        ctx.prec = H.PREC
        d2 = [[Decimal(0)] * n for _ in range(n)]
        for i, j in itertools.combinations(range(n), 2):
            d2[i][j] = d2[j][i] = ref_tab.pair(measure, i, j) ** 2
        row = [sum(r) / n for r in d2]
        grand = sum(row) / n
        g = np.array([[float(-(d2[i][j] - row[i] - row[j] + grand) / 2) for j in range(n)]
                      for i in range(n)])
    ref = np.sort(np.linalg.eigvalsh(g))[::-1]
    o = tly.pcoa(tly.dissimilarity(x, measure))
    scale = np.abs(ref).max()
    np.testing.assert_allclose(o.eigenvalues.to_numpy(), ref, rtol=0, atol=1e-11 * scale)
    assert o.eigenvalues.sum() == pytest.approx(np.trace(g), rel=1e-12)


def _grouped(x):
    n = len(x)
    labels = [f"s{i + 1}" for i in range(n)]
    info = pd.DataFrame({"g": (["a", "b", "c"] * n)[:n]}, index=labels)
    return tly.CommunityTable(pd.DataFrame(x, index=labels), info)


def test_partition_and_permanova_do_not_see_the_unit(tables):
    # Bray-Curtis, chi-square and centred log totals are unchanged when every count is
    # multiplied by the same constant (identity): the partition of counts of 10^15 must be
    # that of the same table scaled down to about 10^3, and so must PERMANOVA's table
    x = tables["huge"]
    x = np.vstack([x, x[::-1] * 0.5 + 1, np.roll(x, 1, axis=1) + 3])   # 21 samples
    big, small = _grouped(x), _grouped(x * 1e-12)
    a, b = tly.size_shape(big, "bray_curtis"), tly.size_shape(small, "bray_curtis")
    np.testing.assert_allclose(a.fractions.to_numpy(), b.fractions.to_numpy(), atol=1e-10)
    assert a.fractions.sum() == pytest.approx(1.0, abs=1e-12)
    pa = tly.permanova(tly.dissimilarity(big, "bray_curtis"), big, ["g"], n_permutations=99,
                       rng=3)
    pb = tly.permanova(tly.dissimilarity(small, "bray_curtis"), small, ["g"],
                       n_permutations=99, rng=3)
    np.testing.assert_allclose(pa.table[["ss", "pseudo_f", "r2"]].to_numpy(dtype=float),
                               pb.table[["ss", "pseudo_f", "r2"]].to_numpy(dtype=float),
                               rtol=1e-10, equal_nan=True)
    assert pa.pvalue["g"] == pb.pvalue["g"]


# ---------------------------------------------------------------------------- size tests
def _totals_table(totals, groups, effort=None):
    labels = [f"s{i + 1}" for i in range(len(totals))]
    info = pd.DataFrame({"g": groups}, index=labels)
    if effort is not None:
        info["effort"] = effort
    # two taxa summing to the totals, so the table holds whole counts
    t = np.asarray(totals, dtype=float)
    counts = pd.DataFrame({"ta": np.floor(t / 3), "tb": t - np.floor(t / 3)}, index=labels)
    return tly.CommunityTable(counts, info, effort=None if effort is None else "effort")


def test_negbin_log_likelihood_at_1e15_against_high_precision():
    # the stable form equals the textbook log-gamma form evaluated in 60 digits; in float64
    # the textbook form's terms are ~3e16 and cancel to a few units (no digit left)
    from tallyform.core.negbin import fit_nb2_oneway, nb2_loglik
    rng = np.random.default_rng(4)
    y = np.round(rng.uniform(0.5, 1.5, 12) * 1e15)
    codes = np.array([0, 1, 2] * 4)
    fit = fit_nb2_oneway(y, codes, 3)
    mu = fit.rates[codes]
    ref = float(H.nb2_loglik(y, mu, fit.theta))
    assert nb2_loglik(y, mu, fit.theta) == pytest.approx(ref, abs=1e-6)
    # and it is a maximum: moving theta or a rate lowers the exact log-likelihood
    for th, m in ((fit.theta * 1.01, mu), (fit.theta / 1.01, mu), (fit.theta, mu * 1.001)):
        assert float(H.nb2_loglik(y, m, th)) < ref


def test_negbin_at_1e15_agrees_with_its_identities():
    # no group effect (totals drawn alike): the likelihood-ratio test must not call one,
    # and each ratio is the ratio of mean totals (score equations; McCullagh & Nelder 1989)
    rng = np.random.default_rng(11)
    totals = np.round(rng.uniform(0.7, 1.3, 15) * 1e15)
    groups = ["a", "b", "c"] * 5
    res = tly.size_test(_totals_table(totals, groups), "g", method="negbin", n_boot=199,
                        rng=1)                 # the bootstrap's vectorised fits at 10^15
    means = pd.Series(totals).groupby(np.array(groups)).mean()
    assert res.summary["ratio"].to_numpy() == pytest.approx(
        (means / means["a"]).to_numpy(), rel=1e-12)
    anova = tly.size_test(_totals_table(totals, groups), "g", method="anova")
    assert res.pvalue > 0.05 and anova.pvalue > 0.05
    assert not any("converge" in n for n in res.notes)
    # the same relative spread at 10^3 gives nearly the same test (NB2 is not exactly
    # scale-free: its Poisson part is negligible at both sizes)
    small = tly.size_test(_totals_table(np.round(totals / 1e12), groups), "g",
                          method="negbin", nb_reference="F")
    assert res.statistic == pytest.approx(small.statistic, rel=0.05, abs=0.05)


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("with_effort", [False, True])
def test_negbin_agrees_with_statsmodels(seed, with_effort):
    # outside reference: statsmodels' NB2 regression (NegativeBinomial, loglike_method='nb2',
    # log effort as offset), on moderate counts where its optimiser converges
    import warnings
    from statsmodels.discrete.discrete_model import NegativeBinomial
    rng = np.random.default_rng(seed)
    codes = np.repeat([0, 1, 2], 6)
    effort = rng.uniform(0.5, 2, 18) if with_effort else None
    mean = np.array([50.0, 80.0, 30.0])[codes] * (1 if effort is None else effort)
    y = rng.negative_binomial(3, 3 / (3 + mean)).astype(float)
    X = np.column_stack([np.ones(18), codes == 1, codes == 2]).astype(float)
    off = None if effort is None else np.log(effort)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        full = NegativeBinomial(y, X, loglike_method="nb2", offset=off).fit(
            disp=0, maxiter=500, method="bfgs")
        null = NegativeBinomial(y, np.ones((18, 1)), loglike_method="nb2", offset=off).fit(
            disp=0, maxiter=500, method="bfgs")
    # the one-dispersion fit (fit_nb2_oneway) is statsmodels' model
    from tallyform.core.negbin import fit_nb2_groups, fit_nb2_oneway
    one = fit_nb2_oneway(y, codes, 3, effort)
    zero = fit_nb2_oneway(y, np.zeros(18, dtype=int), 1, effort)
    assert 2 * (one.llf - zero.llf) == pytest.approx(2 * (full.llf - null.llf), rel=1e-5,
                                                     abs=1e-6)
    np.testing.assert_allclose(one.rates[1:] / one.rates[0], np.exp(full.params[1:3]),
                               rtol=1e-4)
    # size_test uses a dispersion per group: its full model is statsmodels' model fitted to
    # each group alone
    groups = np.array(["a", "b", "c"])[codes]
    res = tly.size_test(_totals_table(y, groups, effort), "g", method="negbin",
                        nb_reference="F")
    alone = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for j in range(3):
            m = codes == j
            alone.append(NegativeBinomial(y[m], np.ones((6, 1)), loglike_method="nb2",
                                          offset=None if off is None else off[m]).fit(
                disp=0, maxiter=1000, method="bfgs"))
    rates = np.exp([a.params[0] for a in alone])
    np.testing.assert_allclose(res.summary["ratio"].to_numpy()[1:], rates[1:] / rates[0],
                               rtol=1e-4)
    per_group = fit_nb2_groups(y, codes, 3, effort)
    assert per_group.llf == pytest.approx(sum(a.llf for a in alone), abs=1e-4)
