"""``spectrum=False`` (size_shape, pcoa with dims): the O(n^3) eigenvalues behind the
negative-eigenvalue share are skipped, and only that share changes (NaN, with a note);
the fractions, scores and leading eigenvalues are those of the default call. Euclidean
measures need no spectrum (share 0 by the embedding, Gower 1966). Data are synthetic."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
from tallyform.core.cache import clear_cache


def _table(n=40, p=15, seed=5):
    rng = np.random.default_rng(seed)
    lam = rng.gamma(1.0, 4.0, size=(1, p)) * rng.lognormal(0, 0.6, size=(n, 1))
    x = rng.poisson(lam) + np.eye(n, p, dtype=int)
    return tly.CommunityTable(pd.DataFrame(x, index=[f"s{i}" for i in range(n)],
                                           columns=[f"t{j}" for j in range(p)]))


def test_size_shape_without_spectrum_changes_only_the_negative_share():
    tab = _table()
    clear_cache()
    fast = tly.size_shape(tab, "bray_curtis", spectrum=False, progress=False)
    assert np.isnan(fast.negative_share)
    assert any("not measured (spectrum=False)" in n for n in fast.notes)
    clear_cache()
    full = tly.size_shape(tab, "bray_curtis", progress=False)
    assert full.negative_share > 0                      # Bray-Curtis is not Euclidean here
    pd.testing.assert_series_equal(fast.fractions, full.fractions)
    # once the spectrum is known (cached on the dissimilarity) it is used either way
    again = tly.size_shape(tab, "bray_curtis", spectrum=False, progress=False)
    assert again.negative_share == full.negative_share


def test_euclidean_measures_report_zero_without_any_spectrum():
    tab = _table()
    clear_cache()
    for kw in ({}, {"spectrum": False}):
        r = tly.size_shape(tab, "hellinger", progress=False, **kw)
        assert r.negative_share == 0.0
    # identity: the Hellinger Gower matrix is a Gram matrix, no eigenvalue below rounding
    ev = tly.dissimilarity(tab, "hellinger").spectrum()
    assert ev.min() > -1e-10 * ev.max()


@pytest.mark.parametrize("n", [40, 320])
def test_pcoa_leading_axes_without_spectrum(n):
    tab = _table(n=n)
    clear_cache()
    fast = tly.pcoa(tly.dissimilarity(tab, "bray_curtis"), dims=2, spectrum=False)
    assert np.isnan(fast.negative_share)
    assert any("not checked (spectrum=False)" in note for note in fast.notes)
    clear_cache()
    full = tly.pcoa(tly.dissimilarity(tab, "bray_curtis"), dims=2)
    np.testing.assert_allclose(fast.scores.to_numpy(), full.scores.to_numpy(), atol=1e-10)
    np.testing.assert_allclose(fast.eigenvalues.to_numpy(), full.eigenvalues.to_numpy(),
                               rtol=1e-12)
    assert np.isnan(full.negative_share) == (n > 300)   # past 300: not measured
    # a Euclidean measure needs no check: share 0 either way
    e = tly.pcoa(tly.dissimilarity(tab, "hellinger"), dims=2, spectrum=False)
    assert e.negative_share == 0.0


def test_feature_path_leading_axes_equal_the_thin_svd():
    # the q x q cross-product route (dims < q <= n / 2) against scipy's thin SVD of the
    # centred features (reference: scipy.linalg.svd)
    import scipy.linalg
    tab = _table(n=120, p=30, seed=9)
    d = tly.dissimilarity(tab, "hellinger")
    o = tly.pcoa(d, dims=3)
    f = np.asarray(d.features, float)
    u, s, _ = scipy.linalg.svd(f - f.mean(axis=0), full_matrices=False)
    np.testing.assert_allclose(o.eigenvalues.to_numpy(), s ** 2, rtol=0,
                               atol=1e-12 * s[0] ** 2)
    np.testing.assert_allclose(np.abs(o.scores.to_numpy()), np.abs(u[:, :3] * s[:3]),
                               atol=1e-10)


def test_leading_axes_past_300_samples_report_an_unmeasured_share_as_nan():
    # the smallest eigenvalue shows the measure is not Euclidean here, but with only the
    # leading axes the share itself is unknown: NaN (not 0) beside the note
    tab = _table(n=320, seed=2)
    clear_cache()
    d = tly.dissimilarity(tab, "bray_curtis")
    o = tly.pcoa(d, dims=2)
    assert np.isnan(o.negative_share)
    assert any("was not measured" in note for note in o.notes)
    full = tly.pcoa(d).negative_share                  # every eigenvalue: measured
    assert full > 0
    d.spectrum()                                       # every eigenvalue, cached on d
    assert tly.pcoa(d, dims=2).negative_share == pytest.approx(full, rel=1e-9)
