"""Partition bars, fractions by shape dimensions, scan heatmap."""
from __future__ import annotations

import numpy as np
import plotly.graph_objects as go
import pytest

from tallyform.core.errors import InputError
from tallyform.core.partition import FRACTIONS
from tallyform.render import plots
from tallyform.render.style import FONT_SIZE, FRACTION_COLOURS, PRESENT_FONT_SIZE

from figure_checks import parse_percent


def _by_fraction(fig):
    return {t.meta["fraction"]: t for t in fig.data}


def test_bars_one_trace_per_fraction_in_fixed_colours(partition):
    fig = plots.partition_bars(partition)
    assert isinstance(fig, go.Figure)
    assert len(fig.data) == 4
    traces = _by_fraction(fig)
    assert list(traces) == list(FRACTIONS)
    for f, t in traces.items():
        assert t.marker.color == FRACTION_COLOURS[f]
        assert t.orientation == "h"
    assert fig.layout.showlegend is True
    assert fig.layout.legend.title.text == "fraction"
    assert "share of the variation" in fig.layout.xaxis.title.text
    assert fig.layout.font.size >= 14


def test_bars_print_the_results_fractions(partition):
    fig = plots.partition_bars(partition)
    for f, t in _by_fraction(fig).items():
        assert t.x[0] == pytest.approx(partition.fractions[f])
        # the printed percentage rounds the result's own fraction (0.05 points)
        assert parse_percent(t.text[0]) == pytest.approx(partition.fractions[f], abs=5e-4)
        assert t.text[0] in t.hovertext[0]


def test_negative_shared_is_drawn_left_of_zero(negative_partition):
    fig = plots.partition_bars(negative_partition)
    shared = _by_fraction(fig)["shared"]
    assert fig.layout.barmode == "relative"     # negative segments stack left of zero
    assert shared.x[0] == pytest.approx(-0.08)
    assert fig.layout.xaxis.range[0] < -0.08    # and the axis shows them
    labels = [a.text for a in fig.layout.annotations if a.name == "negative fraction"]
    assert len(labels) == 1 and "-8.0 %" in labels[0]
    # the positive segments reach 1 + 0.08 and stay on the axis
    assert fig.layout.xaxis.range[1] >= 1.08


def test_bars_note_the_negative_eigenvalue_share(partition):
    assert partition.negative_share > 0.01          # Bray-Curtis here is not Euclidean
    fig = plots.partition_bars(partition)
    tick = fig.layout.yaxis.ticktext[0]
    assert f"negative eigenvalues {100 * partition.negative_share:.1f} %" in tick


def test_bars_from_scan_one_bar_per_cell(grid):
    fig = plots.partition_bars(grid)
    assert len(fig.data) == 4
    assert len(fig.data[0].y) == len(grid.frame)
    assert fig.data[0].y[0] == "bray_curtis"
    assert "sqrt + hellinger" in fig.data[0].y
    for f, t in _by_fraction(fig).items():
        np.testing.assert_allclose(np.asarray(t.x, float), grid.frame[f].to_numpy(float))
        printed = np.array([parse_percent(x) for x in t.text])
        np.testing.assert_allclose(printed, grid.frame[f].to_numpy(float), atol=5e-4)


def test_bars_from_list_and_bad_input(partition, negative_partition):
    fig = plots.partition_bars([partition, negative_partition], title="Two")
    assert list(fig.data[0].y) == ["bray_curtis", "bray_curtis (2)"]
    assert fig.layout.title.text.startswith("Two")
    with pytest.raises(InputError, match="SizeShapeResult"):
        plots.partition_bars([1, 2])


def test_present_enlarges_fonts(partition):
    assert plots.partition_bars(partition).layout.font.size == FONT_SIZE
    assert plots.partition_bars(partition, present=True).layout.font.size == \
        PRESENT_FONT_SIZE


def test_dims_figure(partition):
    fig = partition.figure(kind="dims")
    dims = partition.by_dims()
    assert len(fig.data) == 4
    for f, t in _by_fraction(fig).items():
        assert t.line.color == FRACTION_COLOURS[f]
        np.testing.assert_allclose(np.asarray(t.y, float), dims[f].to_numpy(float))
        assert list(t.x) == list(dims.index)
    used = [s for s in fig.layout.shapes if s.x0 == partition.shape_dims]
    assert used, "the k used is marked"
    assert "shape dimensions" in fig.layout.xaxis.title.text
    assert "%" in fig.layout.yaxis.title.text


def test_scan_heatmap_annotated(grid):
    fig = grid.figure()
    assert len(fig.data) == 1
    hm = fig.data[0]
    pivot = grid.pivot("size_only")
    np.testing.assert_allclose(np.asarray(hm.z, float), pivot.to_numpy(float))
    assert list(hm.y) == list(pivot.index) and list(hm.x) == list(pivot.columns)
    printed = np.array([[parse_percent(x) for x in row] for row in hm.text])
    np.testing.assert_allclose(printed, pivot.to_numpy(float), atol=5e-4)
    assert hm.colorscale[-1][1] == FRACTION_COLOURS["size_only"]
    assert fig.layout.xaxis.title.text.startswith("transform")
    assert fig.layout.yaxis.title.text == "measure"
    assert "size only" in hm.colorbar.title.text
    with pytest.raises(InputError, match="value"):
        grid.figure(value="nonsense")


def test_scan_heatmap_other_fraction_and_bars_kind(grid):
    fig = grid.figure(value="shape_only")
    assert fig.data[0].colorscale[-1][1] == FRACTION_COLOURS["shape_only"]
    assert len(grid.figure(kind="bars").data) == 4
    with pytest.raises(InputError, match="kind"):
        grid.figure(kind="pie")


def test_figure_methods_match_functions(partition):
    a = partition.figure()
    b = plots.partition_bars(partition)
    assert a.to_dict() == b.to_dict()


def test_undefined_cells_are_said_not_hidden(grid):
    import dataclasses
    frame = grid.frame.copy()
    frame.loc[1, ["size_only", "shared", "shape_only", "residual", "negative_share"]] = np.nan
    frame.loc[1, "error"] = "undefined for zeros (synthetic)"
    broken = dataclasses.replace(grid, frame=frame,
                                 results={k: v for k, v in grid.results.items()
                                          if k != tuple(frame.loc[1, ["transform", "measure"]])})
    bars = plots.partition_bars(broken)
    assert "undefined for these data" in bars.layout.yaxis.ticktext[1]
    assert "undefined for zeros" in bars.data[0].hovertext[1]
    heat = plots.scan_heatmap(broken)
    row = list(heat.data[0].y).index(frame.loc[1, "measure"])
    col = list(heat.data[0].x).index(frame.loc[1, "transform"])
    assert heat.data[0].text[row][col] == "n/a"
    assert "undefined for zeros" in heat.data[0].hovertext[row][col]


# ---------------------------------------------------------------------------- intervals
def test_bars_with_intervals_add_a_panel_of_whiskers(partition_ci):
    fig = plots.partition_bars(partition_ci)
    bars = [t for t in fig.data if t.type == "bar"]
    marks = [t for t in fig.data if t.type == "scatter"]
    assert len(bars) == 4 and len(marks) == 4
    ci = partition_ci.fractions_ci
    for t in marks:
        f = t.meta["fraction"]
        assert t.meta["kind"] == "interval" and t.marker.color == FRACTION_COLOURS[f]
        v = partition_ci.fractions[f]
        assert t.x[0] == pytest.approx(v)
        # the whiskers reach the result's interval
        assert v + t.error_x.array[0] == pytest.approx(ci.loc[f, "high"])
        assert v - t.error_x.arrayminus[0] == pytest.approx(ci.loc[f, "low"])
        assert "95 % interval" in t.hovertext[0]
    assert "95 % interval" in fig.layout.xaxis2.title.text
    hover = bars[2].hovertext[0]           # shape only: test and counting-noise range
    assert "Monte Carlo test: p =" in hover and "counting noise alone" in hover


def test_scan_with_intervals(grid_ci):
    fig = plots.partition_bars(grid_ci)
    marks = [t for t in fig.data if t.type == "scatter"]
    assert len(marks) == 4 and len(marks[0].x) == len(grid_ci.frame)
    np.testing.assert_allclose(
        np.asarray(marks[0].x) - np.asarray(marks[0].error_x.arrayminus),
        grid_ci.frame["size_only_low"].to_numpy(float))
    heat = plots.scan_heatmap(grid_ci)
    lo = grid_ci.pivot("size_only_low").to_numpy(float)
    text = heat.data[0].text[0][0]
    assert text.startswith(f"{100 * grid_ci.pivot('size_only').iat[0, 0]:.1f} %")
    assert f"({100 * lo[0, 0]:.0f} to" in text
    assert "interval" in heat.layout.title.text


def test_choice_difference_figure(comparison):
    fig = comparison.figure()
    assert [t.meta["fraction"] for t in fig.data] == list(FRACTIONS)
    fr = comparison.frame
    for t in fig.data:
        f = t.meta["fraction"]
        assert t.x[0] == pytest.approx(fr.loc[f, "difference"])
        assert t.x[0] + t.error_x.array[0] == pytest.approx(fr.loc[f, "high"])
        assert t.x[0] - t.error_x.arrayminus[0] == pytest.approx(fr.loc[f, "low"])
        assert t.marker.color == FRACTION_COLOURS[f]
    assert any(s.x0 == 0 for s in fig.layout.shapes)          # the zero line
    assert "removes" in fig.layout.title.text
    with pytest.raises(InputError, match="ChoiceComparison"):
        plots.choice_difference_figure(comparison.frame)


def test_examples_are_doctests():
    # the Examples sections of the partition figures run as written
    import doctest

    import tallyform.render.partition_plots as partition_plots
    result = doctest.testmod(partition_plots, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.failed == 0 and result.attempted >= 4
