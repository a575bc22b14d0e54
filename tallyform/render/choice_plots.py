"""Figure of a choice-adjusted test: every choice's own p-value and its adjusted p-value.

A pure function: the p-values come from the result object.
"""
from __future__ import annotations

import numpy as np
import plotly.graph_objects as go

from ..core.display import p_words
from ..core.choice_adjusted import ChoiceAdjustedResult
from ..core.errors import InputError
from .style import NEUTRAL, OBSERVED, OKABE_ITO, base_layout, sizes, subtitle

__all__ = ["choice_adjusted_figure"]

RAW, ADJUSTED = NEUTRAL, OKABE_ITO[4]


def choice_adjusted_figure(result, *, alpha: float = 0.05,
                           present: bool = False) -> go.Figure:
    """One row per choice (smallest p first): its own p-value (open) and its p-value
    adjusted for every choice tried (filled), on a log scale, with a line at ``alpha``.

    Examples
    --------
    >>> import tallyform as tly
    >>> j = tly.choice_adjusted(tly.demo("mesocosm"), "treatment",
    ...                         ["hellinger", "chi_square"], n_permutations=49, rng=1,
    ...                         progress=False)
    >>> [t.name.split(" (")[0] for t in choice_adjusted_figure(j).data]
    ['raw to adjusted', 'own p-value', 'adjusted for 2 choices']
    """
    if not isinstance(result, ChoiceAdjustedResult):
        raise InputError("`result` must be a ChoiceAdjustedResult (from tly.choice_adjusted); "
                         f"got {type(result).__name__}.")
    sz = sizes(present)
    frame = result.to_frame()
    frame = frame[frame["error"] == ""].sort_values(["pvalue", "pvalue_adjusted"],
                                                    kind="stable")
    names = list(frame.index)
    raw = frame["pvalue"].to_numpy(dtype=float)
    adj = frame["pvalue_adjusted"].to_numpy(dtype=float)
    k = result.n_choices
    fig = go.Figure()
    xs, ys = [], []
    for name, a, b in zip(names, raw, adj):
        xs += [a, b, None]
        ys += [name, name, None]
    fig.add_trace(go.Scatter(x=xs, y=ys, mode="lines", name="raw to adjusted",
                             line={"color": NEUTRAL, "width": sz["line"] - 1},
                             hoverinfo="skip", showlegend=False))
    fig.add_trace(go.Scatter(
        x=raw, y=names, mode="markers", name="own p-value",
        marker={"color": "white", "size": sz["marker"] + 3,
                "line": {"color": RAW, "width": 2}, "symbol": "circle"},
        hovertext=[f"<b>{n}</b><br>own {p_words(p)}" for n, p in zip(names, raw)],
        hovertemplate="%{hovertext}<extra></extra>", meta={"role": "raw"}))
    fig.add_trace(go.Scatter(
        x=adj, y=names, mode="markers", name=f"adjusted for {k} choices",
        marker={"color": ADJUSTED, "size": sz["marker"] + 3, "symbol": "circle"},
        hovertext=[f"<b>{n}</b><br>adjusted {p_words(p)} ({k} choices)"
                   for n, p in zip(names, adj)],
        hovertemplate="%{hovertext}<extra></extra>", meta={"role": "adjusted"}))
    fig.add_vline(x=alpha, line={"color": OBSERVED, "width": 2, "dash": "dash"})
    # annotations on a log axis take log10 positions
    fig.add_annotation(x=np.log10(alpha), y=1.0, xref="x", yref="paper", yanchor="bottom",
                       xanchor="left", text=f"alpha = {alpha:g}", showarrow=False,
                       font={"size": sz["small"]})
    perms = "all distinct relabellings" if result.exact else \
        f"{result.n_permutations} relabellings"
    lines = [f"{result.test}; every choice on the same {perms}",
             "adjusted: single-step min-P over the choices (Westfall & Young 1993)"]
    base_layout(fig, title=subtitle(f"{result.aspect.capitalize()} of {result.group!r}: "
                                    f"p-values of {k} choices, own and adjusted", *lines),
                legend_title="p-value", present=present,
                height=max(420, 150 + (sz["font"] + 8) * len(names)))
    finite = np.concatenate([raw, adj])
    lo = float(np.nanmin(finite[finite > 0])) if np.any(finite > 0) else 1e-3
    lo = min(lo, alpha) / 2
    ticks = [m * 10.0 ** e for e in range(int(np.floor(np.log10(lo))), 1) for m in (1, 2, 5)]
    ticks = [t for t in ticks if lo <= t <= 1.0]
    fig.update_xaxes(title_text="p-value (log scale)", type="log",
                     range=[np.log10(lo), np.log10(1.05)], tickmode="array", tickvals=ticks,
                     ticktext=[f"{t:g}" for t in ticks])
    fig.update_yaxes(title_text="choice", autorange="reversed", type="category")
    return fig
