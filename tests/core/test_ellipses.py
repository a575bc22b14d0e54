"""Group ellipses: coverage by simulation, constants, geometry, small groups."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from scipy.spatial.distance import pdist

from tallyform.core.dissimilarity import Dissimilarity
from tallyform.core.ellipses import (ellipse_constant, ellipse_from_shape, ellipse_outline,
                                     group_ellipses, inside_ellipse)
from tallyform.core.ordination import pcoa
from tallyform.errors import DesignError, InputError

MU = np.array([1.0, -2.0])
SIGMA = np.array([[2.0, 1.2], [1.2, 1.0]])


def simulate_groups(rng, n_groups, n):
    pts = rng.multivariate_normal(MU, SIGMA, size=n_groups * n)
    groups = np.repeat([f"g{i}" for i in range(n_groups)], n)
    return pts, groups


def coverage(e, points_per_group):
    hits = []
    for g, row in e.table.iterrows():
        hits.append(inside_ellipse(points_per_group(g), (row.centre_x, row.centre_y),
                                   (row.semi_major, row.semi_minor), row.angle_rad))
    return np.concatenate(hits).mean()


def binomial_band(p, m, z=4.0):
    sd = np.sqrt(p * (1 - p) / m)
    return p - z * sd, p + z * sd


@pytest.mark.slow
def test_confidence_ellipse_covers_true_centre(rng):
    pts, g = simulate_groups(rng, 2000, 8)
    e = group_ellipses(pts, g, kind="confidence", level=0.95)
    cov = coverage(e, lambda _: MU[None, :])
    # Hotelling (1931): exact 95 % coverage of the mean for bivariate-normal groups;
    # binomial tolerance (4 standard errors, 2000 independent groups)
    lo, hi = binomial_band(0.95, 2000)
    assert lo < cov < hi


@pytest.mark.slow
def test_prediction_ellipse_covers_new_samples(rng):
    pts, g = simulate_groups(rng, 2000, 10)
    e = group_ellipses(pts, g, kind="prediction", level=0.90)
    new = rng.multivariate_normal(MU, SIGMA, size=2000)
    idx = {f"g{i}": i for i in range(2000)}
    cov = coverage(e, lambda grp: new[idx[grp]][None, :])
    lo, hi = binomial_band(0.90, 2000)  # exact for any n (Hotelling T^2 prediction form)
    assert lo < cov < hi


@pytest.mark.slow
@pytest.mark.parametrize("n", [5, 8, 15, 40])
def test_prediction_ellipse_coverage_of_new_samples_at_every_n(n):
    # vectorised simulation: 2000 bivariate-normal groups in one call, 20 new samples per
    # group; the prediction region holds a new sample with probability 0.95 at every n
    # (Hotelling T^2 prediction form). Monte Carlo SD of the average about 0.0025, so the
    # band [0.94, 0.96] is about 4 SD wide on each side.
    rng = np.random.default_rng(100 + n)
    pts, g = simulate_groups(rng, 2000, n)
    e = group_ellipses(pts, g, kind="prediction", level=0.95)
    new = rng.multivariate_normal(MU, SIGMA, size=(2000, 20))
    t = e.table.loc[[f"g{i}" for i in range(2000)]]
    ca, sa = np.cos(t.angle_rad.to_numpy()), np.sin(t.angle_rad.to_numpy())
    dx = new[..., 0] - t.centre_x.to_numpy()[:, None]
    dy = new[..., 1] - t.centre_y.to_numpy()[:, None]
    u, v = dx * ca[:, None] + dy * sa[:, None], -dx * sa[:, None] + dy * ca[:, None]
    inside = (u / t.semi_major.to_numpy()[:, None]) ** 2 + \
        (v / t.semi_minor.to_numpy()[:, None]) ** 2 <= 1
    assert 0.94 <= inside.mean() <= 0.96
    # the data ellipse (a spread) holds far fewer at small n: the reason it has no level
    d = group_ellipses(pts, g, kind="data", level=0.95)
    cov = coverage(d, lambda grp: new[int(grp[1:])][:3])
    if n <= 8:
        assert cov < 0.86


@pytest.mark.slow
@pytest.mark.parametrize("n", [6, 10])
def test_bootstrap_ellipse_covers_the_centre_from_n_6(n):
    # with the small-sample factor the bootstrap region covers the true centre of normal
    # data within 3 points of 95 % (600 groups: Monte Carlo SD 0.009)
    rng = np.random.default_rng(200 + n)
    pts, g = simulate_groups(rng, 600, n)
    e = group_ellipses(pts, g, kind="bootstrap", level=0.95, n_boot=199, rng=1)
    cov = coverage(e, lambda _: MU[None, :])
    assert 0.92 <= cov <= 0.98
    assert any("small-sample factor" in note for note in e.notes)


def test_bootstrap_factor_tends_to_one():
    # the factor is the exact constant over what the bootstrap reproduces:
    # 2(n-1)/(n-2) F(2, n-2) over (n-1)/n chi2_2; F(2, m) -> chi2_2 / 2 as m grows
    # (scipy.stats for both distributions)
    from tallyform.core.ellipses import bootstrap_factor
    for n in (6, 10, 30):
        f = stats.f.ppf(0.95, 2, n - 2)
        assert bootstrap_factor(n, 0.95) == pytest.approx(
            (2 * (n - 1) / (n - 2) * f) / ((n - 1) / n * stats.chi2.ppf(0.95, 2)))
    assert bootstrap_factor(100_000, 0.95) == pytest.approx(1.0, abs=1e-3)


@pytest.mark.slow
def test_data_ellipse_covers_new_points(rng):
    pts, g = simulate_groups(rng, 40, 1000)
    e = group_ellipses(pts, g, kind="data", level=0.95)
    new = rng.multivariate_normal(MU, SIGMA, size=40 * 250).reshape(40, 250, 2)
    cov = coverage(e, lambda grp: new[int(grp[1:])])
    # with n = 1000 the estimated ellipse is close to the true one (chi-square_2 region);
    # tolerance widened for the shared estimate within each group
    lo, hi = binomial_band(0.95, 10_000, z=6.0)
    assert lo < cov < hi


def test_constants():
    assert ellipse_constant("data", 5, 0.95) == pytest.approx(5.991, abs=5e-4)  # chi2_2, 95 %
    n = 7
    f = stats.f.ppf(0.95, 2, n - 2)
    # Hotelling T^2 for a bivariate mean: T^2 = n (m - mu)' S^-1 (m - mu) ~ 2(n-1)/(n-2) F
    assert ellipse_constant("confidence", n, 0.95) == pytest.approx(2 * (n - 1) / (n * (n - 2)) * f)
    assert ellipse_constant("prediction", n, 0.95) == pytest.approx(
        (n + 1) * ellipse_constant("confidence", n, 0.95))


def test_axes_and_angle_of_a_known_shape():
    c, semi, angle = ellipse_from_shape([1, 2], [[4.0, 0.0], [0.0, 1.0]], 1.0)
    np.testing.assert_allclose(semi, [2.0, 1.0])
    assert angle == pytest.approx(0.0, abs=1e-12)
    rot = np.array([[np.cos(0.5), -np.sin(0.5)], [np.sin(0.5), np.cos(0.5)]])
    _, semi, angle = ellipse_from_shape([0, 0], rot @ np.diag([9.0, 4.0]) @ rot.T, 2.0)
    np.testing.assert_allclose(semi, np.sqrt([18.0, 8.0]))
    assert angle == pytest.approx(0.5)


def test_outline_lies_on_the_ellipse():
    x, y = ellipse_outline((1.0, -1.0), (3.0, 1.5), 0.7, k=50)
    assert len(x) == 50 and x[0] == pytest.approx(x[-1]) and y[0] == pytest.approx(y[-1])
    on = np.column_stack([x, y])
    # points on the boundary: inside the ellipse 1 % larger, outside the one 1 % smaller
    assert inside_ellipse(on, (1.0, -1.0), (3.03, 1.515), 0.7).all()
    assert not inside_ellipse(on, (1.0, -1.0), (2.97, 1.485), 0.7).any()


def test_small_groups_have_no_ellipse():
    pts = np.array([[0, 0], [1, 0], [0, 1], [1, 1], [3, 3], [4, 4]], float)
    e = group_ellipses(pts, ["a", "a", "a", "a", "b", "b"])
    assert e.groups == ["a"] and e.no_ellipse == {"b": 2}
    assert any("fewer than 3 samples" in n and "'b' (n = 2)" in n for n in e.notes)
    with pytest.raises(InputError, match="fewer than 3 samples: no ellipse"):
        e.outline("b")
    assert "no ellipse" in e._repr_html_()


def test_flat_group_is_noted():
    pts = np.array([[0, 0], [1, 1], [2, 2], [3, 3]], float)
    e = group_ellipses(pts, ["a"] * 4, kind="data")
    assert e.table.loc["a", "semi_minor"] == pytest.approx(0, abs=1e-9)
    assert e.table.loc["a", "angle_deg"] == pytest.approx(45.0)
    assert any("flat" in n for n in e.notes)


def test_bootstrap_is_seeded_and_near_confidence(rng):
    pts, g = simulate_groups(rng, 3, 60)
    a = group_ellipses(pts, g, kind="bootstrap", rng=5)
    b = group_ellipses(pts, g, kind="bootstrap", rng=5)
    pd.testing.assert_frame_equal(a.table, b.table)
    conf = group_ellipses(pts, g, kind="confidence")
    # for n = 60 the bootstrap region of the centroid is close to the normal-theory one
    ratio = a.table["semi_major"] / conf.table["semi_major"]
    assert ((ratio > 0.75) & (ratio < 1.25)).all()


def test_ordination_ellipses_use_chosen_axes(rng):
    x = rng.normal(size=(30, 4)) * [3, 2, 1, 0.5]
    d = Dissimilarity(pdist(x), [f"s{i}" for i in range(30)], measure="euclidean")
    o = pcoa(d)
    grp = pd.Series(np.repeat(["u", "v", "w"], 10), index=o.scores.index[::-1])  # by label
    e = o.ellipses(grp, kind="data", axes=("PCoA1", 2))
    assert e.axes == ("PCoA1", "PCoA3")
    ref = group_ellipses(o.scores[["PCoA1", "PCoA3"]], grp.loc[o.scores.index].to_numpy(),
                         kind="data")
    pd.testing.assert_frame_equal(e.table, ref.table.loc[e.table.index])
    assert "PCoA" in e.source
    with pytest.raises(InputError, match="two different axes"):
        o.ellipses(grp, axes=(0, 0))
    with pytest.raises(InputError, match="axis 9 does not exist"):
        o.ellipses(grp, axes=(0, 9))


@pytest.mark.parametrize("kw, err, match", [
    ({"kind": "hull"}, InputError, "`kind` must be one of"),
    ({"level": 95}, InputError, "between 0 and 1"),
    ({"kind": "bootstrap", "n_boot": 5}, InputError, "`n_boot`"),
])
def test_option_errors(kw, err, match):
    pts = np.zeros((4, 2))
    with pytest.raises(err, match=match):
        group_ellipses(pts, list("aaaa"), **kw)


def test_group_errors():
    pts = np.random.default_rng(0).random((4, 2))
    with pytest.raises(DesignError, match="one label per sample"):
        group_ellipses(pts, ["a", "b"])
    with pytest.raises(DesignError, match="missing values"):
        group_ellipses(pts, ["a", None, "a", "a"])
    with pytest.raises(InputError, match="not a column name"):
        group_ellipses(pts, "treatment")
