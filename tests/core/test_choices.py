"""compare_choices and the scan's intervals: paired differences between analysis choices."""
from __future__ import annotations

import numpy as np
import pytest

import tallyform as tly
from tallyform.core.choices import _sentence
from tallyform.core.errors import InputError
from tallyform.core.partition import FRACTIONS

A = {"measure": "bray_curtis"}
B = {"measure": "bray_curtis", "transform": "fourth_root"}


@pytest.fixture(scope="module")
def meso():
    return tly.demo("mesocosm")          # synthetic demo scenario


def test_without_resampling_the_shares_are_size_shapes(meso):
    x = tly.compare_choices(meso, a=A, b=B, n_boot=0)
    ra = tly.size_shape(meso, "bray_curtis").fractions.reindex(FRACTIONS)
    rb = tly.size_shape(meso, "bray_curtis", transform="fourth_root").fractions \
        .reindex(FRACTIONS)
    np.testing.assert_allclose(x.frame["a"], ra, atol=1e-12)
    np.testing.assert_allclose(x.frame["b"], rb, atol=1e-12)
    np.testing.assert_allclose(x.frame["difference"], rb - ra, atol=1e-12)
    assert "low" not in x.frame.columns
    assert x.statistic == pytest.approx(rb["size_only"] - ra["size_only"])
    assert x.reading.startswith("A fourth_root transform removes")


def test_identical_choices_give_exactly_zero_with_zero_width(meso):
    x = tly.compare_choices(meso, a=A, b={"measure": "bray_curtis", "transform": None},
                            n_boot=30, rng=1)
    assert (x.frame["difference"] == 0).all()
    assert (x.frame["low"] == 0).all() and (x.frame["high"] == 0).all()
    assert x.frame["a_low"].equals(x.frame["b_low"])


def test_paired_intervals_come_from_the_shared_replicates(meso):
    x = tly.compare_choices(meso, a=A, b=B, n_boot=40, rng=3)
    # each choice's own interval is the one size_shape gives with the same seed
    sa = tly.size_shape(meso, "bray_curtis", n_boot=40, rng=3).fractions_ci
    sb = tly.size_shape(meso, "bray_curtis", transform="fourth_root", n_boot=40,
                        rng=3).fractions_ci
    np.testing.assert_allclose(x.frame["a_low"], sa["low"], atol=1e-12)
    np.testing.assert_allclose(x.frame["b_high"], sb["high"], atol=1e-12)
    f = x.frame
    assert np.all(f["low"] <= f["difference"]) and np.all(f["difference"] <= f["high"])
    # the paired difference of the size-only share is better determined than the shares
    width = f["high"] - f["low"]
    assert width["size_only"] < (f["a_high"] - f["a_low"])["size_only"]
    again = tly.compare_choices(meso, a=A, b=B, n_boot=40, rng=3)
    assert again.frame.equals(x.frame)
    assert "95 % interval" in x.reading


def test_sentences():
    s = _sentence("a fourth_root transform", "size_only", -0.127, -0.20, -0.03)
    assert s == "a fourth_root transform removes 12.7 points of size (95 % interval 3.0-20.0)."
    s = _sentence("chord instead of bray_curtis", "shape_only", 0.05, -0.01, 0.12)
    assert "no clear change" in s and "-1.0 to 12.0 points" in s


def test_bad_choices(meso):
    with pytest.raises(InputError, match="unknown key"):
        tly.compare_choices(meso, a={"metric": "bray_curtis"}, b=B)
    with pytest.raises(InputError, match="must be a dict"):
        tly.compare_choices(meso, a="bray_curtis", b=B)
    with pytest.raises(InputError, match="size"):
        tly.compare_choices(meso, a={"size": "biomass"}, b=B)


def test_result_object(meso):
    x = tly.compare_choices(meso, a=A, b={"measure": "hellinger"}, n_boot=20, rng=1)
    assert list(x.to_frame().index) == list(FRACTIONS)
    assert "hellinger minus bray_curtis" in x._repr_html_()
    assert any(n.startswith("a: negative eigenvalues") for n in x.notes)
    assert x.reading.startswith("Hellinger instead of bray_curtis removes")
    assert x.reading in str(x)


def test_scan_intervals_match_size_shape(meso):
    g = tly.scan(meso, measures=["bray_curtis", "hellinger"], transforms=[1.0, 0.25],
                 n_boot=30, rng=4)
    for f in FRACTIONS:
        assert {f"{f}_low", f"{f}_high"} <= set(g.frame.columns)
    r = tly.size_shape(meso, "hellinger", transform=tly.Power(0.25), n_boot=30, rng=4)
    row = g.frame[(g.frame["measure"] == "hellinger") & (g.frame["transform"] == "fourth_root")]
    for f in FRACTIONS:
        assert row[f"{f}_low"].item() == pytest.approx(r.fractions_ci.loc[f, "low"], abs=1e-12)
    assert any("Every cell leaves out the same samples" in n for n in g.notes)
    assert "(" in g._repr_html_()
    plain = tly.scan(meso, measures=["bray_curtis"], transforms=[1.0])
    assert "size_only_low" not in plain.frame.columns


def test_examples_are_doctests():
    # the Examples section of compare_choices runs as written
    import doctest

    import tallyform.core.choices as choices
    result = doctest.testmod(choices, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.failed == 0 and result.attempted > 0
