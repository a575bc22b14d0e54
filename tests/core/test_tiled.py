"""Tiled dissimilarities without a cluster (Dask's local threads): the tiled path equals
the in-memory one (pseudo-F to 1e-9 relative, p-values equal), and anything that needs the
whole matrix refuses with the alternatives. Data are synthetic."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.spatial.distance import pdist

pytest.importorskip("dask")

import tallyform as tly  # noqa: E402
from tallyform.core.dissimilarity import Dissimilarity  # noqa: E402
from tallyform.errors import InputError  # noqa: E402


def _data(n=60, p=12, seed=5):
    rng = np.random.default_rng(seed)
    units = np.arange(n) // 4
    info = pd.DataFrame({"unit": [f"u{u}" for u in units],
                         "trt": np.where(units % 2, "a", "b"),
                         "week": np.array(["w1", "w2", "w3", "w4"])[np.arange(n) % 4],
                         "blk": [f"b{u // 4}" for u in units],
                         "cov": rng.normal(size=n)}, index=[f"s{i}" for i in range(n)])
    x = np.round(rng.gamma(1.5, size=(n, p)) * 8) + np.eye(n, p)        # no empty sample
    return pd.DataFrame(x, index=info.index, columns=[f"t{j}" for j in range(p)]), info


def _same(a, b, rtol=1e-9):
    fa, fb = a.table["pseudo_f"].dropna(), b.table["pseudo_f"].dropna()
    assert fa.index.equals(fb.index)
    np.testing.assert_allclose(fb, fa, rtol=rtol)
    np.testing.assert_array_equal(b.pvalue.to_numpy(), a.pvalue.to_numpy())
    for k in a.null_distribution:
        np.testing.assert_allclose(b.null_distribution[k], a.null_distribution[k], rtol=1e-9)


def test_tiles_hold_the_kernel_distances():
    x, _ = _data(n=23)
    t = tly.dissimilarity(x, "bray_curtis", chunks=7)
    assert t.n_tiles == 10                               # 4 blocks: 4 * 5 / 2 tiles
    ref = pdist(x.to_numpy(), "braycurtis")              # scipy's Bray-Curtis
    full = np.asarray(t.array.compute())
    np.testing.assert_allclose(full[np.triu_indices(23, 1)], ref, rtol=1e-12)
    np.testing.assert_allclose(full, full.T)
    # total sum of squares: sum of squared distances / n (identity; Anderson 2001)
    assert t.total_ss() == pytest.approx(np.sum(ref ** 2) / 23, rel=1e-12)


@pytest.mark.parametrize("ss", ["sequential", "marginal"])
def test_permanova_equals_in_memory(ss):
    x, info = _data()
    d = tly.dissimilarity(x, "bray_curtis")
    t = tly.dissimilarity(x, "bray_curtis", chunks=16)
    terms = ["trt", "week", "cov"]
    _same(tly.permanova(d, info, terms, units=False, n_permutations=99, rng=3, ss=ss),
          tly.permanova(t, info, terms, units=False, n_permutations=99, rng=3, ss=ss))


@pytest.mark.parametrize("kw", [dict(units="unit"), dict(units="unit", blocks="blk"),
                                dict(units=False, blocks="blk")])
def test_permanova_units_and_blocks_equal_in_memory(kw):
    x, info = _data()
    d = tly.dissimilarity(x, "manhattan")
    t = tly.dissimilarity(x, "manhattan", chunks=25)
    terms = ["trt", "week", "trt:week"]
    a = tly.permanova(d, info, terms, n_permutations=49, rng=1, **kw)
    b = tly.permanova(t, info, terms, n_permutations=49, rng=1, **kw)
    _same(a, b)
    assert list(a.table.index) == list(b.table.index)       # strata rows too


def test_pairwise_and_dispersion_equal_in_memory():
    x, info = _data()
    d = tly.dissimilarity(x, "bray_curtis")
    t = tly.dissimilarity(x, "bray_curtis", chunks=20)
    a = tly.pairwise_permanova(d, info, "week", units=False, n_permutations=49, rng=4)
    b = tly.pairwise_permanova(t, info, "week", units=False, n_permutations=49, rng=4)
    np.testing.assert_allclose(b.table["pseudo_f"], a.table["pseudo_f"], rtol=1e-9)
    np.testing.assert_array_equal(b.table["pvalue"], a.table["pvalue"])
    for kw in (dict(), dict(samples=info, units="unit")):
        g = "trt" if kw else info["week"]
        a = tly.dispersion_test(d, g, n_permutations=49, rng=2, **kw)
        b = tly.dispersion_test(t, g, n_permutations=49, rng=2, **kw)
        assert b.statistic == pytest.approx(a.statistic, rel=1e-9)
        assert b.pvalue == a.pvalue


def test_pcoa_leading_axes_equal_in_memory():
    x, _ = _data(n=80)
    d = tly.dissimilarity(x, "bray_curtis")
    t = tly.dissimilarity(x, "bray_curtis", chunks=30)
    a, b = tly.pcoa(d, dims=3), tly.pcoa(t, dims=3)
    np.testing.assert_allclose(b.eigenvalues, a.eigenvalues, rtol=1e-9)
    np.testing.assert_allclose(b.scores.to_numpy(), a.scores.to_numpy(), rtol=1e-7, atol=1e-9)
    # eigenvalues of G: identity with the in-memory Gower matrix (Gower 1966)
    top = np.linalg.eigvalsh(d.gower())[::-1][:3]
    np.testing.assert_allclose(b.eigenvalues, top, rtol=1e-9)


def test_dask_array_input_and_float32():
    da = pytest.importorskip("dask.array")
    x, info = _data()
    arr = da.from_array(x.to_numpy(), chunks=(13, 12))
    t = tly.dissimilarity(arr, "bray_curtis", chunks=16, transform="sqrt")
    d = tly.dissimilarity(x, "bray_curtis", transform="sqrt")
    d = Dissimilarity(d.condensed, t.labels, measure="bray_curtis")
    frame = info.set_axis(t.labels)
    _same(tly.permanova(d, frame, ["trt"], units=False, n_permutations=49, rng=7),
          tly.permanova(t, frame, ["trt"], units=False, n_permutations=49, rng=7))
    t32 = tly.dissimilarity(x, "bray_curtis", chunks=16, dtype="float32")
    d32 = tly.dissimilarity(x, "bray_curtis", dtype="float32")
    _same(tly.permanova(d32, info, ["trt"], units=False, n_permutations=49, rng=7),
          tly.permanova(t32, info, ["trt"], units=False, n_permutations=49, rng=7))


def test_bad_dask_counts_name_the_sample():
    da = pytest.importorskip("dask.array")
    x, _ = _data(n=20)
    a = x.to_numpy().copy()
    a[13, 2] = -1.0
    with pytest.raises(InputError, match=r"'s14' \(row 14\), column 3: -1.0"):
        # raised when the tiles are computed: at once on local threads, at first use
        # on a cluster
        tly.dissimilarity(da.from_array(a, chunks=(5, 12)), "bray_curtis", chunks=6).total_ss()
    assert a[13, 2] == -1.0                              # the input is untouched


def test_whole_matrix_calls_refuse_with_alternatives():
    x, info = _data(n=20)
    t = tly.dissimilarity(x, "bray_curtis", chunks=8)
    for call in (lambda: t.condensed, t.square, t.gower, t.to_frame,
                 lambda: tly.nmds(t, n_starts=1, rng=1), lambda: tly.pcoa(t),
                 lambda: tly.pcoa(t, dims=2, correction="lingoes"),
                 lambda: tly.dispersion_test(t, info["trt"], centre="median"),
                 lambda: tly.welch_permanova(t, info, "trt", n_permutations=9),
                 lambda: tly.db_rda(t, info, terms=["trt"])):
        with pytest.raises(InputError, match="dims=|whole|centre='mean'"):
            call()
    with pytest.raises(InputError, match="without chunks="):
        tly.dissimilarity(x, "hellinger", chunks=8)
    with pytest.raises(InputError, match="range"):
        tly.dissimilarity(x, "gower", chunks=8)
    with pytest.raises(InputError, match="chunks"):
        tly.dissimilarity(x, "bray_curtis", chunks=1)


# ------------------------------------------------------------------ size_shape(chunks=)
def _sized(n=60, p=12, seed=5):
    """The synthetic table of _data with totals that vary (log-normal factor per sample)."""
    x, info = _data(n, p, seed)
    f = np.random.default_rng(seed + 1).lognormal(0.0, 0.6, size=(n, 1))
    return tly.CommunityTable(np.round(x * f) + np.eye(n, p), info)


def test_tiled_partition_equals_hat_matrix_traces():
    # R^2(Z) = tr(H G) / tr(G), H the hat matrix of [1, Z] (McArdle & Anderson 2001), with
    # D from scipy's Bray-Curtis and G = -1/2 C D^2 C (Gower 1966) formed here with numpy;
    # adjusted R^2 after Ezekiel (1930), fractions after Borcard et al. (1992)
    tab = _sized()
    r = tly.size_shape(tab, "bray_curtis", chunks=17, shape_dims=3, progress=False)
    n = tab.n_samples
    d2 = pdist(tab.values, "braycurtis")
    from scipy.spatial.distance import squareform
    a = squareform(d2) ** 2
    c = np.eye(n) - 1.0 / n
    g = -0.5 * c @ a @ c
    z = np.log(tab.values.sum(axis=1))
    f = tly.dissimilarity(tab, "chi_square").features
    u = np.linalg.svd(f - f.mean(axis=0), full_matrices=False)[0][:, :3]

    def r2(*cols):
        m = np.column_stack([np.ones(n), *cols])
        h = m @ np.linalg.pinv(m)
        return np.trace(h @ g) / np.trace(g), m.shape[1] - 1

    def adj(v):
        return 1 - (1 - v[0]) * (n - 1) / (n - v[1] - 1)
    s, t, st = adj(r2(z)), adj(r2(u)), adj(r2(z, u))
    want = {"size_only": st - t, "shared": s + t - st, "shape_only": st - s,
            "residual": 1 - st}
    for k, v in want.items():
        assert r.fractions[k] == pytest.approx(v, abs=1e-9), k
    assert r.provenance["chunks"] == 17
    assert np.isnan(r.negative_share) and any("not computed on tiles" in x for x in r.notes)


@pytest.mark.parametrize("measure,kw", [
    ("bray_curtis", {}),
    ("manhattan", {"transform": "sqrt", "size": "total"}),
    ("canberra", {"shape": "hellinger", "shape_dims": 2}),
])
def test_tiled_partition_equals_in_memory(measure, kw):
    tab = _sized(n=41, seed=9)
    a = tly.size_shape(tab, measure, progress=False, **kw)
    b = tly.size_shape(tab, measure, chunks=12, progress=False, **kw)
    assert b.shape_dims == a.shape_dims
    np.testing.assert_allclose(b.fractions, a.fractions, rtol=0, atol=1e-9)
    np.testing.assert_allclose(b.by_dims().to_numpy(), a.by_dims().to_numpy(), rtol=0,
                               atol=1e-9)
    np.testing.assert_allclose(b.r2.to_numpy(), a.r2.to_numpy(), rtol=0, atol=1e-9)


def test_tiled_partition_intervals_equal_in_memory():
    # the leave-out replicates from zero-padded quadratic forms of D^2, many per tile pass
    tab = _sized(n=48, seed=3)
    for kw in ({"n_boot": 40, "rng": 4}, {"n_boot": 30, "rng": 7, "units": "unit"}):
        a = tly.size_shape(tab, "bray_curtis", progress=False, **kw)
        from tallyform.core import partition_tiled
        old = partition_tiled.PASS_BYTES
        partition_tiled.PASS_BYTES = 8 * 48 * 25          # several passes of ~25 columns
        try:
            b = tly.size_shape(tab, "bray_curtis", chunks=13, progress=False, **kw)
        finally:
            partition_tiled.PASS_BYTES = old
        np.testing.assert_allclose(b.fractions_ci.to_numpy(), a.fractions_ci.to_numpy(),
                                   rtol=0, atol=1e-9)


def test_tiled_partition_refuses_what_needs_the_whole_matrix():
    tab = _sized(n=30)
    with pytest.raises(InputError, match="n_permutations=0") as e:
        tly.size_shape(tab, "bray_curtis", chunks=10, n_permutations=19, progress=False)
    assert "permanova" in e.value.hint
    with pytest.raises(InputError, match="same_measure") as e:
        tly.size_shape(tab, "bray_curtis", chunks=10, shape="same_measure", progress=False)
    assert "chi_square" in e.value.hint
    with pytest.raises(InputError, match="feature matrix"):     # in O(n p) without tiles
        tly.size_shape(tab, "hellinger", chunks=10, progress=False)
