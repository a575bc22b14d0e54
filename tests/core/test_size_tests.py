"""Size tests on log totals: reference values from scipy and statsmodels, effort, errors."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from tallyform.core.errors import DesignError, InputError
from tallyform.core.simulate import simulate_community
from tallyform.core.size_tests import size_measure, size_test
from tallyform.core.table import CommunityTable


@pytest.fixture
def three_groups():
    design = pd.DataFrame({"treatment": np.repeat(["ctl", "low", "high"], [7, 9, 8]),
                           "nights": np.tile([1.0, 2.0, 3.0, 4.0], 6)},
                          index=[f"s{i:02d}" for i in range(24)])
    return simulate_community(design, n_taxa=15, size_effects={"treatment": {"low": 0.5}},
                              effort="nights", total_spread=0.4, rng=21)


def log_totals(tab, per_effort=False):
    t = tab.totals.to_numpy()
    return np.log(t / tab.effort.to_numpy() if per_effort else t)


def test_default_is_welch(three_groups):
    assert size_test(three_groups, "treatment").method == "welch"


def test_anova_equals_statsmodels_ols(three_groups):
    # reference: statsmodels OLS on log totals: anova_lm F and exp(conf_int) of the
    # treatment-coded coefficients (reference level = first level)
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm
    tab = three_groups
    res = size_test(tab, "treatment", method="anova", effort=False)
    frame = pd.DataFrame({"y": log_totals(tab),
                          "g": pd.Categorical(tab.samples["treatment"],
                                              categories=["ctl", "high", "low"])})
    fit = smf.ols("y ~ g", data=frame).fit()
    ref = anova_lm(fit, typ=1)
    assert res.statistic == pytest.approx(ref.loc["g", "F"], rel=1e-10)
    assert res.pvalue == pytest.approx(ref.loc["g", "PR(>F)"], rel=1e-8)
    assert res.df == (2, 21)
    ci = np.exp(fit.conf_int(alpha=0.05))
    for lv in ("high", "low"):
        row = res.summary.loc[lv]
        assert row["ratio"] == pytest.approx(np.exp(fit.params[f"g[T.{lv}]"]))
        assert [row["ci_low"], row["ci_high"]] == pytest.approx(ci.loc[f"g[T.{lv}]"].tolist())
    assert res.summary.loc["ctl", "ratio"] == 1.0
    geo = np.exp(pd.Series(log_totals(tab)).groupby(tab.samples["treatment"].to_numpy()).mean())
    assert res.summary["geometric_mean"].to_numpy() == pytest.approx(
        geo.loc[["ctl", "low", "high"]].to_numpy())        # the order of the file


def test_welch_two_groups_equals_welch_t_test(three_groups):
    # reference: scipy.stats.ttest_ind(equal_var=False) on log totals: F = t^2, same p, df
    # and interval, to 1e-10
    tab = three_groups.subset(lambda s: s.treatment != "high")
    res = size_test(tab, "treatment", method="welch", effort=False)
    y = log_totals(tab)
    g = tab.samples["treatment"].to_numpy()
    t = stats.ttest_ind(y[g == "low"], y[g == "ctl"], equal_var=False)
    assert res.statistic == pytest.approx(t.statistic ** 2, rel=1e-10)
    assert res.pvalue == pytest.approx(t.pvalue, rel=1e-10)
    assert res.df[1] == pytest.approx(t.df, rel=1e-10)
    ci = t.confidence_interval(0.95)
    assert [res.summary.loc["low", "ci_low"], res.summary.loc["low", "ci_high"]] == \
        pytest.approx(np.exp([ci.low, ci.high]), rel=1e-10)
    assert "Welch" in res.reference


def test_welch_k_groups_equals_statsmodels_anova_oneway(three_groups):
    # reference: statsmodels.stats.oneway.anova_oneway(use_var="unequal"), to 1e-10
    from statsmodels.stats.oneway import anova_oneway
    res = size_test(three_groups, "treatment", effort=False)
    g = three_groups.samples["treatment"].to_numpy()
    ref = anova_oneway(log_totals(three_groups), groups=g, use_var="unequal")
    assert res.statistic == pytest.approx(ref.statistic, rel=1e-10)
    assert res.df[1] == pytest.approx(ref.df_denom, rel=1e-10)
    assert res.pvalue == pytest.approx(ref.pvalue, rel=1e-10)
    # each interval: Welch's two-sample t interval of that pair (scipy)
    y = log_totals(three_groups)
    for lv in ("high", "low"):
        ci = stats.ttest_ind(y[g == lv], y[g == "ctl"], equal_var=False).confidence_interval()
        assert res.summary.loc[lv, ["ci_low", "ci_high"]].tolist() == pytest.approx(
            np.exp([ci.low, ci.high]), rel=1e-10)


def _two_spreads(seed=1, sizes=(6, 18), sds=(0.9, 0.3)):
    rng = np.random.default_rng(seed)
    n = sum(sizes)
    g = np.repeat(["variable", "steady"], sizes)
    sd = np.repeat(sds, sizes)
    totals = np.round(np.exp(np.log(500) + sd * rng.standard_normal(n)))
    labels = [f"s{i}" for i in range(n)]
    counts = pd.DataFrame({"ta": np.floor(totals / 2), "tb": totals - np.floor(totals / 2)},
                          index=labels)                                    # synthetic
    return CommunityTable(counts, pd.DataFrame({"g": g}, index=labels))


def test_anova_says_when_unequal_variances_matter():
    tab = _two_spreads()
    res = size_test(tab, "g", method="anova")
    y = np.log(tab.totals.to_numpy())
    v = pd.Series(y).groupby(tab.samples["g"].to_numpy()).var()
    assert res.variance_ratio == pytest.approx(v.max() / v.min())
    assert any("largest / smallest" in n and "method='welch'" in n for n in res.notes)
    # equal spreads: nothing to say
    calm = size_test(_two_spreads(sds=(0.5, 0.5), sizes=(12, 12), seed=3), "g",
                     method="anova")
    assert not any("largest / smallest" in n for n in calm.notes)


def test_pooled_f_level_against_direct_simulation():
    # reference: the rejection rate of scipy.stats.f_oneway on normal samples with these
    # variances (Monte Carlo, 4000 data sets: standard error about 0.006)
    from tallyform.core.size_models import pooled_f_level
    rng = np.random.default_rng(0)
    n_g, sd = (6, 18), (0.9, 0.3)
    p = [stats.f_oneway(rng.normal(0, sd[0], n_g[0]), rng.normal(0, sd[1], n_g[1])).pvalue
         for _ in range(4000)]
    assert pooled_f_level(n_g, np.square(sd)) == pytest.approx(np.mean(np.array(p) <= 0.05),
                                                               abs=0.025)
    assert pooled_f_level((10, 10, 10), (1.0, 1.0, 1.0)) == pytest.approx(0.05, abs=0.006)


def _blocked(seed=2):
    rng = np.random.default_rng(seed)
    blocks = np.repeat([f"b{i}" for i in range(6)], 4)
    g = np.tile(["a", "a", "b", "c"], 6)
    y = rng.normal(6, 0.4, 24) + np.repeat(rng.normal(0, 1, 6), 4) + (g == "b") * 0.3
    labels = [f"s{i}" for i in range(24)]
    counts = pd.DataFrame({"ta": np.round(np.exp(y))}, index=labels)          # synthetic
    return CommunityTable(counts, pd.DataFrame({"g": g, "bench": blocks}, index=labels))


def test_anova_with_blocks_equals_statsmodels_block_anova():
    # reference: statsmodels OLS y ~ C(bench) + C(g), anova_lm type II F of g
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm
    tab = _blocked()
    res = size_test(tab, "g", method="anova", blocks="bench")
    frame = tab.samples.assign(y=np.log(tab.totals.to_numpy()))
    fit = smf.ols("y ~ C(bench) + C(g)", data=frame).fit()
    ref = anova_lm(fit, typ=2)
    assert res.statistic == pytest.approx(ref.loc["C(g)", "F"], rel=1e-10)
    assert res.pvalue == pytest.approx(ref.loc["C(g)", "PR(>F)"], rel=1e-8)
    plain = size_test(tab, "g", method="anova")
    assert plain.pvalue != pytest.approx(res.pvalue, rel=1e-3)
    assert any("nuisance factor" in n for n in res.notes)


def test_welch_with_blocks_wald_part_equals_statsmodels_wls():
    # reference: statsmodels WLS with weights 1/s_g^2 and a fixed scale: its Wald chi-square
    # of the group effects is Johansen's T, and F = T / c with
    # c = q + 2A - 6A/(q + 2), df2 = q (q + 2) / (3A) (Johansen 1980)
    import statsmodels.api as sm
    from tallyform.core.size_models import group_design, welch_james
    tab = _blocked()
    y = np.log(tab.totals.to_numpy())
    codes = pd.Categorical(tab.samples["g"]).codes
    res = welch_james(y, codes, 3, tab.samples["bench"].to_numpy())
    X, gcols = group_design(codes, 3, tab.samples["bench"].to_numpy())
    s2 = res.extra["group_variances"]
    wls = sm.WLS(y, X, weights=1 / s2[codes]).fit(cov_type="fixed scale")
    L = np.zeros((2, X.shape[1]))
    L[[0, 1], gcols] = 1
    T = float(np.squeeze(wls.wald_test(L, scalar=True).statistic))
    q, df2 = res.df
    A = q * (q + 2) / (3 * df2)
    assert res.statistic == pytest.approx(T / (q + 2 * A - 6 * A / (q + 2)), rel=1e-10)
    # the group variances: OLS residual sums of squares over sum(1 - h_ii) in each group
    ols = sm.OLS(y, X).fit()
    h = ols.get_influence().hat_matrix_diag
    for j in range(3):
        m = codes == j
        assert s2[j] == pytest.approx(np.sum(ols.resid[m] ** 2) / np.sum(1 - h[m]))
    # a shift of every block leaves the test unchanged (blocks are a nuisance factor)
    shift = np.repeat(np.arange(6.0), 4)
    again = welch_james(y + shift, codes, 3, tab.samples["bench"].to_numpy())
    assert again.statistic == pytest.approx(res.statistic, rel=1e-9)


def _complete_blocks(k, n_blocks=7, seed=4):
    rng = np.random.default_rng(seed)
    g = np.tile(list("abcd"[:k]), n_blocks)
    b = np.repeat([f"b{i}" for i in range(n_blocks)], k)
    sd = np.tile([0.9, 0.3, 0.5, 0.2][:k], n_blocks)
    y = 6 + np.repeat(rng.normal(0, 1, n_blocks), k) + sd * rng.standard_normal(g.size)
    labels = [f"s{i}" for i in range(g.size)]
    counts = pd.DataFrame({"ta": np.round(np.exp(y))}, index=labels)         # synthetic
    return CommunityTable(counts, pd.DataFrame({"g": g, "bench": b}, index=labels))


def test_welch_with_complete_blocks_is_the_paired_t_test():
    # reference: scipy.stats.ttest_rel on log totals paired by block (F = t^2), and its
    # interval
    tab = _complete_blocks(2)
    res = size_test(tab, "g", blocks="bench")
    y = np.log(tab.totals.to_numpy())
    g = tab.samples["g"].to_numpy()
    t = stats.ttest_rel(y[g == "b"], y[g == "a"])
    assert res.statistic == pytest.approx(t.statistic ** 2, rel=1e-10)
    assert res.pvalue == pytest.approx(t.pvalue, rel=1e-10)
    ci = t.confidence_interval(0.95)
    assert res.summary.loc["b", ["ci_low", "ci_high"]].tolist() == pytest.approx(
        np.exp([ci.low, ci.high]), rel=1e-10)
    assert "paired" in res.reference and any("within blocks" in n for n in res.notes)


def test_welch_with_complete_blocks_three_groups_is_hotellings_t2():
    # reference: statsmodels.stats.multivariate.test_mvmean (Hotelling's one-sample T^2)
    # on the within-block differences to the first group
    from statsmodels.stats.multivariate import test_mvmean
    tab = _complete_blocks(3)
    res = size_test(tab, "g", blocks="bench")
    y = np.log(tab.totals.to_numpy()).reshape(7, 3)
    ref = test_mvmean(y[:, 1:] - y[:, :1], np.zeros(2))
    assert res.statistic == pytest.approx(ref.statistic, rel=1e-10)
    assert res.pvalue == pytest.approx(ref.pvalue, rel=1e-10)
    assert res.df == (2, 5)


def test_kruskal_on_ranks_says_it_is_not_a_size_test(three_groups):
    # reference: scipy.stats.kruskal; ranks (hence H) do not change under the log
    res = size_test(three_groups, "treatment", method="kruskal", effort=False)
    g = three_groups.samples["treatment"].to_numpy()
    y = log_totals(three_groups)
    ref = stats.kruskal(*[y[g == k] for k in ("ctl", "high", "low")])
    assert res.statistic == pytest.approx(ref.statistic) and res.pvalue == pytest.approx(
        ref.pvalue)
    assert res.summary["ci_low"].isna().all()
    assert any("not their size" in n and "not a valid test" in n for n in res.notes)
    assert "distributions" in str(res)


def test_permutation_f_equals_anova_f(three_groups):
    a = size_test(three_groups, "treatment", method="anova")
    p1 = size_test(three_groups, "treatment", method="permutation", n_permutations=499, rng=3)
    p2 = size_test(three_groups, "treatment", method="permutation", n_permutations=499, rng=3)
    assert p1.statistic == pytest.approx(a.statistic, rel=1e-10)
    assert p1.pvalue == p2.pvalue and p1.n_permutations == 499


def test_permutation_with_blocks_uses_the_block_adjusted_f():
    tab = _blocked()
    a = size_test(tab, "g", method="anova", blocks="bench")
    p = size_test(tab, "g", method="permutation", blocks="bench", n_permutations=199, rng=1)
    assert p.statistic == pytest.approx(a.statistic, rel=1e-10)
    assert "within blocks" in " ".join(p.notes)


def test_effort_default_and_opt_out(three_groups):
    tab = three_groups
    per = size_test(tab, "treatment", method="anova")
    raw = size_test(tab, "treatment", method="anova", effort=False)
    g = tab.samples["treatment"].to_numpy()
    y = log_totals(tab, per_effort=True)
    ref = stats.f_oneway(*[y[g == k] for k in ("ctl", "high", "low")])
    assert per.statistic == pytest.approx(ref.statistic)
    assert per.measure == "log total per nights" and raw.measure == "log total"
    assert any("nights" in n for n in per.notes)
    assert size_test(tab, "treatment", method="anova", effort="nights").statistic == \
        pytest.approx(per.statistic)
    assert size_measure(tab).to_numpy() == pytest.approx(y)


def test_errors():
    counts = pd.DataFrame({"t1": [3, 0, 4, 5, 6, 2], "t2": [1, 0, 2, 2, 1, 2]},
                          index=list("abcdef"), dtype=float)
    info = pd.DataFrame({"g": list("xxxyyy"), "one": ["z"] * 6, "h": list("xxyyyz")},
                        index=list("abcdef"))
    tab = CommunityTable(counts, info, empty="keep")
    with pytest.raises(InputError, match="'b'.*total of 0"):
        size_test(tab, "g")
    # the zero total enters the ranks (reference: scipy.stats.kruskal on the totals)
    from scipy.stats import kruskal
    assert size_test(tab, "g", method="kruskal").pvalue == pytest.approx(
        kruskal([4.0, 0.0, 6.0], [7.0, 7.0, 4.0]).pvalue, rel=1e-12)
    with pytest.raises(DesignError, match="'nope'"):
        size_test(tab, "nope", method="kruskal")
    with pytest.raises(DesignError, match="'one'.*single level"):
        size_test(tab, "one", method="kruskal")
    with pytest.raises(DesignError, match="'h'.*single sample"):
        size_test(tab, "h", method="kruskal")
    with pytest.raises(InputError, match="`method`"):
        size_test(tab, "g", method="t")
    with pytest.raises(InputError, match="`nb_reference`"):
        size_test(tab, "g", method="negbin", nb_reference="chi2")
    bio = CommunityTable(counts + 0.3, info)
    with pytest.raises(InputError, match="whole-number"):
        size_test(bio, "g", method="negbin")
    with pytest.raises(InputError, match="effort"):
        size_test(bio, "g", effort=[1, 1, 1, 0, 1, 1])


# ---------------------------------------------------------------------------- comparison
def _size_result(p):
    from tallyform.core.size_tests import SizeTestResult
    summary = pd.DataFrame({"n": [5, 5], "geometric_mean": [100.0, 50.0], "mean": [1, 1],
                            "ratio": [1.0, 0.5], "ci_low": [np.nan, 0.3],
                            "ci_high": [np.nan, 0.8]}, index=["ctl", "low"])
    return SizeTestResult(method="anova", statistic=9.0, pvalue=p, df=(1, 8),
                          summary=summary, measure="log total", effect="ratio", group="g")


@pytest.mark.parametrize("shape_p,spread_p,must,must_not", [
    (0.01, 0.01, "differ in composition or in spread", "simplest reading"),     # PERMANOVA
    (0.01, 0.40, "differ in composition (", "or in spread"),
    (0.40, 0.01, "spread within groups differs", "differ in composition"),
    (0.40, 0.40, "not evidence that the groups are the same", "The groups differ"),
])
def test_reading_never_overstates(shape_p, spread_p, must, must_not):
    from tallyform.core.comparison import reading_text
    text = reading_text(_size_result(0.2), shape_p, spread_p, group="g", measure="chi_square")
    assert must in text and must_not not in text
    assert "does not show that the totals are equal" in text
    assert "without adjustment" in text


def test_reading_of_a_welch_type_shape_test_and_of_rarefaction():
    from tallyform.core.comparison import reading_text
    text = reading_text(_size_result(0.2), 0.01, 0.01, group="g", measure="chi_square",
                        welch=True, permanova_p=0.3, depth=120, size_ratio=3.2)
    assert "differ in composition even allowing each group its own spread" in text
    assert "spread within groups differs too" in text and "or in spread" not in text
    assert "rarefied to 120 individuals" in text and "3.2-fold difference" in text
    assert "PERMANOVA on all individuals says otherwise (p = 0.3)" in text
    assert "counting noise" in text


def test_reading_of_size_and_of_a_measure_that_is_not_size_free():
    from tallyform.core.comparison import reading_text
    text = reading_text(_size_result(0.001), 0.5, 0.5, group="g", measure="bray_curtis",
                        size_free=False)
    assert "Total abundance differs" in text and "'low' has 0.5 times" in text
    assert "not size-free" in text and "overall Bray-Curtis dissimilarity" in text
    assert "relative abundances" not in text


def test_compare_groups_with_a_given_dissimilarity():
    from tallyform.core.dissimilarity import Dissimilarity
    from tallyform.core.comparison import compare_groups
    design = pd.DataFrame({"treatment": np.repeat(["ctl", "low"], 10)},
                          index=[f"s{i:02d}" for i in range(20)])
    tab = simulate_community(design, n_taxa=12, size_effects={"treatment": {"low": 0.3}},
                             rng=5)
    hell = Dissimilarity.from_features(np.sqrt(tab.profiles.to_numpy()), tab.sample_labels,
                                       measure="hellinger", properties={"size_free": True})
    res = compare_groups(tab, "treatment", shape_measure=hell, n_permutations=199, rng=1)
    assert res.size.pvalue < 0.001 and "Total abundance differs" in res.reading
    assert list(res.to_frame().index) == ["size", "shape", "spread", "permanova"]
    # a ready dissimilarity cannot be rarefied: the Welch-type and dispersion tests run on it
    assert res.depth is None and type(res.shape).__name__ == "WelchResult"
    assert res.pvalue["shape"] == res.shape.pvalue and res.welch is res.shape
    assert res.pvalue["spread"] == res.dispersion.pvalue
    assert res.pvalue["permanova"] == res.permanova.pvalue["treatment"]
    assert any("not whole counts (or the measure was given" in n for n in res.notes)
    assert res.reading in str(res) and "not size-free" not in res.reading
    again = compare_groups(tab, "treatment", shape_measure=hell, n_permutations=199, rng=1)
    pd.testing.assert_series_equal(res.pvalue, again.pvalue)


def test_compare_groups_rarefies_counts_and_shares_the_draw():
    from tallyform.core.comparison import compare_groups
    from tallyform.core.counting import shape_test
    design = pd.DataFrame({"treatment": np.repeat(["ctl", "low"], 8)},
                          index=[f"s{i:02d}" for i in range(16)])
    tab = simulate_community(design, n_taxa=15, size_effects={"treatment": {"low": 0.25}},
                             rng=8)
    res = compare_groups(tab, "treatment", n_permutations=99, rng=3)
    assert res.depth == int(tab.totals.min())
    assert res.shape.depth == res.dispersion.depth == res.depth
    assert "rarefied to" in res.reading and "cannot by itself" in res.reading
    # the shape row is shape_test with the same seed compare_groups derived for it
    direct = shape_test(tab, "treatment", units=False, n_permutations=99,
                        rng=int(np.random.default_rng(3).spawn(3)[1].integers(2**63)))
    assert direct.pvalue == res.pvalue["shape"] and direct.statistic == res.statistic["shape"]
    import tallyform as tly
    with pytest.raises(InputError, match="rarefaction depth"):
        compare_groups(tab, "treatment", depth=10,
                       shape_measure=tly.dissimilarity(tab, "hellinger"))


def test_compare_groups_on_the_mesocosm_demo():
    # synthetic demo: nutrient_low lowers totals with the same composition,
    # nutrient_high changes composition (tallyform.core.scenarios)
    import tallyform as tly
    tab = tly.demo("mesocosm")
    low = tly.compare_groups(tab.subset(lambda s: s.treatment != "nutrient_high"),
                             "treatment", n_permutations=199, rng=2)
    assert low.measure == "chi_square" and low.size.pvalue < 0.001
    assert low.pvalue["shape"] > 0.1
    assert low.reading.startswith("Tested at the level of 'tank': 10 units")
    assert "Total abundance differs" in low.reading
    assert "No difference in composition" in low.reading and "(10 units)" in low.reading
    high = tly.compare_groups(tab.subset(lambda s: s.treatment != "nutrient_low"),
                              "treatment", shape_measure="hellinger", n_permutations=199,
                              rng=2)
    # the shape test compares the 5 + 5 tanks (detected units), whose smallest possible
    # p-value is 2/252, so the bound is 0.05 rather than the 0.01 of 40 "independent" samples
    assert high.permanova.table.loc["treatment", "stratum"] == "between 'tank'"
    assert high.pvalue["shape"] < 0.05 and "shift in composition" in high.reading
    bray = tly.compare_groups(tab, "treatment", shape_measure="bray_curtis",
                              n_permutations=99, rng=2)
    assert "not size-free" in bray.reading
