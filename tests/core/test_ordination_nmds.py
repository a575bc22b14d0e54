"""NMDS: stress-1, monotone fit, several starts, reproducibility, Shepard data."""
from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import isotonic_regression
from scipy.spatial.distance import pdist
from scipy.stats import spearmanr

from tallyform.core.dissimilarity import Dissimilarity
from tallyform.core.nmds import kruskal_stress, nmds, stress_reading
from tallyform.errors import Cancelled, InputError


@pytest.fixture
def planar(rng):
    """Dissimilarities that are a monotone function of 2-D distances: stress can reach 0."""
    x = rng.random((15, 2))
    return x, Dissimilarity(np.sqrt(pdist(x)) + 0.1, [f"s{i}" for i in range(15)],
                            measure="custom")


def test_kruskal_stress_by_definition(rng):
    dis = rng.random(20)
    dist = dis + rng.normal(scale=0.2, size=20)
    stress, fitted = kruskal_stress(dis, dist)
    order = np.argsort(dis)
    # reference: scipy.optimize.isotonic_regression (no ties here)
    ref = np.empty(20)
    ref[order] = isotonic_regression(dist[order]).x
    np.testing.assert_allclose(fitted, ref, atol=1e-12)
    # Kruskal (1964): stress-1 = sqrt(sum (d - d_hat)^2 / sum d^2)
    assert stress == pytest.approx(np.sqrt(np.sum((dist - ref) ** 2) / np.sum(dist ** 2)))


def test_monotone_configuration_is_recovered(planar):
    x, d = planar
    o = nmds(d, n_axes=2, n_starts=3, rng=1)
    assert o.stress < 0.02
    assert o.stress_reading.startswith("excellent")
    # the rank order of the dissimilarities is kept (Spearman correlation, scipy)
    rho = spearmanr(d.condensed, pdist(o.scores.to_numpy())).statistic
    assert rho > 0.99
    assert o.axes == ["NMDS1", "NMDS2"] and list(o.scores.index) == list(d.labels)


def test_shepard_data_and_starts(planar):
    _, d = planar
    o = nmds(d, n_starts=4, rng=2)
    sh = o.shepard
    assert len(sh) == d.n * (d.n - 1) // 2
    assert list(sh.columns) == ["sample_a", "sample_b", "dissimilarity", "distance", "fitted"]
    assert np.all(np.diff(sh["fitted"].to_numpy()) >= -1e-12)  # monotone in the dissimilarity
    np.testing.assert_allclose(np.sort(sh["distance"]), np.sort(pdist(o.scores.to_numpy())))
    st = o.starts
    assert len(st) == 4 and st["init"].iloc[0] == "PCoA" and st["kept"].sum() == 1
    assert o.stress == pytest.approx(st["stress"].min(), abs=1e-9)
    assert o.eigenvalues.empty and o.to_frame().shape[0] == 4


def test_scores_are_centred_principal_axes(planar):
    _, d = planar
    s = nmds(d, n_starts=2, rng=3).scores.to_numpy()
    np.testing.assert_allclose(s.mean(axis=0), 0, atol=1e-12)
    cov = np.cov(s, rowvar=False)
    assert abs(cov[0, 1]) < 1e-10 and cov[0, 0] >= cov[1, 1]


def test_same_rng_same_answer(rng):
    x = rng.poisson(3, size=(14, 6)) + 1
    d = Dissimilarity(pdist(x, "braycurtis"), measure="bray_curtis")
    a = nmds(d, n_starts=3, rng=11)
    b = nmds(d, n_starts=3, rng=np.random.default_rng(11))
    np.testing.assert_array_equal(a.scores.to_numpy(), b.scores.to_numpy())
    assert a.provenance["rng"] == 11


def test_progress_and_cancel(planar):
    _, d = planar
    seen = []
    nmds(d, n_starts=3, rng=1, progress=lambda done, total: seen.append((done, total)))
    assert seen == [(1, 3), (2, 3), (3, 3)]
    done = []
    with pytest.raises(Cancelled, match="after 1 of 3 starts"):
        nmds(d, n_starts=3, rng=1, progress=lambda i, n: done.append(i),
             cancel=lambda: len(done) >= 1)  # stop once the first start is finished


def test_zero_dissimilarities_are_noted(planar):
    x, _ = planar
    x = np.vstack([x, x[:1]])
    d = Dissimilarity(pdist(x), measure="euclidean")
    o = nmds(d, n_starts=2, rng=1)
    assert any("dissimilarity 0" in n for n in o.notes)
    assert np.isnan(o.shepard["fitted"].iloc[0])


@pytest.mark.parametrize("stress, word", [(0.01, "excellent"), (0.04, "good"),
                                          (0.08, "fair"), (0.15, "poor"), (0.3, "very poor")])
def test_stress_reading(stress, word):
    # Kruskal (1964) verbal scale: 0.025 excellent, 0.05 good, 0.10 fair, 0.20 poor
    assert stress_reading(stress).startswith(word)


@pytest.mark.parametrize("kw, match", [({"n_axes": 0}, "`n_axes`"), ({"n_starts": 0}, "`n_starts`"),
                                       ({"n_axes": 14}, "needs at least 16 samples"),
                                       ({"tol": -1.0}, "`tol`")])
def test_option_errors(planar, kw, match):
    _, d = planar
    with pytest.raises(InputError, match=match):
        nmds(d, **kw)
