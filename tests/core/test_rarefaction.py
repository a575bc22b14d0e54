"""Rarefaction, the multinomial noise estimate and Rueger's combination of draws."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import tallyform as tly
from tallyform.core.errors import InputError
from tallyform.core.rarefaction import (_SMALL_TOTAL, combine_draws, multinomial_noise,
                                        rarefied_counts, rarefied_table)


@pytest.mark.parametrize("scale", [1, 200])          # the small-sample and large-sample ways
def test_rarefied_rows_sum_to_depth_and_never_exceed_the_counts(rng, scale):
    # identity: a subsample without replacement keeps `depth` individuals of every sample
    # and never more of a taxon than were observed (zeros stay zeros)
    x = rng.poisson(3.0, size=(30, 25)) * scale
    x[:, 3] = 0
    depth = int(x.sum(axis=1).min())
    y = rarefied_counts(x, depth, rng)
    assert y.dtype == np.int64
    np.testing.assert_array_equal(y.sum(axis=1), depth)
    assert np.all(y <= x) and np.all(y >= 0)
    assert np.all(y[:, 3] == 0)
    # a sample already at the depth is kept as it is
    i = int(np.argmin(x.sum(axis=1)))
    np.testing.assert_array_equal(y[i], x[i])


@pytest.mark.parametrize("total", [60, 3 * _SMALL_TOTAL])
def test_rarefied_taxon_is_hypergeometric(total):
    # reference: scipy.stats.hypergeom (population `total`, `x_j` of taxon j, `depth` drawn):
    # the mean and variance of one taxon's rarefied count over many draws
    rng = np.random.default_rng(3)
    x = np.array([[total // 2, total // 3, total - total // 2 - total // 3]])
    depth = total // 4
    draws = rarefied_counts(np.repeat(x, 4000, axis=0), depth, rng)[:, 1]
    ref = stats.hypergeom(total, x[0, 1], depth)
    se = np.sqrt(ref.var() / draws.size)
    assert abs(draws.mean() - ref.mean()) < 4.5 * se
    assert draws.var(ddof=1) == pytest.approx(ref.var(), rel=0.1)


def test_rarefied_multinomial_is_multinomial_at_the_depth():
    # identity (Sanders 1968; Hurlbert 1971): a subsample of m individuals without
    # replacement from multinomial(N, q) is multinomial(m, q), whatever N; checked on one
    # taxon against the binomial(m, q_j) mean and variance (scipy.stats.binom)
    rng = np.random.default_rng(5)
    q = np.array([0.5, 0.3, 0.15, 0.05])
    m = 20
    x = rng.multinomial(400, q, size=6000)
    y = rarefied_counts(x, m, rng)[:, 3]
    ref = stats.binom(m, q[3])
    assert abs(y.mean() - ref.mean()) < 4.5 * np.sqrt(ref.var() / y.size)
    assert y.var(ddof=1) == pytest.approx(ref.var(), rel=0.08)


def test_multinomial_noise_is_unbiased():
    # common practice: for a binomial proportion, E[a (1 - a)] = q (1 - q) (N - 1) / N, so
    # sum_j w_j a_j (1 - a_j) / (N - 1) is unbiased for sum_j w_j q_j (1 - q_j) / N, which is
    # E ||a - q||_w^2 (checked by simulation against both closed forms)
    rng = np.random.default_rng(8)
    q = np.array([0.6, 0.25, 0.1, 0.05])
    w = np.array([1.0, 2.0, 5.0, 10.0])
    N = 12
    x = rng.multinomial(N, q, size=40000)
    v = multinomial_noise(x, w)
    target = float(np.sum(w * q * (1 - q)) / N)
    a = x / N
    assert np.mean(np.sum(w * (a - q) ** 2, axis=1)) == pytest.approx(target, rel=0.03)
    se = v.std(ddof=1) / np.sqrt(v.size)
    assert abs(v.mean() - target) < 4.5 * se
    # the plug-in a (1 - a) / N is biased low by the factor (N - 1) / N
    plug = np.mean(np.sum(w * a * (1 - a), axis=1) / N)
    assert plug == pytest.approx(target * (N - 1) / N, rel=0.03)


def test_combine_draws_rueger_rule_and_its_level():
    assert combine_draws([0.2]) == (0.2, 0)
    assert combine_draws([0.01, 0.04, 0.02]) == pytest.approx((0.03, 2))
    assert combine_draws([0.5, 0.9, 0.8, 0.7])[0] == 1.0          # capped at 1
    # level: for K independent uniform p-values, P((K/k) p_(k) <= a) = P(Bin(K, a k / K) >= k)
    # (scipy.stats.binom), which Rueger (1978) bounds by a for any dependence
    for K in (2, 3, 5, 9):
        k = int(np.ceil(K / 2))
        exact = stats.binom.sf(k - 1, K, 0.05 * k / K)
        assert exact <= 0.05
        rng = np.random.default_rng(K)
        sims = np.array([combine_draws(rng.random(K))[0] for _ in range(4000)])
        assert np.mean(sims <= 0.05) == pytest.approx(exact, abs=0.012)
    # fully dependent draws (one p-value K times): rejection rate a k / K <= a
    p = np.linspace(0.0005, 0.9995, 1000)
    comb = np.array([combine_draws([v] * 5)[0] for v in p])
    assert np.mean(comb <= 0.05) <= 0.05


def test_rarefied_table_keeps_information_and_lists_left_out_samples():
    counts = pd.DataFrame([[5, 3, 0], [40, 10, 50], [2, 1, 0], [9, 9, 9]],
                          index=["a", "b", "c", "d"], columns=["x", "y", "z"])
    info = pd.DataFrame({"site": ["n", "s", "n", "s"]}, index=counts.index)
    tab = tly.CommunityTable(counts, info)
    before = tab.values.copy()
    out = rarefied_table(tab, depth=8, rng=1)
    assert list(out.sample_labels) == ["a", "b", "d"]
    assert out.totals.tolist() == [8.0, 8.0, 8.0]
    assert list(out.samples["site"]) == ["n", "s", "s"]
    assert any("'c'" in n and "left out" in n for n in out.notes)
    np.testing.assert_array_equal(tab.values, before)            # input untouched
    # same seed, same table
    np.testing.assert_array_equal(rarefied_table(tab, rng=4).values,
                                  rarefied_table(tab, rng=4).values)


def test_rarefaction_errors_name_the_problem():
    tab = tly.CommunityTable(pd.DataFrame([[1.5, 2], [3, 4]], index=["p", "q"]))
    with pytest.raises(InputError, match=r"whole-number counts; sample 'p' holds 1.5"):
        rarefied_table(tab)
    ok = tly.CommunityTable([[3, 4], [5, 6]])
    with pytest.raises(InputError, match="above the largest sample total"):
        rarefied_table(ok, depth=20)
    with pytest.raises(InputError, match="at least 1"):
        rarefied_table(ok, depth=0)
    with pytest.raises(InputError, match="whole number of individuals"):
        rarefied_table(ok, depth=2.5)
    with pytest.raises(InputError, match="at least 2 individuals"):
        multinomial_noise([[1, 0], [3, 4]])
    huge = tly.CommunityTable([[2e9, 1], [3, 4]])
    with pytest.raises(InputError, match="handles totals up to"):
        rarefied_table(huge)
