"""Transformations: names, formulas, size removal, zero handling, inputs left untouched."""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy.stats import gmean

import tallyform as tly
from tallyform.core.transforms import (TRANSFORMS, Chord, Clr, Hellinger, Identity, Log1p,
                                       Power, Presence, Profile, Transform, Wisconsin,
                                       get_transform)
from tallyform.errors import InputError


@pytest.fixture
def counts(rng):
    x = rng.poisson(rng.gamma(0.6, 5.0, size=(12, 9))).astype(float)
    x[:, 0] += 1                                   # no empty sample
    return x


# ---------------------------------------------------------------- names and registry
def test_power_names_and_special_exponents():
    assert Power(1).name == "none" and Power(0.5).name == "sqrt"
    assert Power(0.25).name == "fourth_root" and Power(0).name == "presence"
    assert Power(0.3).name == "power(0.3)"
    assert Power(0.5) == get_transform("sqrt") and Power(0) == Presence()
    assert Power(1) == get_transform(None) == Identity()
    assert hash(Power(0.5)) == hash(get_transform("sqrt"))


@pytest.mark.parametrize("t", list(TRANSFORMS.values()) + [
    Power(0.3), Power(0.01), Clr(zeros="pseudocount", pseudocount=0.5), Clr(zeros="error"),
    Clr(delta=1e-4)])
def test_name_round_trip(t):
    # the canonical name is a spec get_transform reads back to an equal transform
    again = get_transform(t.name)
    assert again == t and type(get_transform(t)) is type(t)
    assert isinstance(t, Transform) and isinstance(t.removes_size, bool)


def test_registry_names():
    assert set(TRANSFORMS) == {"none", "sqrt", "fourth_root", "log1p", "presence", "profile",
                               "hellinger", "chord", "wisconsin", "clr"}
    assert tly.TRANSFORMS is TRANSFORMS and tly.Power is Power


@pytest.mark.parametrize("spec, match", [
    ("cube", "unknown transform 'cube'"), ("power(2)", r"must lie in \[0, 1\]"),
    ("power(x)", "cannot read the exponent"), (3, "must be None, a name or a Transform"),
    ("clr(shrink=1)", "unknown clr option 'shrink'")])
def test_bad_specs_named(spec, match):
    with pytest.raises(InputError, match=match):
        get_transform(spec)


def test_power_rejects_out_of_range():
    with pytest.raises(InputError, match=r"\[0, 1\]; got -0.1"):
        Power(-0.1)


# ---------------------------------------------------------------- formulas
def test_power_matches_numpy(counts):
    # reference: numpy.power
    for a in (1.0, 0.7, 0.5, 0.3, 0.25, 0.05):
        np.testing.assert_allclose(Power(a).apply(counts), np.power(counts, a), rtol=1e-15)


def test_power_tends_to_presence(counts):
    # mathematical limit: x ** a -> 1[x > 0] as a -> 0 (for x >= 1 here; 0 ** a = 0)
    near = Power(1e-9).apply(counts)
    np.testing.assert_allclose(near, Presence().apply(counts), atol=1e-7)
    np.testing.assert_array_equal(Power(0).apply(counts), (counts > 0).astype(float))


def test_log1p_matches_numpy(counts):
    np.testing.assert_allclose(Log1p().apply(counts), np.log1p(counts), rtol=1e-15)


def test_profile_hellinger_chord(counts):
    prof = counts / counts.sum(axis=1, keepdims=True)
    np.testing.assert_allclose(Profile().apply(counts), prof, rtol=1e-15)
    # Hellinger transformation = sqrt of profiles (Legendre & Gallagher 2001)
    np.testing.assert_allclose(Hellinger().apply(counts), np.sqrt(prof), rtol=1e-15)
    ch = Chord().apply(counts)
    np.testing.assert_allclose(np.linalg.norm(ch, axis=1), 1.0, rtol=1e-14)
    np.testing.assert_allclose(ch, counts / np.linalg.norm(counts, axis=1, keepdims=True),
                               rtol=1e-14)


def test_wisconsin_worked_example():
    # worked by hand: column maxima (2, 3, 4) -> [[1, 0, 1], [0.5, 1, 0.5]] -> row totals
    out = Wisconsin().apply([[2.0, 0.0, 4.0], [1.0, 3.0, 2.0]])
    np.testing.assert_allclose(out, [[0.5, 0.0, 0.5], [0.25, 0.5, 0.25]], rtol=1e-15)


def test_clr_matches_log_over_geometric_mean(counts):
    # reference: scipy.stats.gmean; clr(x) = log(x / g(x)) (Aitchison 1986)
    x = counts + 0.5
    expect = np.log(x / gmean(x, axis=1)[:, None])
    np.testing.assert_allclose(Clr(zeros="error").apply(x), expect, atol=1e-13)
    np.testing.assert_allclose(Clr(zeros="pseudocount", pseudocount=0.5).apply(counts), expect,
                               atol=1e-13)
    np.testing.assert_allclose(Clr().apply(counts).sum(axis=1), 0.0, atol=1e-12)


def test_multiplicative_replacement_properties(counts):
    # Martin-Fernandez et al. (2003): zeros become delta, the rows stay closed (sum 1) and the
    # ratios among the observed parts are unchanged
    delta = 1e-3
    z = Clr(delta=delta).replace_zeros(counts)
    np.testing.assert_allclose(z.sum(axis=1), 1.0, rtol=1e-14)
    assert np.all(z[counts == 0] == delta)
    i = int(np.argmax((counts == 0).sum(axis=1)))
    obs = np.flatnonzero(counts[i] > 0)
    np.testing.assert_allclose(z[i, obs] / z[i, obs[0]], counts[i, obs] / counts[i, obs[0]],
                               rtol=1e-14)
    # default delta = 1 / p^2
    p = counts.shape[1]
    assert np.all(Clr().replace_zeros(counts)[counts == 0] == 1.0 / p ** 2)


def test_clr_zero_policy_error_names_samples():
    x = np.array([[1.0, 2.0], [0.0, 3.0], [4.0, 0.0]])
    with pytest.raises(InputError, match="2 sample\\(s\\) contain zeros: 'b', 'c'"):
        Clr(zeros="error").apply(x, labels=["a", "b", "c"])
    with pytest.raises(InputError, match="zeros"):
        Clr(zeros="sometimes")


@pytest.mark.parametrize("t", [Profile(), Hellinger(), Chord(), Wisconsin(), Clr()])
def test_empty_sample_named(t):
    x = np.array([[1.0, 2.0], [0.0, 0.0], [4.0, 1.0]])
    with pytest.raises(InputError, match="total of 0.*'s2'"):
        t.apply(x, labels=["s1", "s2", "s3"])
    with pytest.raises(InputError, match="'row 2'"):
        t.apply(x)


def test_bad_values_named():
    with pytest.raises(InputError, match="sample 'b' has -1.0 in column 2"):
        Power(0.5).apply([[1.0, 2.0], [3.0, -1.0]], labels=["a", "b"])
    with pytest.raises(InputError, match="2-dimensional"):
        Log1p().apply([1.0, 2.0])


@pytest.mark.parametrize("t", list(TRANSFORMS.values()) + [Power(0.3)])
def test_input_untouched_and_new_array(counts, t):
    x = counts.copy()
    x.setflags(write=False)
    out = t.apply(x)
    assert out is not x and out.dtype == np.float64 and out.shape == x.shape
    np.testing.assert_array_equal(x, counts)
    assert not np.shares_memory(out, x)


# ---------------------------------------------------------------- size removal (property)
_TABLE = arrays(np.float64, st.tuples(st.integers(2, 6), st.integers(2, 6)),
                elements=st.integers(0, 40).map(float))


def _nonempty(x):
    x = x.copy()
    x[x.sum(axis=1) == 0, 0] = 1.0
    return x


@settings(max_examples=60, deadline=None)
@given(_TABLE, st.integers(0, 5), st.sampled_from([0.5, 2.0, 3.7, 1e3]))
def test_size_removing_transforms_ignore_row_scale(x, row, c):
    # property: removes_size and exact -> scaling one sample leaves its transformed row
    # unchanged (and the other rows too)
    x = _nonempty(x)
    row = row % x.shape[0]
    y = x.copy()
    y[row] *= c
    for t in list(TRANSFORMS.values()) + [Power(0.3), Clr(zeros="pseudocount")]:
        if t.removes_size and t.exact:
            np.testing.assert_allclose(t.apply(y), t.apply(x), rtol=1e-12, atol=1e-12)


def test_size_keeping_transforms_do_change(counts):
    # the flag is not over-claimed: scaling a sample changes the values of every
    # transformation that does not declare removes_size, and of the inexact ones
    y = counts.copy()
    y[0] *= 3.0
    for t in list(TRANSFORMS.values()) + [Power(0.3), Clr(zeros="pseudocount")]:
        changed = not np.allclose(t.apply(y), t.apply(counts), rtol=1e-9)
        assert changed == (not (t.removes_size and t.exact)), t.name
