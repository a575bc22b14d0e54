"""PCoA and the Ordination result: reference checks, corrections, leading axes, taxon scores."""
from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest
from scipy.spatial.distance import pdist
from scipy.stats import pearsonr

import tallyform as tly
from tallyform.core.dissimilarity import Dissimilarity
from tallyform.core.memory import set_memory_limit
from tallyform.core.eigen import correction_constant
from tallyform.core.ordination import pcoa
from tallyform.errors import InputError, TooLargeError


def same_up_to_sign(a, b, atol=1e-8):
    """Columns of b flipped to match a (PCA/PCoA axes have no intrinsic sign)."""
    a, b = np.asarray(a), np.asarray(b)
    signs = np.sign(np.sum(a * b, axis=0))
    signs[signs == 0] = 1
    np.testing.assert_allclose(a, b * signs, atol=atol)


@pytest.fixture
def counts(rng):
    x = rng.poisson(rng.gamma(0.7, 6, size=(1, 15)), size=(40, 15)).astype(float)
    x[:, 0] += 1  # no empty sample
    return x


@pytest.fixture
def bray(counts):
    labels = [f"s{i}" for i in range(len(counts))]
    return Dissimilarity(pdist(counts, "braycurtis"), labels, measure="bray_curtis")


def test_pcoa_of_euclidean_equals_sklearn_pca(rng):
    from sklearn.decomposition import PCA
    x = rng.normal(size=(30, 5)) * [3, 2, 1.5, 1, 0.5]
    o = pcoa(Dissimilarity(pdist(x), measure="euclidean"))   # Gower path: no features
    pca = PCA(n_components=5).fit(x)
    # reference: scikit-learn PCA; eigenvalues = explained_variance_ * (n - 1)
    np.testing.assert_allclose(o.eigenvalues.to_numpy()[:5], pca.explained_variance_ * 29,
                               rtol=1e-10)
    same_up_to_sign(pca.transform(x), o.scores.to_numpy()[:, :5])
    assert o.scores.shape[1] == 5  # the other 25 eigenvalues are zero: no axis
    assert np.all(np.abs(o.eigenvalues.to_numpy()[5:]) < 1e-10 * o.eigenvalues.iloc[0])
    assert o.explained.sum() == pytest.approx(1.0)
    assert o.negative_share == 0 and o.notes == ()


def test_feature_path_equals_gower_path(counts):
    # identity: Hellinger = Euclidean on sqrt profiles (Legendre & Gallagher 2001)
    feats = np.sqrt(counts / counts.sum(axis=1, keepdims=True))
    a = pcoa(Dissimilarity.from_features(feats, measure="hellinger"))
    b = pcoa(Dissimilarity(pdist(feats), measure="hellinger"))
    assert a.provenance["path"].startswith("features")
    k = a.scores.shape[1]
    np.testing.assert_allclose(a.eigenvalues.to_numpy()[:k], b.eigenvalues.to_numpy()[:k],
                               rtol=1e-9)
    np.testing.assert_allclose(a.scores.to_numpy(), b.scores.to_numpy()[:, :k], atol=1e-9)
    assert a.total_inertia == pytest.approx(b.total_inertia)


def test_leading_axes_equal_full_decomposition(bray):
    full = pcoa(bray)
    part = pcoa(bray, dims=4)
    np.testing.assert_allclose(part.eigenvalues.to_numpy(), full.eigenvalues.to_numpy()[:4],
                               rtol=1e-9)
    np.testing.assert_allclose(part.scores.to_numpy(), full.scores.to_numpy()[:, :4], atol=1e-8)
    np.testing.assert_allclose(part.explained.to_numpy(), full.explained.to_numpy()[:4])
    assert not part.eigenvalues_complete and full.eigenvalues_complete
    assert any("not Euclidean" in n for n in part.notes)


def test_eigenvalues_sum_to_total_ss_and_negative_share(bray):
    o = pcoa(bray)
    # identity (Gower 1966): trace(G) = sum of eigenvalues = sum of squared distances / n
    c = bray.condensed
    assert o.eigenvalues.sum() == pytest.approx(np.dot(c, c) / bray.n)
    neg = o.eigenvalues[o.eigenvalues < -1e-10 * o.eigenvalues.max()]
    assert len(neg) > 0  # Bray-Curtis is not Euclidean on these counts
    assert o.negative_share == pytest.approx(-neg.sum() / o.total_inertia)
    assert any(f"{100 * o.negative_share:.1f} %" in n and "lingoes" in n for n in o.notes)
    # distances between scores reproduce the dissimilarities plus the "imaginary" part
    assert o.explained.sum() == pytest.approx(1.0)


def test_lingoes_correction(bray):
    o = pcoa(bray, correction="lingoes")
    ev = o.eigenvalues.to_numpy()
    assert ev.min() >= -1e-10 * ev.max()   # docs/methods.md, section 4: no eigenvalue below -1e-10 largest
    raw = np.linalg.eigvalsh(bray.gower())
    c = o.provenance["correction_constant"]
    assert c == pytest.approx(-raw.min())  # Lingoes (1971): c = |most negative eigenvalue|
    # definition: d' = sqrt(d^2 + 2c) off the diagonal, then ordinary PCoA
    direct = pcoa(Dissimilarity(np.sqrt(bray.condensed ** 2 + 2 * c), measure="x"))
    np.testing.assert_allclose(ev, direct.eigenvalues.to_numpy(), atol=1e-10 * ev.max())
    # identity: every non-trivial eigenvalue shifts by c (G' = G + cC)
    shifted = np.sort(np.delete(raw, np.argmin(np.abs(raw))) + c)[::-1]
    np.testing.assert_allclose(ev[:-1][np.argsort(-ev[:-1])][:10], shifted[:10], rtol=1e-9)


@pytest.mark.parametrize("dense_max", [10_000, 0])  # dense solver and ARPACK
def test_cailliez_correction(bray, dense_max):
    c = correction_constant(bray, "cailliez", _dense_max=dense_max)
    d2 = Dissimilarity(bray.condensed + c, measure="x")  # Cailliez (1983): d' = d + c
    ev = np.sort(np.linalg.eigvalsh(d2.gower()))[::-1]
    assert ev.min() >= -1e-10 * ev[0]
    # the defining property: c is the smallest such constant, so a second eigenvalue (besides
    # the trivial one of the centring) reaches 0, and a slightly smaller c leaves a negative one
    assert np.sum(np.abs(ev) < 1e-9 * ev[0]) >= 2
    smaller = Dissimilarity(bray.condensed + 0.99 * c, measure="x")
    assert np.linalg.eigvalsh(smaller.gower()).min() < -1e-6 * ev[0]


def test_cailliez_through_pcoa(bray):
    o = pcoa(bray, correction="cailliez")
    ev = o.eigenvalues.to_numpy()
    assert ev.min() >= -1e-10 * ev.max()
    assert o.negative_share == 0
    assert o.provenance["correction"] == "cailliez" and o.provenance["correction_constant"] > 0


def test_correction_skipped_when_euclidean(rng):
    x = rng.normal(size=(12, 3))
    o = pcoa(Dissimilarity(pdist(x), measure="euclidean"), correction="cailliez")
    assert o.provenance["correction_constant"] == 0.0
    assert any("already Euclidean" in n for n in o.notes)
    o = pcoa(Dissimilarity.from_features(x), correction="lingoes")
    assert any("no lingoes correction was needed" in n for n in o.notes)


def test_leading_axes_with_lingoes_match_full(bray):
    full = pcoa(bray, correction="lingoes")
    part = pcoa(bray, correction="lingoes", dims=3)
    np.testing.assert_allclose(part.eigenvalues.to_numpy(), full.eigenvalues.to_numpy()[:3],
                               rtol=1e-9)


def test_signs_are_deterministic(bray):
    a, b = pcoa(bray), pcoa(bray)
    pd.testing.assert_frame_equal(a.scores, b.scores)
    s = a.scores.to_numpy()
    top = s[np.argmax(np.abs(s), axis=0), np.arange(s.shape[1])]
    assert np.all(top > 0)


def test_square_matrix_input_and_labels(bray):
    frame = bray.to_frame()
    o = pcoa(frame)
    assert list(o.scores.index) == list(bray.labels)
    assert o.axes[:2] == ["PCoA1", "PCoA2"]
    assert o.axis_label(0).startswith("PCoA1 (")


@pytest.mark.parametrize("kw, match", [
    ({"dims": 0}, "`dims` must be a whole number from 1 to 39"),
    ({"dims": 2.5}, "`dims`"),
    ({"correction": "other"}, "`correction` must be one of"),
])
def test_option_errors(bray, kw, match):
    with pytest.raises(InputError, match=match):
        pcoa(bray, **kw)


def test_wrong_input_type():
    with pytest.raises(InputError, match="must be a Dissimilarity"):
        pcoa("bray_curtis")


def test_memory_guard_names_alternatives(bray):
    set_memory_limit(1000)
    try:
        with pytest.raises(TooLargeError, match="dims"):
            pcoa(bray)
    finally:
        set_memory_limit(None)


def test_result_is_frozen_and_displays_notes(bray):
    o = pcoa(bray)
    with pytest.raises(dataclasses.FrozenInstanceError):
        o.method = "x"
    html = o._repr_html_()
    assert "negative eigenvalues" in html and "PCoA1" in html
    frame = o.to_frame()
    assert list(frame.columns) == ["eigenvalue", "explained", "cumulative"]
    assert "note:" in str(o)


def test_weighted_average_taxon_scores_by_hand():
    x = pd.DataFrame([[1.0, 0.0], [3.0, 2.0], [0.0, 2.0]], index=["a", "b", "c"],
                     columns=["t1", "t2"])
    d = Dissimilarity.from_features([[0.0], [1.0], [3.0]], ["a", "b", "c"])
    o = pcoa(d)
    s = o.scores["PCoA1"].to_numpy()
    ws = o.taxon_scores(x)
    # by hand: (1*s_a + 3*s_b) / 4 and (2*s_b + 2*s_c) / 4
    assert ws.loc["t1", "PCoA1"] == pytest.approx((s[0] + 3 * s[1]) / 4)
    assert ws.loc["t2", "PCoA1"] == pytest.approx((2 * s[1] + 2 * s[2]) / 4)
    # rows are matched by label, not position
    pd.testing.assert_frame_equal(o.taxon_scores(x.iloc[::-1]), ws)


def test_correlation_taxon_scores_match_scipy(counts, bray):
    o = pcoa(bray)
    cs = o.taxon_scores(pd.DataFrame(counts, index=bray.labels), method="correlation",
                        axes=[0, "PCoA2"])
    # reference: scipy.stats.pearsonr
    r = pearsonr(counts[:, 3], o.scores["PCoA2"].to_numpy()).statistic
    assert cs.iloc[3]["PCoA2"] == pytest.approx(r)
    assert list(cs.columns) == ["PCoA1", "PCoA2"]


def test_taxon_scores_errors(bray, counts):
    o = pcoa(bray)
    with pytest.raises(InputError, match="no taxon scores of its own"):
        o.taxon_scores()
    with pytest.raises(InputError, match="`method` must be one of"):
        o.taxon_scores(counts, method="mean")
    other = pd.DataFrame(counts, index=[f"x{i}" for i in range(len(counts))])
    with pytest.raises(InputError, match="do not match"):
        o.taxon_scores(other)


def test_top_level_exports():
    for name in ("pcoa", "ca", "cca", "rda", "db_rda", "nmds", "Ordination"):
        assert hasattr(tly, name)


def test_lingoes_with_arpack_smallest_eigenvalue(rng):
    # past 300 samples the most negative eigenvalue comes from ARPACK, not LAPACK
    x = rng.poisson(rng.gamma(0.5, 4, size=(1, 12)), size=(320, 12)).astype(float) + \
        (np.arange(12) == 0)
    d = Dissimilarity(pdist(x, "braycurtis"), measure="bray_curtis")
    c = correction_constant(d, "lingoes")
    assert c == pytest.approx(-np.linalg.eigvalsh(d.gower()).min(), rel=1e-9)  # numpy LAPACK
    ev = pcoa(d, correction="lingoes").eigenvalues.to_numpy()
    assert ev.min() >= -1e-10 * ev.max()


def test_leading_axes_from_the_squared_distance_operator(rng):
    # past 300 samples, dims= works on D^2 as an operator (no Gower matrix is formed)
    x = rng.poisson(rng.gamma(0.8, 5, size=(1, 10)), size=(330, 10)).astype(float) + \
        (np.arange(10) == 0)
    d = Dissimilarity(pdist(x, "braycurtis"), measure="bray_curtis")
    part = pcoa(d, dims=5)
    assert part.provenance["path"].startswith("squared distances as an operator")
    full = pcoa(Dissimilarity(d.condensed, measure="bray_curtis"))
    np.testing.assert_allclose(part.eigenvalues.to_numpy(), full.eigenvalues.to_numpy()[:5],
                               rtol=1e-9)
    np.testing.assert_allclose(part.scores.to_numpy(), full.scores.to_numpy()[:, :5], atol=1e-8)
    lmin = full.eigenvalues.min()
    assert any(f"{lmin:.4g}" in n for n in part.notes)  # the smallest eigenvalue is reported
