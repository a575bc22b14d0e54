"""One look for every figure: palette, fraction colours, fonts readable on a projector.

Every figure module takes its colours, symbols and sizes from here, so a group, a fraction or
a negative eigenvalue looks the same in every figure.
"""
from __future__ import annotations

import pandas as pd

__all__ = ["OKABE_ITO", "FRACTION_COLOURS", "FRACTION_LABELS", "FONT_SIZE", "TITLE_SIZE",
           "PRESENT_FONT_SIZE", "SYMBOLS", "NEUTRAL", "MARKER_EDGE", "OBSERVED", "EIGEN_COLOURS",
           "group_colours", "group_levels", "sizes", "base_layout", "layout_dict", "merged",
           "vertical_line", "subtitle"]

# Colour-blind-safe qualitative palette (Okabe & Ito 2008), for groups. The yellow is hard
# to see on white, so it comes last (a ninth group cycles back to orange).
OKABE_ITO = ["#E69F00", "#56B4E9", "#009E73", "#0072B2", "#D55E00", "#CC79A7", "#000000",
             "#F0E442"]

# One accent per partition fraction, the same in every figure (legend always shown).
FRACTION_COLOURS = {
    "size_only": "#D55E00",     # vermillion: total abundance
    "shared": "#CC79A7",        # reddish purple: cannot be told apart
    "shape_only": "#0072B2",    # blue: composition
    "residual": "#C8C8C8",      # grey: unexplained
}
FRACTION_LABELS = {"size_only": "size only", "shared": "shared (size and shape)",
                   "shape_only": "shape only", "residual": "residual"}

# Marker shapes for a second factor (chosen to stay distinct in black and white).
SYMBOLS = ["circle", "square", "diamond", "triangle-up", "triangle-down", "cross", "x",
           "star", "hexagon", "pentagon"]

NEUTRAL = "#7F7F7F"      # permuted statistics, taxa, anything that is not a group
MARKER_EDGE = "rgba(0, 0, 0, 0.45)"   # thin dark edge: keeps the yellow group visible
OBSERVED = "#000000"     # an observed statistic, a nominal rate
# Eigenvalues in a scree plot: positive axes (constrained darker), negative ones hatched.
EIGEN_COLOURS = {"constrained": "#0072B2", "positive": "#56B4E9", "negative": "#D55E00"}

FONT_SIZE = 16          # >= 14 px at projector size
TITLE_SIZE = 20
PRESENT_FONT_SIZE = 22  # presentation mode (projector at the back of a room)


def sizes(present: bool = False) -> dict:
    """Font, title, marker and line sizes for normal or presentation (``present``) mode."""
    if present:
        return {"font": PRESENT_FONT_SIZE, "title": PRESENT_FONT_SIZE + 6, "marker": 13,
                "line": 3.5, "small": PRESENT_FONT_SIZE - 4}
    return {"font": FONT_SIZE, "title": TITLE_SIZE, "marker": 9, "line": 2.5,
            "small": FONT_SIZE - 2}


def group_levels(values) -> list[str]:
    """Level order of figures: categorical order, else the order of the file (first
    appearance), the order of the totals tables (``tab.totals_by``), so that a table and
    the figure beside it list the groups alike; colours follow this order everywhere.
    """
    s = values if isinstance(values, pd.Series) else pd.Series(list(values), dtype=object)
    s = s.dropna()
    if isinstance(s.dtype, pd.CategoricalDtype):
        return [str(c) for c in s.cat.categories if (s == c).any()]
    return [str(x) for x in pd.unique(s.astype(str))]


def group_colours(levels) -> dict:
    """Okabe-Ito colour per group level, in the order given (cycling past 8 levels)."""
    return {lv: OKABE_ITO[i % len(OKABE_ITO)] for i, lv in enumerate(levels)}


def subtitle(title: str | None, *lines: str) -> str | None:
    """A title with smaller explanatory lines under it (plain HTML, works in every plotly)."""
    lines = [ln for ln in lines if ln]
    if not title and not lines:
        return None
    body = "".join(f"<br><span style='font-size:0.72em'>{ln}</span>" for ln in lines)
    return f"{title or ''}{body}"


# trace types whose white-look defaults we keep (scatter has none that we draw)
_TRACE_TYPES = ("bar", "box", "heatmap", "histogram")
# parts of the white layout no figure of ours uses (maps, polar and 3-D axes; every
# heatmap names its own colour scale)
_UNUSED_LAYOUT = ("geo", "polar", "scene", "ternary", "colorscale")
_TEMPLATE = None


def _template():
    """The white look (plotly's "plotly_white" layout and the defaults of the trace types we
    draw), built once: a template of every trace type costs several times more to apply and
    compare, on every redraw of a live figure."""
    global _TEMPLATE
    if _TEMPLATE is None:
        import plotly.graph_objects as go
        import plotly.io as pio
        white = pio.templates["plotly_white"].to_plotly_json()
        layout = {k: v for k, v in white["layout"].items() if k not in _UNUSED_LAYOUT}
        data = {k: [{x: y for x, y in t.items() if x != "colorscale"} for t in v]
                for k, v in white.get("data", {}).items() if k in _TRACE_TYPES}
        _TEMPLATE = go.layout.Template(layout=layout, data=data)
    return _TEMPLATE


def merged(base: dict, *more: dict) -> dict:
    """``base`` with each dict of ``more`` merged into it, nested dicts key by key (a new
    dict; the inputs are not changed). Figures gather their whole layout this way and hand
    it to plotly once: every separate ``update_layout`` is validated anew, which made the
    layout cost more than the traces on the live path."""
    out = dict(base)
    for extra in more:
        for key, value in extra.items():
            if isinstance(value, dict) and isinstance(out.get(key), dict):
                out[key] = merged(out[key], value)
            else:
                out[key] = value
    return out


def layout_dict(*, title: str | None = None, legend_title: str | None = None,
                font_size: int | None = None, height: int | None = None,
                present: bool = False) -> dict:
    """The shared layout (white template, large fonts, legend shown) as one plain dict.

    ``present=True`` enlarges every font for a projector; ``font_size`` overrides both.
    """
    sz = sizes(present)
    font_size = sz["font"] if font_size is None else font_size
    n_title_lines = (title or "").count("<br>") + 1 if title else 0
    # the title hangs from the top of the figure; the top margin grows with its lines
    line = round(1.35 * (font_size + 4))       # plotly spaces every title line alike
    top = font_size + 6 + line * n_title_lines + 8 if title else 40
    out = {
        "template": _template(),
        "font": {"size": font_size, "family": "Arial, Helvetica, sans-serif",
                 "color": "#222222"},
        "title": {"text": title, "font": {"size": font_size + 4}, "x": 0.01,
                  "xanchor": "left", "y": 1.0, "yref": "container", "yanchor": "top",
                  "pad": {"t": font_size + 6}} if title else None,
        "legend": {"title": {"text": legend_title}} if legend_title else {},
        "showlegend": True,
        "margin": {"l": 70, "r": 30, "t": top, "b": 60},
        "hoverlabel": {"font": {"size": font_size - 2}},
    }
    if height:
        out["height"] = height
    return out


def base_layout(fig, *, title: str | None = None, legend_title: str | None = None,
                font_size: int | None = None, height: int | None = None,
                present: bool = False, extra: dict | None = None):
    """Apply the shared layout (:func:`layout_dict`), merged with ``extra``, in one update,
    and return fig."""
    lay = layout_dict(title=title, legend_title=legend_title, font_size=font_size,
                      height=height, present=present)
    # one assignment of the merged whole: about a third of the cost of update_layout,
    # which walks and validates the figure's layout key by key
    current = fig.layout.to_plotly_json()
    current.pop("template", None)
    fig.layout = merged(current, lay, extra or {})
    return fig


def vertical_line(x: float, line: dict, *, xref: str = "x", yref: str = "y") -> dict:
    """A line across the whole height of a plot at ``x`` (a layout shape), as plotly's
    ``add_vline`` draws it, for figures that set their layout in one update."""
    return {"type": "line", "x0": x, "x1": x, "xref": xref, "y0": 0, "y1": 1,
            "yref": f"{yref} domain", "line": line}
