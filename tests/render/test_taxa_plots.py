"""Figures for taxon contributions: pure (result in, figure out), readable, labelled."""
from __future__ import annotations

import numpy as np
import pandas as pd
import plotly.graph_objects as go
import pytest

import tallyform as tly
from tallyform.render.plots import taxon_shape_figure, taxon_size_figure
from tallyform.render.style import FRACTION_COLOURS


@pytest.fixture(scope="module")
def high():
    return tly.taxon_contributions(tly.demo("mesocosm"), "treatment", "control",
                                   "nutrient_high")


@pytest.fixture(scope="module")
def low():
    return tly.taxon_contributions(tly.demo("mesocosm"), "treatment", "control",
                                   "nutrient_low")


def _fonts_ok(fig):
    assert fig.layout.font.size >= 14
    assert fig.layout.title.font.size >= 14
    assert fig.layout.title.subtitle.font.size >= 14
    for ann in fig.layout.annotations:
        assert ann.font.size is None or ann.font.size >= 14


def test_shape_figure_reads_the_result(high):
    fig = taxon_shape_figure(high, top=10)
    assert isinstance(fig, go.Figure)
    bars = [t for t in fig.data if t.type == "bar"]
    assert {t.name for t in bars} == {"control", "nutrient_high"}
    top = high.shape.head(10)
    drawn = {}
    for t in bars:
        sign = -1 if t.name == "control" else 1
        for x, y in zip(t.x, t.y):
            drawn[y] = sign * x
    # every bar is a share read from the result, pointing towards its group
    assert set(drawn) == set(top.index)
    for taxon, v in drawn.items():
        assert v == pytest.approx(top.loc[taxon, "share_pct"], rel=1e-12)
    assert list(fig.layout.yaxis.categoryarray) == list(top.index)
    # diamonds at the noise-corrected shares, intervals for the true shares mirrored with
    # the bars: the far end is the upper bound
    d = next(t for t in fig.data if (t.meta or {}).get("role") == "true share")
    for y, x, plus, minus in zip(d.y, d.x, d.error_x.array, d.error_x.arrayminus):
        row = top.loc[y]
        assert abs(x) == pytest.approx(row["share_net_pct"], rel=1e-12)
        lo, hi = (x - minus, x + plus) if x > 0 else (-(x + plus), -(x - minus))
        assert (lo, hi) == pytest.approx((row["ci_low"], row["ci_high"]), rel=1e-9, abs=1e-9)
    assert "true difference" in d.name and "jackknife" in fig.layout.title.subtitle.text
    # the noise markers come from the result's noise_pct column
    noise = next(t for t in fig.data if t.name == "expected from noise alone")
    assert np.abs(np.asarray(noise.x)) == pytest.approx(top["noise_pct"].to_numpy())
    _fonts_ok(fig)
    assert fig.layout.legend.title.text == "higher in"
    assert "share of D" in fig.layout.xaxis.title.text and "%" in fig.layout.xaxis.title.text
    assert fig.layout.yaxis.title.text == "taxon"
    assert all(str(y) in h for t in bars for y, h in zip(t.y, t.hovertext))
    assert all(not str(v).startswith("-") for v in fig.layout.xaxis.ticktext)


def test_shape_figure_for_an_average_says_so():
    k = tly.taxon_contributions(tly.demo("mesocosm"), "treatment", "control",
                                "nutrient_high", measure="bray_curtis", intervals=False)
    fig = k.figure("shape", top=5)
    assert "not an exact split" in fig.layout.title.subtitle.text
    assert "no intervals" in fig.layout.title.subtitle.text
    assert "mean between-group" in fig.layout.xaxis.title.text
    assert all(not t.error_x.visible for t in fig.data if t.type == "bar")


def test_size_figure_reads_the_result(low):
    fig = taxon_size_figure(low, top=12)
    top = low.size.head(12)
    dots = [t for t in fig.data if t.mode == "markers" and t.x[0] is not None]
    drawn = {y: x for t in dots for x, y in zip(t.x, t.y)}
    assert set(drawn) == set(top.index)
    for taxon, v in drawn.items():
        assert v == pytest.approx(top.loc[taxon, "log2_ratio"], rel=1e-12)
    # the reference line "all taxa alike" sits at the total's ratio
    ref = low.size_reference["log2_ratio"]
    lines = [s for s in fig.layout.shapes if s.type == "line"]
    assert any(s.x0 == pytest.approx(ref) and s.x1 == pytest.approx(ref) for s in lines)
    assert any(s.type == "rect" and s.x0 == pytest.approx(low.size_reference["ci_low"])
               for s in fig.layout.shapes)
    assert any("all taxa alike" in (t.name or "") for t in fig.data)
    # colour says whether the interval of the departure excludes 0
    for t in dots:
        flag = top.loc[list(t.y), "differs_from_total"].astype(bool)
        want = (FRACTION_COLOURS["shape_only"] if t.name == "differs from total"
                else FRACTION_COLOURS["size_only"])
        assert t.marker.color == want
        assert flag.all() if t.name == "differs from total" else not flag.any()
    _fonts_ok(fig)
    assert fig.layout.legend.title.text == "log2 ratio"
    assert "log2 ratio" in fig.layout.xaxis.title.text and "per sample" in \
        fig.layout.xaxis.title.text
    assert all(str(y) in h for t in dots for y, h in zip(t.y, t.hovertext))


def test_size_figure_draws_infinite_ratios_at_the_edge():
    x = np.array([[5, 3, 2], [4, 4, 1], [6, 2, 3], [1, 9, 0], [2, 7, 0.0], [1, 8, 0]])
    idx = list("pqrstu")
    tab = tly.CommunityTable(pd.DataFrame(x, index=idx, columns=list("xyz")),
                             pd.DataFrame({"g": ["a"] * 3 + ["b"] * 3}, index=idx))
    k = tly.taxon_contributions(tab, "g", "a", "b", pseudocount=0)
    fig = k.figure("size")
    xs = np.concatenate([np.asarray(t.x, dtype=float) for t in fig.data
                         if t.mode == "markers" and t.x[0] is not None])
    assert np.isfinite(xs).all()
    symbols = [s for t in fig.data if t.mode == "markers" and t.x[0] is not None
               for s in t.marker.symbol]
    assert "triangle-left" in symbols
    assert any("seen in one group only" in (t.name or "") for t in fig.data)


def test_figures_are_new_and_leave_the_result_alone(high):
    before = high.shape.copy()
    f1, f2 = high.figure("shape"), high.figure("shape")
    assert f1 is not f2
    pd.testing.assert_frame_equal(high.shape, before)
    with pytest.raises(ValueError, match="top"):
        taxon_size_figure(high, top=0)
    assert len(high.figure("size", top=3).layout.yaxis.categoryarray) == 3


def test_one_sample_group_draws_without_intervals():
    x = np.array([[5, 3, 0, 2], [4, 4, 1, 1], [6, 2, 0, 3], [1, 9, 2, 0.0]])
    idx = ["p", "q", "r", "s"]
    tab = tly.CommunityTable(pd.DataFrame(x, index=idx, columns=list("wxyz")),
                             pd.DataFrame({"g": ["a", "a", "a", "b"]}, index=idx))
    k = tly.taxon_contributions(tab, "g", "a", "b")
    size = k.figure("size")
    assert any(t.name == "no interval" for t in size.data)
    assert not any(s.type == "rect" for s in size.layout.shapes)
    assert "no intervals" in k.figure("shape").layout.title.subtitle.text
