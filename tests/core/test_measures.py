"""Dissimilarity measures: agreement with scipy, identities, worked examples, properties."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy.spatial.distance import jensenshannon, pdist, squareform
from scipy.stats import gmean

import tallyform as tly
from tallyform.core import kernels
from tallyform.core.dissimilarity import dissimilarity, feature_matrix
from tallyform.core.measures import MEASURES, get_measure
from tallyform.core.memory import set_memory_limit
from tallyform.core.table import CommunityTable
from tallyform.errors import InputError, TooLargeError

NAMES = ["euclidean", "manhattan", "bray_curtis", "chi_square", "hellinger", "chord",
         "aitchison", "jaccard", "quantitative_jaccard", "sorensen", "kulczynski", "canberra",
         "morisita_horn", "jensen_shannon", "gower"]


@pytest.fixture(params=["numba", "numpy"])
def path(request):
    """Run a test once with the compiled kernels and once with the numpy fallback."""
    kernels.use_numba(request.param == "numba")
    yield request.param
    kernels.use_numba(None)


def _table(rng, n=40, p=25, zeros=0.0):
    x = rng.gamma(0.8, 10.0, size=(n, p))
    if zeros:
        x[rng.random((n, p)) < zeros] = 0.0
    x[x.sum(axis=1) == 0, 0] = 1.0          # no empty sample
    x[0, x.sum(axis=0) == 0] = 1.0          # no empty taxon
    return x


def _profiles(x):
    return x / x.sum(axis=1, keepdims=True)


def _clr(x):
    return np.log(x / gmean(x, axis=1)[:, None])


def _d(x, measure, **kw):
    return np.asarray(dissimilarity(x, measure, **kw).condensed)


# ---------------------------------------------------------------- registry
def test_registry_names_and_records():
    assert list(MEASURES) == NAMES and tly.MEASURES is MEASURES
    for m in MEASURES.values():
        assert m.label and m.references and m.double_zero and m.formula
        assert not (m.euclidean and not m.metric), m.name   # Euclidean implies metric
        assert m.has_features == (m.name in {"euclidean", "chi_square", "hellinger", "chord",
                                             "aitchison"})
        assert callable(m.kernel) and m.describe()["name"] == m.name
    assert get_measure("Bray-Curtis") is MEASURES["bray_curtis"]
    with pytest.raises(InputError, match="unknown measure 'bray'.*bray_curtis|unknown measure"):
        get_measure("brayish")


# ---------------------------------------------------------------- scipy.spatial.distance
@pytest.mark.parametrize("zeros", [0.0, 0.8], ids=["dense", "sparse80"])
@pytest.mark.parametrize("ours, theirs", [("euclidean", "euclidean"),
                                          ("manhattan", "cityblock"),
                                          ("bray_curtis", "braycurtis"),
                                          ("canberra", "canberra")])
def test_agrees_with_scipy(path, rng, zeros, ours, theirs):
    # reference: scipy.spatial.distance.pdist with the same metric
    x = _table(rng, zeros=zeros)
    np.testing.assert_allclose(_d(x, ours), pdist(x, theirs), rtol=1e-12, atol=0)


@pytest.mark.parametrize("zeros", [0.0, 0.8], ids=["dense", "sparse80"])
def test_jensen_shannon_agrees_with_scipy(path, rng, zeros):
    # reference: scipy.spatial.distance.jensenshannon on profiles (natural log by default)
    x = _table(rng, n=25, zeros=zeros)
    ref = pdist(_profiles(x), jensenshannon)
    np.testing.assert_allclose(_d(x, "jensen_shannon"), ref, rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("zeros", [0.3, 0.8], ids=["dense", "sparse80"])
def test_presence_measures_agree_with_scipy_booleans(path, rng, zeros):
    # reference: scipy jaccard and dice on boolean vectors
    x = _table(rng, zeros=zeros)
    b = x > 0
    np.testing.assert_allclose(_d(x, "jaccard"), pdist(b, "jaccard"), rtol=1e-12, atol=0)
    np.testing.assert_allclose(_d(x, "sorensen"), pdist(b, "dice"), rtol=1e-12, atol=0)


# ---------------------------------------------------------------- identities
def test_chi_square_equals_ca_principal_coordinates(path, rng):
    # identity: chi-square distances between profiles equal the Euclidean distances between
    # full-rank CA row principal coordinates (Greenacre 1984)
    x = _table(rng, n=15, p=8, zeros=0.3)
    P = x / x.sum()
    r, c = P.sum(axis=1), P.sum(axis=0)
    S = (P - np.outer(r, c)) / np.sqrt(np.outer(r, c))
    U, s, _ = np.linalg.svd(S, full_matrices=False)
    F = U * s / np.sqrt(r)[:, None]
    np.testing.assert_allclose(_d(x, "chi_square"), pdist(F), rtol=1e-10)


def test_hellinger_chord_aitchison_are_euclidean_on_their_features(path, rng):
    x = _table(rng, zeros=0.5)
    # Hellinger = Euclidean on sqrt profiles (Legendre & Gallagher 2001)
    np.testing.assert_allclose(_d(x, "hellinger"), pdist(np.sqrt(_profiles(x))), rtol=1e-12)
    # chord = Euclidean on unit-length rows (Orloci 1967)
    u = x / np.linalg.norm(x, axis=1, keepdims=True)
    np.testing.assert_allclose(_d(x, "chord"), pdist(u), rtol=1e-12)
    # Aitchison = Euclidean on clr (Aitchison 1986); reference clr via scipy.stats.gmean
    y = x + 1.0
    np.testing.assert_allclose(_d(y, "aitchison", zeros="error"), pdist(_clr(y)), rtol=1e-12)
    np.testing.assert_allclose(_d(x, "aitchison", zeros="pseudocount", pseudocount=1.0),
                               pdist(_clr(y)), rtol=1e-12)


def test_sorensen_is_bray_curtis_on_presence(path, rng):
    # identity (Legendre & Legendre 2012): Sorensen = Bray-Curtis on presence/absence
    x = _table(rng, zeros=0.6)
    np.testing.assert_allclose(_d(x, "sorensen"), _d(x, "bray_curtis", transform="presence"),
                               rtol=1e-14)


def test_quantitative_formulas_against_direct_numpy(path, rng):
    # direct transcriptions of the formulas (docs/methods.md, section 3) on each pair
    x = _table(rng, n=12, p=9, zeros=0.5)
    n = len(x)
    ii, jj = np.triu_indices(n, 1)
    a, b = x[ii], x[jj]
    mins, maxs = np.minimum(a, b).sum(1), np.maximum(a, b).sum(1)
    ra, rb = a.sum(1), b.sum(1)
    np.testing.assert_allclose(_d(x, "quantitative_jaccard"), 1 - mins / maxs, rtol=1e-12)
    np.testing.assert_allclose(_d(x, "kulczynski"), 1 - (mins / ra + mins / rb) / 2,
                               rtol=1e-10, atol=1e-14)
    la, lb = (a ** 2).sum(1) / ra ** 2, (b ** 2).sum(1) / rb ** 2
    mh = 1 - 2 * (a * b).sum(1) / ((la + lb) * ra * rb)
    np.testing.assert_allclose(_d(x, "morisita_horn"), mh, rtol=1e-10, atol=1e-14)
    rngj = x.max(0) - x.min(0)
    gw = (np.abs(a - b) / rngj).mean(1)
    np.testing.assert_allclose(_d(x, "gower"), gw, rtol=1e-12)
    # quantitative Jaccard = 2 BC / (1 + BC) (identity, Legendre & Legendre 2012)
    bc = _d(x, "bray_curtis")
    np.testing.assert_allclose(_d(x, "quantitative_jaccard"), 2 * bc / (1 + bc), rtol=1e-12)


# ---------------------------------------------------------------- worked examples
SIZE_FREE = [m for m in NAMES if MEASURES[m].size_free]


def test_size_worked_example():
    # common practice: y = 2x; Euclidean sqrt(55), Bray-Curtis 15/45, size-free measures 0
    x = [[1, 2, 3, 4, 5], [2, 4, 6, 8, 10]]
    assert _d(x, "euclidean")[0] == pytest.approx(np.sqrt(55), rel=1e-14)
    assert _d(x, "bray_curtis")[0] == pytest.approx(1 / 3, rel=1e-14)
    for m in SIZE_FREE:
        assert _d(x, m)[0] == pytest.approx(0.0, abs=1e-7), m
    # swap the 2nd and 4th values between the rows: same two distances, profiles now differ
    z = [[1, 4, 3, 8, 5], [2, 2, 6, 4, 10]]
    assert _d(z, "euclidean")[0] == pytest.approx(np.sqrt(55), rel=1e-14)
    assert _d(z, "bray_curtis")[0] == pytest.approx(1 / 3, rel=1e-14)
    for m in SIZE_FREE:
        if m in ("jaccard", "sorensen"):   # presence unchanged by the swap: still 0
            assert _d(z, m)[0] == 0.0
        else:
            assert _d(z, m)[0] > 1e-3, m


def test_bray_curtis_worked_example():
    # common practice (the usual encyclopedia example): (6, 7, 4) vs (10, 0, 6) -> 13/33
    assert _d([[6, 7, 4], [10, 0, 6]], "bray_curtis")[0] == pytest.approx(13 / 33, rel=1e-14)


def test_samples_sharing_no_taxa_are_finite_and_maximal():
    # double zeros: disjoint samples give the known maxima (Legendre & Legendre 2012)
    x = [[3, 1, 0, 0], [0, 0, 2, 5]]
    expect = {"bray_curtis": 1, "hellinger": np.sqrt(2), "chord": np.sqrt(2), "jaccard": 1,
              "sorensen": 1, "kulczynski": 1, "quantitative_jaccard": 1, "morisita_horn": 1,
              "jensen_shannon": np.sqrt(np.log(2)), "canberra": 4}
    for m in NAMES:
        v = _d(x, m)[0]
        assert np.isfinite(v) and v > 0, m
        if m in expect:
            assert v == pytest.approx(expect[m], rel=1e-12), m


# ---------------------------------------------------------------- errors and notes
@pytest.mark.parametrize("m", [m for m in NAMES if MEASURES[m].empty_samples == "error"])
def test_empty_sample_named(m):
    x = pd.DataFrame([[1, 2, 0], [0, 0, 0], [3, 0, 1]], index=["p1", "p2", "p3"],
                     columns=["A", "B", "C"])
    with pytest.raises(InputError, match="'p2'"):
        dissimilarity(x, m)


@pytest.mark.parametrize("m", [m for m in NAMES if MEASURES[m].empty_samples == "allowed"])
def test_empty_sample_allowed_with_note(m):
    x = pd.DataFrame([[1, 2, 0], [0, 0, 0], [3, 0, 1]], index=["p1", "p2", "p3"])
    d = dissimilarity(x, m)
    assert np.all(np.isfinite(d.condensed)) and any("'p2'" in s for s in d.notes)


def test_chi_square_empty_taxon_left_out_and_named():
    x = pd.DataFrame([[1, 0, 2], [3, 0, 1]], index=["a", "b"], columns=["Ta", "Tb", "Tc"])
    d = dissimilarity(x, "chi_square")
    # identity: the absent taxon adds 0, so the distance is that of the other two columns
    same = dissimilarity(x[["Ta", "Tc"]], "chi_square")
    np.testing.assert_allclose(d.condensed, same.condensed, rtol=1e-12)
    assert any("'Tb'" in n and "left out" in n for n in d.notes)


def test_aitchison_zero_policy():
    x = pd.DataFrame([[1, 2, 3], [0, 2, 1], [4, 1, 1]], index=["a", "b", "c"])
    with pytest.raises(InputError, match="contain zeros: 'b'"):
        dissimilarity(x, "aitchison", zeros="error")
    d = dissimilarity(x, "aitchison")
    assert d.params["zeros"] == "multiplicative" and d.params["delta"] == 1 / 9
    assert any("multiplicative replacement" in s for s in d.notes)
    assert d.properties["size_free_exact"]
    e = dissimilarity(x, "aitchison", zeros="pseudocount", pseudocount=0.5)
    assert e.params["pseudocount"] == 0.5 and not e.properties["size_free_exact"]


def test_bad_requests_named():
    x = [[1, 2], [3, 4]]
    with pytest.raises(InputError, match="needs values >= 0.*'clr'"):
        dissimilarity(x, "bray_curtis", transform="clr")
    with pytest.raises(InputError, match=r"no option\(s\) \['zeros'\]"):
        dissimilarity(x, "bray_curtis", zeros="error")
    with pytest.raises(InputError, match="unknown measure"):
        dissimilarity(x, "angular")
    with pytest.raises(InputError, match="dtype"):
        dissimilarity(x, "bray_curtis", dtype="int8")
    with pytest.raises(InputError, match="negative"):
        dissimilarity([[1, -2], [3, 4]], "euclidean")


def test_gower_constant_taxa_left_out():
    x = pd.DataFrame([[1, 5, 0], [3, 5, 2], [2, 5, 1]], columns=["A", "B", "C"])
    d = dissimilarity(x, "gower")
    # by hand: ranges A 2, C 2; B constant -> mean over A and C only
    np.testing.assert_allclose(d.condensed, [(1 + 1) / 2, (0.5 + 0.5) / 2, (0.5 + 0.5) / 2])
    assert d.params["constant_taxa_left_out"] == 1 and any("'B'" in s for s in d.notes)


# ---------------------------------------------------------------- the Dissimilarity returned
def test_object_labels_provenance_features(rng):
    x = pd.DataFrame(_table(rng, n=8, p=5), index=[f"q{i}" for i in range(8)],
                     columns=list("ABCDE"))
    d = dissimilarity(CommunityTable(x), "hellinger", transform=tly.Power(0.3))
    assert list(d.labels) == list(x.index) and d.transform == "power(0.3)"
    assert d.measure == "hellinger" and d.has_features
    assert d.properties == {"metric": True, "euclidean": True, "size_free": True,
                            "size_free_exact": True}
    np.testing.assert_allclose(d.condensed, pdist(d.features), rtol=1e-12)
    np.testing.assert_allclose(feature_matrix(x, "hellinger", transform="power(0.3)"),
                               d.features, rtol=1e-15)
    assert d.provenance["transform"] == "power(0.3)"
    g = d.gower()
    assert g is d.gower()                            # cached
    assert feature_matrix(x, "bray_curtis") is None
    b = dissimilarity(x, "bray_curtis", transform="sqrt")
    assert not b.has_features and b.transform == "sqrt" and b.properties["metric"] is False
    assert dissimilarity(x, "bray_curtis", transform="profile").properties["size_free"]


def test_features_of_the_family(rng):
    x = _table(rng, n=6, p=4)
    prof = _profiles(x)
    c = x.sum(0) / x.sum()
    np.testing.assert_allclose(feature_matrix(x, "chi_square"), prof / np.sqrt(c), rtol=1e-14)
    np.testing.assert_allclose(feature_matrix(x, "aitchison", zeros="error"), _clr(x),
                               atol=1e-13)
    np.testing.assert_allclose(feature_matrix(x, "euclidean", transform="log1p"), np.log1p(x),
                               rtol=1e-15)


@pytest.mark.parametrize("m", ["bray_curtis", "hellinger"])  # one per kernel kind: each
def test_float32_on_request(path, rng, m):           # float32 kernel compiles once
    x = _table(rng, n=10, p=6, zeros=0.3)
    d32 = dissimilarity(x, m, dtype="float32")
    assert d32.condensed.dtype == np.float32
    np.testing.assert_allclose(d32.condensed, _d(x, m), rtol=1e-5, atol=1e-6)


def test_memory_estimate_before_allocation():
    x = np.ones((3000, 2))
    set_memory_limit("1MB")
    try:
        with pytest.raises(TooLargeError, match="3000 samples would need 36.0 MB.*float32"):
            dissimilarity(x, "bray_curtis")
        d = dissimilarity(x, "euclidean", dtype="float32")   # features only: no n x n yet
        with pytest.raises(TooLargeError, match="18.0 MB"):
            d.condensed
    finally:
        set_memory_limit(None)


# ---------------------------------------------------------------- Gram precision
def test_gram_kernel_precise_on_near_identical_rows(path, rng):
    # near-identical rows lose everything to cancellation in |x|^2 + |y|^2 - 2 x.y; the kernel
    # must recompute them directly. Reference: scipy pdist (direct differences).
    base = rng.random(50) * 1e3 + 1e6
    x = np.vstack([base, base + 1e-6 * rng.random(50), base + 1e-3, rng.random(50), base])
    ours = kernels.euclidean_condensed(x)
    np.testing.assert_allclose(ours, pdist(x), rtol=1e-10, atol=0)
    assert ours[3] == 0.0                            # identical rows 0 and 4: exactly 0


def test_numba_and_numpy_paths_agree(rng):
    x = _table(rng, n=30, p=12, zeros=0.6)
    out = {}
    for flag in (True, False):
        kernels.use_numba(flag)
        try:
            out[flag] = {m: _d(x, m) for m in NAMES}
        finally:
            kernels.use_numba(None)
    for m in NAMES:
        np.testing.assert_allclose(out[True][m], out[False][m], rtol=1e-12, atol=1e-15)


# ---------------------------------------------------------------- properties (hypothesis)
_TABLES = arrays(np.float64, st.tuples(st.integers(3, 7), st.integers(2, 6)),
                 elements=st.integers(0, 30).map(float))


def _clean(x):
    x = x.copy()
    x[x.sum(axis=1) == 0, 0] = 1.0
    x[0, x.sum(axis=0) == 0] = 1.0
    return x


def _square(x, m, **kw):
    return squareform(_d(x, m, **kw))


@settings(max_examples=40, deadline=None)
@given(_TABLES, st.randoms(use_true_random=False))
def test_symmetry_zero_diagonal_nonnegative(x, rnd):
    x = _clean(x)
    n = len(x)
    perm = list(range(n))
    rnd.shuffle(perm)
    twin = np.vstack([x, x[:1]])                    # a duplicate of sample 0
    for m in NAMES:
        D = _square(x, m)
        assert np.all(D >= 0), m
        # order-free and symmetric: permuting samples permutes the matrix
        np.testing.assert_allclose(_square(x[perm], m), D[np.ix_(perm, perm)], rtol=1e-12,
                                   atol=1e-14, err_msg=m)
        # zero diagonal: a sample is at distance 0 from its copy
        assert _square(twin, m)[0, n] == pytest.approx(0.0, abs=1e-7), m


@settings(max_examples=40, deadline=None)
@given(_TABLES)
def test_triangle_inequality_for_metrics(x):
    x = _clean(x)
    for m in NAMES:
        if MEASURES[m].metric:
            D = _square(x, m)
            gap = D[:, None, :] - (D[:, :, None] + D[None, :, :])    # d_ik - (d_ij + d_jk)
            assert gap.max() <= 1e-12 * max(D.max(), 1.0), m


@settings(max_examples=40, deadline=None)
@given(_TABLES, st.integers(0, 6), st.sampled_from([0.25, 3.0, 1000.0]))
def test_size_free_measures_ignore_row_scale(x, row, c):
    x = _clean(x)
    y = x.copy()
    y[row % len(x)] *= c
    for m in NAMES:
        if MEASURES[m].size_free_exact:
            np.testing.assert_allclose(_d(y, m), _d(x, m), rtol=1e-10, atol=1e-13, err_msg=m)
    # chi-square is exactly size-free once the column masses are held fixed
    w = np.full(x.shape[1], 1.0 / x.shape[1])
    np.testing.assert_allclose(_d(y, "chi_square", column_masses=w),
                               _d(x, "chi_square", column_masses=w), rtol=1e-10, atol=1e-13)


@settings(max_examples=30, deadline=None)
@given(_TABLES)
def test_euclidean_declared_measures_embed(x):
    # Gower (1966): D is Euclidean iff G = -1/2 C D^2 C is positive semi-definite
    x = _clean(x)
    for m in NAMES:
        if MEASURES[m].euclidean:
            ev = np.linalg.eigvalsh(dissimilarity(x, m).gower())
            assert ev[0] >= -1e-9 * max(ev[-1], 1e-12), m


def test_declarations_are_not_overcautious():
    # every "no" is earned: a seeded search finds a triangle violation for each non-metric
    # measure, a negative PCoA eigenvalue for each non-Euclidean one, and a distance that
    # moves under row scaling for each measure not declared size-free
    rng = np.random.default_rng(2024)
    need_tri = {m for m in NAMES if not MEASURES[m].metric}
    need_neg = {m for m in NAMES if not MEASURES[m].euclidean}
    need_scale = {m for m in NAMES if not MEASURES[m].size_free_exact}
    for _ in range(300):
        if not (need_tri or need_neg or need_scale):
            break
        x = _clean(rng.poisson(rng.gamma(0.5, 4, size=(6, 4))).astype(float))
        for m in list(need_tri | need_neg):
            d = dissimilarity(x, m)
            D = d.square()
            if m in need_tri and (D[:, None, :] - D[:, :, None] - D[None]).max() > 1e-9:
                need_tri.discard(m)
            if m in need_neg:
                ev = np.linalg.eigvalsh(d.gower())
                if ev[0] < -1e-6 * ev[-1]:
                    need_neg.discard(m)
        for m in list(need_scale):
            y = x.copy()
            y[0] *= 3.0
            if not np.allclose(_d(x, m), _d(y, m), rtol=1e-9):
                need_scale.discard(m)
    assert not need_tri and not need_neg and not need_scale, (need_tri, need_neg, need_scale)


def test_without_numba_same_numbers(tmp_path):
    # numba is optional at run time: with its import blocked, the numpy path answers
    import json
    import subprocess
    import sys
    from pathlib import Path
    code = (
        "import sys; sys.modules['numba'] = None\n"
        "import json, numpy as np, tallyform as tly\n"
        "from tallyform.core import kernels\n"
        "kernels.use_numba(True)\n"
        "x = np.random.default_rng(3).poisson(3.0, size=(30, 7)).astype(float) + 1\n"
        "print(json.dumps(tly.dissimilarity(x, 'canberra').condensed.tolist()))\n"
        "print(kernels.numba_enabled())\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, cwd=Path(__file__).resolve().parents[2]).stdout.split("\n")
    assert out[1] == "False"
    x = np.random.default_rng(3).poisson(3.0, size=(30, 7)).astype(float) + 1
    np.testing.assert_allclose(json.loads(out[0]), pdist(x, "canberra"), rtol=1e-12)
