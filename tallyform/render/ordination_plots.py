"""Ordination figures: samples on two axes (groups, ellipses, taxa) and the scree plot.

Pure functions: the scores, shares of variation, ellipses and taxon scores all come from the
result objects. The only arithmetic here is geometry for drawing: the outline points of an
ellipse (from :meth:`EllipseSet.outline`), the length of a taxon's vector on the two plotted
axes (to pick the longest ones) and one display factor that fits taxon arrows into the
frame of the samples (stated in the legend).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from ..core.ellipses import EllipseSet
from ..core.errors import DesignError, InputError
from ..core.ordination import Ordination
from .style import (EIGEN_COLOURS, MARKER_EDGE, NEUTRAL, SYMBOLS, base_layout, group_colours,
                    group_levels, sizes, subtitle)

__all__ = ["ordination_figure", "scree_figure"]

MISSING = "(no value)"
TAXON_COLOUR = "#444444"
WARNING_COLOUR = "#B00020"


def _check_ordination(o) -> Ordination:
    if not isinstance(o, Ordination):
        raise InputError("`ordination` must be an Ordination (from tly.pcoa, ca, cca, rda, "
                         f"db_rda or nmds); got {type(o).__name__}.")
    return o


def _axis_name(o: Ordination, a) -> str:
    axes = list(o.axes)
    if isinstance(a, (int, np.integer)) and not isinstance(a, bool):
        if not -len(axes) <= a < len(axes):
            raise InputError(f"axis {a} does not exist; this ordination has {len(axes)} "
                             f"scored axes ({axes[:6]}).")
        return axes[a]
    if str(a) not in axes:
        raise InputError(f"axis {a!r} does not exist; axes are {axes[:10]}.")
    return str(a)


def _labels_for(values, labels: pd.Index, what: str) -> pd.Series | None:
    """One label per sample: a Series matched by sample label, or a sequence in order.

    Missing values become ``'(no value)'`` (drawn in grey, never dropped).
    """
    if values is None:
        return None
    if isinstance(values, str):
        raise InputError(f"`{what}` must be the labels themselves (e.g. "
                         f"table.samples[{values!r}]), not a column name.")
    if isinstance(values, pd.Series):
        s = values.copy()
        # plain lists: iterating a pandas index costs a lookup per element
        s.index = [str(x) for x in s.index.tolist()]
        have = set(s.index)
        wanted = labels.tolist()
        missing = [x for x in wanted if x not in have]
        if missing:
            if len(s) == len(labels) and not set(s.index) & set(labels):
                s = pd.Series(values.to_numpy(), index=labels, name=values.name)
            else:
                raise DesignError(f"`{what}` has no value for sample(s) {missing[:8]}; give a "
                                  "Series indexed by sample label (or one value per sample, "
                                  "in order).")
        out = s.loc[wanted]
        name = values.name if values.name is not None else what
    else:
        arr = np.asarray(values, dtype=object).ravel()
        if arr.size != len(labels):
            raise DesignError(f"`{what}` has {arr.size} values for {len(labels)} samples.")
        out, name = pd.Series(arr, index=labels), what
    if isinstance(out.dtype, pd.CategoricalDtype):
        if out.isna().any():
            out = out.cat.add_categories([MISSING]).fillna(MISSING)
        out = out.cat.rename_categories([str(c) for c in out.cat.categories])
    else:
        out = out.astype(object).where(out.notna(), MISSING).astype(str)
    out.index = labels
    out.name = str(name)
    return out


def _levels(s: pd.Series) -> list[str]:
    levels = group_levels(s[s != MISSING] if not isinstance(s.dtype, pd.CategoricalDtype)
                          else s)
    levels = [lv for lv in levels if lv != MISSING]
    return levels + ([MISSING] if (s.astype(str) == MISSING).any() else [])


def texts(strings: list[str]) -> np.ndarray:
    """Per-point strings as one numpy array: plotly checks a list element by element (most
    of the cost of a figure of 2 000 samples), an array at once."""
    return np.array(strings, dtype=str)


def _fmt(v: float) -> str:
    return f"{v:.3g}"


def _title_lines(o: Ordination, ellipses) -> tuple[str, list[str]]:
    prov = o.provenance or {}
    what = o.method
    if prov.get("measure"):
        tr = prov.get("transform")
        what += f" of {prov['measure']}" + (f" ({tr} transform)" if tr not in (None, "none")
                                             else "")
    title = f"{what}: {o.n_samples} samples"
    lines = [f"scaling: {o.scaling}"]
    if o.stress is not None:
        lines.append(f"stress {o.stress:.3f}: {o.stress_reading}")
    summary = o.constrained_summary() if o.r_squared is not None else None
    if summary:                 # share, chance level, adjusted share, p when tested
        lines.append(summary)
    if o.negative_share > 0:
        lines.append(f"negative eigenvalues hold {100 * o.negative_share:.1f} % of the total: "
                     "no axis shows that part")
    if ellipses is not None and ellipses.withheld:
        lines.append(f"{ellipses.kind} ellipses withheld: the axes were chosen to separate "
                     "these groups")
    elif ellipses is not None:
        lines.append(f"ellipses: {ellipses.covers}")
    return title, lines


def _legend_only(**kwargs) -> go.Scatter:
    """A trace that only shows a legend entry (no points)."""
    return go.Scatter(x=[None], y=[None], hoverinfo="skip", **kwargs)


def ordination_figure(ordination, *, group=None, symbol=None, ellipses=None, axes=(0, 1),
                      taxa=None, top_taxa: int = 0, arrows: bool = False,
                      title: str | None = None, present: bool = False) -> go.Figure:
    """Samples on two ordination axes, coloured by group, with ellipses and taxa if asked.

    Parameters
    ----------
    ordination : Ordination
    group : Series or sequence, optional
        Group label of every sample: a Series matched to the samples by its index (e.g.
        ``table.samples["treatment"]``), or a sequence in the order of
        ``ordination.scores``. Colours follow the Okabe-Ito palette in the level order of
        the design (categorical order, else natural sort), the same in every figure.
    symbol : Series or sequence, optional
        A second factor (same forms as ``group``) shown by marker shape.
    ellipses : EllipseSet, optional
        From ``ordination.ellipses(group, ...)`` on the same two axes; each group's outline
        is drawn in its colour, and groups too small for an ellipse are listed in the legend.
    axes : pair of int or str, default (0, 1)
    taxa : DataFrame, optional
        Taxon scores (taxa x axes), e.g. ``ordination.taxon_scores(table)`` or
        ``ordination.taxa``; must have the two plotted axes as columns.
    top_taxa : int, default 0
        Show only the taxa with the longest vectors on the two plotted axes (0: all of
        ``taxa``). With ``taxa=None`` and ``top_taxa > 0`` the ordination's own taxon scores
        are used (CA, CCA, RDA).
    arrows : bool, default False
        Draw taxa as arrows from the origin (for correlation scores), scaled by one factor to
        fit the samples (the factor is given in the legend); otherwise as labelled points.
    title : str, optional
    present : bool, default False
        Larger fonts and markers for a projector.

    Returns
    -------
    plotly.graph_objects.Figure
        Equal scales on both axes; axis titles give each axis' share of the total; the
        scaling is named under the title; hover shows sample label, groups and scores.

    Examples
    --------
    >>> import tallyform as tly
    >>> tab = tly.demo("mesocosm")
    >>> o = tly.pcoa(tly.dissimilarity(tab, "bray_curtis"))
    >>> fig = ordination_figure(o, group=tab.samples["treatment"])
    >>> [t.name for t in fig.data]
    ['control', 'nutrient_low', 'nutrient_high']
    """
    o = _check_ordination(ordination)
    sz = sizes(present)
    if len(axes) != 2:
        raise InputError(f"`axes` must name two axes; got {axes!r}.")
    xa, ya = _axis_name(o, axes[0]), _axis_name(o, axes[1])
    if xa == ya:
        raise InputError(f"`axes` must name two different axes; got {axes!r}.")
    scores = o.scores
    labels = pd.Index([str(x) for x in scores.index.tolist()])
    x = scores[xa].to_numpy(dtype=float)
    y = scores[ya].to_numpy(dtype=float)
    g = _labels_for(group, labels, "group")
    s = _labels_for(symbol, labels, "symbol")
    levels = _shown_levels(g, ellipses, xa, ya)
    colours = group_colours([lv for lv in levels if lv != MISSING])
    colours[MISSING] = NEUTRAL
    sym_levels = _levels(s) if s is not None else []
    sym_map = {lv: SYMBOLS[i % len(SYMBOLS)] for i, lv in enumerate(sym_levels)}
    fig = go.Figure()
    _add_samples(fig, x, y, labels, g, s, (xa, ya), levels, colours, sym_map, sz)
    if s is not None:
        _add_symbol_legend(fig, s, sym_levels, sym_map, sz)
    if ellipses is not None:
        _add_ellipses(fig, ellipses, colours, sz)
    if taxa is not None or top_taxa:
        _add_taxa(fig, o, taxa, top_taxa, arrows, xa, ya, x, y, sz)
    legend_title = g.name if g is not None else "samples"
    _frame(fig, o, ellipses, (xa, ya), title=title, legend_title=legend_title, present=present)
    return fig


def _add_symbol_legend(fig: go.Figure, s, sym_levels, sym_map: dict, sz: dict) -> None:
    """Legend entries (no points) for the marker shapes of the second factor."""
    for j, lv in enumerate(sym_levels):
        fig.add_trace(_legend_only(
            mode="markers", name=lv, legendgroup="symbol",
            legendgrouptitle={"text": s.name} if j == 0 else None,
            marker={"color": "#555555", "size": sz["marker"], "symbol": sym_map[lv]},
            meta={"role": "symbol legend"}))


def _frame(fig: go.Figure, o: Ordination, ellipses, plotted, *, title, legend_title,
           present: bool) -> None:
    """Title and lines under it, legend, and equal scales on the two plotted axes."""
    xa, ya = plotted
    default_title, lines = _title_lines(o, ellipses)
    zero = {"zeroline": True, "zerolinecolor": "#BBBBBB", "zerolinewidth": 1}
    base_layout(fig, title=subtitle(title or default_title, *lines), legend_title=legend_title,
                present=present, height=680 if present else 620, extra={
                    "legend": {"groupclick": "togglegroup", "tracegroupgap": 4},
                    "xaxis": {"title": {"text": o.axis_label(xa)}, **zero},
                    "yaxis": {"title": {"text": o.axis_label(ya)}, **zero,
                              "scaleanchor": "x", "scaleratio": 1}})


def _shown_levels(g, ellipses, xa: str, ya: str) -> list:
    """The group levels to colour (from the ellipses when there is no group); checks them."""
    if ellipses is not None and not isinstance(ellipses, EllipseSet):
        raise InputError("`ellipses` must be an EllipseSet from ordination.ellipses(...); got "
                         f"{type(ellipses).__name__}.")
    if ellipses is not None and tuple(ellipses.axes) != (xa, ya):
        raise InputError(f"the ellipses were computed on {ellipses.axes[0]} x "
                         f"{ellipses.axes[1]}, but the figure shows {xa} x {ya}; compute "
                         f"them with ordination.ellipses(group, axes=({xa!r}, {ya!r})).")
    levels = _levels(g) if g is not None else []
    if ellipses is not None:
        extra = [lv for lv in list(ellipses.table.index) + list(ellipses.no_ellipse)
                 if str(lv) not in levels]
        if g is not None and extra:
            raise InputError(f"ellipse group(s) {extra[:5]} are not levels of `group` "
                             f"({levels[:8]}); compute the ellipses with the same grouping.")
        levels = levels or [str(lv) for lv in extra]
    return levels


def _add_samples(fig: go.Figure, x, y, labels, g, s, plotted, levels, colours: dict,
                 sym_map: dict, sz: dict) -> None:
    """The samples as markers: one trace per group level (or one trace), hover per sample."""
    xa, ya = plotted
    # plain arrays: a pandas lookup per sample costs more than the figure at 2000 samples
    lab = labels.tolist()
    gval = None if g is None else g.to_numpy(dtype=object)
    sval = None if s is None else s.to_numpy(dtype=object)

    def hover(i: int) -> str:
        bits = [f"<b>{lab[i]}</b>"]
        if gval is not None:
            bits.append(f"{g.name}: {gval[i]}")
        if sval is not None:
            bits.append(f"{s.name}: {sval[i]}")
        bits += [f"{xa}: {_fmt(x[i])}", f"{ya}: {_fmt(y[i])}"]
        return "<br>".join(bits)

    marker_line = {"color": MARKER_EDGE, "width": 0.7}
    if g is None:
        idx = np.arange(len(labels))
        fig.add_trace(go.Scatter(
            x=x, y=y, mode="markers", name="samples", hovertext=texts([hover(i) for i in idx]),
            hovertemplate="%{hovertext}<extra></extra>",
            marker={"color": "#333333", "size": sz["marker"], "line": marker_line,
                    "symbol": [sym_map[sval[i]] for i in idx] if s is not None
                    else "circle"}))
        return
    gv = g.astype(str).to_numpy()
    for lv in levels:
        idx = np.flatnonzero(gv == lv)
        if idx.size == 0:
            continue
        fig.add_trace(go.Scatter(
            x=x[idx], y=y[idx], mode="markers", name=lv, legendgroup=f"group:{lv}",
            hovertext=texts([hover(i) for i in idx]),
            hovertemplate="%{hovertext}<extra></extra>",
            marker={"color": colours[lv], "size": sz["marker"], "line": marker_line,
                    "symbol": [sym_map[sval[i]] for i in idx] if s is not None
                    else "circle"},
            meta={"role": "samples", "group": lv}))


def _wrap(text: str, width: int = 95) -> str:
    import textwrap
    return "<br>".join(textwrap.wrap(text, width))


def _add_ellipses(fig: go.Figure, e: EllipseSet, colours: dict, sz: dict) -> None:
    """Outlines in the group colours; legend and hover say what each ellipse covers; a
    withheld set or a warning is written into the figure itself."""
    covers = e.covers
    for lv, row in e.table.iterrows():
        ex, ey = e.outline(lv, k=120)
        text = (f"<b>{lv}</b>: {covers}<br>n = {int(row['n'])}<br>{e.constant_name}"
                + (f"<br><b>{e.warning}</b>" if e.warning else ""))
        fig.add_trace(go.Scatter(
            x=ex, y=ey, mode="lines", name=f"{lv} ellipse", legendgroup=f"group:{lv}",
            showlegend=False, line={"color": colours.get(str(lv), NEUTRAL),
                                    "width": sz["line"],
                                    "dash": "dash" if e.warning else "solid"},
            hovertext=[text] * len(ex), hovertemplate="%{hovertext}<extra></extra>",
            meta={"role": "ellipse", "group": str(lv), "kind": e.kind,
                  "covers": covers}))
    if e.withheld:
        fig.add_trace(_legend_only(
            mode="lines", name=f"{e.kind} ellipses withheld<br>(see the note below)",
            legendgroup="ellipses", legendgrouptitle={"text": "ellipses"},
            line={"color": WARNING_COLOUR, "width": sz["line"], "dash": "dot"},
            meta={"role": "ellipse withheld"}))
        _note_in_figure(fig, e.withheld, sz)
    else:
        name = _wrap(covers, 34)
        if e.warning:
            name = "drawn on request, not evidence:<br>" + name
        fig.add_trace(_legend_only(
            mode="lines", name=name, legendgroup="ellipses",
            legendgrouptitle={"text": "ellipses"},
            line={"color": "#555555", "width": sz["line"],
                  "dash": "dash" if e.warning else "solid"},
            meta={"role": "ellipse legend", "covers": covers}))
        if e.warning:
            _note_in_figure(fig, e.warning[0].upper() + e.warning[1:] + ".", sz)
    for lv, n in e.no_ellipse.items():
        fig.add_trace(_legend_only(
            mode="markers", name=f"no ellipse: {lv} (n = {n}, fewer than 3)",
            legendgroup="ellipses",
            marker={"color": colours.get(str(lv), NEUTRAL), "symbol": "circle",
                    "size": sz["marker"], "line": {"color": MARKER_EDGE, "width": 0.7}},
            meta={"role": "no ellipse", "group": str(lv)}))


def _note_in_figure(fig: go.Figure, text: str, sz: dict) -> None:
    """A warning written into the plotting area (top left), so it travels with the image."""
    fig.add_annotation(text=_wrap(text, 70), xref="paper", yref="paper", x=0.01, y=0.99,
                       xanchor="left", yanchor="top", showarrow=False, align="left",
                       font={"size": sz["small"], "color": WARNING_COLOUR},
                       bgcolor="rgba(255,255,255,0.85)", bordercolor=WARNING_COLOUR,
                       borderwidth=1, name="ellipse warning")


def _add_taxa(fig, o, taxa, top_taxa, arrows, xa, ya, x, y, sz) -> None:
    if taxa is None:
        if o.taxa is None:
            raise InputError(f"{o.method} has no taxon scores of its own; pass "
                             "taxa=ordination.taxon_scores(table) to show taxa.")
        taxa = o.taxa
    if not isinstance(taxa, pd.DataFrame):
        raise InputError("`taxa` must be a DataFrame of taxon scores (taxa x axes); got "
                         f"{type(taxa).__name__}.")
    missing = [a for a in (xa, ya) if a not in taxa.columns]
    if missing:
        raise InputError(f"`taxa` has no column(s) {missing}; its columns are "
                         f"{list(taxa.columns)[:8]}.")
    if isinstance(top_taxa, bool) or not isinstance(top_taxa, (int, np.integer)) \
            or top_taxa < 0:
        raise InputError(f"`top_taxa` must be a whole number >= 0; got {top_taxa!r}.")
    tx = taxa[xa].to_numpy(dtype=float)
    ty = taxa[ya].to_numpy(dtype=float)
    names = [str(t) for t in taxa.index]
    ok = np.isfinite(tx) & np.isfinite(ty)
    length = np.where(ok, tx * tx + ty * ty, -1.0)     # squared length on these two axes
    order = [i for i in np.argsort(-length, kind="stable") if ok[i]]
    if top_taxa:
        order = order[:int(top_taxa)]
    if not order:
        return
    tx, ty, names = tx[order], ty[order], [names[i] for i in order]
    which = f"{len(order)} longest on these axes" if top_taxa else f"{len(order)}"
    hover = [f"<b>{nm}</b> (taxon)<br>{xa}: {_fmt(a)}<br>{ya}: {_fmt(b)}"
             for nm, a, b in zip(names, tx, ty)]
    if arrows:
        reach = float(np.nanmax(np.abs(np.concatenate([x, y])))) if len(x) else 1.0
        longest = float(np.sqrt(np.max(tx * tx + ty * ty)))
        factor = 0.9 * reach / longest if longest > 0 else 1.0
        px, py = tx * factor, ty * factor
        for a, b in zip(px, py):
            fig.add_annotation(x=a, y=b, ax=0, ay=0, xref="x", yref="y", axref="x", ayref="y",
                               showarrow=True, arrowhead=2, arrowsize=1.2,
                               arrowwidth=max(1.5, sz["line"] - 1), arrowcolor=TAXON_COLOUR,
                               text="", name="taxon arrow")
        name = f"taxa: {which}<br>arrows x {factor:.3g} to fit"
        # labels just beyond each head, on the side the arrow points to
        fig.add_trace(go.Scatter(
            x=px * 1.06, y=py * 1.06, mode="text", text=names, cliponaxis=False,
            textposition=["middle right" if a >= 0 else "middle left" for a in px],
            textfont={"size": sz["small"], "color": TAXON_COLOUR}, name=name,
            legendgroup="taxa", hovertext=hover, hovertemplate="%{hovertext}<extra></extra>",
            meta={"role": "taxa", "factor": factor}))
        fig.add_trace(_legend_only(mode="lines", name="taxon arrows", legendgroup="taxa",
                                   showlegend=False, line={"color": TAXON_COLOUR}))
        return
    fig.add_trace(go.Scatter(
        x=tx, y=ty, mode="markers+text", text=names, textposition="top center",
        cliponaxis=False,
        textfont={"size": sz["small"], "color": TAXON_COLOUR},
        marker={"symbol": "x-thin-open", "size": sz["marker"],
                "line": {"color": TAXON_COLOUR, "width": 2}, "color": TAXON_COLOUR},
        name=f"taxa: {which}", legendgroup="taxa", hovertext=hover,
        hovertemplate="%{hovertext}<extra></extra>", meta={"role": "taxa", "factor": 1.0}))


def scree_figure(ordination, *, present: bool = False) -> go.Figure:
    """Every eigenvalue's share of the total, negative eigenvalues included (hatched).

    Constrained axes (CCA, RDA, db-RDA) are drawn darker than unconstrained ones.

    Examples
    --------
    >>> import tallyform as tly
    >>> o = tly.pcoa(tly.dissimilarity(tly.demo("mesocosm"), "bray_curtis"))
    >>> [t.name for t in scree_figure(o).data]
    ['positive eigenvalues', 'negative eigenvalues']
    """
    o = _check_ordination(ordination)
    if o.eigenvalues is None or len(o.eigenvalues) == 0:
        raise InputError(f"{o.method} has no eigenvalues, so there is no scree plot"
                         + (f"; its stress is {o.stress:.3f}" if o.stress is not None else "")
                         + ".")
    sz = sizes(present)
    ev = o.eigenvalues.to_numpy(dtype=float)
    share = o.explained.reindex(o.eigenvalues.index).to_numpy(dtype=float)
    names = [str(a) for a in o.eigenvalues.index]
    k = int(o.n_constrained or 0)
    scale = float(np.max(np.abs(ev))) if ev.size else 0.0
    negative = ev < -1e-10 * scale if scale > 0 else np.zeros(ev.size, bool)
    parts = []
    if k:
        parts.append(("constrained axes", np.arange(ev.size) < k, EIGEN_COLOURS["constrained"],
                      ""))
        parts.append(("unconstrained axes", (np.arange(ev.size) >= k) & ~negative,
                      EIGEN_COLOURS["positive"], ""))
    else:
        parts.append(("positive eigenvalues", ~negative, EIGEN_COLOURS["positive"], ""))
    parts.append(("negative eigenvalues", negative, EIGEN_COLOURS["negative"], "/"))
    fig = go.Figure()
    for name, mask, colour, pattern in parts:
        if name == "negative eigenvalues" and not mask.any():
            continue
        idx = np.flatnonzero(mask)
        fig.add_trace(go.Bar(
            x=[names[i] for i in idx], y=share[idx], name=name,
            marker={"color": colour, "pattern": {"shape": pattern, "fgcolor": "#333333",
                                                  "solidity": 0.35} if pattern else None,
                    "line": {"color": "#333333" if pattern else colour, "width": 0.5}},
            hovertext=[f"<b>{names[i]}</b><br>eigenvalue {ev[i]:.4g}<br>"
                       f"{100 * share[i]:.2f} % of the total" for i in idx],
            hovertemplate="%{hovertext}<extra></extra>", meta={"role": name}))
    if negative.any():     # tiny bars: say what they add up to, above them
        first, last = np.flatnonzero(negative)[[0, -1]]
        fig.add_annotation(
            x=names[(first + last) // 2], y=0, yshift=8, yanchor="bottom", showarrow=False,
            text=(f"{int(negative.sum())} negative eigenvalues: "
                  f"{100 * o.negative_share:.1f} % in all"),
            font={"size": sz["small"], "color": EIGEN_COLOURS["negative"]},
            name="negative eigenvalues")
    lines = []
    if o.negative_share > 0:
        lines.append(f"negative eigenvalues: {100 * o.negative_share:.1f} % of the total; "
                     f"the positive axes together hold {100 * (1 + o.negative_share):.1f} %")
    if not o.eigenvalues_complete:
        lines.append(f"only the leading {len(ev)} eigenvalues were computed")
    inertia = "inertia" if o.method in ("CA", "CCA") else "variation"
    title = subtitle(f"Eigenvalues of the {o.method} ({len(ev)} axes)", *lines)
    base_layout(fig, title=title, legend_title="eigenvalues", present=present, height=480)
    fig.update_layout(bargap=0.15, legend={"orientation": "h", "yref": "container", "y": 0.0,
                                           "yanchor": "bottom", "x": 0.0},
                      margin={"b": 70 + 2 * sz["font"] + 10})
    fig.update_xaxes(title_text="axis", type="category", categoryorder="array",
                     categoryarray=names, tickangle=-45 if len(names) > 12 else 0)
    fig.update_yaxes(title_text=f"share of the total {inertia} (%)", tickformat=".0%",
                     zeroline=True, zerolinecolor="#333333", zerolinewidth=1.5)
    return fig
