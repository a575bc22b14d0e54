"""Continuity of ordinations: orthogonal Procrustes (Gower 1975)."""
import numpy as np
import pytest
from scipy.spatial import procrustes as scipy_procrustes

import tallyform as tly
from tallyform.core.procrustes import align_ordination, procrustes_rotation


def test_a_known_rotation_and_reflection_is_undone():
    rng = np.random.default_rng(3)
    b = rng.normal(size=(20, 2))
    theta = np.deg2rad(37)
    rot = np.array([[np.cos(theta), -np.sin(theta)], [np.sin(theta), np.cos(theta)]])
    a = b @ rot @ np.diag([1, -1])              # rotated, then one axis reflected
    r = procrustes_rotation(a, b)
    np.testing.assert_allclose(a @ r, b, atol=1e-12)     # identity: R^T R = I recovers b
    np.testing.assert_allclose(r.T @ r, np.eye(2), atol=1e-12)


def test_adjacent_exponents_keep_every_sign_and_the_distances():
    tab = tly.demo("mesocosm")                  # synthetic
    prev = tly.pcoa(tly.dissimilarity(tab, "bray_curtis", transform="power(0.5)"), dims=2)
    new = tly.pcoa(tly.dissimilarity(tab, "bray_curtis", transform="power(0.55)"), dims=2)
    flipped = new.scores.copy()
    flipped.iloc[:, 0] *= -1                    # what an eigen-solver may hand back
    from dataclasses import replace
    new = replace(new, scores=flipped)
    aligned = align_ordination(new, prev)
    s0, s1 = prev.scores.to_numpy(), aligned.scores.to_numpy()
    scale = np.abs(s0).max()
    assert np.abs(s1 - s0).max() < 0.25 * scale
    # distances between samples unchanged (rotations keep distances)
    d = lambda x: np.sqrt(((x[:, None, :] - x[None, :, :]) ** 2).sum(-1))   # noqa: E731
    np.testing.assert_allclose(d(s1), d(new.scores.to_numpy()), atol=1e-10)
    # scipy's procrustes (which also scales) finds no better fit than the rotation alone
    _, _, disparity = scipy_procrustes(s0, new.scores.to_numpy())
    assert disparity < 0.1


def test_nothing_to_follow_returns_the_same_ordination():
    o = tly.pcoa(tly.dissimilarity(tly.demo("mesocosm"), "hellinger"), dims=2)
    assert align_ordination(o, None) is o
    assert align_ordination(o, o) is o
    with pytest.raises(tly.InputError):
        align_ordination(o, [1, 2, 3])
