"""Large data, in small (the full-size run is benchmarks/large.py; synthetic data).

* The memory guard refuses, before allocating anything, a request over the limit, with a
  message that gives the size needed and the alternatives.
* Measures with a feature matrix run PERMANOVA and PCoA under a memory limit set below one
  n x n matrix, and the traced peak of the run stays below one n x n matrix too.
* float32 storage gives the same analysis as float64 to float32 rounding.
"""
from __future__ import annotations

import re
import tracemalloc

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
from tallyform.core.memory import set_memory_limit
from tallyform.errors import TooLargeError


def _sparse_counts(n, p, rng, density=0.1):
    """Sparse counts in three groups (synthetic), every sample and taxon non-empty."""
    groups = np.arange(n) % 3
    base = rng.gamma(0.5, 1.0, size=(3, p))
    x = rng.poisson(base[groups] * 20) * (rng.random((n, p)) < density)
    x[:, 0] += 1
    x[0] += 1
    labels = [f"s{i}" for i in range(n)]
    info = pd.DataFrame({"group": np.array(["a", "b", "c"])[groups]}, index=labels)
    return tly.CommunityTable(pd.DataFrame(x.astype(float), index=labels), info)


@pytest.fixture
def limit():
    yield set_memory_limit
    set_memory_limit(None)


def test_guard_refuses_with_size_and_alternatives(limit):
    tab = _sparse_counts(3000, 20, np.random.default_rng(1))
    limit("10MB")                        # the condensed float64 vector needs 36 MB
    tracemalloc.start()
    try:
        with pytest.raises(TooLargeError) as exc:
            tly.dissimilarity(tab, "bray_curtis")
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    msg = str(exc.value)
    assert re.search(r"36\.0 MB", msg) and "10.0 MB" in msg
    assert "float32" in msg and "hellinger" in msg and "set_memory_limit" in msg
    assert exc.value.needed_bytes == 3000 * 2999 // 2 * 8
    assert peak < 5e6                     # refused before the distances were allocated
    # the float32 alternative it names fits (18 MB) once the limit allows it
    limit("20MB")
    d = tly.dissimilarity(tab, "bray_curtis", dtype="float32")
    assert d.condensed.dtype == np.float32
    # every eigenvalue of a 3000 x 3000 Gower matrix (5 n^2 doubles) is refused, naming dims
    with pytest.raises(TooLargeError, match="dims="):
        tly.pcoa(d)


def test_feature_path_runs_below_one_n_by_n_matrix(limit):
    n = 4000
    tab = _sparse_counts(n, 30, np.random.default_rng(2))
    square = n * n * 8                    # one n x n float64 matrix: 128 MB
    limit(square // 2)
    tracemalloc.start()
    try:
        d = tly.dissimilarity(tab, "hellinger")              # features only, no distances
        res = tly.permanova(d, tab, ["group"], n_permutations=99, rng=1)
        o = tly.pcoa(d, dims=5)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < square / 2
    assert res.table.loc["group", "df"] == 2 and 0 < res.pvalue["group"] <= 1
    assert o.scores.shape == (n, 5)
    # asking for the distances of these n samples, or the Gower matrix, is refused
    with pytest.raises(TooLargeError):
        tly.pcoa(tly.dissimilarity(tab, "bray_curtis", dtype="float32"), dims=5)
    with pytest.raises(TooLargeError):
        d.gower()


def test_feature_path_matches_distance_path():
    # the same PERMANOVA table and PCoA eigenvalues from the features (O(n q)) and from
    # the n x n Gower matrix (identity: G = F F' for centred features F)
    tab = _sparse_counts(300, 25, np.random.default_rng(3))
    d = tly.dissimilarity(tab, "chi_square")
    plain = tly.Dissimilarity(d.condensed, d.labels, measure="chi_square")
    a = tly.permanova(d, tab, ["group"], n_permutations=199, rng=5)
    b = tly.permanova(plain, tab, ["group"], n_permutations=199, rng=5)
    cols = ["df", "ss", "pseudo_f", "r2"]
    pd.testing.assert_frame_equal(a.table[cols], b.table[cols], rtol=1e-9)
    assert a.pvalue["group"] == b.pvalue["group"]
    ea = tly.pcoa(d, dims=4).eigenvalues.to_numpy()[:4]
    eb = tly.pcoa(plain, dims=4).eigenvalues.to_numpy()[:4]
    np.testing.assert_allclose(ea, eb, rtol=1e-8)


def test_float32_storage_gives_the_float64_analysis():
    tab = _sparse_counts(400, 40, np.random.default_rng(4))
    d64 = tly.dissimilarity(tab, "bray_curtis")
    d32 = tly.dissimilarity(tab, "bray_curtis", dtype="float32")
    np.testing.assert_allclose(d32.condensed, d64.condensed, rtol=1e-6, atol=1e-7)
    e64 = tly.pcoa(d64, dims=3).eigenvalues.to_numpy()[:3]
    e32 = tly.pcoa(d32, dims=3).eigenvalues.to_numpy()[:3]
    np.testing.assert_allclose(e32, e64, rtol=1e-5)
    f64 = tly.permanova(d64, tab, ["group"], n_permutations=99, rng=2)
    f32 = tly.permanova(d32, tab, ["group"], n_permutations=99, rng=2)
    assert f32.table.loc["group", "pseudo_f"] == pytest.approx(
        f64.table.loc["group", "pseudo_f"], rel=1e-5)


def test_distances_are_not_copied_on_the_way_out():
    # the condensed vector is the one big array of a pairwise measure: computing it must
    # not hold a second copy, nor full-length boolean checks (traced peak, n = 3000)
    tab = _sparse_counts(3000, 20, np.random.default_rng(5))
    size = 3000 * 2999 // 2 * 4
    tly.dissimilarity(tab.subset(tab.sample_labels[:400]), "bray_curtis", dtype="float32")
    tracemalloc.start()                   # (after a first call: compiling is not counted)
    try:
        d = tly.dissimilarity(tab, "bray_curtis", dtype="float32")
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 1.3 * size
    assert d.condensed.nbytes == size
    # a NaN produced by a measure is still caught, chunk by chunk (the first bad pair named)
    from tallyform.core.dissimilarity import first_invalid
    v = np.zeros(10_000_001, dtype=np.float32)
    v[9_999_999] = np.nan
    assert first_invalid(v, chunk=1 << 20) == 9_999_999
    v[5] = -1
    assert first_invalid(v) == 5
