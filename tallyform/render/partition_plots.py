"""Figures of the size and shape partition: bars (with interval error bars), fractions by
shape dimensions, scan heatmap, and the paired difference of two choices.

Pure functions: a result object in, a new plotly Figure out. Every number drawn or printed
comes from the result (fractions, negative-eigenvalue shares, p-values); nothing is computed
here but positions and labels.
"""
from __future__ import annotations

import numpy as np
import plotly.graph_objects as go

from ..core.display import p_words
from ..core.errors import InputError
from ..core.partition import FRACTIONS, SizeShapeResult
from ..core.scan import ScanResult
from .style import (FRACTION_COLOURS, FRACTION_LABELS, NEUTRAL, base_layout, merged, sizes,
                    subtitle, vertical_line)

NEGATIVE_BLUE = "#3B6FB6"

__all__ = ["partition_bars", "dims_figure", "scan_heatmap", "choice_difference_figure",
           "setting_label", "percent"]


def percent(x, digits: int = 1) -> str:
    """``0.3505 -> '35.1 %'``; NaN -> ``'n/a'`` (the text printed in a segment)."""
    if x is None or not np.isfinite(x):
        return "n/a"
    text = f"{100 * float(x):.{digits}f}"
    if float(text) == 0:           # no "-0.0 %"
        text = f"{0:.{digits}f}"
    return f"{text} %"


def setting_label(measure: str, transform) -> str:
    """``'sqrt + bray_curtis'``; the measure alone when there is no transform."""
    if transform in (None, "", "none"):
        return str(measure)
    return f"{transform} + {measure}"


def _ci_of(result) -> dict | None:
    ci = getattr(result, "fractions_ci", None)
    if ci is None:
        return None
    return {f: (float(ci.loc[f, "low"]), float(ci.loc[f, "high"])) for f in FRACTIONS}


def _null_of(result) -> dict | None:
    ns = getattr(result, "null_shares", None)
    if ns is None:
        return None
    return {f: tuple(float(ns.loc[f, c]) for c in ("null_median", "null_low", "null_high"))
            for f in FRACTIONS}


def _rows(results) -> list[dict]:
    """One dict per bar: label, fractions, intervals, negative share, p-values, error."""
    if isinstance(results, SizeShapeResult):
        results = [results]
    if isinstance(results, ScanResult):
        rows = []
        for rec in results.frame.to_dict("records"):
            key = (rec["transform"], rec["measure"])
            res = results.results.get(key)
            ci = None
            if f"{FRACTIONS[0]}_low" in rec:
                ci = {f: (rec[f"{f}_low"], rec[f"{f}_high"]) for f in FRACTIONS}
            rows.append({
                "label": setting_label(rec["measure"], rec["transform"]),
                "fractions": {f: rec[f] for f in FRACTIONS}, "ci": ci,
                "null": None if res is None else _null_of(res),
                "negative_share": rec.get("negative_share", np.nan),
                "tests": None if res is None else res.tests,
                "detail": "" if res is None else res.shape_dims_reason,
                "error": rec.get("error", "") or "",
            })
        return rows
    try:
        items = list(results)
    except TypeError:
        items = None
    if not items or not all(isinstance(r, SizeShapeResult) for r in items):
        raise InputError("`results` must be a SizeShapeResult (from tly.size_shape), a list "
                         "of them, or a ScanResult (from tly.scan); got "
                         f"{type(results).__name__}.")
    return [{"label": setting_label(r.measure, r.transform),
             "fractions": {f: float(r.fractions[f]) for f in FRACTIONS},
             "ci": _ci_of(r), "null": _null_of(r),
             "negative_share": r.negative_share, "tests": r.tests,
             "detail": r.shape_dims_reason, "error": ""} for r in items]


def _interval_trace(rows, labels, f, vals, hover, sz) -> go.Scatter:
    """One fraction's shares as markers with 95 % whiskers (the side panel of the bars).

    Row i of the bars is at y = i; the four fractions sit just above and below it.
    """
    offset = (FRACTIONS.index(f) - 1.5) * 0.17
    return go.Scatter(
        x=vals, y=np.arange(len(rows)) + offset, mode="markers",
        error_x=_error_bars(rows, vals, f),
        marker={"color": FRACTION_COLOURS[f], "size": sz["marker"],
                "line": {"color": "#222222", "width": 1}},
        legendgroup=f, showlegend=False, hovertext=hover,
        hovertemplate="%{hovertext}<extra></extra>", meta={"fraction": f, "kind": "interval"})


def _error_bars(rows, vals, f) -> dict:
    """error_x of one fraction's markers: the interval around the share."""
    plus, minus = [], []
    for r, v in zip(rows, vals):
        lo, hi = r["ci"][f] if r.get("ci") is not None else (np.nan, np.nan)
        ok = np.isfinite(v) and np.isfinite(lo) and np.isfinite(hi)
        plus.append(float(max(hi - v, 0.0)) if ok else 0.0)
        minus.append(float(max(v - lo, 0.0)) if ok else 0.0)
    return {"type": "data", "symmetric": False, "array": plus, "arrayminus": minus,
            "visible": True, "color": FRACTION_COLOURS[f], "thickness": 2.5, "width": 4}


def _unique_labels(labels: list[str]) -> list[str]:
    seen: dict[str, int] = {}
    out = []
    for lb in labels:
        seen[lb] = seen.get(lb, 0) + 1
        out.append(lb if seen[lb] == 1 else f"{lb} ({seen[lb]})")
    return out


def _tick(row: dict) -> str:
    lines = [row["label"]]
    neg = row["negative_share"]
    if row["error"]:
        lines.append("undefined for these data")
    elif neg is not None and np.isfinite(neg) and neg > 0 and percent(neg) != "0.0 %":
        lines.append(f"negative eigenvalues {percent(neg)}")
    return "<br>".join(lines[:1] + [f"<span style='font-size:0.8em'>{x}</span>"
                                    for x in lines[1:]])


def describe_choice(results) -> tuple[str, list[str]]:
    """Default title and explanatory lines."""
    if isinstance(results, ScanResult):
        return (f"Size and shape over {len(results.frame)} settings (n = {results.n})",
                [f"size: {results.size}; shape: {results.shape}"])
    items = [results] if isinstance(results, SizeShapeResult) else list(results)
    first = items[0]
    size_label = first.provenance.get("size_label", first.size)
    if len(items) == 1:
        return (f"Size and shape of {setting_label(first.measure, first.transform)} "
                f"(n = {first.n})",
                [f"size: {size_label}; shape: {first.shape_dims} {first.shape} dimension(s) "
                 f"({100 * first.shape_inertia_share:.0f} % of the variation in composition)"])
    return (f"Size and shape over {len(items)} settings",
            [f"size: {size_label}; shape: {first.shape}"])


def partition_bars(results, *, title: str | None = None, present: bool = False) -> go.Figure:
    """Horizontal stacked bars of the four fractions, one bar per (transform, measure).

    Parameters
    ----------
    results : SizeShapeResult, list of SizeShapeResult, or ScanResult
        A scan gives one bar per (transform, measure) cell, in the scan's order.
    title : str, optional
        Replaces the default title (the explanatory line under it stays).
    present : bool, default False
        Larger fonts for a projector.

    Returns
    -------
    plotly.graph_objects.Figure
        One bar trace per fraction (size only, shared, shape only, residual) in the fixed
        fraction colours, the percentage printed in each segment. A negative fraction (the
        shared one can be negative) is drawn to the left of zero and labelled there; the
        share of negative eigenvalues of each measure is printed under its name.

    Notes
    -----
    The fractions are the result's adjusted shares; they sum to 100 %, so with a negative
    segment the positive ones reach past 100 %.

    Examples
    --------
    >>> import tallyform as tly
    >>> fig = partition_bars(tly.size_shape(tly.demo("mesocosm"), "bray_curtis"))
    >>> [t.meta["fraction"] for t in fig.data]
    ['size_only', 'shared', 'shape_only', 'residual']
    """
    rows = _rows(results)
    sz = sizes(present)
    labels = _unique_labels([r["label"] for r in rows])
    ticks = [_tick(r) for r in rows]
    with_ci = any(r.get("ci") is not None for r in rows)
    if with_ci:         # the intervals get their own panel, sharing the rows
        from plotly.subplots import make_subplots
        fig = make_subplots(rows=1, cols=2, column_widths=[0.64, 0.36],
                            horizontal_spacing=0.03)
    else:
        fig = go.Figure()
    for f in FRACTIONS:
        _add_fraction(fig, rows, labels, f, with_ci, sz)
    notes = _negative_labels(rows, labels, sz)
    low = min([0.0] + [sum(float(v) for v in r["fractions"].values()
                           if np.isfinite(v) and v < 0) for r in rows])
    highs = [sum(float(v) for v in r["fractions"].values() if np.isfinite(v) and v > 0)
             for r in rows]
    high = max([1.0] + highs)
    left = min(0.0, low) - (0.12 if notes else 0.0)
    default_title, lines = describe_choice(results)
    lines.append("shares of the dissimilarity's variation (adjusted R<sup>2</sup>); "
                 "they sum to 100 %"
                 + ("; right: each share with its 95 % interval" if with_ci else ""))
    zero = {"color": "#222222", "width": 2}
    y_axis = {"autorange": "reversed", "tickmode": "array", "tickvals": labels,
              "ticktext": ticks, "title": {"text": None}}
    extra = {
        "barmode": "relative", "bargap": 0.3,
        "uniformtext": {"minsize": sz["small"], "mode": "hide"},
        # legend under the axis title, anchored to the figure so it never meets the title
        "legend": {"orientation": "h", "yref": "container", "y": 0.0, "yanchor": "bottom",
                   "xanchor": "left", "x": 0.0, "traceorder": "normal"},
        "margin": {"b": 70 + 2 * sz["font"] + (20 if len(rows) == 1 else 0)},
        "xaxis": {"title": {"text": "share of the variation (%)"}, "tickformat": ".0%",
                  "range": [left, high + 0.02], "zeroline": False, "gridcolor": "#E5E5E5"},
        "yaxis": y_axis,
        "annotations": list(fig.layout.annotations) + notes,
        "shapes": [vertical_line(0, zero)],
    }
    if with_ci:
        extra["shapes"].append(vertical_line(0, zero, xref="x2", yref="y2"))
        extra.update(_interval_axes(rows, y_axis))
    base_layout(fig, title=subtitle(title or default_title, *lines), legend_title="fraction",
                present=present, height=max(360, 260 + (70 if present else 56) * len(rows)),
                extra=extra)
    return fig


def _fraction_hover(rows, labels, f: str, vals) -> list[str]:
    """Hover text of one fraction's segments: share, interval, noise level, test, error."""
    hover = []
    for r, lb, v in zip(rows, labels, vals):
        bits = [f"<b>{lb}</b>", f"{FRACTION_LABELS[f]}: {percent(v)}"]
        if r.get("ci") is not None:
            lo, hi = r["ci"][f]
            bits.append(f"95 % interval: {percent(lo)} to {percent(hi)}")
        if r.get("null") is not None:
            med, nlo, nhi = r["null"][f]
            bits.append(f"counting noise alone: {percent(med)} ({percent(nlo)} to "
                        f"{percent(nhi)})")
        t = r["tests"]
        if t is not None and f in t.index and np.isfinite(t.loc[f, "pvalue"]):
            bits.append(f"Monte Carlo test: {p_words(t.loc[f, 'pvalue'])} "
                        f"({int(t.loc[f, 'n_simulations'])} simulated tables)")
        if r["error"]:
            bits.append(r["error"])
        hover.append("<br>".join(bits))
    return hover


def _add_fraction(fig: go.Figure, rows, labels, f: str, with_ci: bool, sz: dict) -> None:
    """One fraction's bar trace (and its whiskers in the side panel when there are any)."""
    vals = np.array([float(r["fractions"][f]) for r in rows], dtype=float)
    text = [percent(v) for v in vals]
    hover = _fraction_hover(rows, labels, f, vals)
    name = FRACTION_LABELS[f]
    if len(rows) == 1:        # one bar: the legend doubles as a readout of all four
        name = f"{name}: {text[0]}"
    fig.add_trace(go.Bar(
        name=name, x=vals, y=labels, orientation="h",
        marker={"color": FRACTION_COLOURS[f], "line": {"color": "white", "width": 1}},
        text=text, textposition="inside", insidetextanchor="middle", textangle=0,
        textfont={"size": sz["font"]}, hovertext=hover, legendgroup=f,
        hovertemplate="%{hovertext}<extra></extra>", meta={"fraction": f}),
        **({"row": 1, "col": 1} if with_ci else {}))
    if with_ci:
        fig.add_trace(_interval_trace(rows, labels, f, vals, hover, sz), row=1, col=2)


def _negative_labels(rows, labels, sz: dict) -> list[dict]:
    """Labels of negative segments, left of their bar (they are thin): annotation dicts,
    each at the left end of its row's negative part."""
    out = []
    for r, lb in zip(rows, labels):
        neg = [(f, float(r["fractions"][f])) for f in FRACTIONS
               if np.isfinite(r["fractions"][f]) and r["fractions"][f] < 0]
        if neg and any(percent(v) != "0.0 %" for _, v in neg):
            out.append({   # short, in the fraction's colour (hover says more)
                "x": sum(v for _, v in neg), "y": lb, "xref": "x", "yref": "y",
                "xanchor": "right", "showarrow": False,
                "text": " ".join(f"<span style='color:{FRACTION_COLOURS[f]}'>{percent(v)}"
                                 "</span>" for f, v in neg) + " ",
                "font": {"size": sz["small"]}, "name": "negative fraction"})
    return out


def _interval_axes(rows, y_axis: dict) -> dict:
    """Axes of the side panel of intervals: every interval end in view, rows as the bars."""
    ends = [v for r in rows if r.get("ci") is not None for pair in r["ci"].values()
            for v in pair if np.isfinite(v)] + [0.0, 1.0]
    return {"xaxis2": {"title": {"text": "share, 95 % interval"}, "tickformat": ".0%",
                       "zeroline": True, "zerolinecolor": "#222222", "gridcolor": "#E5E5E5",
                       "range": [min(ends) - 0.03, max(ends) + 0.03]},
            "yaxis2": merged(y_axis, {"showticklabels": False, "autorange": False,
                                      "tickmode": "auto", "range": [len(rows) - 0.5, -0.5],
                                      "showgrid": False, "zeroline": False})}


def dims_figure(result: SizeShapeResult, *, present: bool = False) -> go.Figure:
    """The four fractions against the number of shape dimensions k (from ``by_dims()``).

    A dashed line marks the k the result used, with the reason it was chosen.

    Examples
    --------
    >>> import tallyform as tly
    >>> fig = dims_figure(tly.size_shape(tly.demo("mesocosm"), "bray_curtis"))
    >>> len(fig.data)
    4
    """
    if not isinstance(result, SizeShapeResult):
        raise InputError("`result` must be a SizeShapeResult (from tly.size_shape); got "
                         f"{type(result).__name__}.")
    sz = sizes(present)
    dims = result.by_dims()
    k = dims.index.to_numpy()
    fig = go.Figure()
    for f in FRACTIONS:
        y = dims[f].to_numpy(dtype=float)
        fig.add_trace(go.Scatter(
            x=k, y=y, name=FRACTION_LABELS[f], mode="lines+markers",
            line={"color": FRACTION_COLOURS[f], "width": sz["line"]},
            marker={"color": FRACTION_COLOURS[f], "size": sz["marker"]},
            hovertext=[f"k = {int(kk)}<br>{FRACTION_LABELS[f]}: {percent(v)}"
                       for kk, v in zip(k, y)],
            hovertemplate="%{hovertext}<extra></extra>", meta={"fraction": f}))
    fig.add_hline(y=0, line={"color": "#222222", "width": 1.5})
    fig.add_vline(x=result.shape_dims, line={"color": NEUTRAL, "width": 2, "dash": "dash"},
                  annotation={"text": f"used: k = {result.shape_dims}", "yanchor": "bottom",
                              "font": {"size": sz["small"]}},
                  annotation_position="top right")
    title = subtitle(f"Fractions by number of shape dimensions: "
                     f"{setting_label(result.measure, result.transform)} (n = {result.n})",
                     result.shape_dims_reason)
    base_layout(fig, title=title, legend_title="fraction", present=present, height=560)
    fig.update_xaxes(title_text=f"shape dimensions k (leading {result.shape} principal "
                                "coordinates)", dtick=1 if len(k) <= 20 else None,
                     range=[k.min() - 0.5, k.max() + 0.5] if len(k) else None)
    fig.update_yaxes(title_text="share of the variation (%)", tickformat=".0%")
    return fig


def _mix(colour: str, weight: float) -> str:
    """``colour`` blended with white: weight 0 gives white, 1 the colour."""
    rgb = [int(colour[i:i + 2], 16) for i in (1, 3, 5)]
    w = min(max(weight, 0.0), 1.0)
    return "#" + "".join(f"{round(255 + (c - 255) * w):02X}" for c in rgb)


def _heat_scale(value: str, zmin: float, zmax: float):
    """White at 0, the fraction's colour at the top; negatives in blue, as strong as
    their size relative to the largest positive value (so -0.1 % stays near white)."""
    top = FRACTION_COLOURS.get(value, "#4D4D4D")
    if zmin < 0 < zmax:
        low = _mix(NEGATIVE_BLUE, -zmin / max(zmax, -zmin))
        return [[0.0, low], [-zmin / (zmax - zmin), "#FFFFFF"], [1.0, top]]
    return [[0.0, "#FFFFFF"], [1.0, top]]


def scan_heatmap(scan: ScanResult, *, value: str = "size_only",
                 present: bool = False) -> go.Figure:
    """Heatmap of one fraction (default: size only) over measures x transforms.

    Each cell prints its value; cells undefined for the data print ``n/a`` (their reason is
    in the hover text).

    Examples
    --------
    >>> import tallyform as tly
    >>> g = tly.scan(tly.demo("mesocosm"), measures=["bray_curtis", "hellinger"],
    ...              transforms=[1.0, 0.5])
    >>> scan_heatmap(g).data[0].z.shape
    (2, 2)
    """
    if not isinstance(scan, ScanResult):
        raise InputError("`scan` must be a ScanResult (from tly.scan); got "
                         f"{type(scan).__name__}.")
    allowed = list(FRACTIONS) + ["negative_share"]
    if value not in allowed:
        raise InputError(f"`value` must be one of {allowed}; got {value!r}.")
    sz = sizes(present)
    z = scan.pivot(value)
    frame = scan.frame.set_index(["measure", "transform"])
    measures, transforms = list(z.index), list(z.columns)
    arr = z.to_numpy(dtype=float)
    text = [[percent(v) for v in row] for row in arr]
    has_ci = f"{value}_low" in scan.frame.columns
    if has_ci:          # the interval under the share, in points
        lo, hi = scan.pivot(f"{value}_low").to_numpy(float), \
            scan.pivot(f"{value}_high").to_numpy(float)
        text = [[t if not (np.isfinite(a) and np.isfinite(b)) else
                 f"{t}<br><span style='font-size:0.75em'>({100 * a:.0f} to {100 * b:.0f})"
                 "</span>" for t, a, b in zip(tr, la, ha)]
                for tr, la, ha in zip(text, lo, hi)]
    hover = []
    for m in measures:
        line = []
        for t in transforms:
            rec = frame.loc[(m, t)]
            bits = [f"<b>{setting_label(m, t)}</b>",
                    f"{FRACTION_LABELS.get(value, value.replace('_', ' '))}: "
                    f"{percent(rec[value])}"]
            if has_ci and np.isfinite(rec[f"{value}_low"]):
                bits.append(f"95 % interval: {percent(rec[f'{value}_low'])} to "
                            f"{percent(rec[f'{value}_high'])}")
            if value != "negative_share":
                bits.append(f"negative eigenvalues: {percent(rec['negative_share'])}")
            if rec.get("error"):
                bits.append(str(rec["error"]))
            line.append("<br>".join(bits))
        hover.append(line)
    finite = arr[np.isfinite(arr)]
    zmin = float(min(0.0, finite.min())) if finite.size else 0.0
    zmax = float(max(finite.max(), zmin + 1e-9)) if finite.size else 1.0
    scale = _heat_scale(value, zmin, zmax)
    name = FRACTION_LABELS.get(value, value.replace("_", " "))
    fig = go.Figure(go.Heatmap(
        z=arr, x=transforms, y=measures, text=text, texttemplate="%{text}",
        textfont={"size": sz["font"]}, hovertext=hover,
        hovertemplate="%{hovertext}<extra></extra>", colorscale=scale, zmin=zmin, zmax=zmax,
        xgap=2, ygap=2, name=name,
        colorbar={"title": {"text": f"{name} (%)"}, "tickformat": ".0%"}))
    base_layout(fig, title=subtitle(f"Share of the variation that is {name}: scan over "
                                    f"measures and transforms (n = {scan.n})",
                                    f"size: {scan.size}; shape: {scan.shape}"
                                    + ("; in brackets: 95 % interval (%)" if has_ci else "")),
                legend_title=None, present=present,
                height=max(420, 200 + (60 if present else 46) * len(measures)))
    fig.update_layout(plot_bgcolor="#D9D9D9")      # the gaps between cells show as a grid
    fig.update_xaxes(title_text="transform (applied before the measure)", side="bottom",
                     type="category")
    fig.update_yaxes(title_text="measure", autorange="reversed", type="category",
                     ticksuffix="  ")
    return fig


def choice_difference_figure(comparison, *, present: bool = False) -> go.Figure:
    """The paired difference b - a of every share, with its 95 % interval.

    One row per share (size only, shared, shape only, residual): a marker at the difference
    in the fraction's colour, whiskers for the interval (when the comparison was resampled),
    and a line at zero. The sentence of the comparison is printed under the title.

    Examples
    --------
    >>> import tallyform as tly
    >>> x = tly.compare_choices(tly.demo("mesocosm"), a={"measure": "bray_curtis"},
    ...                         b={"measure": "hellinger"}, n_boot=0)
    >>> [t.meta["fraction"] for t in choice_difference_figure(x).data]
    ['size_only', 'shared', 'shape_only', 'residual']
    """
    from ..core.choices import ChoiceComparison
    if not isinstance(comparison, ChoiceComparison):
        raise InputError("`comparison` must be a ChoiceComparison (from tly.compare_choices); "
                         f"got {type(comparison).__name__}.")
    sz = sizes(present)
    fr = comparison.frame
    has_ci = "low" in fr.columns
    fig = go.Figure()
    for f in FRACTIONS:
        v = float(fr.loc[f, "difference"])
        label = FRACTION_LABELS[f]
        bits = [f"<b>{label}</b>", f"a: {percent(fr.loc[f, 'a'])}, b: {percent(fr.loc[f, 'b'])}",
                f"b - a: {100 * v:+.1f} points"]
        err = {"visible": False}
        if has_ci:
            lo, hi = float(fr.loc[f, "low"]), float(fr.loc[f, "high"])
            bits.append(f"95 % interval: {100 * lo:+.1f} to {100 * hi:+.1f} points")
            err = {"type": "data", "symmetric": False, "array": [max(hi - v, 0.0)],
                   "arrayminus": [max(v - lo, 0.0)], "visible": True,
                   "color": FRACTION_COLOURS[f], "thickness": sz["line"], "width": 8}
        fig.add_trace(go.Scatter(
            x=[v], y=[label], mode="markers+text", name=label, error_x=err,
            marker={"color": FRACTION_COLOURS[f], "size": sz["marker"] + 5,
                    "line": {"color": "#222222", "width": 1}},
            text=[f"{100 * v:+.1f}"], textposition="top center",
            textfont={"size": sz["small"]}, hovertext=["<br>".join(bits)],
            hovertemplate="%{hovertext}<extra></extra>", meta={"fraction": f}))
    fig.add_vline(x=0, line={"color": "#222222", "width": 2})
    from ..core.choices import describe_choice
    title = f"{describe_choice(comparison.b)} minus {describe_choice(comparison.a)} (n = {comparison.n})"
    lines = [comparison.reading.replace(". ", ".<br>")] if comparison.reading else []
    lines.append("difference in each share (b - a), percentage points"
                 + ("; whiskers: paired 95 % interval" if has_ci else ""))
    base_layout(fig, title=subtitle(title, *lines), legend_title="fraction", present=present,
                height=560)
    ends = [fr["difference"].abs().max()]
    if has_ci:
        ends += [fr["low"].abs().max(), fr["high"].abs().max()]
    reach = float(np.nanmax(ends)) * 1.15 + 0.01
    fig.update_xaxes(title_text="b - a (share of the variation, points of %)",
                     tickformat=".0%", range=[-reach, reach], zeroline=False,
                     gridcolor="#E5E5E5")
    fig.update_yaxes(autorange="reversed", title_text=None)
    return fig
