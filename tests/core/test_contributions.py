"""Taxon contributions: exact splits, averages over pairs, size ratios, intervals, bad input."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from scipy.spatial.distance import cdist

import tallyform as tly
from tallyform.core.contributions import PAIR_MEASURES, SPLIT_MEASURES
from tallyform.core.dissimilarity import Dissimilarity
from tallyform.core.errors import Cancelled, DesignError, InputError
from tallyform.core.taxon_terms import centroid_noise, interval
from tallyform.core.transforms import Clr


# ---------------------------------------------------------------------------- fixtures
def _design(n_per: int, levels=("a", "b")) -> pd.DataFrame:
    g = [lv for lv in levels for _ in range(n_per)]
    return pd.DataFrame({"g": g}, index=[f"s{i + 1:03d}" for i in range(len(g))])


@pytest.fixture(scope="module")
def shape_table():
    """Only t01..t03 change share between a and b (t01, t02 up, t03 down)."""
    return tly.simulate_community(
        _design(15), n_taxa=20, mean_total=600.0,
        shape_effects={"g": {"b": {"t01": 3.0, "t02": 2.5, "t03": 0.25}}},
        total_spread=0.1, profile_noise=0.01, rng=11)


@pytest.fixture(scope="module")
def size_table():
    """A pure size change: b has 40 % of a's totals, the same composition."""
    return tly.simulate_community(
        _design(15), n_taxa=20, mean_total=800.0, size_effects={"g": {"b": 0.4}},
        total_spread=0.15, profile_noise=0.01, rng=12)


@pytest.fixture(scope="module")
def mesocosm():
    return tly.demo("mesocosm")


def _sub(tab, g, a, b):
    """Counts of groups a and b, taxa absent from both left out (as the function does)."""
    lab = tab.group(g).to_numpy()
    x = tab.values[(lab == a) | (lab == b)]
    keep = x.sum(axis=0) > 0
    taxa = tab.taxon_labels[keep]
    sl = tab.sample_labels[(lab == a) | (lab == b)]
    gsub = lab[(lab == a) | (lab == b)]
    return pd.DataFrame(x[:, keep], index=sl, columns=taxa), gsub == a, gsub == b


# ---------------------------------------------------------------------------- exact split
@pytest.mark.parametrize("measure", SPLIT_MEASURES)
def test_terms_sum_to_squared_centroid_distance(mesocosm, measure):
    # identity: ||fbar_b - fbar_a||^2 = sum_j (fbar_bj - fbar_aj)^2, features from
    # tly.feature_matrix on the two groups' samples
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                measure=measure, n_boot=0)
    sub, ia, ib = _sub(mesocosm, "treatment", "control", "nutrient_high")
    F = tly.feature_matrix(sub, measure)
    d2 = float(np.sum((F[ib].mean(axis=0) - F[ia].mean(axis=0)) ** 2))
    assert k.exact
    assert abs(k.shape["term"].sum() - d2) <= 1e-12 * max(d2, 1.0)
    assert abs(k.total - d2) <= 1e-12 * max(d2, 1.0)
    assert k.shape["share_pct"].sum() == pytest.approx(100.0, abs=1e-10)
    assert np.all(np.diff(k.shape["term"].to_numpy()) <= 0)       # largest first
    assert k.shape["cumulative_pct"].iloc[-1] == pytest.approx(100.0, abs=1e-10)


@pytest.mark.parametrize("measure", ["hellinger", "chord", "aitchison", "chi_square"])
def test_centroid_distance_from_pairwise_distances(mesocosm, measure):
    # identity (Apollonius / the two-group PERMANOVA decomposition, Anderson 2001):
    # ||fbar_a - fbar_b||^2 = mean_{i in a, k in b} d_ik^2 - (W_a + W_b) / 2, W_g the mean of
    # d^2 over all n_g^2 ordered pairs of g; distances from tly.dissimilarity (kernel path)
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                measure=measure, n_boot=0)
    sub, ia, ib = _sub(mesocosm, "treatment", "control", "nutrient_high")
    D2 = tly.dissimilarity(sub, measure).square() ** 2
    rhs = D2[np.ix_(ia, ib)].mean() - 0.5 * (D2[np.ix_(ia, ia)].mean()
                                              + D2[np.ix_(ib, ib)].mean())
    assert k.total == pytest.approx(rhs, rel=1e-9)
    # and the between-group sum of squares from sums of squared distances (no features):
    # SS_T(a+b) - SS_T(a) - SS_T(b) = n_a n_b / (n_a + n_b) D^2
    d = tly.dissimilarity(sub, measure)
    plain = Dissimilarity(d.condensed, d.labels, measure=measure)
    ss_between = (plain.total_ss() - plain.subset(ia).total_ss()
                  - plain.subset(ib).total_ss())
    na, nb = ia.sum(), ib.sum()
    assert ss_between == pytest.approx(na * nb / (na + nb) * k.total, rel=1e-9)


def test_chi_square_equals_distance_between_mean_profiles(mesocosm):
    # chi-square features are profiles / sqrt(c): linear in the profile, so the centroid
    # distance is the chi-square distance between the two mean profiles with the same masses
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                measure="chi_square", n_boot=0)
    sub, ia, ib = _sub(mesocosm, "treatment", "control", "nutrient_high")
    x = sub.to_numpy()
    masses = x.sum(axis=0) / x.sum()
    prof = x / x.sum(axis=1, keepdims=True)
    two = np.vstack([prof[ia].mean(axis=0), prof[ib].mean(axis=0)])
    d = tly.dissimilarity(two, "chi_square", column_masses=masses)
    assert k.total == pytest.approx(float(d.condensed[0]) ** 2, rel=1e-12)
    assert any("pooled" in n for n in k.notes)


def test_profile_euclidean_equals_distance_between_mean_profiles(mesocosm):
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                measure="euclidean", transform="profile", n_boot=0)
    sub, ia, ib = _sub(mesocosm, "treatment", "control", "nutrient_high")
    prof = sub.to_numpy() / sub.to_numpy().sum(axis=1, keepdims=True)
    two = np.vstack([prof[ia].mean(axis=0), prof[ib].mean(axis=0)])
    d = tly.dissimilarity(two, "euclidean", transform="profile")
    assert k.total == pytest.approx(float(d.condensed[0]) ** 2, rel=1e-12)


def test_aitchison_equals_distance_between_geometric_means(mesocosm):
    # the mean of clr rows is the clr of the geometric mean (Aitchison 1986), so D is the
    # Aitchison distance between the groups' geometric-mean compositions (after the same
    # zero replacement)
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                measure="aitchison", n_boot=0)
    sub, ia, ib = _sub(mesocosm, "treatment", "control", "nutrient_high")
    z = Clr().replace_zeros(sub.to_numpy())
    gm = np.vstack([np.exp(np.log(z[ia]).mean(axis=0)), np.exp(np.log(z[ib]).mean(axis=0))])
    d = tly.dissimilarity(gm, "aitchison", zeros="error")
    assert k.total == pytest.approx(float(d.condensed[0]) ** 2, rel=1e-10)


def test_hellinger_centroid_is_not_the_mean_profile_feature(mesocosm):
    # the note-worthy difference: sqrt of the mean profile is not the mean sqrt profile
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high", n_boot=0)
    sub, ia, ib = _sub(mesocosm, "treatment", "control", "nutrient_high")
    prof = sub.to_numpy() / sub.to_numpy().sum(axis=1, keepdims=True)
    two = np.vstack([prof[ia].mean(axis=0), prof[ib].mean(axis=0)])
    d_means = float(tly.dissimilarity(two, "hellinger").condensed[0]) ** 2
    assert abs(k.total - d_means) > 1e-4 * k.total
    np.testing.assert_allclose(k.shape["mean_a"].sort_index(),
                               pd.Series(two[0], index=sub.columns).sort_index(), rtol=1e-12)


# ---------------------------------------------------------------------------- average
_SCIPY = {"bray_curtis": ("braycurtis", False), "manhattan": ("cityblock", False),
          "canberra": ("canberra", False), "sorensen": ("dice", True),
          "jaccard": ("jaccard", True)}


@pytest.mark.parametrize("measure", list(PAIR_MEASURES))
def test_average_terms_sum_to_mean_between_group_dissimilarity(mesocosm, measure):
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                measure=measure, n_boot=0)
    sub, ia, ib = _sub(mesocosm, "treatment", "control", "nutrient_high")
    D = tly.dissimilarity(sub, measure).square()
    mean_between = D[np.ix_(ia, ib)].mean()
    assert not k.exact
    assert k.shape["term"].sum() == pytest.approx(mean_between, rel=1e-12)
    if measure in _SCIPY:   # scipy.spatial.distance as the outside reference
        name, presence = _SCIPY[measure]
        x = sub.to_numpy()
        if presence:
            x = x > 0
        assert k.total == pytest.approx(cdist(x[ia], x[ib], name).mean(), rel=1e-12)
    assert any("average over pairs" in n for n in k.notes)
    assert "noise" not in k.shape.columns


def test_bray_curtis_terms_by_hand():
    # Bray-Curtis worked example (6, 7, 4) vs (10, 0, 6): 13/33, per taxon 4/33, 7/33, 2/33
    # (from memory; the total also agrees with scipy's braycurtis)
    tab = tly.CommunityTable(pd.DataFrame([[6, 7, 4], [10, 0, 6]], index=["p", "q"],
                                          columns=["x", "y", "z"]),
                             pd.DataFrame({"g": ["a", "b"]}, index=["p", "q"]))
    k = tly.taxon_contributions(tab, "g", "a", "b", measure="bray_curtis", n_boot=0)
    assert k.total == pytest.approx(13 / 33, rel=1e-12)
    assert k.shape.loc[["x", "y", "z"], "term"].tolist() == pytest.approx(
        [4 / 33, 7 / 33, 2 / 33], rel=1e-12)
    assert k.shape.loc["y", "higher_in"] == "a"


def test_bootstrap_of_average_matches_direct_resampling(mesocosm):
    # the weighted form (counts of draws) equals recomputing on the resampled samples
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                measure="bray_curtis", n_boot=7, rng=3)
    sub, ia, ib = _sub(mesocosm, "treatment", "control", "nutrient_high")
    rng = np.random.default_rng(3)
    na, nb = ia.sum(), ib.sum()
    Wa = rng.multinomial(na, np.full(na, 1 / na), size=7)
    Wb = rng.multinomial(nb, np.full(nb, 1 / nb), size=7)
    x = sub.to_numpy()
    xa, xb = x[ia], x[ib]
    totals = []
    for wa, wb in zip(Wa, Wb):
        ra, rb = np.repeat(xa, wa, axis=0), np.repeat(xb, wb, axis=0)
        totals.append(cdist(ra, rb, "braycurtis").mean())
    lo, hi = interval(np.array(totals), 0.95)
    assert k.total_ci == pytest.approx((float(lo), float(hi)), rel=1e-12)


# ---------------------------------------------------------------------------- which taxa
@pytest.mark.parametrize("measure", ["hellinger", "chi_square", "aitchison", "bray_curtis"])
def test_changed_taxa_come_first(shape_table, measure):
    k = tly.taxon_contributions(shape_table, "g", "a", "b", measure=measure, n_boot=0)
    assert set(k.shape.index[:3]) == {"t01", "t02", "t03"}
    assert k.shape.loc["t01", "higher_in"] == "b"
    assert k.shape.loc["t03", "higher_in"] == "a"


def test_shape_change_is_well_above_noise(shape_table):
    k = tly.taxon_contributions(shape_table, "g", "a", "b", n_boot=199, rng=2)
    assert k.total > 10 * k.noise
    assert not any("sampling noise" in n for n in k.notes)
    top = k.shape.iloc[:3]
    assert (top["ci_low"] > top["noise_pct"]).all()


def test_pure_size_change(size_table):
    k = tly.taxon_contributions(size_table, "g", "a", "b", n_boot=499, rng=4)
    # shape: the centroid distance is at the level expected from sampling noise alone
    assert k.total < 2 * k.noise
    assert any("sampling noise" in n for n in k.notes)
    # size: the total's ratio is near log2(0.4) and nearly every taxon agrees with it
    assert k.size_reference["ci_low"] < np.log2(0.4) < k.size_reference["ci_high"]
    inside = (k.size["ci_low"] <= k.size_reference["log2_ratio"]) & \
             (k.size["ci_high"] >= k.size_reference["log2_ratio"])
    assert inside.mean() >= 0.85
    assert k.size["differs_from_total"].astype(bool).mean() <= 0.15


def test_exact_scaling_gives_equal_ratios_and_no_shape():
    # group b is group a with every count tripled: every ratio is log2(3) exactly (the
    # pseudocount is proportional to the sample total, so it cannot make taxa differ)
    rng = np.random.default_rng(5)
    xa = rng.poisson(rng.uniform(0.5, 30, 12), size=(6, 12)).astype(float)
    xa[:, 0] = 0.0
    xa[0, 0] = 1.0                       # a rare taxon
    x = np.vstack([xa, 3 * xa])
    idx = [f"s{i}" for i in range(12)]
    tab = tly.CommunityTable(pd.DataFrame(x, index=idx),
                             pd.DataFrame({"g": ["a"] * 6 + ["b"] * 6}, index=idx))
    k = tly.taxon_contributions(tab, "g", "a", "b", n_boot=50, rng=1)
    assert k.total == pytest.approx(0.0, abs=1e-28)
    np.testing.assert_allclose(k.size["log2_ratio"], np.log2(3), rtol=0, atol=1e-12)
    assert k.size_reference["log2_ratio"] == pytest.approx(np.log2(3), abs=1e-12)
    np.testing.assert_allclose(k.size["departure"], 0.0, atol=1e-12)


def test_pseudocount_pulls_towards_the_total_never_away(mesocosm):
    # the ratio with the pseudocount is a mediant of the raw ratio and the total's ratio
    raw = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                  n_boot=0, pseudocount=0)
    sm = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                 n_boot=0, pseudocount=0.5)
    ref = sm.size_reference["log2_ratio"]
    r0 = raw.size["log2_ratio"].loc[sm.size.index].to_numpy()
    r1 = sm.size["log2_ratio"].to_numpy()
    lo, hi = np.minimum(r0, ref), np.maximum(r0, ref)
    assert np.all((r1 >= lo - 1e-12) & (r1 <= hi + 1e-12))
    assert np.isfinite(r1).all()


def test_size_ratio_matches_glm_coefficients(mesocosm):
    # outside reference: statsmodels GLMs. Without effort, the group coefficient of a
    # negative-binomial (any alpha) or Poisson regression of one taxon's counts on the group
    # is log(mean_b / mean_a)
    import statsmodels.api as sm
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                n_boot=0, pseudocount=0)
    sub, ia, ib = _sub(mesocosm, "treatment", "control", "nutrient_high")
    X = sm.add_constant(ib.astype(float))
    for taxon in ["grazer_04", "shredder_07", "collector_03"]:
        y = sub[taxon].to_numpy()
        fit = sm.GLM(y, X, family=sm.families.NegativeBinomial(alpha=0.3)).fit()
        assert k.size.loc[taxon, "log2_ratio"] * np.log(2) == pytest.approx(
            fit.params[1], rel=1e-6)


def test_effort_adjusted_ratio_matches_poisson_offset():
    # with effort: Poisson regression with log-effort offset (statsmodels) gives
    # log(sum x_b / sum e_b) - log(sum x_a / sum e_a)
    import statsmodels.api as sm
    tab = tly.demo("moths")
    k = tly.taxon_contributions(tab, "habitat", "woodland", "arable", n_boot=0,
                                pseudocount=0)
    g = tab.group("habitat").to_numpy()
    rows = (g == "woodland") | (g == "arable")
    e = tab.effort.to_numpy()[rows]
    X = sm.add_constant((g[rows] == "arable").astype(float))
    for taxon in k.size.index[:4]:
        y = tab.counts[taxon].to_numpy()[rows]
        fit = sm.GLM(y, X, family=sm.families.Poisson(), offset=np.log(e)).fit()
        assert k.size.loc[taxon, "log2_ratio"] * np.log(2) == pytest.approx(
            fit.params[1], rel=1e-6)
    assert k.per_effort == "trap_nights"
    assert any("trap_nights" in n for n in k.notes)


# ---------------------------------------------------------------------------- intervals
def test_interval_is_the_order_statistic_rule():
    # percentile interval with B = 999 at 95 %: the 25th and 975th ordered draws
    # (the (B + 1) alpha rule, Efron & Tibshirani 1993)
    draws = np.random.default_rng(0).normal(size=999)
    lo, hi = interval(draws, 0.95)
    s = np.sort(draws)
    assert (float(lo), float(hi)) == (s[24], s[974])


def test_share_and_ratio_intervals_agree_with_scipy_bootstrap(shape_table):
    # outside reference: scipy.stats.bootstrap (percentile method, each group resampled
    # independently); Monte Carlo noise only, so compare with a tolerance of the width
    B = 3000
    k = tly.taxon_contributions(shape_table, "g", "a", "b", n_boot=B, rng=8)
    sub, ia, ib = _sub(shape_table, "g", "a", "b")
    F = tly.feature_matrix(sub, "hellinger")
    j = list(sub.columns).index("t01")

    def share(fa, fb, axis):
        # scipy passes (taxa, resamples, samples) here: taxa on the first axis
        d = fb.mean(axis=axis) - fa.mean(axis=axis)
        d2 = d * d
        return 100 * d2[j] / d2.sum(axis=0)

    res = stats.bootstrap((F[ia], F[ib]), share, n_resamples=B, method="percentile",
                          vectorized=True, axis=0, rng=np.random.default_rng(9))
    width = res.confidence_interval.high - res.confidence_interval.low
    assert k.shape.loc["t01", "ci_low"] == pytest.approx(res.confidence_interval.low,
                                                         abs=0.15 * width)
    assert k.shape.loc["t01", "ci_high"] == pytest.approx(res.confidence_interval.high,
                                                          abs=0.15 * width)
    x = sub.to_numpy()
    t = list(sub.columns).index("t05")
    pc = 0.5 * x.sum(axis=1) / x.sum(axis=1).mean()
    xt = x[:, t] + pc

    def lr(ya, yb, axis):
        return np.log2(yb.mean(axis=axis) / ya.mean(axis=axis))

    res = stats.bootstrap((xt[ia], xt[ib]), lr, n_resamples=B, method="percentile",
                          vectorized=True, rng=np.random.default_rng(10))
    width = res.confidence_interval.high - res.confidence_interval.low
    assert k.size.loc["t05", "ci_low"] == pytest.approx(res.confidence_interval.low,
                                                        abs=0.15 * width)
    assert k.size.loc["t05", "ci_high"] == pytest.approx(res.confidence_interval.high,
                                                         abs=0.15 * width)


def test_same_seed_same_answer(mesocosm):
    k1 = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_low",
                                 n_boot=60, rng=7)
    k2 = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_low",
                                 n_boot=60, rng=np.random.default_rng(7))
    pd.testing.assert_frame_equal(k1.shape, k2.shape)
    pd.testing.assert_frame_equal(k1.size, k2.size)
    k3 = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_low",
                                 n_boot=60, rng=8)
    assert not np.allclose(k1.shape["ci_low"], k3.shape["ci_low"].loc[k1.shape.index])


def test_progress_and_cancel(mesocosm):
    seen = []
    tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high", n_boot=40,
                            rng=1, progress=lambda d, t: seen.append((d, t)))
    assert seen and seen[-1] == (80, 80)
    with pytest.raises(Cancelled):
        tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                n_boot=40, rng=1, cancel=lambda: True)


# ---------------------------------------------------------------------------- the demo
def test_mesocosm_low_nutrients_is_a_size_change(mesocosm):
    low = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_low",
                                  n_boot=299, rng=1)
    high = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                   n_boot=299, rng=1)
    # shape: nutrient_low's Hellinger centroid distance is small next to nutrient_high's
    assert low.total < 0.15 * high.total
    assert low.total_ci[1] < high.total_ci[0]
    # size: totals fall to about 45 % (log2 about -1.15), and most taxa follow the total
    assert low.size_reference["ci_high"] < -0.8
    follows = ~low.size["differs_from_total"].astype(bool)
    assert follows.mean() >= 0.85
    assert high.size["differs_from_total"].astype(bool).sum() > \
        low.size["differs_from_total"].astype(bool).sum() + 5


def test_chi_square_masses_come_from_the_two_groups(mesocosm):
    # the answer for a vs b does not depend on other groups in the table
    k1 = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                 measure="chi_square", n_boot=0)
    two = mesocosm.subset(lambda s: s.treatment != "nutrient_low")
    k2 = tly.taxon_contributions(two, "treatment", "control", "nutrient_high",
                                 measure="chi_square", n_boot=0)
    assert k1.total == pytest.approx(k2.total, rel=1e-12)
    # whole-table masses may be passed; their length is that of the full table
    v = mesocosm.values
    k3 = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                 measure="chi_square", n_boot=0,
                                 column_masses=v.sum(axis=0) / v.sum())
    assert k3.total != pytest.approx(k1.total, rel=1e-6)
    assert not any("pooled" in n for n in k3.notes)


# ---------------------------------------------------------------------------- bad input
def test_unknown_group_and_same_group(mesocosm):
    with pytest.raises(DesignError, match="nutrient_mid.*levels"):
        tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_mid")
    with pytest.raises(DesignError, match="two different groups"):
        tly.taxon_contributions(mesocosm, "treatment", "control", "control")
    with pytest.raises(DesignError, match="'habitat' is not in the sample table"):
        tly.taxon_contributions(mesocosm, "habitat", "control", "nutrient_low")


def test_unsupported_measure_and_bad_options(mesocosm):
    with pytest.raises(InputError, match="supported measures.*hellinger.*bray_curtis"):
        tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_low",
                                measure="morisita_horn")
    with pytest.raises(InputError, match="no option"):
        tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_low",
                                measure="hellinger", zeros="error")
    for kw in ({"n_boot": -1}, {"n_boot": 2.5}, {"level": 1.5}, {"pseudocount": -1}):
        with pytest.raises(InputError):
            tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_low", **kw)


def test_group_with_one_sample_has_no_interval():
    x = np.array([[5, 3, 0, 2], [4, 4, 1, 1], [6, 2, 0, 3], [1, 9, 2, 0.0]])
    idx = ["p", "q", "r", "s"]
    tab = tly.CommunityTable(pd.DataFrame(x, index=idx, columns=list("wxyz")),
                             pd.DataFrame({"g": ["a", "a", "a", "b"]}, index=idx))
    k = tly.taxon_contributions(tab, "g", "a", "b", n_boot=99, rng=1)
    assert k.shape[["ci_low", "ci_high"]].isna().all().all()
    assert k.size[["ci_low", "ci_high"]].isna().all().all()
    assert k.size["differs_from_total"].isna().all()
    assert np.isnan(k.total_ci[0]) and k.noise is None and k.n_boot == 0
    assert any("'b' has only one sample" in n and "no intervals" in n for n in k.notes)
    assert np.isfinite(k.shape["share_pct"]).all()
    assert np.isfinite(k.size["log2_ratio"]).all()


def test_taxon_absent_from_both_groups_is_excluded(mesocosm):
    counts = mesocosm.counts
    g = mesocosm.group("treatment")
    counts["ghost"] = np.where(g == "nutrient_low", 3.0, 0.0)   # only in the third group
    tab = tly.CommunityTable(counts, mesocosm.samples)
    k = tly.taxon_contributions(tab, "treatment", "control", "nutrient_high",
                                measure="chi_square", n_boot=20, rng=1)
    assert k.excluded == ("ghost",)
    assert "ghost" not in k.shape.index and "ghost" not in k.size.index
    assert any("ghost" in n and "left out" in n for n in k.notes)
    assert not k.shape.drop(columns=["ci_low", "ci_high"]).isna().any().any()


def test_taxon_in_one_group_only_without_pseudocount():
    x = np.array([[5, 3, 2], [4, 4, 1], [6, 2, 3], [1, 9, 0], [2, 7, 0.0]])
    idx = list("pqrst")
    tab = tly.CommunityTable(pd.DataFrame(x, index=idx, columns=list("xyz")),
                             pd.DataFrame({"g": ["a", "a", "a", "b", "b"]}, index=idx))
    k = tly.taxon_contributions(tab, "g", "a", "b", n_boot=50, rng=1, pseudocount=0)
    assert k.size.loc["z", "log2_ratio"] == -np.inf
    assert k.size.loc["z", "only_in"] == "a"
    assert not k.size[["log2_ratio", "ci_low", "ci_high", "departure"]].isna().any().any()
    assert bool(k.size.loc["z", "differs_from_total"])
    assert any("infinite log2 ratio" in n for n in k.notes)
    k2 = tly.taxon_contributions(tab, "g", "a", "b", n_boot=50, rng=1)
    assert np.isfinite(k2.size["log2_ratio"]).all()


def test_group_with_no_individuals():
    x = np.array([[5, 3], [4, 4], [0, 0], [0, 0.0]])
    idx = list("pqrs")
    tab = tly.CommunityTable(pd.DataFrame(x, index=idx, columns=list("xy")),
                             pd.DataFrame({"g": ["a", "a", "b", "b"]}, index=idx),
                             empty="keep")
    with pytest.raises(InputError, match="'b' has a total abundance of 0"):
        tly.taxon_contributions(tab, "g", "a", "b", measure="manhattan")


def test_labels_as_a_sequence_and_inputs_untouched(small_counts):
    before = small_counts.copy()
    k = tly.taxon_contributions(small_counts, ["a", "a", "b", "b"], "a", "b",
                                measure="bray_curtis", n_boot=30, rng=1)
    pd.testing.assert_frame_equal(small_counts, before)
    assert k.group == "group" and k.n == {"a": 2, "b": 2}
    with pytest.raises(DesignError, match="one label per sample"):
        tly.taxon_contributions(small_counts, ["a", "b"], "a", "b")


def test_result_views(mesocosm):
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                n_boot=30, rng=1)
    f = k.to_frame()
    f.iloc[0, 0] = -1.0
    assert k.shape.iloc[0, 0] != -1.0               # to_frame is a copy
    assert list(k.size_frame().columns[:4]) == ["mean_a", "mean_b", "change", "log2_ratio"]
    # the changes of the taxa add up to the change of the total (mean abundance per sample)
    ref = k.size_reference
    assert k.size["change"].sum() == pytest.approx(ref["mean_b"] - ref["mean_a"], rel=1e-12)
    html = k._repr_html_()
    assert "control" in html and "shredder_07" in html and "tallyform-notes" in html
    assert "squared" in str(k)
    assert k.distance == pytest.approx(np.sqrt(k.total))
    with pytest.raises(InputError, match="kind"):
        k.figure("bars")
    assert k.provenance["measure"] == "hellinger" and k.provenance["n_boot"] == 30


# ---------------------------------------------------------------------------- units
def test_units_of_one_sample_each_change_nothing(mesocosm):
    k1 = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                 n_boot=40, rng=3)
    k2 = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                 n_boot=40, rng=3, units=list(mesocosm.sample_labels))
    pd.testing.assert_frame_equal(k1.shape, k2.shape)
    pd.testing.assert_frame_equal(k1.size, k2.size)
    assert k1.noise == pytest.approx(k2.noise, rel=1e-12)


def test_centroid_noise_forms():
    rng = np.random.default_rng(4)
    F = rng.normal(size=(12, 5))
    # one sample per unit: s^2 / n with divisor n - 1 (numpy's var, ddof=1)
    np.testing.assert_allclose(centroid_noise(F, np.arange(12)),
                               F.var(axis=0, ddof=1) / 12, rtol=1e-12)
    # equal units of 3: the variance of the 4 unit means / 4 (common practice for cluster
    # samples of equal size)
    codes = np.repeat(np.arange(4), 3)
    means = np.vstack([F[codes == u].mean(axis=0) for u in range(4)])
    np.testing.assert_allclose(centroid_noise(F, codes), means.var(axis=0, ddof=1) / 4,
                               rtol=1e-12)
    assert np.isnan(centroid_noise(F, np.zeros(12, dtype=int))).all()


def test_unit_bootstrap_matches_resampling_units_directly(mesocosm):
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                measure="bray_curtis", n_boot=6, rng=5, units="tank")
    sub, ia, ib = _sub(mesocosm, "treatment", "control", "nutrient_high")
    tank = mesocosm.samples["tank"].loc[sub.index].to_numpy()
    x = sub.to_numpy()
    rng = np.random.default_rng(5)
    ua, ca = np.unique(tank[ia], return_inverse=True)
    ub, cb = np.unique(tank[ib], return_inverse=True)
    Da = rng.multinomial(len(ua), np.full(len(ua), 1 / len(ua)), size=6)
    Db = rng.multinomial(len(ub), np.full(len(ub), 1 / len(ub)), size=6)
    xa, xb = x[ia], x[ib]
    totals = []
    for da, db in zip(Da, Db):
        ra = np.vstack([xa[ca == u] for u in range(len(ua)) for _ in range(da[u])])
        rb = np.vstack([xb[cb == u] for u in range(len(ub)) for _ in range(db[u])])
        totals.append(cdist(ra, rb, "braycurtis").mean())
    lo, hi = interval(np.array(totals), 0.95)
    assert k.total_ci == pytest.approx((float(lo), float(hi)), rel=1e-12)
    assert any("units of 'tank'" in n for n in k.notes)
    assert any("too narrow" in n for n in k.notes)


def test_one_unit_per_group_has_no_interval(mesocosm):
    block = np.where(mesocosm.group("treatment") == "control", "c", "other")
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                n_boot=20, rng=1, units=block)
    assert k.shape["ci_low"].isna().all() and k.noise is None
    assert any("'control' and 'nutrient_high' each have only one unit" in n for n in k.notes)
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                n_boot=20, rng=1, units=np.where(block == "c", "c",
                                                                 mesocosm.samples["tank"]))
    assert any("group 'control' has only one unit" in n for n in k.notes)
