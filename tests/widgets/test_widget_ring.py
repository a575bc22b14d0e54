"""The interaction ring computes nothing: no numerical libraries imported by the widgets."""
from __future__ import annotations

import ast
from pathlib import Path

WIDGETS = Path(__file__).resolve().parents[2] / "tallyform" / "widgets"


def test_widgets_import_no_numerical_library():
    # DESIGN.md: widgets hold state and call the core; every number comes from a result
    for f in WIDGETS.rglob("*.py"):
        for node in ast.walk(ast.parse(f.read_text())):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.module and not node.level:
                names = [node.module]
            for name in names:
                assert name.split(".")[0] not in {"numpy", "scipy", "statsmodels", "sklearn",
                                                  "numba"}, (f.name, name)
                assert not name.startswith("tallyform.cli"), (f.name, name)


def test_examples_run():
    # the Examples sections of the widget modules are doctests
    import doctest

    from tallyform.widgets import common, dashboard
    for mod in (common, dashboard):
        result = doctest.testmod(mod, optionflags=doctest.NORMALIZE_WHITESPACE)
        assert result.failed == 0 and result.attempted > 0, mod.__name__


def test_copy_figure_gives_the_figure_exactly():
    # successive copies (the fast path reuses the template) leave exactly the new figure
    import plotly.graph_objects as go

    from tallyform.render.style import base_layout
    from tallyform.widgets.common import copy_figure, new_figure_widget
    first = base_layout(go.Figure(go.Bar(x=[1, 2], y=[3, 4])), title="one")
    first.add_annotation(x=1, y=3, text="only in the first")
    first.update_layout(xaxis_title="x")
    second = base_layout(go.Figure(go.Scatter(x=[1], y=[2])), title="two")
    third = base_layout(go.Figure(go.Scatter(x=[1], y=[2])), title="three", present=True)
    fw = new_figure_widget("tf-x")

    def drop_empty(layout):     # a reset key reads {} or [], which plotly draws as absent
        return {k: v for k, v in layout.items() if v not in ({}, [])}
    for fig in (first, second, third, first, second):
        copy_figure(fw, fig)
        got, want = fw.to_plotly_json(), fig.to_plotly_json()
        for trace in got["data"]:
            trace.pop("uid", None)
        assert drop_empty(got["layout"]) == drop_empty(want["layout"])
        assert got["data"] == want["data"]
