"""CA, CCA, RDA (PCA) and db-RDA: published tables, reference libraries, identities."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.spatial.distance import pdist
from scipy.stats import chi2_contingency

from tallyform.core.constrained import (ca, cca, constraint_bases, db_rda, rda, split_features,
                                        split_gower)
from tallyform.core.dissimilarity import Dissimilarity
from tallyform.core.table import CommunityTable
from tallyform.errors import DesignError, InputError

# Snee (1974), hair x eye colour of 592 students (typed from memory; the published
# Pearson chi-square 138.29 on 9 df is the check).
SNEE = pd.DataFrame([[68, 20, 15, 5], [119, 84, 54, 29], [26, 17, 14, 14], [7, 94, 10, 16]],
                    index=["black", "brown", "red", "blond"],
                    columns=["eye_brown", "eye_blue", "eye_hazel", "eye_green"], dtype=float)

# Fisher (1940), eye x hair colour of 5387 Caithness children (typed from memory; the
# published canonical correlations 0.4464, 0.1735, 0.0293 are the check).
FISHER = pd.DataFrame([[326, 38, 241, 110, 3], [688, 116, 584, 188, 4],
                       [343, 84, 909, 412, 26], [98, 48, 403, 681, 85]],
                      index=["blue", "light", "medium", "dark"],
                      columns=["fair", "red", "hair_medium", "hair_dark", "black"], dtype=float)


@pytest.fixture
def community(rng):
    n, p = 24, 10
    info = pd.DataFrame({"trt": np.repeat(["a", "b", "c"], 8),
                         "blk": np.tile(["x", "y", "z", "w"], 6),
                         "temp": rng.normal(15, 3, n)},
                        index=[f"s{i:02d}" for i in range(n)])
    base = rng.gamma(1.0, 5.0, size=p)
    shift = np.where(info["trt"].to_numpy()[:, None] == "b", np.linspace(0.3, 3, p), 1.0)
    x = rng.poisson(base * shift * np.exp(0.05 * (info["temp"].to_numpy()[:, None] - 15)))
    x = pd.DataFrame(x + (np.arange(p) == 0), index=info.index,
                     columns=[f"t{j}" for j in range(p)], dtype=float)
    return x, info


# ---------------------------------------------------------------------------- CA
def test_ca_snee_total_inertia_is_chi_square_over_n():
    o = ca(SNEE)
    chi2, _, dof, _ = chi2_contingency(SNEE.to_numpy(), correction=False)
    assert o.total_inertia * 592 == pytest.approx(chi2, rel=1e-12)  # reference: scipy
    assert o.total_inertia * 592 == pytest.approx(138.29, abs=0.005)  # Snee (1974)
    assert dof == 9 and len(o.eigenvalues) == 3
    assert o.eigenvalues.sum() == pytest.approx(o.total_inertia)


def test_ca_fisher_canonical_correlations():
    o = ca(FISHER)
    # Fisher (1940): canonical correlations = CA singular values
    np.testing.assert_allclose(np.sqrt(o.eigenvalues.to_numpy()), [0.4464, 0.1735, 0.0293],
                               atol=5e-5)


def test_ca_chi_square_distance_equals_principal_coordinate_distance(community):
    x, _ = community
    o = ca(x, scaling="samples")
    a = x.to_numpy() / x.to_numpy().sum(axis=1, keepdims=True)
    c = x.to_numpy().sum(axis=0) / x.to_numpy().sum()
    # identity (docs/methods.md, section 3): chi-square distance sqrt(sum_j (a_xj - a_yj)^2 / c_j)
    chi = pdist(a / np.sqrt(c))
    np.testing.assert_allclose(pdist(o.scores.to_numpy()), chi, rtol=1e-9)


def test_ca_reconstitution_formula_in_every_scaling(community):
    x, _ = community
    P = x.to_numpy() / x.to_numpy().sum()
    r, c = P.sum(axis=1), P.sum(axis=0)
    for scaling in ("samples", "taxa", "symmetric"):
        o = ca(x, scaling=scaling)
        # reconstitution formula (Greenacre 1984): p_ij = r_i c_j (1 + sum_k f_ik g_jk)
        recon = np.outer(r, c) * (1 + o.scores.to_numpy() @ o.taxa.to_numpy().T)
        np.testing.assert_allclose(recon, P, atol=1e-12)
        assert o.scaling.startswith({"samples": "samples principal", "taxa": "taxa principal",
                                     "symmetric": "symmetric"}[scaling])


def test_ca_empty_margins_named():
    t = SNEE.copy()
    t["eye_green"] = 0.0
    with pytest.raises(InputError, match="eye_green"):
        ca(t)  # the table funnel refuses empty taxa
    with pytest.raises(InputError, match="eye_green.*absent from every sample"):
        ca(CommunityTable(t, empty="keep"))  # and so does CA itself
    with pytest.raises(InputError, match="`scaling` must be one of"):
        ca(SNEE, scaling="rows")


# ---------------------------------------------------------------------------- CCA
def test_cca_factor_constraint_inertia_is_inertia_of_pooled_table(community):
    x, info = community
    o = cca(x, info, terms=["trt"])
    pooled = x.groupby(info["trt"]).sum().to_numpy()
    chi2 = chi2_contingency(pooled, correction=False)[0]
    # identity: constraining by a factor keeps exactly the inertia of the group-summed
    # table (reference: scipy chi2_contingency on it)
    assert o.constrained_inertia == pytest.approx(chi2 / x.to_numpy().sum(), rel=1e-10)
    assert o.total_inertia == pytest.approx(ca(x).total_inertia)
    assert o.constrained_inertia + o.unconstrained_inertia == pytest.approx(o.total_inertia)
    assert o.n_constrained == 2 and o.axes[:3] == ["CCA1", "CCA2", "CA1"]
    assert o.eigenvalues.iloc[:2].sum() == pytest.approx(o.constrained_inertia)


def test_cca_sample_scores_are_weighted_averages_of_taxon_scores(community):
    x, info = community
    o = cca(x, info, terms=["trt", "temp"], scaling="samples")
    k = o.n_constrained
    X = x.to_numpy()
    # transition formula (ter Braak 1986): sample scores = abundance-weighted means of the
    # taxon scores (samples principal, taxa standard)
    wa = (X @ o.taxa.to_numpy()[:, :k]) / X.sum(axis=1, keepdims=True)
    np.testing.assert_allclose(o.scores.to_numpy()[:, :k], wa, atol=1e-10)


def test_partial_cca_equals_weighted_residual_analysis(community):
    x, info = community
    part = cca(x, info, terms=["trt"], conditions=["temp"])
    full = cca(x, info, terms=["temp", "trt"])
    only = cca(x, info, terms=["temp"])
    # identity: inertia(trt | temp) = inertia(temp + trt) - inertia(temp)
    assert part.constrained_inertia == pytest.approx(full.constrained_inertia -
                                                     only.constrained_inertia)
    assert part.conditioned_inertia == pytest.approx(only.constrained_inertia)


# ---------------------------------------------------------------------------- RDA / PCA
def test_pca_equals_sklearn(community):
    from sklearn.decomposition import PCA
    x, _ = community
    o = rda(x)
    pca = PCA().fit(x.to_numpy())
    k = len(o.eigenvalues)
    # reference: scikit-learn PCA (eigenvalues are sums of squares = variance * (n - 1))
    np.testing.assert_allclose(o.eigenvalues.to_numpy(), pca.explained_variance_[:k] * 23,
                               rtol=1e-9)
    s = pca.transform(x.to_numpy())[:, :k]
    signs = np.sign(np.sum(s * o.scores.to_numpy(), axis=0))
    np.testing.assert_allclose(o.scores.to_numpy(), s * signs, atol=1e-8)
    assert o.method == "PCA" and o.axes[0] == "PC1"


def test_rda_single_taxon_r2_matches_statsmodels(community):
    sm = pytest.importorskip("statsmodels.api")
    x, info = community
    o = rda(x[["t0"]], info, terms=["trt", "temp"])
    X = pd.get_dummies(info[["trt"]], drop_first=True, dtype=float).assign(temp=info["temp"])
    fit = sm.OLS(x["t0"].to_numpy(), sm.add_constant(X.to_numpy())).fit()
    assert o.r_squared == pytest.approx(fit.rsquared, rel=1e-10)  # reference: statsmodels OLS
    assert o.adjusted_r_squared == pytest.approx(fit.rsquared_adj, rel=1e-10)


def test_rda_constrained_axes_are_pca_of_fitted_values(community):
    from sklearn.decomposition import PCA
    x, info = community
    o = rda(x, info, terms=["trt", "temp"])
    X = np.column_stack([np.ones(24), info["trt"] == "b", info["trt"] == "c", info["temp"]])
    Y = x.to_numpy()
    fitted = X @ np.linalg.lstsq(X, Y, rcond=None)[0]
    pca = PCA().fit(fitted)
    k = o.n_constrained
    assert k == 3
    # Rao (1964): RDA = PCA of the least-squares fitted values (reference: scikit-learn)
    np.testing.assert_allclose(o.eigenvalues.to_numpy()[:k], pca.explained_variance_[:k] * 23,
                               rtol=1e-9)
    # biplot identity: fitted scores x taxon scores = centred fitted values, in any scaling
    for scaling in ("samples", "taxa", "symmetric"):
        oo = rda(x, info, terms=["trt", "temp"], scaling=scaling)
        recon = oo.fitted_scores.to_numpy() @ oo.taxa.to_numpy()[:, :k].T
        np.testing.assert_allclose(recon, fitted - fitted.mean(axis=0), atol=1e-9)


def test_rda_constraint_correlations_match_numpy(community):
    x, info = community
    o = rda(x, info, terms=["temp"])
    r = np.corrcoef(info["temp"], o.fitted_scores["RDA1"])[0, 1]  # reference: numpy corrcoef
    assert abs(o.constraint_correlations.loc["temp", "RDA1"]) == pytest.approx(1.0)
    assert o.constraint_correlations.loc["temp", "RDA1"] == pytest.approx(r)


def test_partial_rda_is_rda_of_residuals(community):
    x, info = community
    part = rda(x, info, terms=["temp"], conditions=["blk"])
    Z = np.column_stack([np.ones(24)] + [(info["blk"] == b).to_numpy(float) for b in "xyz"])
    res = lambda m: m - Z @ np.linalg.lstsq(Z, m, rcond=None)[0]  # noqa: E731
    Yr, tr = res(x.to_numpy()), res(info["temp"].to_numpy()[:, None])
    b = np.linalg.lstsq(tr, Yr, rcond=None)[0]
    fitted = tr @ b
    # Frisch-Waugh-Lovell theorem (Frisch & Waugh 1933; Lovell 1963)
    assert part.eigenvalues.iloc[0] == pytest.approx(np.sum(fitted ** 2))
    assert part.conditioned_inertia == pytest.approx(
        np.sum((x.to_numpy() - x.to_numpy().mean(0)) ** 2) - np.sum(Yr ** 2))
    assert part.adjusted_r_squared is not None   # fraction [a]: see test_constraint_tests.py


def test_rda_standardize(community):
    x, info = community
    o = rda(x, standardize=True)
    # identity: PCA of standardised columns has total = p (n - 1), the trace of (n-1) R
    assert o.total_inertia == pytest.approx(10 * 23)
    r = np.corrcoef(x.to_numpy(), rowvar=False)
    np.testing.assert_allclose(o.eigenvalues.to_numpy(),
                               np.sort(np.linalg.eigvalsh(r))[::-1][:len(o.eigenvalues)] * 23,
                               rtol=1e-9)  # reference: numpy eigenvalues of the correlations


def test_rda_transform_option(community):
    transforms = pytest.importorskip("tallyform.core.transforms")  # written in another issue
    x, info = community
    t = transforms.get_transform("hellinger")
    a = rda(x, info, terms=["trt"], transform="hellinger")
    b = rda(pd.DataFrame(t.apply(x.to_numpy()), index=x.index), info, terms=["trt"])
    np.testing.assert_allclose(a.eigenvalues.to_numpy(), b.eigenvalues.to_numpy())
    assert a.provenance["transform"] == t.name


def test_rda_constant_taxon_cannot_be_standardized(community):
    x, _ = community
    x = x.assign(t9=1.0)
    with pytest.raises(InputError, match="'t9'"):
        rda(x, standardize=True)


# ---------------------------------------------------------------------------- db-RDA
@pytest.mark.parametrize("use_features", [False, True])
def test_db_rda_one_variable_r2_matches_statsmodels(community, use_features):
    sm = pytest.importorskip("statsmodels.api")
    x, info = community
    y = np.log1p(x["t4"].to_numpy())[:, None]
    d = (Dissimilarity.from_features(y, x.index) if use_features
         else Dissimilarity(pdist(y), x.index, measure="euclidean"))
    o = db_rda(d, info, ["trt", "temp"])
    X = pd.get_dummies(info[["trt"]], drop_first=True, dtype=float).assign(temp=info["temp"])
    fit = sm.OLS(y.ravel(), sm.add_constant(X.to_numpy())).fit()
    assert o.r_squared == pytest.approx(fit.rsquared, rel=1e-10)  # reference: statsmodels OLS
    assert o.adjusted_r_squared == pytest.approx(fit.rsquared_adj, rel=1e-10)


def test_db_rda_of_euclidean_equals_rda(community):
    x, info = community
    y = np.sqrt(x.to_numpy())
    d = Dissimilarity(pdist(y), x.index, measure="euclidean")
    a = db_rda(d, info, ["trt", "temp"])
    b = rda(pd.DataFrame(y, index=x.index), info, terms=["trt", "temp"])
    # identity (Legendre & Anderson 1999): db-RDA of Euclidean D = RDA of the data
    np.testing.assert_allclose(a.eigenvalues.to_numpy(), b.eigenvalues.to_numpy(), rtol=1e-8)
    k = a.n_constrained
    for A, B in ((a.scores, b.scores), (a.fitted_scores, b.fitted_scores)):
        A, B = A.to_numpy()[:, :k], B.to_numpy()[:, :k]
        np.testing.assert_allclose(A, B * np.sign(np.sum(A * B, axis=0)), atol=1e-8)
    assert a.axes[:k + 1] == ["db-RDA1", "db-RDA2", "db-RDA3", "PCoA1"]


def test_db_rda_gower_and_feature_paths_agree(community):
    x, info = community
    f = np.sqrt(x.to_numpy() / x.to_numpy().sum(axis=1, keepdims=True))
    a = db_rda(Dissimilarity.from_features(f, x.index), info, ["trt"], conditions=["blk"])
    b = db_rda(Dissimilarity(pdist(f), x.index, measure="h"), info, ["trt"], conditions=["blk"])
    np.testing.assert_allclose(a.eigenvalues.to_numpy(), b.eigenvalues.to_numpy(), rtol=1e-8)
    np.testing.assert_allclose(a.scores.to_numpy(), b.scores.to_numpy(), atol=1e-8)
    assert a.conditioned_inertia == pytest.approx(b.conditioned_inertia)


def test_db_rda_non_euclidean_trace_identities(community):
    x, info = community
    d = Dissimilarity(pdist(x.to_numpy(), "braycurtis"), x.index, measure="bray_curtis")
    o = db_rda(d, info, ["trt", "temp"])
    G = d.gower()
    X = np.column_stack([np.ones(24), info["trt"] == "b", info["trt"] == "c", info["temp"]])
    H = X @ np.linalg.pinv(X)
    # McArdle & Anderson (2001): R^2 = tr(H G) / tr(G), also with negative eigenvalues
    assert o.r_squared == pytest.approx(np.trace(H @ G) / np.trace(G), rel=1e-10)
    assert o.eigenvalues.sum() == pytest.approx(np.trace(G))
    assert o.negative_share > 0 and any("not Euclidean" in n for n in o.notes)
    assert o.constrained_axes == [a for a in o.axes if a.startswith("db-RDA")]
    c = db_rda(d, info, ["trt", "temp"], correction="lingoes")
    assert c.eigenvalues.min() >= -1e-10 * c.eigenvalues.max()
    short = db_rda(d, info, ["trt", "temp"], residual_dims=2)
    assert short.axes == ["db-RDA1", "db-RDA2", "db-RDA3", "PCoA1", "PCoA2"]
    np.testing.assert_allclose(short.scores.to_numpy(), o.scores.to_numpy()[:, :5], atol=1e-8)


def test_split_engines_agree(community):
    x, info = community
    Y = np.sqrt(x.to_numpy())
    Y = Y - Y.mean(axis=0)
    X = np.column_stack([(info["trt"] == "b").to_numpy(float), info["temp"]])
    _, Q = constraint_bases(X)
    a, b = split_features(Y, Q), split_gower(Y @ Y.T, Q)
    np.testing.assert_allclose(a.fitted_values, b.fitted_values, rtol=1e-9)
    np.testing.assert_allclose(a.residual_values, b.residual_values[:len(a.residual_values)],
                               rtol=1e-8)
    assert a.fitted_trace + a.residual_trace == pytest.approx(a.total)


@pytest.mark.parametrize("terms, match", [
    (["nope"], "column 'nope' is not in the sample table"),
    ([], "no terms were given"),
])
def test_design_errors(community, terms, match):
    x, info = community
    d = Dissimilarity(pdist(x.to_numpy()), x.index, measure="euclidean")
    with pytest.raises(DesignError, match=match):
        db_rda(d, info, terms)


def test_sample_table_must_match_labels(community):
    x, info = community
    d = Dissimilarity(pdist(x.to_numpy()), x.index, measure="euclidean")
    with pytest.raises(DesignError, match="do not match"):
        db_rda(d, info.set_axis([f"z{i}" for i in range(24)]), ["trt"])
    # rows are matched by label: shuffled sample table, same answer
    a = db_rda(d, info, ["trt"])
    b = db_rda(d, info.iloc[::-1], ["trt"])
    assert a.r_squared == pytest.approx(b.r_squared)


def test_residual_dims_checked(community):
    x, info = community
    d = Dissimilarity(pdist(x.to_numpy()), x.index, measure="euclidean")
    with pytest.raises(InputError, match="`residual_dims` must be None or a whole number"):
        db_rda(d, info, ["trt"], residual_dims=-1)
    o = db_rda(d, info, ["trt"], residual_dims=0)
    assert o.axes == ["db-RDA1", "db-RDA2"] and not o.eigenvalues_complete
    assert o.constrained_inertia + o.unconstrained_inertia == pytest.approx(o.total_inertia)
