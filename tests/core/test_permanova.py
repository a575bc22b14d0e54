"""PERMANOVA and pairwise PERMANOVA: reference values, design errors, result contents."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from scipy.spatial.distance import pdist

from tallyform.core.dissimilarity import Dissimilarity
from tallyform.core.errors import Cancelled, DesignError, InputError
from tallyform.core.inference import adjust_pvalues, pairwise_permanova, permanova
from tallyform.core.table import CommunityTable


def euclid(y, labels):
    y = np.asarray(y, dtype=float)
    return Dissimilarity(pdist(y.reshape(len(labels), -1)), labels, measure="euclidean")


@pytest.fixture
def unbalanced():
    """Two crossed factors, unbalanced, plus a covariate (synthetic)."""
    rng = np.random.default_rng(8)
    a = np.array(list("ppppqqqqqrrrrrrr"))
    b = np.array(list("xyxyxxyyxyxyyxyy"))
    x = rng.normal(size=16)
    y = rng.normal(size=16) + (a == "q") * 1.5 + (b == "y") * 0.7 + 0.5 * x
    labels = [f"s{i:02d}" for i in range(16)]
    frame = pd.DataFrame({"a": a, "b": b, "x": x, "y": y}, index=labels)
    return frame, euclid(y, labels)


# ---------------------------------------------------------------------------- references
def test_one_factor_pseudo_f_equals_f_oneway():
    # reference: scipy.stats.f_oneway (Euclidean D on one variable, one factor)
    rng = np.random.default_rng(1)
    y = rng.normal(size=21) + np.repeat([0.0, 0.8, 0.3], 7)
    g = np.repeat(["c", "a", "b"], 7)
    labels = [f"s{i}" for i in range(21)]
    res = permanova(euclid(y, labels), pd.DataFrame({"g": g}, index=labels), "g", rng=1)
    ref = stats.f_oneway(*[y[g == k] for k in ("a", "b", "c")])
    assert res.table.loc["g", "pseudo_f"] == pytest.approx(ref.statistic, rel=1e-10)
    assert res.statistic["g"] == pytest.approx(ref.statistic, rel=1e-10)
    # the feature path gives the same table
    feat = Dissimilarity.from_features(y[:, None], labels, measure="euclidean")
    res_f = permanova(feat, pd.DataFrame({"g": g}, index=labels), "g", rng=1)
    pd.testing.assert_frame_equal(res.table, res_f.table, rtol=1e-9)


def test_mussel_example_f_oneway_documentation():
    # scipy.stats.f_oneway documentation example: anterior adductor muscle scar length
    # (standardised) of Mytilus trossulus at five sites, after McDonald et al. (1991);
    # the documented F is 7.1210 (typed from the documentation page)
    tillamook = [0.0571, 0.0813, 0.0831, 0.0976, 0.0817, 0.0859, 0.0735, 0.0659, 0.0923,
                 0.0836]
    newport = [0.0873, 0.0662, 0.0672, 0.0819, 0.0749, 0.0649, 0.0835, 0.0725]
    petersburg = [0.0974, 0.1352, 0.0817, 0.1016, 0.0968, 0.1064, 0.105]
    magadan = [0.1033, 0.0915, 0.0781, 0.0685, 0.0677, 0.0697, 0.0764, 0.0689]
    tvarminne = [0.0703, 0.1026, 0.0956, 0.0973, 0.1039, 0.1045]
    sites = {"tillamook": tillamook, "newport": newport, "petersburg": petersburg,
             "magadan": magadan, "tvarminne": tvarminne}
    y = np.concatenate(list(sites.values()))
    site = np.concatenate([[k] * len(v) for k, v in sites.items()])
    labels = [f"m{i:02d}" for i in range(y.size)]
    d = Dissimilarity(pdist(y[:, None], "cityblock"), labels, measure="custom")  # |y_i - y_j|
    res = permanova(d, pd.DataFrame({"site": site}, index=labels), ["site"],
                    n_permutations=199, rng=1)
    assert res.table.loc["site", "pseudo_f"] == pytest.approx(7.1210, abs=5e-5)
    assert res.table.loc["site", "df"] == 4 and res.table.loc["Residual", "df"] == 34


@pytest.mark.parametrize("formula,terms", [
    ("y ~ C(a) + C(b) + C(a):C(b)", ["a", "b", "a:b"]),
    ("y ~ C(a) + C(b) + x", ["a", "b", "x"]),     # patsy puts numeric terms last
])
def test_sequential_ss_equal_anova_lm_type_1(unbalanced, formula, terms):
    # reference: statsmodels anova_lm(typ=1) on the one response variable
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm
    frame, d = unbalanced
    ref = anova_lm(smf.ols(formula, data=frame).fit(), typ=1)
    res = permanova(d, frame, terms, n_permutations=99, rng=1)
    names = {"a": "C(a)", "b": "C(b)", "a:b": "C(a):C(b)", "x": "x"}
    assert [names[t] for t in terms] == [n for n in ref.index if n != "Residual"]
    for t in terms:
        assert res.table.loc[t, "ss"] == pytest.approx(ref.loc[names[t], "sum_sq"], rel=1e-9)
        assert res.table.loc[t, "df"] == ref.loc[names[t], "df"]
        assert res.table.loc[t, "pseudo_f"] == pytest.approx(ref.loc[names[t], "F"], rel=1e-9)
    assert res.table.loc["Residual", "ss"] == pytest.approx(ref.loc["Residual", "sum_sq"])
    assert res.table.loc["Residual", "df"] == ref.loc["Residual", "df"]
    # sequential SS add up to the total
    assert res.table.loc[terms + ["Residual"], "ss"].sum() == pytest.approx(
        res.table.loc["Total", "ss"])
    assert res.table.loc[terms, "r2"].sum() + res.table.loc["Residual", "r2"] == \
        pytest.approx(1.0)


def test_marginal_ss_equal_anova_lm_type_2(unbalanced):
    # reference: statsmodels anova_lm(typ=2): each term after all terms not containing it
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm
    frame, d = unbalanced
    ref = anova_lm(smf.ols("y ~ x + C(a) + C(b) + C(a):C(b)", data=frame).fit(), typ=2)
    res = permanova(d, frame, ["x", "a", "b", "a:b"], ss="marginal", n_permutations=99,
                    rng=1)
    for t, name in zip(["x", "a", "b", "a:b"], ["x", "C(a)", "C(b)", "C(a):C(b)"]):
        assert res.table.loc[t, "ss"] == pytest.approx(ref.loc[name, "sum_sq"], rel=1e-9)
        assert res.table.loc[t, "pseudo_f"] == pytest.approx(ref.loc[name, "F"], rel=1e-9)
    assert any("interaction" in n for n in res.notes)


def test_table_layout_and_result_fields(unbalanced):
    frame, d = unbalanced
    res = permanova(d, frame, ["a", "b"], n_permutations=199, rng=3)
    assert list(res.table.columns) == ["df", "ss", "ms", "pseudo_f", "r2", "pvalue",
                                       "stratum", "tested_against", "df_denominator"]
    assert list(res.table.index) == ["a", "b", "Residual", "Total"]
    assert res.table.loc["a", "tested_against"] == "Residual"
    assert res.table.loc["a", "df_denominator"] == res.table.loc["Residual", "df"]
    assert res.schemes.loc["a", "reduced_model"] == "intercept + b"
    assert res.schemes.loc["b", "reduced_model"] == "intercept + a"
    assert res.table.loc["Total", "df"] == 15
    assert res.table.loc["a", "ms"] == pytest.approx(res.table.loc["a", "ss"] / 2)
    assert set(res.null_distribution) == {"a", "b"}
    assert res.null_distribution["a"].size == 199 and res.n_permutations == 199
    assert not res.exact and "199 random permutations" in res.scheme
    # p = (1 + #{F* >= F}) / (P + 1) (Phipson & Smyth 2010), ties within the engine's tolerance
    from tallyform.core.permutation import TIE_RTOL
    f = res.table.loc["a", "pseudo_f"]
    hits = int(np.sum(res.null_distribution["a"] >= f * (1 - TIE_RTOL)))
    assert res.pvalue["a"] == pytest.approx((1 + hits) / 200, rel=1e-12)
    assert "PERMANOVA" in str(res) and "<table" in res._repr_html_()
    with pytest.raises(ValueError):
        res.null_distribution["a"][0] = 0.0


def test_exact_and_few_permutations_announced():
    y = [1.0, 2.0, 3.5, 7.0, 8.0, 9.5]
    labels = list("abcdef")
    res = permanova(euclid(y, labels), pd.DataFrame({"g": list("xxxyyy")}, index=labels),
                    "g", n_permutations=999, rng=0)
    assert res.exact and res.n_permutations == 20
    assert res.pvalue["g"] == pytest.approx(2 / 20)         # identity + the group swap
    assert any("Only 20 distinct" in n for n in res.notes)
    assert "exact" in str(res)


def test_same_seed_same_pvalue(unbalanced):
    frame, d = unbalanced
    runs = [permanova(d, frame, ["b", "a"], n_permutations=299, rng=5).pvalue
            for _ in range(2)]
    pd.testing.assert_series_equal(runs[0], runs[1])
    other = permanova(d, frame, ["b", "a"], n_permutations=299, rng=6)
    assert not all(np.array_equal(other.null_distribution[t],
                                  permanova(d, frame, ["b", "a"], n_permutations=299,
                                            rng=5).null_distribution[t]) for t in ["a", "b"])


def test_blocks_restrict_permutations(unbalanced):
    frame, d = unbalanced
    frame = frame.assign(block=np.repeat(["k1", "k2", "k3", "k4"], 4))
    res = permanova(d, frame, ["b"], blocks="block", n_permutations=199, rng=2)
    assert "within blocks of 'block'" in res.scheme


def test_samples_may_be_a_table_and_are_matched_by_label():
    counts = pd.DataFrame(np.random.default_rng(0).poisson(5, size=(8, 5)) + 1.0,
                          index=[f"s{i}" for i in range(8)],
                          columns=[f"t{j}" for j in range(5)])
    info = pd.DataFrame({"g": list("aaaabbbb")}, index=counts.index)
    tab = CommunityTable(counts, info)
    d = Dissimilarity(pdist(counts.to_numpy(), "braycurtis"), counts.index,
                      measure="bray_curtis")
    a = permanova(d, tab, "g", rng=1)
    b = permanova(d, info.iloc[::-1], "g", rng=1)             # order does not matter
    pd.testing.assert_frame_equal(a.table, b.table)
    c = permanova(d, pd.concat([info, pd.DataFrame({"g": ["a"]}, index=["extra"])]), "g",
                  rng=1)
    assert any("not in the dissimilarity" in n for n in c.notes)


# ---------------------------------------------------------------------------- errors
@pytest.fixture
def small():
    labels = [f"s{i}" for i in range(8)]
    frame = pd.DataFrame({"g": list("aaaabbbb"), "one": ["z"] * 8,
                          "x": [1.0, 2.0, np.nan, 4.0, 5.0, 6.0, 7.0, 8.0],
                          "solo": list("ppqqrrst"), "ids": labels,
                          "blk": labels}, index=labels)
    d = euclid(np.arange(8.0), labels)
    return d, frame


@pytest.mark.parametrize("terms,column", [
    (["nope"], "nope"), (["one"], "one"), (["g", "x"], "x"), (["ids"], "ids"),
])
def test_design_errors_name_the_column(small, terms, column):
    d, frame = small
    with pytest.raises(DesignError, match=repr(column)):
        permanova(d, frame, terms)


def test_blocks_of_one_sample_each(small):
    d, frame = small
    with pytest.raises(DesignError, match="'blk'.*single sample"):
        permanova(d, frame, ["g"], blocks="blk")
    with pytest.raises(DesignError, match="'nothere'"):
        permanova(d, frame, ["g"], blocks="nothere")


def test_mismatched_labels_listed(small):
    d, frame = small
    with pytest.raises(DesignError, match="s7"):
        permanova(d, frame.iloc[:7], ["g"])


def test_bad_options(small):
    d, frame = small
    with pytest.raises(InputError, match="`ss`"):
        permanova(d, frame, ["g"], ss="type3")
    with pytest.raises(InputError, match="n_permutations"):
        permanova(d, frame, ["g"], n_permutations=-1)
    with pytest.raises(InputError, match="Dissimilarity"):
        permanova(np.zeros((8, 8)), frame, ["g"])


def test_cancel_leaves_no_result(unbalanced):
    frame, d = unbalanced
    with pytest.raises(Cancelled):
        permanova(d, frame, ["a", "b"], n_permutations=999, cancel=lambda: True)
    seen = []
    permanova(d, frame, ["a", "b"], n_permutations=99, rng=1,
              progress=lambda done, total: seen.append((done, total)))
    assert seen[-1] == (198, 198)


# ---------------------------------------------------------------------------- pairwise
def test_adjustments_equal_statsmodels_multipletests():
    # reference: statsmodels.stats.multitest.multipletests (holm, fdr_bh), to 1e-15
    from statsmodels.stats.multitest import multipletests
    rng = np.random.default_rng(2)
    for m in (1, 2, 5, 11, 40, 300):
        p = rng.uniform(0, 0.3, size=m) ** rng.uniform(0.5, 3)
        if m > 3:
            p[3] = p[m - 1]                                   # a tie
        kept = p.copy()
        for ours, theirs in (("holm", "holm"), ("bh", "fdr_bh")):
            np.testing.assert_allclose(adjust_pvalues(p, ours),
                                       multipletests(p, method=theirs)[1], rtol=0, atol=1e-15)
        np.testing.assert_array_equal(p, kept)                # the input is not modified
        assert adjust_pvalues(p, None) == pytest.approx(p)


def test_adjustments_match_their_definitions():
    # Holm (1979): p_(i) -> max_{j<=i} min(1, (m-j+1) p_(j)); Benjamini & Hochberg (1995):
    # p_(i) -> min_{j>=i} min(1, m p_(j) / j)  (written from the papers' definitions)
    rng = np.random.default_rng(5)
    p = rng.uniform(0, 0.2, size=9)
    m = p.size
    order = np.argsort(p)
    holm = np.empty(m)
    bh = np.empty(m)
    for i, k in enumerate(order):
        holm[k] = max(min(1.0, (m - j) * p[order[j]]) for j in range(i + 1))
        bh[k] = min(min(1.0, m * p[order[j]] / (j + 1)) for j in range(i, m))
    np.testing.assert_allclose(adjust_pvalues(p, "holm"), holm, rtol=0, atol=1e-15)
    np.testing.assert_allclose(adjust_pvalues(p, "bh"), bh, rtol=0, atol=1e-15)
    # a missing p-value stays missing and is not counted among the tests
    q = np.array([0.01, np.nan, 0.04])
    out = adjust_pvalues(q, "holm")
    assert np.isnan(out[1]) and out[[0, 2]] == pytest.approx([0.02, 0.04])


@pytest.mark.parametrize("adjust,method", [("holm", "holm"), ("bh", "fdr_bh")])
def test_pairwise_permanova(adjust, method):
    from statsmodels.stats.multitest import multipletests
    rng = np.random.default_rng(4)
    g = np.repeat(["ctl", "low", "high"], 6)
    y = rng.normal(size=(18, 3)) + (g == "high")[:, None] * 2.0
    labels = [f"s{i:02d}" for i in range(18)]
    frame = pd.DataFrame({"treatment": g}, index=labels)
    d = Dissimilarity(pdist(y), labels, measure="euclidean")
    res = pairwise_permanova(d, frame, "treatment", adjust=adjust, n_permutations=199, rng=1)
    assert list(res.table.index) == ["ctl vs low", "ctl vs high", "low vs high"]  # file order
    assert res.pvalue_adjusted.to_numpy() == pytest.approx(
        multipletests(res.pvalue.to_numpy(), method=method)[1])
    # each row is the one-factor PERMANOVA of that pair alone
    keep = np.isin(g, ["ctl", "low"])
    one = permanova(d.subset(keep), frame[keep], "treatment", n_permutations=9)
    assert res.table.loc["ctl vs low", "pseudo_f"] == pytest.approx(
        one.table.loc["treatment", "pseudo_f"])
    assert res.table.loc["ctl vs low", "n_a"] == 6
    assert res.pvalue["ctl vs high"] < 0.05


def test_pairwise_needs_two_samples_per_level():
    labels = [f"s{i}" for i in range(7)]
    frame = pd.DataFrame({"g": list("aaabbbc")}, index=labels)
    with pytest.raises(DesignError, match="'g'.*at least 2 samples"):
        pairwise_permanova(euclid(np.arange(7.0), labels), frame, "g")
    with pytest.raises(InputError, match="adjust"):
        pairwise_permanova(euclid(np.arange(7.0), labels), frame, "g", adjust="bonf")


def test_docstring_examples_run():
    # the Examples sections of the inference modules are doctests
    import doctest

    import tallyform.core.dispersion as dispersion
    import tallyform.core.ems as ems
    import tallyform.core.inference as inference
    import tallyform.core.pairwise as pairwise
    import tallyform.core.permutation as permutation
    import tallyform.core.size_tests as size_tests
    import tallyform.core.symmetries as symmetries
    import tallyform.core.units as units
    for mod in (dispersion, ems, inference, pairwise, permutation, size_tests, symmetries,
                units):
        result = doctest.testmod(mod, optionflags=doctest.NORMALIZE_WHITESPACE)
        assert result.failed == 0, mod.__name__


def test_feature_path_needs_no_n_by_n_matrix():
    # with a memory limit below one n x n matrix, the feature path still runs and the
    # distance path refuses with TooLargeError (checked before allocating)
    from tallyform.core.errors import TooLargeError
    from tallyform.core.memory import set_memory_limit
    rng = np.random.default_rng(6)
    n = 800
    f = rng.normal(size=(n, 5))
    labels = [f"s{i}" for i in range(n)]
    frame = pd.DataFrame({"g": np.tile(["a", "b", "c", "d"], n // 4)}, index=labels)
    feat = Dissimilarity.from_features(f, labels, measure="euclidean")
    set_memory_limit(n * n * 8 // 2)
    try:
        res = permanova(feat, frame, ["g"], n_permutations=99, rng=1)
        with pytest.raises(TooLargeError):
            permanova(Dissimilarity(pdist(f), labels, measure="euclidean"), frame, ["g"],
                      n_permutations=99, rng=1)
    finally:
        set_memory_limit(None)
    assert res.table.loc["g", "df"] == 3


def test_property_relabelling_samples_changes_nothing():
    # property (hypothesis): presenting the samples in another order, in both the
    # dissimilarity and the sample table, leaves the sums of squares and F unchanged
    from hypothesis import given, settings
    from hypothesis import strategies as st

    @settings(max_examples=25, deadline=None)
    @given(st.integers(0, 10_000), st.integers(6, 14))
    def check(seed, n):
        rng = np.random.default_rng(seed)
        y = rng.normal(size=(n, 3))
        g = np.array(["a", "b"] * n)[:n]
        x = rng.normal(size=n)
        labels = [f"s{i}" for i in range(n)]
        frame = pd.DataFrame({"g": g, "x": x}, index=labels)
        order = rng.permutation(n)
        d1 = Dissimilarity(pdist(y, "cityblock"), labels, measure="custom")
        d2 = Dissimilarity(pdist(y[order], "cityblock"), [labels[i] for i in order],
                           measure="custom")
        t1 = permanova(d1, frame, ["x", "g"], n_permutations=0).table
        t2 = permanova(d2, frame, ["x", "g"], n_permutations=0).table
        cols = ["df", "ss", "pseudo_f", "r2"]
        pd.testing.assert_frame_equal(t1[cols], t2[cols], rtol=1e-9)

    check()
