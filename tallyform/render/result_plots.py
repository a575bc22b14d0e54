"""Figures of the smaller results: the size test's ratios, pairwise contrasts, unusual
samples and ellipse outlines. Pure functions: result in, new plotly Figure out."""
from __future__ import annotations

import numpy as np
import plotly.graph_objects as go

from ..core.display import p_words
from .style import NEUTRAL, OBSERVED, base_layout, group_colours, sizes, subtitle

__all__ = ["size_test_figure", "pairwise_figure", "outlier_figure", "ellipse_figure"]


def size_test_figure(result, *, title: str | None = None, present: bool = False) -> go.Figure:
    """Each group's ratio of totals to the reference group, with its interval, on a log axis.

    Only the numbers of the result are drawn (``summary``: ratio, ci_low, ci_high); the
    reference group sits at 1 with no interval."""
    sz = sizes(present)
    s = result.summary
    levels = [str(x) for x in s.index]
    colours = group_colours(levels)
    fig = go.Figure()
    if {"ratio", "ci_low", "ci_high"} <= set(s.columns):
        ratio = s["ratio"].to_numpy(float)
        lo, hi = s["ci_low"].to_numpy(float), s["ci_high"].to_numpy(float)
        for i, lv in enumerate(levels):
            has_ci = np.isfinite(lo[i]) and np.isfinite(hi[i])
            fig.add_trace(go.Scatter(
                x=[ratio[i]], y=[lv], mode="markers", name=lv,
                marker={"color": colours[lv], "size": sz["marker"] + 3},
                error_x={"type": "data", "symmetric": False, "array": [hi[i] - ratio[i]],
                         "arrayminus": [ratio[i] - lo[i]], "thickness": sz["line"]}
                if has_ci else None,
                hovertext=(f"<b>{lv}</b><br>ratio {ratio[i]:.3g}"
                           + (f" ({lo[i]:.3g} to {hi[i]:.3g})" if has_ci else " (reference)")),
                hoverinfo="text"))
        fig.add_vline(x=1.0, line={"color": NEUTRAL, "dash": "dot"})
        fig.update_xaxes(type="log", title_text="ratio of totals to the reference group")
    else:                                      # no ratios: the group means as they are
        col = "geometric_mean" if "geometric_mean" in s.columns else s.columns[0]
        fig.add_trace(go.Bar(x=s[col].to_numpy(float), y=levels, orientation="h",
                             marker={"color": [colours[lv] for lv in levels]}, name=col))
        fig.update_xaxes(title_text=col.replace("_", " "))
    fig.update_yaxes(title_text=str(result.group), autorange="reversed")
    head = title or f"Size test ({result.method_name}): {p_words(result.pvalue)}"
    return base_layout(fig, title=subtitle(head, f"{result.measure}; {result.effect}"),
                       present=present)


def pairwise_figure(result, *, title: str | None = None, present: bool = False) -> go.Figure:
    """One bar per pair: its statistic, labelled with the adjusted p-value."""
    sz = sizes(present)
    t = result.table
    pairs = [str(x) for x in t.index]
    stat = t[result.statistic_name].to_numpy(float)
    adj = t["pvalue_adjusted"].to_numpy(float)
    fig = go.Figure(go.Bar(
        x=stat, y=pairs, orientation="h", name=result.statistic_name.replace("_", "-"),
        marker={"color": [OBSERVED if p <= 0.05 else NEUTRAL for p in adj]},
        text=[p_words(p) for p in adj], textposition="outside", cliponaxis=False,
        textfont={"size": sz["small"]},
        hovertext=[f"<b>{pr}</b><br>{result.statistic_name} {s:.3g}<br>adjusted "
                   f"{p_words(p)}" for pr, s, p in zip(pairs, stat, adj)], hoverinfo="text"))
    top = float(np.nanmax(stat)) if np.isfinite(stat).any() else 1.0
    fig.update_xaxes(title_text=result.statistic_name.replace("_", "-"),
                     range=[0, 1.25 * max(top, 1e-12)])
    fig.update_yaxes(autorange="reversed")
    adjust = result.adjust or "none"
    head = title or f"Pairwise contrasts of {result.group}"
    return base_layout(fig, title=subtitle(head, f"{result.measure}; p-values adjusted: "
                                                 f"{adjust}; dark bars: adjusted p <= 0.05"),
                       present=present)


def outlier_figure(result, *, title: str | None = None, present: bool = False) -> go.Figure:
    """Every sample's total score against its profile score, the flagged ones named."""
    sz = sizes(present)
    t = result.table
    flagged = t["flagged"].to_numpy(bool)
    names = [str(x) for x in t.index]
    fig = go.Figure()
    for mask, label, colour in ((~flagged, "not flagged", NEUTRAL),
                                (flagged, "flagged", OBSERVED)):
        if not mask.any():
            continue
        fig.add_trace(go.Scatter(
            x=t["total_score"].to_numpy(float)[mask], y=t["profile_score"].to_numpy(float)[mask],
            mode="markers+text" if label == "flagged" else "markers", name=label,
            text=[n for n, m in zip(names, mask) if m] if label == "flagged" else None,
            textposition="top center", marker={"color": colour, "size": sz["marker"]},
            hovertext=[f"<b>{n}</b>" for n, m in zip(names, mask) if m], hoverinfo="text"))
    for v in (-result.threshold, result.threshold):
        fig.add_vline(x=v, line={"color": NEUTRAL, "dash": "dot"})
        fig.add_hline(y=v, line={"color": NEUTRAL, "dash": "dot"})
    fig.update_xaxes(title_text="total score (robust z)")
    fig.update_yaxes(title_text="profile score (robust z)")
    return base_layout(fig, title=subtitle(title or "Unusual samples",
                                           f"dotted lines: the threshold {result.threshold:g}"),
                       present=present)


def ellipse_figure(result, *, title: str | None = None, present: bool = False) -> go.Figure:
    """The outline and centre of every group's ellipse, named by what it covers."""
    from .wording import ellipse_words
    sz = sizes(present)
    groups = list(result.groups)
    colours = group_colours(groups)
    fig = go.Figure()
    for g in groups:
        x, y = result.outline(g)
        row = result.table.loc[g]
        fig.add_trace(go.Scatter(x=x, y=y, mode="lines", name=g, legendgroup=g,
                                 line={"color": colours[g], "width": sz["line"]},
                                 hoverinfo="name"))
        fig.add_trace(go.Scatter(x=[row["centre_x"]], y=[row["centre_y"]], mode="markers",
                                 legendgroup=g, showlegend=False,
                                 marker={"color": colours[g], "size": sz["marker"],
                                         "symbol": "cross"}, hoverinfo="skip"))
    fig.update_yaxes(scaleanchor="x", scaleratio=1)
    fig.update_xaxes(title_text=str(result.axes[0]))
    fig.update_yaxes(title_text=str(result.axes[1]))
    lines = [ellipse_words(result.kind, result.level)]
    if result.no_ellipse:
        lines.append("no ellipse (fewer than 3 samples): " + ", ".join(result.no_ellipse))
    return base_layout(fig, title=subtitle(title or "Ellipses", *lines), present=present)
