"""constraint_test: permutation tests of CCA, RDA and db-RDA constraints, checked against
statsmodels and scipy, mathematical identities and simulation (all data synthetic)."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import special, stats
from scipy.spatial.distance import pdist, squareform

import tallyform as tly
from tallyform.core.constrained import cca, db_rda, rda
from tallyform.core.constraint_engine import Rows, f_test
from tallyform.core.constraint_tests import ConstraintTest, constraint_test
from tallyform.core.dissimilarity import Dissimilarity
from tallyform.core.permutation import Permutations, permutation_f_test
from tallyform.errors import Cancelled, DesignError, InputError

sm = pytest.importorskip("statsmodels.api")
smf = pytest.importorskip("statsmodels.formula.api")


@pytest.fixture
def community(rng):
    """24 samples x 12 taxa (synthetic): a factor with an effect, a covariate, a block."""
    n, p = 24, 12
    info = pd.DataFrame({"trt": np.repeat(["a", "b", "c"], 8),
                         "blk": np.tile(["x", "y", "z", "w"], 6),
                         "temp": rng.normal(15, 3, n)},
                        index=[f"s{i:02d}" for i in range(n)])
    base = rng.gamma(1.0, 5.0, size=p) + 0.5
    shift = np.where(info["trt"].to_numpy()[:, None] == "b", np.linspace(0.3, 3, p), 1.0)
    lam = base * shift * np.exp(0.05 * (info["temp"].to_numpy()[:, None] - 15))
    x = rng.poisson(lam * rng.gamma(5, 1 / 5, size=(n, 1))) + 1
    x = pd.DataFrame(x, index=info.index, columns=[f"t{j}" for j in range(p)], dtype=float)
    return x, info


def _one_response(community):
    x, info = community
    y = np.log1p(x[["t3"]])
    return y, info


# ---------------------------------------------------------------------------- references
def test_rda_one_response_one_factor_is_the_anova_f(community):
    y, info = _one_response(community)
    ct = constraint_test(rda(y, info, terms=["trt"]), n_permutations=99, rng=1)
    fit = smf.ols("y ~ C(trt)", data=info.assign(y=y["t3"])).fit()
    assert ct.statistic == pytest.approx(fit.fvalue, rel=1e-10)  # reference: statsmodels OLS
    f = stats.f_oneway(*[y["t3"][info["trt"] == g] for g in "abc"]).statistic
    assert ct.statistic == pytest.approx(f, rel=1e-10)  # reference: scipy f_oneway
    assert ct.table.loc["all terms", "df"] == 2 and ct.table.loc["residual", "df"] == 21
    assert ct.table.loc["all terms", "inertia"] == pytest.approx(fit.ess, rel=1e-10)


def test_sequential_and_marginal_terms_match_statsmodels_anova(community):
    y, info = _one_response(community)
    data = info.assign(y=y["t3"])
    o = rda(y, info, terms=["trt", "temp"])
    seq = constraint_test(o, "each_term", n_permutations=0)
    mar = constraint_test(o, "each_term", n_permutations=0, ss="marginal")
    fit = smf.ols("y ~ C(trt) + temp", data=data).fit()
    a1 = sm.stats.anova_lm(fit, typ=1)     # reference: statsmodels type I
    a2 = sm.stats.anova_lm(fit, typ=2)     # reference: statsmodels type II
    assert list(a1.index[:2]) == ["C(trt)", "temp"]
    for table, ref in ((seq.table, a1), (mar.table, a2)):
        np.testing.assert_allclose(table.loc[["trt", "temp"], "inertia"],
                                   ref.loc[["C(trt)", "temp"], "sum_sq"], rtol=1e-10)
        np.testing.assert_allclose(table.loc[["trt", "temp"], "pseudo_f"],
                                   ref.loc[["C(trt)", "temp"], "F"], rtol=1e-10)
    # identity: sequential inertias add up to the constrained inertia
    assert seq.table.loc[["trt", "temp"], "inertia"].sum() == pytest.approx(
        o.constrained_inertia, rel=1e-12)
    assert np.isnan(seq.table.loc["trt", "pvalue"])      # no permutations asked for


def test_db_rda_of_euclidean_distance_equals_rda(community):
    x, info = community
    y = np.sqrt(x)
    d = Dissimilarity(pdist(y.to_numpy()), x.index, measure="euclidean")   # Gower path
    assert not d.has_features
    for scope in ("all", "each_term", "each_axis"):
        a = constraint_test(db_rda(d, info, ["temp", "trt"]), scope, n_permutations=199,
                            rng=3)
        b = constraint_test(rda(y, info, terms=["temp", "trt"]), scope, n_permutations=199,
                            rng=3)
        # identity (Legendre & Anderson 1999): db-RDA of Euclidean D is RDA of the data;
        # the same permutations give the same p-values
        np.testing.assert_allclose(a.table["pseudo_f"].to_numpy(),
                                   b.table["pseudo_f"].to_numpy(), rtol=1e-8)
        np.testing.assert_allclose(a.table["pvalue"].to_numpy(), b.table["pvalue"].to_numpy())


@pytest.mark.parametrize("method", ["CCA", "RDA", "db-RDA"])
def test_axis_eigenvalues_sum_to_the_constrained_inertia(community, method):
    x, info = community
    if method == "CCA":
        o = cca(x, info, terms=["trt", "temp"])
    elif method == "RDA":
        o = rda(x, info, terms=["trt", "temp"], transform="hellinger")
    else:
        o = db_rda(tly.dissimilarity(x, "hellinger"), info, ["trt", "temp"])
    ct = constraint_test(o, "each_axis", n_permutations=49, rng=2)
    axes = ct.tested
    assert axes == o.constrained_axes
    # the axis statistic is the first eigenvalue of the analysis given the earlier axes,
    # which is the ordination's j-th constrained eigenvalue; together they make up the
    # constrained inertia (identity: trace = sum of eigenvalues)
    np.testing.assert_allclose(ct.table.loc[axes, "inertia"],
                               o.eigenvalues.iloc[:o.n_constrained], rtol=1e-9)
    assert ct.table.loc[axes, "inertia"].sum() == pytest.approx(o.constrained_inertia,
                                                                rel=1e-9)
    resid = ct.table.loc["residual"]
    f1 = (o.eigenvalues.iloc[0] / 1) / (resid["inertia"] / resid["df"])
    assert ct.table.loc[axes[0], "pseudo_f"] == pytest.approx(f1, rel=1e-10)
    assert resid["df"] == 24 - 1 - 3


def test_cca_inertia_is_the_weighted_regression_fit(community):
    x, info = community
    o = cca(x, info, terms=["trt", "temp"])
    ct = constraint_test(o, n_permutations=0)
    X = x.to_numpy()
    N = X.sum()
    r, c = X.sum(1) / N, X.sum(0) / N
    # chi-square residuals of every taxon, regressed on the constraints with row weights r
    design = sm.add_constant(pd.get_dummies(info["trt"], drop_first=True, dtype=float)
                             .assign(temp=info["temp"]).to_numpy())
    ess = ssr = 0.0
    for j in range(X.shape[1]):
        yj = (X[:, j] / (N * r) - c[j]) / np.sqrt(c[j])
        fit = sm.WLS(yj, design, weights=r).fit()       # reference: statsmodels WLS
        ess += fit.ess
        ssr += fit.ssr
    assert ct.table.loc["all terms", "inertia"] == pytest.approx(ess, rel=1e-9)
    assert o.constrained_inertia == pytest.approx(ess, rel=1e-9)
    assert ct.table.loc["residual", "inertia"] == pytest.approx(ssr, rel=1e-9)
    assert ct.statistic == pytest.approx((ess / 3) / (ssr / 20), rel=1e-9)


def test_exact_enumeration_matches_scipy_permutation_test():
    # 2 groups of 4 (70 splits), one response: exact p of the one-way F
    y = np.array([1.1, 2.3, 2.0, 3.1, 3.9, 4.4, 3.0, 5.2])
    info = pd.DataFrame({"g": list("aaaabbbb")}, index=[f"s{i}" for i in range(8)])
    ct = constraint_test(rda(pd.DataFrame({"y": y}, index=info.index), info, terms=["g"]),
                         n_permutations=999, rng=1)

    def fstat(a, b):
        return stats.f_oneway(a, b).statistic
    ref = stats.permutation_test((y[:4], y[4:]), fstat, permutation_type="independent",
                                 alternative="greater", n_resamples=np.inf)
    assert ct.exact and ct.n_permutations == 70
    assert ct.pvalue == pytest.approx(ref.pvalue)     # reference: scipy permutation_test


def test_chance_share_is_the_permutation_mean_of_the_share():
    # identity: over all relabellings, E[R^2] = m / (n - 1) for unit weights
    rng = np.random.default_rng(4)
    info = pd.DataFrame({"g": list("aabbcc")}, index=[f"s{i}" for i in range(6)])
    o = rda(pd.DataFrame(5 + rng.normal(size=(6, 3)), index=info.index), info, terms=["g"])
    from tallyform.core.constraint_shares import permutation_adjusted_share
    adj, chance = permutation_adjusted_share(o.constraint_data, n_permutations=999, rng=1)
    assert chance == pytest.approx(2 / 5, rel=1e-12) == pytest.approx(o.chance_share)
    assert adj == pytest.approx(o.adjusted_r_squared, rel=1e-10)  # Ezekiel (1930)


def test_partial_rda_adjusted_share_is_a_difference_of_ezekiel_values(community):
    y, info = _one_response(community)
    o = rda(y, info, terms=["trt"], conditions=["temp"])
    data = info.assign(y=y["t3"])
    full = smf.ols("y ~ temp + C(trt)", data=data).fit()
    cond = smf.ols("y ~ temp", data=data).fit()
    # Peres-Neto et al. (2006) fraction [a]; reference: statsmodels rsquared_adj
    assert o.adjusted_r_squared == pytest.approx(full.rsquared_adj - cond.rsquared_adj,
                                                 rel=1e-10)
    assert o.r_squared == pytest.approx(full.rsquared - cond.rsquared, rel=1e-10)
    assert o.chance_share == pytest.approx(2 / 22 * (1 - cond.rsquared), rel=1e-12)


# ---------------------------------------------------------------------------- the engine
def test_cca_permutation_is_the_cca_of_relabelled_constraints(community):
    x, info = community
    o = cca(x, info, terms=["trt", "temp"])
    ct = constraint_test(o, n_permutations=15, rng=11)
    # replay the same permutations: the permuted design is the design rows [idx]
    perms = Permutations(24, 15, np.random.default_rng(11))
    idx = next(perms.batches(100))
    for k in range(5):
        relabelled = info.iloc[idx[k]].set_axis(info.index)
        ok = cca(x, relabelled, terms=["trt", "temp"])
        f = (ok.constrained_inertia / 3) / (ok.unconstrained_inertia / 20)
        # the permuted statistic is that of a CCA of the same table (every sample with its
        # counts and its weight) against the relabelled constraints
        assert ct.null_distribution["all terms"][k] == pytest.approx(f, rel=1e-9)


def test_unit_weights_reproduce_the_general_engine(community):
    x, info = community
    y = np.sqrt(x.to_numpy())
    y = y - y.mean(0)
    Xt = pd.get_dummies(info["trt"], drop_first=True, dtype=float).to_numpy()
    Xz = info[["temp"]].to_numpy()
    perms = Permutations(24, 99, np.random.default_rng(5), design=np.hstack([Xz, Xt]))
    ref = permutation_f_test(y, Xt, Xz, permutations=perms)
    rows = Rows(24, y, None, None, {})
    ours = f_test(rows, Xz, Xt, None, perms)
    # reference: the package's permutation engine (Freedman & Lane residuals)
    assert ours.statistic == pytest.approx(ref.statistic, rel=1e-10)
    np.testing.assert_allclose(ours.null, ref.null_distribution, rtol=1e-9)
    # equal weights take the re-weighting path and must give the same answer
    w = np.full(24, 1 / 24)
    weighted = f_test(Rows(24, y * np.sqrt(w)[:, None], None, w, {}), Xz, Xt, None, perms)
    np.testing.assert_allclose(weighted.null, ref.null_distribution, rtol=1e-8)


# ---------------------------------------------------------------------------- units
def _tanks(rng, sizes):
    code = np.repeat(np.arange(len(sizes)), sizes)
    n = code.size
    info = pd.DataFrame({"treatment": np.where(code < len(sizes) // 2, "c", "w"),
                         "tank": [f"T{c}" for c in code],
                         "week": np.concatenate([np.arange(s) for s in sizes]).astype(str)},
                        index=[f"s{i:02d}" for i in range(n)])
    y = 10.0 + rng.normal(size=len(sizes))[code] + rng.normal(size=n)   # shifted: counts are >= 0
    return info, pd.DataFrame({"y": y}, index=info.index)


def test_between_unit_term_is_the_anova_of_unit_means(rng):
    info, y = _tanks(rng, [3] * 6)
    ct = constraint_test(rda(y, info, terms=["treatment"]), units="tank", n_permutations=999,
                         rng=1)
    means = y.groupby(info["tank"]).mean().join(info.groupby("tank")["treatment"].first())
    fit = smf.ols("y ~ treatment", data=means).fit()      # reference: statsmodels OLS
    assert ct.statistic == pytest.approx(fit.fvalue, rel=1e-10)
    # 6 tanks in two groups of 3: 20 distinct relabellings of whole tanks
    assert ct.exact and ct.n_permutations == 20
    assert ct.table.loc["residual", "df"] == 4
    assert "between 'tank'" in ct.table.loc["all terms", "stratum"]


def test_ten_tanks_db_rda_enumerates_every_split_of_the_tanks(rng):
    # 10 tanks x 3 visits, treatment on 5 + 5 tanks, db-RDA of Bray-Curtis (Gower path):
    # C(10, 5) = 252 relabellings of whole tanks (scipy.special.comb); swapping the two
    # labels gives the same F, so every value comes twice and the smallest p is 2 / 252
    info, _ = _tanks(rng, [3] * 10)
    x = pd.DataFrame(rng.poisson(rng.gamma(2.0, 5.0, size=(10, 8))[np.repeat(range(10), 3)]
                                 ) + 1.0, index=info.index)
    d = tly.dissimilarity(x, "bray_curtis")
    assert not d.has_features
    ct = constraint_test(db_rda(d, info, ["treatment"]), units="tank", n_permutations=999,
                         rng=1)
    assert ct.exact and ct.n_permutations == int(special.comb(10, 5, exact=True))
    null = ct.null_distribution["all terms"]
    assert len(np.unique(np.round(null, 10))) == 126
    assert ct.pvalue >= 2 / 252 and ct.table.loc["residual", "df"] == 8
    # the statistic is on tank means: pseudo-F of the Gower matrix of the tank means
    # (McArdle & Anderson 2001 trace form), from scipy's Bray-Curtis, written out here
    d2 = squareform(pdist(x.to_numpy(), "braycurtis")) ** 2
    c = np.eye(30) - 1 / 30
    A = np.kron(np.eye(10), np.ones((3, 1))) / 3              # samples -> tank means
    gu = A.T @ (-0.5 * c @ d2 @ c) @ A
    t = np.r_[np.zeros(5), np.ones(5)] - 0.5
    h = np.outer(t, t) / (t @ t)
    f = np.trace(h @ gu) / ((np.trace(gu) - np.trace(h @ gu)) / 8)
    assert ct.statistic == pytest.approx(f, rel=1e-9)


def test_unbalanced_units_are_weighted_by_their_samples(rng):
    info, y = _tanks(rng, [2, 3, 4, 2, 5, 3])
    ct = constraint_test(rda(y, info, terms=["treatment"]), units="tank", n_permutations=99,
                         rng=1)
    means = y.groupby(info["tank"]).mean().join(info.groupby("tank")["treatment"].first())
    size = info.groupby("tank").size()
    fit = smf.wls("y ~ treatment", data=means, weights=size.loc[means.index]).fit()
    assert ct.statistic == pytest.approx(fit.fvalue, rel=1e-10)   # reference: statsmodels WLS
    # the fitted inertia is the sample-level one (the term is constant within tanks)
    o = rda(y, info, terms=["treatment"])
    assert ct.table.loc["all terms", "inertia"] == pytest.approx(o.constrained_inertia)


def test_within_unit_term_is_tested_against_the_within_residual(rng):
    info, y = _tanks(rng, [4] * 6)
    o = rda(y, info, terms=["treatment", "week"])
    ct = constraint_test(o, "each_term", units="tank", n_permutations=99, rng=1)
    fit = smf.ols("y ~ C(tank) + C(week)", data=info.assign(y=y["y"])).fit()
    ref = sm.stats.anova_lm(fit, typ=1)            # reference: statsmodels split-plot strata
    assert ct.table.loc["week", "pseudo_f"] == pytest.approx(ref.loc["C(week)", "F"],
                                                             rel=1e-10)
    assert ct.table.loc["week", "stratum"] == "within 'tank'"
    assert {"residual (between 'tank')", "residual (within 'tank')"} <= set(ct.table.index)
    with pytest.raises(DesignError, match="different strata"):
        constraint_test(o, "all", units="tank")


def test_units_are_detected_and_said(rng):
    info, y = _tanks(rng, [3] * 6)
    ct = constraint_test(rda(y, info, terms=["treatment"]), n_permutations=19, rng=1)
    assert ct.units["units"] == ["tank"]
    assert any("Sampling units detected" in n for n in ct.notes)
    free = constraint_test(rda(y, info, terms=["treatment"]), n_permutations=19, rng=1,
                           units=False)
    assert "stratum" not in free.table.columns


def test_blocks_restrict_the_permutations(community):
    x, info = community
    o = rda(x, info, terms=["temp"], transform="hellinger")
    ct = constraint_test(o, n_permutations=99, rng=1, blocks="blk", units=False)
    assert "within blocks of 'blk'" in ct.scheme
    with pytest.raises(DesignError, match="'nope'"):
        constraint_test(o, blocks="nope", units=False)


# ---------------------------------------------------------------------------- the null
def test_adjusted_share_is_zero_on_average_under_the_null():
    # simulation (synthetic, 3-level noise factor, n = 12): the adjusted share averages 0,
    # the raw share its chance level 2 / 11
    rng = np.random.default_rng(20)
    info = pd.DataFrame({"g": list("abc") * 4}, index=[f"s{i}" for i in range(12)])
    raw, adj_rda, adj_cca = [], [], []
    for i in range(60):
        x = pd.DataFrame(rng.poisson(rng.gamma(2.0, 4.0, size=(1, 8)) *
                                     rng.gamma(4.0, 0.25, size=(12, 8))) + 1.0,
                         index=info.index)
        o = rda(x, info, terms=["g"], transform="hellinger")
        raw.append(o.r_squared)
        adj_rda.append(o.adjusted_r_squared)
        adj_cca.append(cca(x, info, terms=["g"]).adjusted_share(n_permutations=99, rng=i))
    for values in (adj_rda, adj_cca):
        se = np.std(values, ddof=1) / np.sqrt(len(values))
        assert abs(np.mean(values)) < 3 * se + 0.01
    assert abs(np.mean(raw) - 2 / 11) < 3 * np.std(raw, ddof=1) / np.sqrt(60) + 0.01


# ---------------------------------------------------------------------------- the result
def test_with_test_shows_the_overall_p_and_keeps_the_original(community):
    x, info = community
    o = cca(x, info, terms=["trt"])
    ct = constraint_test(o, n_permutations=99, rng=1)
    shown = ct.ordination
    assert o.constraint_test is None and o.adjusted_r_squared is None
    assert shown.constraint_test is ct and shown.adjusted_r_squared == ct.adjusted_share
    assert f"overall p = {ct.pvalue:.3g}" in repr(shown)
    assert "chance level" in shown._repr_html_()
    assert any(n.startswith("Constraint test:") for n in shown.notes)
    other = constraint_test(cca(x, info, terms=["temp"]), n_permutations=9, rng=1)
    with pytest.raises(InputError, match="another ordination"):
        o.with_test(other)


def test_adjusted_share_is_cached_and_reproducible(community):
    x, info = community
    o = cca(x, info, terms=["trt"])
    a = o.adjusted_share(n_permutations=99, rng=3)
    assert o.adjusted_share(n_permutations=99, rng=3) == a
    assert cca(x, info, terms=["trt"]).adjusted_share(n_permutations=99, rng=3) == a
    r = rda(x, info, terms=["trt"])
    assert r.adjusted_share() == r.adjusted_r_squared


def test_same_seed_same_answer_and_callbacks(community):
    x, info = community
    o = rda(x, info, terms=["trt", "temp"], transform="hellinger")
    seen = []
    a = constraint_test(o, "each_term", n_permutations=99, rng=7,
                        progress=lambda d, t: seen.append((d, t)))
    b = constraint_test(o, "each_term", n_permutations=99, rng=np.random.default_rng(7))
    pd.testing.assert_frame_equal(a.table, b.table)
    assert seen[-1] == (198, 198)
    with pytest.raises(Cancelled):
        constraint_test(o, n_permutations=99, rng=1, cancel=lambda: True)
    seen.clear()                  # CCA: the adjusted share's permutations are counted too
    constraint_test(cca(x, info, terms=["trt"], conditions=["temp"]), n_permutations=49,
                    rng=1, progress=lambda d, t: seen.append((d, t)))
    assert seen[-1] == (3 * 49, 3 * 49)
    assert all(a[0] <= b[0] for a, b in zip(seen, seen[1:]))


def test_bad_input_is_named(community):
    x, info = community
    with pytest.raises(InputError, match="no constraints to test"):
        constraint_test(tly.pcoa(tly.dissimilarity(x, "hellinger")))
    with pytest.raises(InputError, match="must be an Ordination"):
        constraint_test(x)
    o = rda(x, info, terms=["trt"])
    with pytest.raises(InputError, match="`scope` must be one of"):
        constraint_test(o, "axes")
    with pytest.raises(InputError, match="`n_permutations`"):
        constraint_test(o, n_permutations=-1)


def test_inputs_are_not_modified(community):
    x, info = community
    xs, infos = x.copy(), info.copy()
    o = cca(x, info, terms=["trt"], conditions=["temp"])
    constraint_test(o, "each_axis", n_permutations=19, rng=1, units=False)
    pd.testing.assert_frame_equal(x, xs)
    pd.testing.assert_frame_equal(info, infos)


def test_partial_table_and_reading(community):
    x, info = community
    o = rda(x, info, terms=["trt"], conditions=["temp"], transform="hellinger")
    ct = constraint_test(o, n_permutations=199, rng=1)
    assert list(ct.table.index) == ["conditions", "all terms", "residual", "total"]
    assert ct.table.loc["conditions", "inertia"] == pytest.approx(o.conditioned_inertia)
    assert ct.table["inertia"].iloc[:3].sum() == pytest.approx(o.total_inertia)
    assert "Freedman & Lane" in ct.scheme
    assert ct.pvalue <= 0.05 and "more than chance" in ct.reading
    assert isinstance(ct, ConstraintTest) and ct.to_frame() is not ct.table


def test_result_says_when_totals_go_with_the_constraints(community):
    x, info = community
    heavy = x.mul(np.where(info["trt"] == "a", 8.0, 1.0), axis=0)
    ct = constraint_test(cca(heavy, info, terms=["trt"]), n_permutations=19, rng=1)
    assert any("Sample totals differ with the constraints" in n for n in ct.notes)
    plain = constraint_test(cca(x, info, terms=["temp"]), n_permutations=19, rng=1)
    assert not any("Sample totals differ" in n for n in plain.notes)
    hel = constraint_test(rda(heavy, info, terms=["trt"], transform="hellinger"),
                          n_permutations=19, rng=1)
    assert any("hellinger transform is not linear" in n for n in hel.notes)
    # profiles keep the counting noise, which shrinks with the total (binomial variance
    # q(1 - q) / N: common practice), so the note stays, and says what to do instead
    prof = constraint_test(rda(heavy, info, terms=["trt"], transform="profile"),
                           n_permutations=19, rng=1)
    note = [n for n in prof.notes if "Sample totals differ" in n]
    assert len(note) == 1 and "counting noise" in note[0] and "rarefied_table" in note[0]
    # one rarefaction to a common depth: equal totals, nothing left to say
    rare = tly.rarefied_table(tly.CommunityTable(heavy, info), rng=1)
    assert set(rare.totals) == {heavy.sum(axis=1).min()}
    for o in (rda(rare, terms=["trt"], transform="profile"), cca(rare, terms=["trt"])):
        assert not any("Sample totals differ" in n
                       for n in constraint_test(o, n_permutations=19, rng=1).notes)


def test_db_rda_says_when_totals_go_with_the_constraints_if_it_has_the_table(community):
    x, info = community
    heavy = tly.CommunityTable(x.mul(np.where(info["trt"] == "a", 8.0, 1.0), axis=0), info)
    d = tly.dissimilarity(heavy, "bray_curtis", transform="profile")
    said = constraint_test(db_rda(d, heavy, ["trt"]), n_permutations=19, rng=1)
    note = [n for n in said.notes if "Sample totals differ" in n]
    assert len(note) == 1 and "rarefied_table" in note[0]
    # a sample table without counts: the dissimilarity keeps no totals, nothing is said
    quiet = constraint_test(db_rda(d, info, ["trt"]), n_permutations=19, rng=1)
    assert not any("Sample totals differ" in n for n in quiet.notes)
    # the same statistic either way: the note is the only difference
    assert said.statistic == pytest.approx(quiet.statistic, rel=1e-12)


def test_nested_units_test_a_plot_term_within_sites(rng):
    # 4 sites x 4 plots x 2 visits; treatment applied to plots (2 per site), site and plot
    # effects, no treatment effect (synthetic)
    site = np.repeat(np.arange(4), 8)
    plot = np.repeat(np.arange(16), 2)
    info = pd.DataFrame({"site": [f"S{s}" for s in site], "plot": [f"p{p % 4}" for p in plot],
                         "treatment": np.where(plot % 2 == 0, "c", "w")},
                        index=[f"s{i:02d}" for i in range(32)])
    y = 10 + rng.normal(size=4)[site] + rng.normal(size=16)[plot] + rng.normal(size=32)
    y = pd.DataFrame({"y": y}, index=info.index)
    ct = constraint_test(rda(y, info, terms=["treatment"]), units=["site", "plot"],
                         n_permutations=99, rng=1)
    plots = (y.assign(site=info["site"], plot=info["site"] + info["plot"],
                      treatment=info["treatment"]).groupby("plot")
             .agg({"y": "mean", "site": "first", "treatment": "first"}))
    ref = sm.stats.anova_lm(smf.ols("y ~ C(site) + treatment", data=plots).fit(), typ=1)
    # reference: statsmodels, plot means with sites as blocks (the plot stratum)
    assert ct.statistic == pytest.approx(ref.loc["treatment", "F"], rel=1e-10)
    assert ct.table.loc["all terms", "stratum"] == "between 'plot'"
    assert "within each 'site'" in ct.scheme
