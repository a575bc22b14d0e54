"""The negative-binomial size test with a dispersion per group: fits against statsmodels and
scipy, the small-sample reference, the bootstrap, the fit check (all data synthetic)."""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats

from tallyform.core.errors import Cancelled, DesignError
from tallyform.core.negbin import (fit_nb2_groups, quantile_residuals,
                                   skew_check)
from tallyform.core.size_tests import size_test
from tallyform.core.table import CommunityTable


def _table(totals, groups, effort=None):
    labels = [f"s{i + 1}" for i in range(len(totals))]
    info = pd.DataFrame({"g": groups}, index=labels)
    if effort is not None:
        info["effort"] = effort
    t = np.asarray(totals, dtype=float)
    counts = pd.DataFrame({"ta": np.floor(t / 3), "tb": t - np.floor(t / 3)}, index=labels)
    return CommunityTable(counts, info, effort=None if effort is None else "effort",
                          empty="keep")


def _nb_data(seed, sizes=(8, 8, 8), mean=(50.0, 80.0, 30.0), shape=(1.5, 4.0, 10.0),
             effort=False):
    rng = np.random.default_rng(seed)
    codes = np.repeat(np.arange(len(sizes)), sizes)
    e = rng.uniform(0.5, 2, codes.size) if effort else None
    mu = np.asarray(mean)[codes] * (1 if e is None else e)
    s = np.asarray(shape)[codes]
    return rng.negative_binomial(s, s / (s + mu)).astype(float), codes, e


def _sm_group_fit(y, e):
    # statsmodels' NB2 regression (intercept only, log effort as offset) of one group alone
    from statsmodels.discrete.discrete_model import NegativeBinomial
    off = None if e is None else np.log(e)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return NegativeBinomial(y, np.ones((y.size, 1)), loglike_method="nb2",
                                offset=off).fit(disp=0, maxiter=1000, method="bfgs")


@pytest.mark.parametrize("seed", [0, 1])
@pytest.mark.parametrize("with_effort", [False, True])
def test_each_group_fit_equals_statsmodels_on_that_group(seed, with_effort):
    # outside reference: statsmodels NegativeBinomial(loglike_method='nb2') fitted to each
    # group alone at moderate counts: same log-likelihood, rate and dispersion alpha
    y, codes, e = _nb_data(seed, effort=with_effort)
    fit = fit_nb2_groups(y, codes, 3, e)
    total = 0.0
    for j in range(3):
        m = codes == j
        ref = _sm_group_fit(y[m], None if e is None else e[m])
        total += ref.llf
        assert fit.rates[j] == pytest.approx(np.exp(ref.params[0]), rel=1e-5)
        assert fit.alphas[j] == pytest.approx(ref.params[1], rel=1e-3, abs=1e-5)  # 0: Poisson
    # equal, or higher where statsmodels stops short of alpha = 0 (a Poisson group)
    assert total - 1e-7 <= fit.llf <= total + 1e-4


def test_null_fit_equals_a_general_optimiser_on_scipys_pmf():
    # outside reference: scipy.stats.nbinom.logpmf maximised by Nelder-Mead over
    # (log rate, log theta_1, log theta_2, log theta_3): one rate, a size per group
    y, codes, _ = _nb_data(3)
    null = fit_nb2_groups(y, codes, 3, common=True)

    def negll(p):
        mu, th = np.exp(p[0]), np.exp(p[1:])[codes]
        return -stats.nbinom.logpmf(y, th, th / (th + mu)).sum()
    start = np.r_[np.log(y.mean()), np.zeros(3)]
    ref = optimize.minimize(negll, start, method="Nelder-Mead",
                            options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 20000,
                                     "maxfev": 40000})
    assert null.llf == pytest.approx(-ref.fun, abs=1e-6)
    assert null.rates[0] == pytest.approx(np.exp(ref.x[0]), rel=1e-4)
    assert null.thetas == pytest.approx(np.exp(ref.x[1:]), rel=1e-3)


def test_size_test_negbin_reports_ratios_and_reference():
    # identity: without effort each group's fitted rate is its mean total (score equation;
    # McCullagh & Nelder 1989), so the ratio is the ratio of mean totals
    y, codes, _ = _nb_data(4)
    groups = np.array(["a", "b", "c"])[codes]
    res = size_test(_table(y, groups), "g", method="negbin", nb_reference="F")
    means = pd.Series(y).groupby(groups).mean()
    assert res.summary["ratio"].to_numpy() == pytest.approx((means / means["a"]).to_numpy(),
                                                            rel=1e-10)
    full = fit_nb2_groups(y, codes, 3)
    null = fit_nb2_groups(y, codes, 3, common=True)
    assert res.statistic == pytest.approx(2 * (full.llf - null.llf), rel=1e-10)
    # Welch's (1951) degrees of freedom with weights the information of each log rate
    w = full.information
    lam = np.sum((1 - w / w.sum()) ** 2 / (np.bincount(codes) - 1))
    assert res.df[1] == pytest.approx(8 / (3 * lam), rel=1e-10)
    assert res.pvalue == pytest.approx(stats.f.sf(res.statistic / 2, 2, res.df[1]))
    assert "Welch" in res.reference and res.too_skewed is False
    assert any("per group" in n for n in res.notes)
    lo, hi = res.summary.loc["b", ["ci_low", "ci_high"]]
    assert lo < res.summary.loc["b", "ratio"] < hi


def test_bootstrap_reference_is_reproducible_and_cancellable():
    y, codes, _ = _nb_data(5, sizes=(6, 6))
    groups = np.array(["a", "b"])[codes]
    tab = _table(y, groups)
    a = size_test(tab, "g", method="negbin", nb_reference="bootstrap", n_boot=49, rng=7)
    b = size_test(tab, "g", method="negbin", nb_reference="bootstrap", n_boot=49, rng=7)
    assert a.pvalue == b.pvalue and a.n_boot == 49 and "bootstrap" in a.reference
    k = a.pvalue * 50                     # (1 + #{LR* >= LR}) / (B + 1) with B = 49
    assert 1 <= round(k) <= 50 and abs(k - round(k)) < 1e-9
    default = size_test(tab, "g", method="negbin", rng=7)
    assert default.n_boot == 999 and "bootstrap" in default.reference
    # the bootstrap p-value is the share of null draws at least as large: against the
    # statistic's F reference it agrees roughly (both approximate the same null law)
    f = size_test(tab, "g", method="negbin", nb_reference="F")
    assert f.statistic == default.statistic
    assert abs(np.log(default.pvalue) - np.log(f.pvalue)) < 1.5
    seen = []
    with pytest.raises(Cancelled):
        size_test(tab, "g", method="negbin", nb_reference="bootstrap", n_boot=99, rng=7,
                  progress=lambda d, t: seen.append((d, t)), cancel=lambda: len(seen) >= 2)
    assert seen == [(25, 99), (50, 99)]
    # the bootstrap's likelihood ratios are the scalar fits' (vectorised fit, same answer)
    from tallyform.core.negbin import _lr, lr_rows
    rng = np.random.default_rng(1)
    Y = rng.negative_binomial(2.0, 2.0 / 102.0, size=(5, codes.size)).astype(float)
    ref = [_lr(Y[i], codes, 2, None)[0] for i in range(5)]
    assert lr_rows(Y, codes, 2) == pytest.approx(ref, rel=1e-7, abs=1e-8)


def test_quantile_residuals_are_normal_under_the_model():
    # Dunn & Smyth (1996): under the true model the (mid-)quantile residuals of large
    # counts are close to standard normal; reference: scipy.stats.kstest
    rng = np.random.default_rng(8)
    mu, th = 400.0, 3.0
    y = rng.negative_binomial(th, th / (th + mu), 3000).astype(float)
    z = quantile_residuals(y, np.full(y.size, mu), th)
    assert stats.kstest(z, "norm").pvalue > 0.01


def test_fit_check_fires_on_log_normal_totals_only():
    rng = np.random.default_rng(9)
    codes = np.repeat([0, 1], 40)
    groups = np.array(["a", "b"])[codes]
    skewed = np.round(np.exp(np.log(300) + 1.5 * rng.standard_normal(80)))   # synthetic
    res = size_test(_table(skewed, groups), "g", method="negbin", nb_reference="F")
    assert res.too_skewed is True
    assert any("more skewed" in n and "method='welch'" in n for n in res.notes)
    nb = rng.negative_binomial(2.0, 2.0 / 302.0, 80).astype(float)
    assert size_test(_table(nb, groups), "g", method="negbin",
                     nb_reference="F").too_skewed is False
    assert skew_check(np.arange(5.0)) == (False, pytest.approx(np.nan, nan_ok=True))


def test_a_group_without_counts_is_refused():
    y = np.array([0, 0, 0, 5, 9, 4], dtype=float)
    with pytest.raises(DesignError, match="total of 0 in every sample"):
        size_test(_table(y, list("aaabbb")), "g", method="negbin")


def test_poisson_group_is_said():
    # one group with no over-dispersion at all: its dispersion goes to 0
    y = np.array([100, 100, 100, 100, 60, 150, 90, 200], dtype=float)
    res = size_test(_table(y, list("aaaabbbb")), "g", method="negbin", nb_reference="F")
    assert any("Poisson" in n for n in res.notes)
    assert np.isfinite(res.pvalue)


def test_note_for_a_small_group_beside_a_large_one():
    # calibration (docs/calibration.md, size/negbin/5x20 and 20x5): 7-8 % at alpha = 0.05
    import tallyform as tly
    rng = np.random.default_rng(1)

    def table(sizes):
        g = np.repeat(["a", "b"], sizes)
        n = len(g)
        y = rng.negative_binomial(5, 5 / (5 + 200), n)
        labels = [f"s{i}" for i in range(n)]
        x = pd.DataFrame(np.c_[y + 1, rng.integers(1, 5, n)], index=labels,
                         columns=["t1", "t2"])
        return tly.CommunityTable(x, pd.DataFrame({"g": g}, index=labels))

    def noted(sizes):
        res = tly.size_test(table(sizes), "g", method="negbin", units=False, n_boot=19, rng=1)
        return any("poorly estimated" in n for n in res.notes)

    assert noted((5, 20)) and noted((20, 4))
    assert not noted((8, 8)) and not noted((6, 20))
