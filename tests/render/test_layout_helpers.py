"""The layout helpers behind the one-update figures: ``merged``, ``layout_dict`` /
``base_layout(extra=)`` and ``vertical_line`` give the figure that plotly's own sequence of
``update_layout`` / ``add_vline`` calls gives (the reference: plotly's merge rules), and
per-point hover strings passed as arrays serialise like lists."""
from __future__ import annotations

import json

import numpy as np
import plotly.graph_objects as go
import plotly.io as pio
import pytest

from tallyform.render.ordination_plots import texts
from tallyform.render.style import base_layout, layout_dict, merged, vertical_line


def test_merged_is_nested_and_leaves_its_inputs_alone():
    a = {"legend": {"title": {"text": "x"}, "x": 0}, "margin": {"l": 1}, "shapes": [1]}
    b = {"legend": {"orientation": "h"}, "margin": {"b": 2}, "shapes": [2], "title": None}
    out = merged(a, b)
    assert out == {"legend": {"title": {"text": "x"}, "x": 0, "orientation": "h"},
                   "margin": {"l": 1, "b": 2}, "shapes": [2], "title": None}
    assert a == {"legend": {"title": {"text": "x"}, "x": 0}, "margin": {"l": 1},
                 "shapes": [1]}
    assert b["legend"] == {"orientation": "h"}


EXTRAS = [
    {},
    {"legend": {"orientation": "h", "y": 0.0}, "margin": {"b": 99}, "barmode": "relative",
     "xaxis": {"title": {"text": "share"}, "range": [-0.2, 1.1]},
     "yaxis": {"autorange": "reversed", "tickvals": ["a", "b"]}},
    {"legend": {"groupclick": "togglegroup"}, "yaxis": {"scaleanchor": "x", "scaleratio": 1},
     "annotations": [{"x": 1, "y": 2, "text": "note", "showarrow": False}]},
]


@pytest.mark.parametrize("extra", EXTRAS)
@pytest.mark.parametrize("kw", [dict(title="T<br>line", legend_title="grp"),
                                dict(present=True, height=500), dict()])
def test_one_update_equals_plotlys_sequence_of_updates(extra, kw):
    ours = base_layout(go.Figure(go.Scatter(x=[1, 2], y=[3, 4])), extra=extra, **kw)
    ref = go.Figure(go.Scatter(x=[1, 2], y=[3, 4]))
    ref.update_layout(layout_dict(**kw))
    for key, value in extra.items():            # plotly merges nested dicts key by key
        ref.update_layout({key: value})
    # an empty object (plotly's record of a property set to None) is the property's default
    assert _drop_empty(ours.to_plotly_json()["layout"]) == \
        _drop_empty(ref.to_plotly_json()["layout"])


def _drop_empty(d: dict) -> dict:
    return {k: v for k, v in d.items() if v != {}}


def test_base_layout_keeps_what_the_figure_already_has():
    from plotly.subplots import make_subplots
    fig = make_subplots(rows=1, cols=2)
    domain = fig.layout.xaxis2.domain
    base_layout(fig, title="x", extra={"xaxis2": {"title": {"text": "right"}}})
    assert fig.layout.xaxis2.domain == domain and fig.layout.xaxis2.title.text == "right"
    assert fig.layout.yaxis2.anchor == "x2"


@pytest.mark.parametrize("x,line", [(0, {"color": "#222222", "width": 2}),
                                    (0.3, {"color": "red", "dash": "dash"})])
def test_vertical_line_is_plotlys_vline(x, line):
    ref = go.Figure(go.Scatter(x=[0, 1], y=[0, 1])).add_vline(x=x, line=line)
    ours = go.Figure(go.Scatter(x=[0, 1], y=[0, 1]), layout={"shapes": [vertical_line(x, line)]})
    assert ours.to_plotly_json()["layout"]["shapes"] == ref.to_plotly_json()["layout"]["shapes"]


def test_hover_strings_as_an_array_serialise_as_the_list():
    words = [f"<b>s{i}</b><br>grp: é{i}" for i in range(50)]
    arr = texts(words)
    assert isinstance(arr, np.ndarray) and arr.tolist() == words
    fig = go.Figure(go.Scatter(x=np.arange(50), y=np.arange(50), hovertext=arr))
    ref = go.Figure(go.Scatter(x=np.arange(50), y=np.arange(50), hovertext=words))
    assert json.loads(pio.to_json(fig))["data"][0]["hovertext"] == words
    assert json.loads(pio.to_json(fig)) == json.loads(pio.to_json(ref))
