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


def test_anova_equals_statsmodels_ols(three_groups):
    # reference: statsmodels OLS on log totals: anova_lm F and exp(conf_int) of the
    # treatment-coded coefficients (reference level = first level)
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm
    tab = three_groups
    res = size_test(tab, "treatment", effort=False)
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
        geo.loc[["ctl", "high", "low"]].to_numpy())


def test_welch_two_groups_equals_welch_t_test(three_groups):
    # reference: scipy.stats.ttest_ind(equal_var=False): F = t^2, same df, same interval
    tab = three_groups.subset(lambda s: s.treatment != "high")
    res = size_test(tab, "treatment", method="welch", effort=False)
    y = log_totals(tab)
    g = tab.samples["treatment"].to_numpy()
    t = stats.ttest_ind(y[g == "low"], y[g == "ctl"], equal_var=False)
    assert res.statistic == pytest.approx(t.statistic ** 2, rel=1e-10)
    assert res.pvalue == pytest.approx(t.pvalue, rel=1e-8)
    assert res.df[1] == pytest.approx(t.df, rel=1e-10)
    ci = t.confidence_interval(0.95)
    assert [res.summary.loc["low", "ci_low"], res.summary.loc["low", "ci_high"]] == \
        pytest.approx(np.exp([ci.low, ci.high]))


def test_welch_df_equals_statsmodels_anova_oneway(three_groups):
    # reference: statsmodels.stats.oneway.anova_oneway(use_var="unequal")
    from statsmodels.stats.oneway import anova_oneway
    res = size_test(three_groups, "treatment", method="welch", effort=False)
    g = three_groups.samples["treatment"].to_numpy()
    ref = anova_oneway(log_totals(three_groups), groups=g, use_var="unequal")
    assert res.statistic == pytest.approx(ref.statistic, rel=1e-10)
    assert res.df[1] == pytest.approx(ref.df_denom, rel=1e-10)


def test_kruskal_on_ranks(three_groups):
    # reference: scipy.stats.kruskal; ranks (hence H) do not change under the log
    res = size_test(three_groups, "treatment", method="kruskal", effort=False)
    g = three_groups.samples["treatment"].to_numpy()
    y = log_totals(three_groups)
    ref = stats.kruskal(*[y[g == k] for k in ("ctl", "high", "low")])
    assert res.statistic == pytest.approx(ref.statistic) and res.pvalue == pytest.approx(
        ref.pvalue)
    assert res.summary["ci_low"].isna().all()


def test_permutation_f_equals_anova_f(three_groups):
    a = size_test(three_groups, "treatment", method="anova")
    p1 = size_test(three_groups, "treatment", method="permutation", n_permutations=499, rng=3)
    p2 = size_test(three_groups, "treatment", method="permutation", n_permutations=499, rng=3)
    assert p1.statistic == pytest.approx(a.statistic, rel=1e-10)
    assert p1.pvalue == p2.pvalue and p1.n_permutations == 499


def test_negbin_ratio_equals_ratio_of_means(three_groups):
    # identity: in a negative-binomial (NB2) model with one factor and no offset, the score
    # equations make each group's fitted mean its sample mean (McCullagh & Nelder 1989), so
    # exp(coefficient) is the ratio of arithmetic mean totals
    res = size_test(three_groups, "treatment", method="negbin", effort=False)
    t = three_groups.totals.groupby(three_groups.samples["treatment"].to_numpy()).mean()
    assert res.summary.loc["low", "ratio"] == pytest.approx(t["low"] / t["ctl"], rel=1e-4)
    assert res.summary.loc["high", "ratio"] == pytest.approx(t["high"] / t["ctl"], rel=1e-4)
    assert res.summary.loc["low", "ci_low"] < res.summary.loc["low", "ratio"] < \
        res.summary.loc["low", "ci_high"]
    assert res.df == (2,) and 0 <= res.pvalue <= 1


def test_negbin_offset_is_the_log_effort(three_groups):
    # with effort e, log E[total] = log e + X beta: doubling every effort halves the ratio
    # of nothing (ratios between groups unchanged) and leaves the test unchanged
    tab = three_groups
    a = size_test(tab, "treatment", method="negbin")
    b = size_test(tab, "treatment", method="negbin", effort=2 * tab.effort.to_numpy())
    assert a.statistic == pytest.approx(b.statistic, rel=1e-4)
    assert a.summary["ratio"].to_numpy() == pytest.approx(b.summary["ratio"].to_numpy(),
                                                          rel=1e-4)
    assert "per nights" in a.effect


def test_effort_default_and_opt_out(three_groups):
    tab = three_groups
    per = size_test(tab, "treatment")
    raw = size_test(tab, "treatment", effort=False)
    g = tab.samples["treatment"].to_numpy()
    y = log_totals(tab, per_effort=True)
    ref = stats.f_oneway(*[y[g == k] for k in ("ctl", "high", "low")])
    assert per.statistic == pytest.approx(ref.statistic)
    assert per.measure == "log total per nights" and raw.measure == "log total"
    assert any("nights" in n for n in per.notes)
    assert size_test(tab, "treatment", effort="nights").statistic == pytest.approx(
        per.statistic)
    assert size_measure(tab).to_numpy() == pytest.approx(y)


def test_errors():
    counts = pd.DataFrame({"t1": [3, 0, 4, 5, 6, 2], "t2": [1, 0, 2, 2, 1, 2]},
                          index=list("abcdef"), dtype=float)
    info = pd.DataFrame({"g": list("xxxyyy"), "one": ["z"] * 6, "h": list("xxyyyz")},
                        index=list("abcdef"))
    tab = CommunityTable(counts, info, empty="keep")
    with pytest.raises(InputError, match="'b'.*total of 0"):
        size_test(tab, "g")
    assert size_test(tab, "g", method="kruskal").pvalue <= 1
    with pytest.raises(DesignError, match="'nope'"):
        size_test(tab, "nope", method="kruskal")
    with pytest.raises(DesignError, match="'one'.*single level"):
        size_test(tab, "one", method="kruskal")
    with pytest.raises(DesignError, match="'h'.*single sample"):
        size_test(tab, "h", method="kruskal")
    with pytest.raises(InputError, match="`method`"):
        size_test(tab, "g", method="t")
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
    (0.01, 0.01, "differ in composition or in spread", "simplest reading"),
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
    assert list(res.to_frame().index) == ["size", "shape", "spread"]
    assert res.pvalue["shape"] == res.shape.pvalue["treatment"]
    assert res.pvalue["spread"] == res.dispersion.pvalue
    assert res.reading in str(res) and "not size-free" not in res.reading
    again = compare_groups(tab, "treatment", shape_measure=hell, n_permutations=199, rng=1)
    pd.testing.assert_series_equal(res.pvalue, again.pvalue)


def test_compare_groups_on_the_mesocosm_demo():
    # synthetic demo: nutrient_low lowers totals with the same composition,
    # nutrient_high changes composition (tallyform.core.scenarios)
    import tallyform as tly
    tab = tly.demo("mesocosm")
    low = tly.compare_groups(tab.subset(lambda s: s.treatment != "nutrient_high"),
                             "treatment", n_permutations=199, rng=2)
    assert low.measure == "chi_square" and low.size.pvalue < 0.001
    assert low.pvalue["shape"] > 0.2
    assert low.reading.startswith("Total abundance differs")
    assert "No difference in composition" in low.reading
    high = tly.compare_groups(tab.subset(lambda s: s.treatment != "nutrient_low"),
                              "treatment", shape_measure="hellinger", n_permutations=199,
                              rng=2)
    # the shape test compares the 5 + 5 tanks (detected units), whose smallest possible
    # p-value is 2/252, so the bound is 0.05 rather than the 0.01 of 40 "independent" samples
    assert high.shape.table.loc["treatment", "stratum"] == "between 'tank'"
    assert high.pvalue["shape"] < 0.05 and "differ in composition" in high.reading
    bray = tly.compare_groups(tab, "treatment", shape_measure="bray_curtis",
                              n_permutations=99, rng=2)
    assert "not size-free" in bray.reading
