"""Figures for taxon contributions: which taxa carry the shape and the size difference.

Pure functions: a :class:`~tallyform.core.contributions.TaxonContributions` in, a new
plotly Figure out. Every number shown is read from the result; nothing is estimated here.
"""
from __future__ import annotations

import math

import numpy as np
import plotly.graph_objects as go

from .style import FONT_SIZE, FRACTION_COLOURS, base_layout, group_colours

__all__ = ["taxon_shape_figure", "taxon_size_figure"]

_NO_INTERVAL = "#8C8C8C"


def _top(top) -> int:
    if isinstance(top, bool) or not isinstance(top, (int, np.integer)) or top < 1:
        raise ValueError(f"`top` must be a whole number of at least 1; got {top!r}.")
    return int(top)


def _height(k: int) -> int:
    return int(200 + 30 * k)


def _pct(v) -> str:
    return "n/a" if v is None or (isinstance(v, float) and math.isnan(v)) else f"{v:.3g} %"


def _num(v) -> str:
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return "n/a"
    if isinstance(v, float) and math.isinf(v):
        return "infinite" if v > 0 else "minus infinite"
    return f"{v:.3g}"


def taxon_shape_figure(result, *, top: int = 15, title: str | None = None) -> go.Figure:
    """Diverging bars: each taxon's share of the shape difference, towards the group where
    it is higher; a diamond at its noise-corrected share with the interval for its share of
    the true difference.

    Parameters
    ----------
    result : TaxonContributions
    top : int, default 15
        How many taxa (the largest shares).
    title : str, optional

    Returns
    -------
    plotly.graph_objects.Figure
    """
    k = _top(top)
    a, b = result.a, result.b
    tab = result.shape.head(k)
    colours = group_colours([a, b])
    taxa = [str(t) for t in tab.index]
    fig = go.Figure()
    for grp, sign in ((a, -1.0), (b, 1.0)):
        part = tab[tab["higher_in"] == grp]
        if part.empty:
            continue
        share = part["share_pct"].to_numpy(dtype=float)
        hover = [f"<b>{t}</b><br>share of the observed difference {_pct(s)}"
                 f"<br>term {_num(tm)}<br>mean relative abundance: {a} {_pct(100 * ma)}, "
                 f"{b} {_pct(100 * mb)}<br>higher in {grp}"
                 for t, s, tm, ma, mb in zip(part.index, share, part["term"],
                                             part["mean_a"], part["mean_b"])]
        fig.add_trace(go.Bar(
            x=sign * share, y=[str(t) for t in part.index], orientation="h", name=grp,
            marker={"color": colours[grp]}, hovertext=hover, hoverinfo="text",
            meta={"role": "share"}))
    _add_true_share(fig, result, tab, a)
    if "noise_pct" in tab and np.isfinite(tab["noise_pct"].to_numpy(dtype=float)).any():
        sign = np.where(tab["higher_in"] == a, -1.0, 1.0)
        noise = tab["noise_pct"].to_numpy(dtype=float)
        fig.add_trace(go.Scatter(
            x=sign * noise, y=taxa, mode="markers", name="expected from noise alone",
            marker={"symbol": "line-ns-open", "size": 18, "color": "#333333",
                    "line": {"width": 2}},
            hovertext=[f"<b>{t}</b><br>expected share if the groups had the same centroid: "
                       f"{_pct(v)}" for t, v in zip(taxa, noise)], hoverinfo="text",
            meta={"role": "noise"}))
    if result.exact:
        kind = f"{result.measure}, exact split of D² = {_num(result.total)}"
        if result.noise is not None:
            kind += (f" (noise level {_num(result.noise)}; corrected "
                     f"{_num(result.total_corrected)})")
    else:
        kind = (f"{result.measure}, average over between-group pairs (not an exact split), "
                f"mean {_num(result.total)}")
    what = ("share of D², the squared centroid distance (%)" if result.exact
            else "share of the mean between-group dissimilarity (%)")
    shown = float(tab["share_pct"].sum()) if len(tab) else 0.0
    ends = np.concatenate([tab["share_pct"].to_numpy(dtype=float),
                           tab["ci_high"].to_numpy(dtype=float)])
    ends = ends[np.isfinite(ends)]
    vals, text = _mirrored_ticks(float(ends.max()) if ends.size else 1.0)
    fig.add_vline(x=0, line={"color": "#333333", "width": 1})
    fig.update_layout(barmode="relative", bargap=0.25)
    fig.update_xaxes(title_text=f"← higher in {a}      {what}      higher in {b} →",
                     zeroline=False, tickvals=vals, ticktext=text)
    fig.update_yaxes(title_text="taxon", type="category", categoryorder="array",
                     categoryarray=taxa, autorange="reversed")
    head = title or f"Which taxa make the shape difference: {a} vs {b}"
    base_layout(fig, title=head, legend_title="higher in", height=_height(len(taxa)))
    ci = (f"{result.level:.0%} jackknife intervals for each taxon's share of the true "
          "difference" if result.interval_method != "none" else "no intervals")
    fig.update_layout(title_subtitle_text=(
        f"{kind}<br>top {len(taxa)} of {len(result.shape)} taxa ({shown:.1f} % of the "
        f"total); {ci}"), title_subtitle_font_size=FONT_SIZE - 2, margin_t=120)
    return fig


def _add_true_share(fig: go.Figure, result, tab, a: str) -> None:
    """Diamonds at the noise-corrected shares with the intervals for the true shares,
    mirrored like the bars."""
    lo = tab["ci_low"].to_numpy(dtype=float)
    hi = tab["ci_high"].to_numpy(dtype=float)
    est = tab["share_net_pct"].to_numpy(dtype=float)
    if not (np.isfinite(lo).any() or np.isfinite(est).any()):
        return
    sign = np.where(tab["higher_in"] == a, -1.0, 1.0)
    centre = np.where(np.isfinite(est), np.clip(est, 0.0, 100.0), (lo + hi) / 2)
    x = sign * centre
    # the far end (away from 0) is the upper bound on both sides
    far, near = hi - centre, centre - lo
    has_ci = bool(np.isfinite(lo).any())
    label = ("share of the true difference<br>(noise removed), with interval" if result.exact
             else "share of the population mean,<br>with interval")
    hover = [f"<b>{t}</b><br>estimated share of the true difference {_pct(e)}"
             f"<br>{result.level:.0%} interval {_pct(l)} to {_pct(h)}"
             for t, e, l, h in zip(tab.index, est, lo, hi)]
    fig.add_trace(go.Scatter(
        x=x, y=[str(t) for t in tab.index], mode="markers", name=label,
        marker={"symbol": "diamond", "size": 9, "color": "#333333"},
        error_x=dict(type="data", symmetric=False, visible=has_ci, thickness=1.5, width=4,
                     color="#333333", array=np.where(sign > 0, far, near),
                     arrayminus=np.where(sign > 0, near, far)),
        hovertext=hover, hoverinfo="text", meta={"role": "true share"}))


def _mirrored_ticks(extent: float) -> tuple[list, list]:
    """Tick positions on both sides of 0, labelled without a sign (shares are >= 0)."""
    extent = max(extent, 1e-9)
    step = next((s for s in (0.1, 0.2, 0.5, 1, 2, 5, 10, 20, 25, 50) if extent / s <= 4), 50)
    k = int(np.ceil(extent / step))
    pos = [step * i for i in range(0, k + 1)]
    vals = [-v for v in pos[:0:-1]] + pos
    return vals, [f"{abs(v):g}" for v in vals]


def taxon_size_figure(result, *, top: int = 15, title: str | None = None) -> go.Figure:
    """Dots and intervals: each taxon's log2 ratio of mean abundance (b / a), against the
    total's ratio (the line where all taxa change alike: a pure size difference).

    Parameters
    ----------
    result : TaxonContributions
    top : int, default 15
        How many taxa (those with the largest absolute change in mean abundance).
    title : str, optional

    Returns
    -------
    plotly.graph_objects.Figure
    """
    k = _top(top)
    a, b = result.a, result.b
    tab = result.size.head(k)
    taxa = [str(t) for t in tab.index]
    ratio = tab["log2_ratio"].to_numpy(dtype=float)
    lo = tab["ci_low"].to_numpy(dtype=float)
    hi = tab["ci_high"].to_numpy(dtype=float)
    ref = result.size_reference
    finite = np.concatenate([v[np.isfinite(v)] for v in (ratio, lo, hi)]
                            + [np.array([ref["log2_ratio"], 0.0])])
    edge = float(np.max(np.abs(finite))) + 1.0
    unit = f" per unit of {result.per_effort}" if result.per_effort else " per sample"
    differs = tab["differs_from_total"]
    classes = [("differs from total", FRACTION_COLOURS["shape_only"],
                differs.fillna(False).to_numpy(dtype=bool)),
               ("consistent with total", FRACTION_COLOURS["size_only"],
                (~differs.fillna(True)).to_numpy(dtype=bool)),
               ("no interval", _NO_INTERVAL, differs.isna().to_numpy(dtype=bool))]
    fig = go.Figure()
    if np.isfinite(ref.get("ci_low", np.nan)):
        fig.add_vrect(x0=ref["ci_low"], x1=ref["ci_high"], fillcolor=FRACTION_COLOURS[
            "size_only"], opacity=0.12, line_width=0, layer="below")
    fig.add_vline(x=0, line={"color": "#999999", "width": 1, "dash": "dot"})
    fig.add_vline(x=ref["log2_ratio"], line={"color": FRACTION_COLOURS["size_only"],
                                             "width": 2, "dash": "dash"})
    fig.add_trace(go.Scatter(
        x=[None], y=[None], mode="lines",
        name=f"total ({ref['log2_ratio']:.2f}):<br>all taxa alike",
        line={"color": FRACTION_COLOURS["size_only"], "width": 2, "dash": "dash"}))
    for name, colour, mask in classes:
        if not mask.any():
            continue
        r, l, h = ratio[mask], lo[mask], hi[mask]
        # infinite ratios (a taxon seen in one group, no pseudocount) sit at the edge
        shown = np.clip(r, -edge, edge)
        symbol = ["triangle-right" if v == np.inf else "triangle-left" if v == -np.inf
                  else "circle" for v in r]
        has_ci = bool(np.isfinite(l).any())
        err = dict(type="data", symmetric=False, visible=has_ci, thickness=1.5, width=4,
                   color=colour, array=np.clip(h, -edge, edge) - shown,
                   arrayminus=shown - np.clip(l, -edge, edge))
        sub = tab[mask]
        hover = [f"<b>{t}</b><br>log2 ratio {_num(v)} (interval {_num(x)} to {_num(y)})"
                 f"<br>mean{unit}: {a} {_num(ma)}, {b} {_num(mb)}"
                 f"<br>departure from the total's ratio {_num(dp)}"
                 + (f"<br>seen only in {o}" if o else "")
                 for t, v, x, y, ma, mb, dp, o in zip(sub.index, r, l, h, sub["mean_a"],
                                                      sub["mean_b"], sub["departure"],
                                                      sub["only_in"])]
        fig.add_trace(go.Scatter(
            x=shown, y=[str(t) for t in sub.index], mode="markers", name=name,
            marker={"color": colour, "size": 11, "symbol": symbol}, error_x=err,
            hovertext=hover, hoverinfo="text"))
    if not np.isfinite(ratio).all():
        fig.add_trace(go.Scatter(
            x=[None], y=[None], mode="markers", name="seen in one group only<br>"
            "(infinite ratio, drawn at the edge)",
            marker={"symbol": "triangle-left", "size": 11, "color": _NO_INTERVAL}))
    fig.update_xaxes(title_text=f"log2 ratio of mean abundance{unit}, {b} / {a} "
                                "(1 = twofold)")
    fig.update_yaxes(title_text="taxon", type="category", categoryorder="array",
                     categoryarray=taxa, autorange="reversed")
    head = title or f"Which taxa carry the size difference: {b} / {a}"
    base_layout(fig, title=head, legend_title="log2 ratio", height=_height(len(taxa)))
    ci = (f"{result.level:.0%} jackknife intervals for the true ratios (shaded: the total's)"
          if result.interval_method != "none" else "no intervals")
    fig.update_layout(title_subtitle_text=(
        f"top {len(taxa)} of {len(result.size)} taxa by change in mean abundance{unit}; "
        f"{ci}"), title_subtitle_font_size=FONT_SIZE - 2, margin_t=110)
    fig.add_annotation(text="no change", x=0, xref="x", y=1.0, yref="paper",
                       yanchor="bottom", showarrow=False, font={"size": FONT_SIZE - 2,
                                                                "color": "#777777"})
    return fig
