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
from tallyform.core.taxon_terms import centroid_noise, jackknife_interval
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
                                measure=measure, intervals=False)
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
                                measure=measure, intervals=False)
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
                                measure="chi_square", intervals=False)
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
                                measure="euclidean", transform="profile", intervals=False)
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
                                measure="aitchison", intervals=False)
    sub, ia, ib = _sub(mesocosm, "treatment", "control", "nutrient_high")
    z = Clr().replace_zeros(sub.to_numpy())
    gm = np.vstack([np.exp(np.log(z[ia]).mean(axis=0)), np.exp(np.log(z[ib]).mean(axis=0))])
    d = tly.dissimilarity(gm, "aitchison", zeros="error")
    assert k.total == pytest.approx(float(d.condensed[0]) ** 2, rel=1e-10)


def test_hellinger_centroid_is_not_the_mean_profile_feature(mesocosm):
    # the note-worthy difference: sqrt of the mean profile is not the mean sqrt profile
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high", intervals=False)
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
                                measure=measure, intervals=False)
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
    k = tly.taxon_contributions(tab, "g", "a", "b", measure="bray_curtis", intervals=False)
    assert k.total == pytest.approx(13 / 33, rel=1e-12)
    assert k.shape.loc[["x", "y", "z"], "term"].tolist() == pytest.approx(
        [4 / 33, 7 / 33, 2 / 33], rel=1e-12)
    assert k.shape.loc["y", "higher_in"] == "a"


def _leave_one_out_interval(theta, ja, jb, level=0.95):
    """Textbook two-group jackknife-t (Efron & Tibshirani 1993, ch. 11; Welch df), typed
    out with plain loops as the reference for the vectorised form."""
    va = (len(ja) - 1) / len(ja) * sum((v - np.mean(ja)) ** 2 for v in ja)
    vb = (len(jb) - 1) / len(jb) * sum((v - np.mean(jb)) ** 2 for v in jb)
    df = (va + vb) ** 2 / (va ** 2 / (len(ja) - 1) + vb ** 2 / (len(jb) - 1))
    t = stats.t.ppf(0.5 + level / 2, df)
    return theta - t * np.sqrt(va + vb), theta + t * np.sqrt(va + vb)


def test_jackknife_of_average_matches_direct_leave_one_out(mesocosm):
    # leave each sample out, recompute the mean between-group Bray-Curtis with scipy's cdist
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                measure="bray_curtis")
    sub, ia, ib = _sub(mesocosm, "treatment", "control", "nutrient_high")
    x = sub.to_numpy()
    xa, xb = x[ia], x[ib]
    ja = [cdist(np.delete(xa, i, axis=0), xb, "braycurtis").mean() for i in range(len(xa))]
    jb = [cdist(xa, np.delete(xb, i, axis=0), "braycurtis").mean() for i in range(len(xb))]
    lo, hi = _leave_one_out_interval(cdist(xa, xb, "braycurtis").mean(), ja, jb)
    assert k.total_ci == pytest.approx((lo, hi), rel=1e-10)
    assert k.total_corrected == k.total and k.interval_method == "jackknife-t"


# ---------------------------------------------------------------------------- which taxa
@pytest.mark.parametrize("measure", ["hellinger", "chi_square", "aitchison", "bray_curtis"])
def test_changed_taxa_come_first(shape_table, measure):
    k = tly.taxon_contributions(shape_table, "g", "a", "b", measure=measure, intervals=False)
    assert set(k.shape.index[:3]) == {"t01", "t02", "t03"}
    assert k.shape.loc["t01", "higher_in"] == "b"
    assert k.shape.loc["t03", "higher_in"] == "a"


def test_shape_change_is_well_above_noise(shape_table):
    k = tly.taxon_contributions(shape_table, "g", "a", "b")
    assert k.total > 10 * k.noise
    assert not any("mostly describe noise" in n for n in k.notes)
    top = k.shape.iloc[:3]
    assert (top["ci_low"] > top["noise_pct"]).all()


def test_pure_size_change(size_table):
    k = tly.taxon_contributions(size_table, "g", "a", "b")
    # shape: the centroid distance is at the level expected from sampling noise alone
    assert k.total < 2 * k.noise
    assert any("mostly describe noise" in n for n in k.notes)
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
    k = tly.taxon_contributions(tab, "g", "a", "b")
    assert k.total == pytest.approx(0.0, abs=1e-28)
    np.testing.assert_allclose(k.size["log2_ratio"], np.log2(3), rtol=0, atol=1e-12)
    assert k.size_reference["log2_ratio"] == pytest.approx(np.log2(3), abs=1e-12)
    np.testing.assert_allclose(k.size["departure"], 0.0, atol=1e-12)


def test_pseudocount_pulls_towards_the_total_never_away(mesocosm):
    # the ratio with the pseudocount is a mediant of the raw ratio and the total's ratio
    raw = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high", intervals=False, pseudocount=0)
    sm = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high", intervals=False, pseudocount=0.5)
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
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high", intervals=False, pseudocount=0)
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
    k = tly.taxon_contributions(tab, "habitat", "woodland", "arable", intervals=False,
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
def test_jackknife_interval_of_a_mean_difference_is_welchs():
    # identity: for a difference of two means the delete-one jackknife variance is
    # s_a^2/n_a + s_b^2/n_b, so the jackknife-t interval with Welch-Satterthwaite df is
    # Welch's interval (outside reference: scipy.stats.ttest_ind(equal_var=False))
    rng = np.random.default_rng(0)
    ya, yb = rng.normal(0, 1, 7), rng.normal(1, 3, 11)
    ja = np.array([[np.mean(yb) - np.mean(np.delete(ya, i))] for i in range(7)])
    jb = np.array([[np.mean(np.delete(yb, i)) - np.mean(ya)] for i in range(11)])
    lo, hi, se, df = jackknife_interval(np.array([yb.mean() - ya.mean()]), ja, jb, 0.9)
    ref = stats.ttest_ind(yb, ya, equal_var=False).confidence_interval(0.9)
    assert (float(lo[0]), float(hi[0])) == pytest.approx((ref.low, ref.high), rel=1e-10)


def test_exact_split_intervals_match_direct_leave_one_out(shape_table):
    # the vectorised leave-one-out updates against recomputing the noise-corrected terms
    # on each reduced group (features from tly.feature_matrix)
    k = tly.taxon_contributions(shape_table, "g", "a", "b")
    sub, ia, ib = _sub(shape_table, "g", "a", "b")
    F = tly.feature_matrix(sub, "hellinger")
    Fa, Fb = F[ia], F[ib]

    def net(fa, fb):
        d = fb.mean(axis=0) - fa.mean(axis=0)
        return d * d - fa.var(axis=0, ddof=1) / len(fa) - fb.var(axis=0, ddof=1) / len(fb)

    full = net(Fa, Fb)
    ja = np.array([net(np.delete(Fa, i, axis=0), Fb) for i in range(len(Fa))])
    jb = np.array([net(Fa, np.delete(Fb, i, axis=0)) for i in range(len(Fb))])
    lo, hi = _leave_one_out_interval(full.sum(), ja.sum(axis=1), jb.sum(axis=1))
    assert k.total_corrected == pytest.approx(full.sum(), rel=1e-10)
    assert k.total_ci == pytest.approx((max(lo, 0), hi), rel=1e-9)
    j = list(sub.columns).index("t01")
    share = 100 * full[j] / full.sum()
    slo, shi = _leave_one_out_interval(share, 100 * ja[:, j] / ja.sum(axis=1),
                                       100 * jb[:, j] / jb.sum(axis=1))
    assert k.shape.loc["t01", "share_net_pct"] == pytest.approx(share, rel=1e-10)
    assert (k.shape.loc["t01", "ci_low"], k.shape.loc["t01", "ci_high"]) == pytest.approx(
        (max(slo, 0), min(shi, 100)), rel=1e-9)
    # size side: log2 ratio of group sums (pseudocount scaled by the full-data mean total)
    x = sub.to_numpy()
    t = list(sub.columns).index("t05")
    xt = x[:, t] + 0.5 * x.sum(axis=1) / x.sum(axis=1).mean()
    lr = np.log2(xt[ib].mean() / xt[ia].mean())
    ja = [np.log2(xt[ib].mean() / np.delete(xt[ia], i).mean()) for i in range(ia.sum())]
    jb = [np.log2(np.delete(xt[ib], i).mean() / xt[ia].mean()) for i in range(ib.sum())]
    rlo, rhi = _leave_one_out_interval(lr, ja, jb)
    assert (k.size.loc["t05", "ci_low"], k.size.loc["t05", "ci_high"]) == pytest.approx(
        (rlo, rhi), rel=1e-9)


def test_corrected_total_is_the_two_sample_u_statistic():
    # identity (Chen & Qin 2010): ||xbar_b - xbar_a||^2 - s2_a/n_a - s2_b/n_b equals the
    # average over distinct pairs i != i' of a and k != k' of b of (x_bk - x_ai).(x_bk' -
    # x_ai'), an unbiased estimate of ||mu_b - mu_a||^2; checked with Euclidean features
    rng = np.random.default_rng(3)
    x = rng.poisson(rng.uniform(1, 20, 6), size=(9, 6)).astype(float) + 1
    idx = [f"s{i}" for i in range(9)]
    tab = tly.CommunityTable(pd.DataFrame(x, index=idx),
                             pd.DataFrame({"g": ["a"] * 4 + ["b"] * 5}, index=idx))
    k = tly.taxon_contributions(tab, "g", "a", "b", measure="euclidean")
    A, B = x[:4], x[4:]
    vals = [(B[k1] - A[i1]) @ (B[k2] - A[i2]) for i1 in range(4) for i2 in range(4)
            for k1 in range(5) for k2 in range(5) if i1 != i2 and k1 != k2]
    assert k.total_corrected == pytest.approx(np.mean(vals), rel=1e-10)
    assert k.total - k.noise == pytest.approx(k.total_corrected, rel=1e-12)


def test_jackknife_variance_of_corrected_total_is_conservative_at_no_difference():
    # Synthetic Poisson counts, the same rates in both groups (D^2 = 0), Euclidean features.
    # Outside reference (Chen & Qin 2010, variance of their statistic under H0):
    #   Var(U) = 2 tr(S^2) [1/(n_a(n_a-1)) + 1/(n_b(n_b-1)) + 2/(n_a n_b)], S = diag(rates).
    # The jackknife variance is biased upwards (Efron & Stein 1981); for this quadratic
    # statistic its expectation is tr(S^2) [4/(n_a(n_a-2)) + 4/(n_b(n_b-2)) + 8/(n_a n_b)]
    # (Hoeffding decomposition of U, derived by hand), 2.2 times Var(U) here: the reason the
    # interval for D^2 = 0 covers about 99 % (benchmarks/calibration_cells/contributions.py).
    from tallyform.core.taxon_terms import Groups, Ticker, split_terms
    rng = np.random.default_rng(41)
    na, nb, p, reps = 8, 10, 20, 400
    lam = rng.uniform(2.0, 30.0, p)
    tr2 = float(np.sum(lam ** 2))
    g = Groups(ia=np.arange(na), ib=np.arange(na, na + nb), codes_a=np.arange(na),
               codes_b=np.arange(nb))
    idx = [f"s{i}" for i in range(na + nb)]
    u, v = [], []
    for _ in range(reps):
        x = rng.poisson(lam, size=(na + nb, p)).astype(float)
        sub = tly.CommunityTable(pd.DataFrame(x, index=idx), empty="keep")
        st = split_terms(sub, g, "euclidean", None, {}, jackknife=True,
                         ticker=Ticker(1, None, None))
        _, _, se, _ = jackknife_interval(st.net.sum(), st.jack_a.sum(axis=1),
                                         st.jack_b.sum(axis=1), 0.95)
        u.append(st.net.sum())
        v.append(float(se) ** 2)
    var_u = 2 * tr2 * (1 / (na * (na - 1)) + 1 / (nb * (nb - 1)) + 2 / (na * nb))
    e_vj = tr2 * (4 / (na * (na - 2)) + 4 / (nb * (nb - 2)) + 8 / (na * nb))
    assert abs(np.mean(u)) < 4 * np.sqrt(var_u / reps)          # unbiased for D^2 = 0
    assert np.var(u, ddof=1) == pytest.approx(var_u, rel=0.25)   # sd of a variance: ~7 %
    assert np.mean(v) == pytest.approx(e_vj, rel=0.1)
    assert np.mean(v) > 1.8 * var_u


def test_intervals_use_no_random_numbers(mesocosm):
    k1 = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_low", rng=7)
    k2 = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_low", rng=8)
    pd.testing.assert_frame_equal(k1.shape, k2.shape)
    pd.testing.assert_frame_equal(k1.size, k2.size)
    k3 = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_low", n_boot=0)
    assert k3.shape["ci_low"].isna().all() and k3.interval_method == "none"
    k4 = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_low", n_boot=99)
    assert any("n_boot is no longer used" in n for n in k4.notes)
    pd.testing.assert_frame_equal(k1.shape, k4.shape)


def test_progress_and_cancel(mesocosm):
    seen = []
    tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                            progress=lambda d, t: seen.append((d, t)))
    assert seen and seen[-1] == (2, 2)
    with pytest.raises(Cancelled):
        tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high", cancel=lambda: True)


# ---------------------------------------------------------------------------- the demo
def test_mesocosm_low_nutrients_is_a_size_change(mesocosm):
    low = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_low")
    high = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high")
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
                                 measure="chi_square", intervals=False)
    two = mesocosm.subset(lambda s: s.treatment != "nutrient_low")
    k2 = tly.taxon_contributions(two, "treatment", "control", "nutrient_high",
                                 measure="chi_square", intervals=False)
    assert k1.total == pytest.approx(k2.total, rel=1e-12)
    # whole-table masses may be passed; their length is that of the full table
    v = mesocosm.values
    k3 = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                 measure="chi_square", intervals=False,
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
    for kw in ({"n_boot": -1}, {"n_boot": 2.5}, {"intervals": "yes"}, {"level": 1.5}, {"pseudocount": -1}):
        with pytest.raises(InputError):
            tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_low", **kw)


def test_group_with_one_sample_has_no_interval():
    x = np.array([[5, 3, 0, 2], [4, 4, 1, 1], [6, 2, 0, 3], [1, 9, 2, 0.0]])
    idx = ["p", "q", "r", "s"]
    tab = tly.CommunityTable(pd.DataFrame(x, index=idx, columns=list("wxyz")),
                             pd.DataFrame({"g": ["a", "a", "a", "b"]}, index=idx))
    k = tly.taxon_contributions(tab, "g", "a", "b")
    assert k.shape[["ci_low", "ci_high"]].isna().all().all()
    assert k.size[["ci_low", "ci_high"]].isna().all().all()
    assert k.size["differs_from_total"].isna().all()
    assert np.isnan(k.total_ci[0]) and k.noise is None and k.interval_method == "none"
    assert any("'b' has fewer than 3 samples" in n and "no intervals" in n for n in k.notes)
    assert np.isfinite(k.shape["share_pct"]).all()
    assert np.isfinite(k.size["log2_ratio"]).all()


def test_taxon_absent_from_both_groups_is_excluded(mesocosm):
    counts = mesocosm.counts
    g = mesocosm.group("treatment")
    counts["ghost"] = np.where(g == "nutrient_low", 3.0, 0.0)   # only in the third group
    tab = tly.CommunityTable(counts, mesocosm.samples)
    k = tly.taxon_contributions(tab, "treatment", "control", "nutrient_high",
                                measure="chi_square")
    assert k.excluded == ("ghost",)
    assert "ghost" not in k.shape.index and "ghost" not in k.size.index
    assert any("ghost" in n and "left out" in n for n in k.notes)
    assert not k.shape.drop(columns=["ci_low", "ci_high"]).isna().any().any()


def test_taxon_in_one_group_only_without_pseudocount():
    x = np.array([[5, 3, 2], [4, 4, 1], [6, 2, 3], [1, 9, 0], [2, 7, 0.0], [1, 8, 0]])
    idx = list("pqrstu")
    tab = tly.CommunityTable(pd.DataFrame(x, index=idx, columns=list("xyz")),
                             pd.DataFrame({"g": ["a"] * 3 + ["b"] * 3}, index=idx))
    k = tly.taxon_contributions(tab, "g", "a", "b", pseudocount=0)
    assert k.size.loc["z", "log2_ratio"] == -np.inf
    assert k.size.loc["z", "only_in"] == "a"
    # an infinite estimate has no interval; the finite ones do
    assert k.size.loc["z", ["ci_low", "ci_high"]].isna().all()
    assert pd.isna(k.size.loc["z", "differs_from_total"])
    assert not k.size.loc[["x", "y"], ["log2_ratio", "ci_low", "ci_high"]].isna().any().any()
    assert any("infinite log2 ratio (and no interval)" in n for n in k.notes)
    k2 = tly.taxon_contributions(tab, "g", "a", "b")
    assert np.isfinite(k2.size["log2_ratio"]).all()
    assert np.isfinite(k2.size[["ci_low", "ci_high"]]).all().all()


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
                                measure="bray_curtis")
    pd.testing.assert_frame_equal(small_counts, before)
    assert k.group == "group" and k.n == {"a": 2, "b": 2}
    with pytest.raises(DesignError, match="one label per sample"):
        tly.taxon_contributions(small_counts, ["a", "b"], "a", "b")


def test_result_views(mesocosm):
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high")
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
    assert k.provenance["measure"] == "hellinger" and k.provenance["intervals"] == "jackknife-t"


# ---------------------------------------------------------------------------- units
def test_units_of_one_sample_each_change_nothing(mesocosm):
    k1 = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high")
    k2 = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high", units=list(mesocosm.sample_labels))
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


def test_unit_jackknife_matches_leaving_units_out_directly(mesocosm):
    sub, ia, ib = _sub(mesocosm, "treatment", "control", "nutrient_high")
    tank = mesocosm.samples["tank"].loc[sub.index].to_numpy()
    x = sub.to_numpy()
    xa, xb, ta, tb = x[ia], x[ib], tank[ia], tank[ib]
    # average over pairs: leave each tank out, recompute with scipy's cdist
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                measure="bray_curtis", units="tank")
    ja = [cdist(xa[ta != u], xb, "braycurtis").mean() for u in np.unique(ta)]
    jb = [cdist(xa, xb[tb != u], "braycurtis").mean() for u in np.unique(tb)]
    lo, hi = _leave_one_out_interval(cdist(xa, xb, "braycurtis").mean(), ja, jb)
    assert k.total_ci == pytest.approx((lo, hi), rel=1e-10)
    assert any("units of 'tank'" in n for n in k.notes)
    # exact split: the noise of each reduced group from its remaining tanks
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high",
                                units="tank")
    F = tly.feature_matrix(sub, "hellinger")
    Fa, Fb = F[ia], F[ib]

    def net(fa, ca, fb, cb):
        d = fb.mean(axis=0) - fa.mean(axis=0)
        codes_a = np.unique(ca, return_inverse=True)[1]
        codes_b = np.unique(cb, return_inverse=True)[1]
        return float(np.sum(d * d - centroid_noise(fa, codes_a) - centroid_noise(fb, codes_b)))

    full = net(Fa, ta, Fb, tb)
    ja = [net(Fa[ta != u], ta[ta != u], Fb, tb) for u in np.unique(ta)]
    jb = [net(Fa, ta, Fb[tb != u], tb[tb != u]) for u in np.unique(tb)]
    lo, hi = _leave_one_out_interval(full, ja, jb)
    assert k.total_corrected == pytest.approx(full, rel=1e-10)
    assert k.total_ci == pytest.approx((max(lo, 0.0), hi), rel=1e-9)


def test_one_unit_per_group_has_no_interval(mesocosm):
    block = np.where(mesocosm.group("treatment") == "control", "c", "other")
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high", units=block)
    assert k.shape["ci_low"].isna().all() and k.noise is None
    assert any("'control' and 'nutrient_high' each have fewer than 3 units" in n
               for n in k.notes)
    k = tly.taxon_contributions(mesocosm, "treatment", "control", "nutrient_high", units=np.where(block == "c", "c",
                                                                 mesocosm.samples["tank"]))
    assert any("group 'control' has fewer than 3 units" in n for n in k.notes)
