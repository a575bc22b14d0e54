"""Size and shape partition: identities, reference libraries and the behaviour it exists for."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.spatial.distance import pdist

import tallyform as tly
from tallyform.core.design import orthonormal_basis
from tallyform.core.dissimilarity import Dissimilarity
from tallyform.core.partition import (Variation, centred_unit, partition_by_dims,
                                      adjusted_r2, fractions_from_r2)
from tallyform.errors import DesignError, InputError


def _design(n_per=12, levels=("a", "b", "c")):
    rows = [{"grp": g} for g in levels for _ in range(n_per)]
    return pd.DataFrame(rows, index=[f"s{i:03d}" for i in range(len(rows))])


def pure_size_table(rng, n_per=15, p=30):
    """Every row a multiple of one profile (group-specific multipliers) + Poisson noise."""
    design = _design(n_per)
    profile = rng.dirichlet(np.full(p, 0.8))
    mult = design["grp"].map({"a": 400.0, "b": 1200.0, "c": 3600.0}).to_numpy()
    mult = mult * rng.lognormal(0, 0.3, mult.size)
    x = rng.poisson(mult[:, None] * profile[None, :])
    return tly.CommunityTable(pd.DataFrame(x, index=design.index), design, empty="drop")


def pure_shape_table(rng, n_per=15, p=30, total=800):
    """Equal totals; group profiles differ."""
    design = _design(n_per)
    base = rng.dirichlet(np.full(p, 0.8))
    rows = []
    for g in design["grp"]:
        prof = base.copy()
        if g == "b":
            prof[:5] *= 4.0
        if g == "c":
            prof[5:10] *= 4.0
        rows.append(rng.multinomial(total, prof / prof.sum()))
    return tly.CommunityTable(pd.DataFrame(rows, index=design.index), design, empty="drop")


# ---------------------------------------------------------------------------- identities
def test_r2_equals_statsmodels_multivariate_r2(rng):
    # identity (McArdle & Anderson 2001): with Euclidean D on raw Y, tr(HG)/tr(G) is the
    # multivariate R^2 = sum of regression SS over columns / sum of total SS over columns.
    # Reference: statsmodels OLS, column by column.
    sm = pytest.importorskip("statsmodels.api")
    n = 25
    y = rng.normal(size=(n, 4))
    z = rng.normal(size=(n, 2))
    y[:, 0] += 2 * z[:, 0]
    ess = tss = 0.0
    for j in range(y.shape[1]):
        fit = sm.OLS(y[:, j], sm.add_constant(z)).fit()
        ess += fit.ess
        tss += fit.centered_tss
    q = orthonormal_basis(z - z.mean(axis=0))
    for d in (Dissimilarity(pdist(y), measure="euclidean"), Dissimilarity.from_features(y)):
        var = Variation(d)
        assert var.explained(q) / var.total == pytest.approx(ess / tss, rel=1e-12)


def test_incremental_by_dims_equals_direct_fits(rng):
    # algebraic identity: the O(n K^2) update equals refitting [size, U_k] for every k
    n = 30
    y = rng.gamma(1.0, size=(n, 6))
    d = Dissimilarity(pdist(y, "cityblock"), measure="manhattan")   # non-Euclidean G
    var = Variation(d)
    u = orthonormal_basis(rng.normal(size=(n, 8)) - 0)
    u = orthonormal_basis(u - u.mean(axis=0))
    z = centred_unit(rng.normal(size=n))
    dims = partition_by_dims(var, z, u, n)
    for k in (1, 3, 8):
        r2_s = var.explained(z[:, None]) / var.total
        r2_t = var.explained(u[:, :k]) / var.total
        r2_st = var.explained(orthonormal_basis(np.column_stack([z, u[:, :k]]))) / var.total
        want = fractions_from_r2(r2_s, r2_t, r2_st, n=n, m_s=1, m_t=k)
        for key, val in want.items():
            assert dims.loc[k, key] == pytest.approx(val, abs=1e-12)


def test_adjusted_r2_matches_statsmodels(rng):
    # reference: statsmodels OLS rsquared_adj (Ezekiel's formula)
    sm = pytest.importorskip("statsmodels.api")
    y, z = rng.normal(size=20), rng.normal(size=(20, 3))
    fit = sm.OLS(y, sm.add_constant(z)).fit()
    assert adjusted_r2(fit.rsquared, 20, 3) == pytest.approx(fit.rsquared_adj, rel=1e-12)


def test_negative_shared_fraction_is_kept():
    f = fractions_from_r2(0.10, 0.10, 0.35, n=100, m_s=1, m_t=2, adjusted=False)
    assert f["shared"] == pytest.approx(-0.15)
    assert sum(f.values()) == pytest.approx(1.0, abs=1e-15)


# ---------------------------------------------------------------------------- behaviour
def test_fractions_sum_to_one_and_report(rng):
    tab = pure_size_table(rng)
    r = tly.size_shape(tab, "bray_curtis")
    assert r.fractions.sum() == pytest.approx(1.0, abs=1e-12)
    assert r.fractions_unadjusted.sum() == pytest.approx(1.0, abs=1e-12)
    assert 1 <= r.shape_dims <= (tab.n_samples - 2) // 3
    assert "shape inertia" in r.shape_dims_reason
    dims = r.by_dims()
    assert dims.index[0] == 1 and np.allclose(dims[["size_only", "shared", "shape_only",
                                                     "residual"]].sum(axis=1), 1.0)
    assert "size_only" in r.to_frame().index
    assert "Size and shape" in r._repr_html_()


def test_orthogonal_size_and_shape_share_nothing(rng):
    # identity: with Euclidean D and size orthogonal to the shape coordinates, the
    # unadjusted R^2 values add, so the unadjusted shared fraction is 0 (Borcard et al. 1992)
    n = 40
    y = rng.normal(size=(n, 5))
    d = Dissimilarity.from_features(y)
    var = Variation(d)
    u = orthonormal_basis(rng.normal(size=(n, 4)))
    u = orthonormal_basis(u - u.mean(axis=0))
    z = rng.normal(size=n)
    z = z - u @ (u.T @ z)
    z = centred_unit(z - z.mean())
    dims = partition_by_dims(var, z, u, n)
    assert abs(dims.loc[4, "shared_unadjusted"]) < 1e-10


@pytest.mark.parametrize("measure", ["bray_curtis", "euclidean"])
def test_pure_size_data_size_dominates_size_sensitive_measures(rng, measure):
    r = tly.size_shape(pure_size_table(rng), measure)
    assert r.fractions["size_only"] > max(r.fractions["shape_only"], 0.3)


@pytest.mark.parametrize("measure", ["hellinger", "chi_square"])
def test_pure_size_data_size_free_measures_see_no_size(rng, measure):
    r = tly.size_shape(pure_size_table(rng), measure)
    assert abs(r.fractions["size_only"]) < 0.02


@pytest.mark.parametrize("measure", ["bray_curtis", "euclidean", "hellinger", "chi_square",
                                     "manhattan", "chord"])
def test_pure_shape_data_shape_dominates(rng, measure):
    r = tly.size_shape(pure_shape_table(rng), measure)
    others = r.fractions.drop(["shape_only", "residual"])
    assert r.fractions["shape_only"] > 0.3 and (r.fractions["shape_only"] > others).all()
    assert any("same size" in n for n in r.notes)


def test_options_and_errors(rng):
    tab = pure_size_table(rng)
    with pytest.raises(DesignError, match="sampling-effort column"):
        tly.size_shape(tab, "bray_curtis", size="log_total_per_effort")
    with pytest.raises(InputError, match="`shape` must be one of"):
        tly.size_shape(tab, "bray_curtis", shape="bray")
    with pytest.raises(InputError, match="`shape_dims` must be between 1 and"):
        tly.size_shape(tab, "bray_curtis", shape_dims=0)
    r = tly.size_shape(tab, "bray_curtis", shape_dims=3)
    assert r.shape_dims == 3 and "as requested" in r.shape_dims_reason
    for shape in ("hellinger", "same_measure"):
        assert tly.size_shape(tab, "bray_curtis", shape=shape).fractions.sum() == \
            pytest.approx(1.0, abs=1e-12)


def test_effort_size_on_moths():
    tab = tly.demo("moths")
    r = tly.size_shape(tab, "bray_curtis", size="log_total_per_effort")
    assert r.provenance["size_label"] == "log total per trap_nights"
    assert r.fractions.sum() == pytest.approx(1.0, abs=1e-12)


def test_non_euclidean_measure_reports_negative_share():
    r = tly.size_shape(tly.demo("mesocosm"), "bray_curtis")
    assert r.negative_share > 0
    assert any("negative eigenvalues" in n for n in r.notes)
    assert tly.size_shape(tly.demo("mesocosm"), "hellinger").negative_share == 0


def test_mesocosm_size_effect_is_seen_by_bray_curtis_not_chi_square():
    tab = tly.demo("mesocosm")
    bc = tly.size_shape(tab, "bray_curtis").fractions
    chi = tly.size_shape(tab, "chi_square").fractions
    assert bc["size_only"] > chi["size_only"] + 0.02


def test_shape_test_is_monte_carlo_and_reproducible(rng):
    tab = pure_size_table(rng)
    r = tly.size_shape(tab, "bray_curtis", n_permutations=49, rng=3)
    assert list(r.tests.index) == ["shape_only"]          # size only is not tested
    assert "one composition for all samples" in r.tests.loc["shape_only", "null"]
    again = tly.size_shape(tab, "bray_curtis", n_permutations=49, rng=3)
    assert again.tests.equals(r.tests)
    assert again.null_shares.equals(r.null_shares)


# ---------------------------------------------------------------------------- scan
def test_scan_grid_and_pivot():
    tab = tly.demo("mesocosm")
    g = tly.scan(tab, measures=["bray_curtis", "hellinger", "euclidean"],
                 transforms=[1.0, 0.5, 0.0, "log1p"])
    f = g.to_frame()
    assert len(f) == 12
    ok = f[f["error"] == ""]
    np.testing.assert_allclose(ok[["size_only", "shared", "shape_only", "residual"]]
                               .sum(axis=1), 1.0, atol=1e-12)
    piv = g.pivot("size_only")
    assert piv.shape == (3, 4)
    # a scan cell equals a direct call with the same settings
    direct = tly.size_shape(tab, "bray_curtis", transform="sqrt").fractions["size_only"]
    assert piv.loc["bray_curtis", "sqrt"] == pytest.approx(direct, abs=1e-12)
    with pytest.raises(InputError, match="unknown measure"):
        tly.scan(tab, measures=["bray"])
