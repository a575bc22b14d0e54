"""Figures for tests: sample totals by group, permutation null distributions, spread, audit.

Pure functions: observed statistics, p-values, group means and intervals come from the result
objects; box plots and histograms are drawn from the values by plotly itself.
"""
from __future__ import annotations

import textwrap

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from ..core.display import p_words
from ..core.audit import AuditResult
from ..core.dispersion import DispersionResult
from ..core.errors import DesignError, InputError
from ..core.inference import PermanovaResult
from ..core.permutation import PermutationTest
from ..core.table import CommunityTable, as_table
from ..core.welch import WelchResult
from .style import (MARKER_EDGE, NEUTRAL, OBSERVED, base_layout, group_colours, group_levels,
                    sizes, subtitle)

__all__ = ["totals_figure", "null_distribution_figure", "dispersion_figure", "audit_figure"]

AUDIT_COLOURS = {"measure": "#0072B2", "reference": "#555555"}


def _fill(colour: str, alpha: float = 0.25) -> str:
    rgb = [int(colour[i:i + 2], 16) for i in (1, 3, 5)]
    return f"rgba({rgb[0]}, {rgb[1]}, {rgb[2]}, {alpha})"


def _log_ticks(values: np.ndarray) -> list[float]:
    """1-2-3-5 tick positions spanning the positive values (a log axis' own labels are tiny)."""
    v = values[np.isfinite(values) & (values > 0)]
    if v.size == 0:
        return []
    lo, hi = np.floor(np.log10(v.min())), np.ceil(np.log10(v.max()))
    ticks = [m * 10.0 ** e for e in range(int(lo), int(hi) + 1) for m in (1, 2, 3, 5)]
    inside = [t for t in ticks if v.min() / 2 <= t <= v.max() * 2]
    return inside if len(inside) >= 2 else ticks


def _boxes(fig, values: pd.Series, groups: pd.Series, *, sz: dict, unit: str) -> list[str]:
    """One box per group with every sample drawn over it; returns the level order."""
    levels = group_levels(groups)
    colours = group_colours(levels)
    g = groups.astype(str).to_numpy()
    labels = [str(x) for x in values.index]
    v = values.to_numpy(dtype=float)
    for lv in levels:
        idx = np.flatnonzero(g == lv)
        fig.add_trace(go.Box(
            y=v[idx], name=lv, legendgroup=lv, boxpoints="all", jitter=0.45, pointpos=0,
            marker={"color": colours[lv], "size": sz["marker"] - 1,
                    "line": {"color": MARKER_EDGE, "width": 0.6}},
            line={"color": colours[lv], "width": 2}, fillcolor=_fill(colours[lv]),
            hovertext=[f"<b>{labels[i]}</b><br>{groups.name}: {lv}<br>{unit}: {v[i]:.4g}"
                       for i in idx],
            hoverinfo="text", hoveron="points", meta={"group": lv}))
    return levels


def totals_figure(table, group, *, log: bool = True, per_effort: bool = False,
                  present: bool = False) -> go.Figure:
    """Sample totals (size) by group: a box per group with every sample shown.

    Parameters
    ----------
    table : CommunityTable, DataFrame or array
    group : str or Series
        A column of the sample table, or the group label of every sample.
    log : bool, default True
        Logarithmic y axis (totals usually span orders of magnitude). Samples with a total
        of 0 cannot be drawn on it; the figure says how many.
    per_effort : bool, default False
        Totals divided by the table's sampling effort (e.g. per trap night).
    present : bool, default False
        Larger fonts for a projector.

    Examples
    --------
    >>> import tallyform as tly
    >>> fig = totals_figure(tly.demo("mesocosm"), "treatment")
    >>> [t.name for t in fig.data]
    ['control', 'nutrient_low', 'nutrient_high']
    """
    from ..core.size_tests import size_measure
    tab = table if isinstance(table, CommunityTable) else as_table(table)
    groups = tab.group(group)
    if per_effort and tab.effort is None:
        raise DesignError("per_effort=True needs a sampling-effort column; load the table with "
                          "effort='column name', or use per_effort=False.")
    values = size_measure(tab, effort=None if per_effort else False, log=False)
    what, name, line = _totals_words(tab)
    unit = f"{what} per {tab.effort_name}" if per_effort else what
    sz = sizes(present)
    fig = go.Figure()
    _boxes(fig, values, groups, sz=sz, unit=unit)
    lines = [line + (f", divided by {tab.effort_name}" if per_effort else "")]
    zero = int((values.to_numpy() <= 0).sum())
    if log and zero:
        lines.append(f"{zero} sample(s) with a total of 0 cannot be drawn on a log scale "
                     "(log=False shows them)")
    base_layout(fig, title=subtitle(f"{name} by {groups.name} ({tab.n_samples} samples)",
                                    *lines),
                legend_title=str(groups.name), present=present, height=540)
    fig.update_yaxes(title_text=f"sample {unit}" + (" (log scale)" if log else ""),
                     type="log" if log else "linear")
    if log:
        ticks = _log_ticks(values.to_numpy(dtype=float))
        fig.update_yaxes(tickmode="array", tickvals=ticks, ticktext=[f"{t:,.6g}" for t in ticks])
    fig.update_xaxes(title_text=str(groups.name))
    return fig


def _totals_words(tab) -> tuple[str, str, str]:
    """(axis word, title, explanatory line) for what a table's totals are: counted
    abundances, sequencing depths (technical) or the loads of relative data."""
    if getattr(tab, "abundance", "absolute") == "absolute":
        return "total", "Sample totals", "sum of all counts in each sample (size)"
    if tab.load is None:
        return ("reads", "Sequencing depths",
                "reads per sample: set by the sequencing, not the size of the community")
    if tab.spike_in is not None:
        return ("load", "Sample loads (size)",
                f"absolute load from the spike-in {tab.spike_in['taxon']!r} (amount added: "
                f"{tab.spike_in['added']})")
    return "load", "Sample loads (size)", f"absolute load of each sample ({tab.load_name})"


def _perms_text(exact: bool, n_permutations: int) -> str:
    return ("all distinct relabellings (exact)" if exact
            else f"{int(n_permutations)} permutations")


def _permanova_parts(result, term):
    """PERMANOVA: one term's own scheme and permutation count (terms in different strata
    are relabelled differently: whole units for one, within units for another)."""
    terms = list(result.terms)
    term = terms[0] if term is None else term
    if term not in terms:
        raise InputError(f"`term` must be one of {terms}; got {term!r}.")
    null = result.null_distribution.get(term)
    stat, p = float(result.statistic[term]), float(result.pvalue[term])
    what = f"PERMANOVA on {result.measure}: term {term!r}"
    schemes = result.schemes
    if schemes is not None and term in schemes.index:
        row = schemes.loc[term]
        perms = _perms_text(bool(row["exact"]), int(row["n_permutations"]))
        against = (result.table.loc[term, "tested_against"]
                   if "tested_against" in result.table.columns else "")
        if isinstance(against, str) and against:
            perms += f"; tested against {against}"
        lines = [f"{row['stratum']}: {row['permutations']}"]
        reduced = row.get("reduced_model", "")
        if isinstance(reduced, str) and reduced and reduced != "intercept":
            lines.append(f"residuals of the model with {reduced} permuted (Freedman & Lane "
                         "1983)")
    else:
        perms, lines = _perms_text(result.exact, result.n_permutations), [result.scheme]
    return stat, p, null, "pseudo-F", what, perms, lines


def _welch_parts(result):
    """The Welch-type test: its own statistic, units and (prepivoted) null."""
    on = f" (centroids of {result.units!r} units)" if result.units else ""
    what = f"Welch-type test on {result.measure}: {result.group!r}{on}"
    stat_name = ("T_w<sup>2</sup> (Alekseyenko 2016)" if len(result.groups) == 2
                 else "W_d (Hamidi et al. 2019)")
    lines = [f"{stat_name}: each group weighed by its own spread", result.scheme]
    return (float(result.statistic), float(result.pvalue), result.null_distribution,
            "Welch statistic", what, _perms_text(result.exact, result.n_permutations), lines)


def _null_parts(result, term):
    """(observed, p-value, null values, statistic name, what, permutations text, lines)."""
    if isinstance(result, PermanovaResult):
        stat, p, null, name, what, perms, lines = _permanova_parts(result, term)
    elif isinstance(result, WelchResult):
        if term is not None:
            raise InputError("a WelchResult holds one test; leave `term` out.")
        stat, p, null, name, what, perms, lines = _welch_parts(result)
    elif isinstance(result, (PermutationTest, DispersionResult)):
        if term is not None:
            raise InputError(f"a {type(result).__name__} holds one test; leave `term` out.")
        null, stat, p = result.null_distribution, float(result.statistic), float(result.pvalue)
        if isinstance(result, DispersionResult):
            what = f"Spread (distances to group {result.centre}s) on {result.measure}"
            name = "F of the distances"
        else:
            what, name = "Permutation test", "pseudo-F"
        perms, lines = _perms_text(result.exact, result.n_permutations), []
    else:
        raise InputError("`result` must be a PermanovaResult, WelchResult, PermutationTest "
                         f"or DispersionResult; got {type(result).__name__}.")
    if null is None or len(null) == 0 or not np.isfinite(stat):
        raise InputError(f"{what} has no permutation distribution to draw (was it run with "
                         "n_permutations=0?).")
    return stat, p, np.asarray(null, dtype=float), name, what, perms, lines


def null_distribution_figure(result, *, term: str | None = None,
                             present: bool = False) -> go.Figure:
    """The permuted statistics as a histogram, with the observed value and its p-value.

    Parameters
    ----------
    result : PermanovaResult, WelchResult, PermutationTest or DispersionResult
    term : str, optional
        PERMANOVA only: which term (default: the first). Each term is drawn with its own
        scheme and permutation count (``result.schemes``): terms in different error strata
        are relabelled differently (whole units, or within units), and the title says how
        and against which residual the term was tested.
    present : bool, default False

    Notes
    -----
    A WelchResult is drawn with its own statistic (the Welch-type W_d, or T_w^2 for two
    groups); with ``small_sample=True`` its null holds each relabelling's statistic mapped
    to the observed degrees of freedom, so the share at or above the observed value is the
    p-value.

    Examples
    --------
    >>> import tallyform as tly
    >>> tab = tly.demo("mesocosm")
    >>> p = tly.permanova(tly.dissimilarity(tab, "bray_curtis"), tab.samples,
    ...                   terms=["treatment"], n_permutations=99, rng=1)
    >>> [t.name.split(" =")[0] for t in null_distribution_figure(p).data]
    ['permuted pseudo-F', 'observed pseudo-F']
    """
    stat, p, null, name, what, perms, lines = _null_parts(result, term)
    sz = sizes(present)
    fig = go.Figure()
    fig.add_trace(go.Histogram(
        x=null, name=f"permuted {name}", nbinsx=40,
        marker={"color": NEUTRAL, "line": {"color": "white", "width": 0.5}},
        hovertemplate=f"{name} %{{x}}<br>%{{y}} permutations<extra></extra>"))
    fig.add_trace(go.Scatter(
        x=[stat], y=[0], mode="markers", name=f"observed {name} = {stat:.4g}",
        marker={"color": OBSERVED, "symbol": "triangle-up", "size": sz["marker"] + 7},
        hovertext=[f"observed {name} = {stat:.4g}<br>{p_words(p)} ({perms})"],
        hovertemplate="%{hovertext}<extra></extra>", cliponaxis=False,
        meta={"role": "observed", "statistic": stat, "pvalue": p}))
    fig.add_vline(x=stat, line={"color": OBSERVED, "width": sz["line"], "dash": "dash"},
                  annotation={"text": f"observed {stat:.4g}<br>{p_words(p)}",
                              "font": {"size": sz["font"]}, "xanchor": "left", "align": "left",
                              "bgcolor": "rgba(255,255,255,0.8)"},
                  annotation_position="top right")
    notes = [f"{p_words(p)} from {perms}"]
    notes += [part for ln in lines for part in textwrap.wrap(ln, 90)]
    base_layout(fig, title=subtitle(what, *notes), legend_title="permutation test",
                present=present, height=500)
    fig.update_layout(bargap=0.04, legend={"orientation": "h", "yref": "container", "y": 0.0,
                                           "yanchor": "bottom", "x": 0.0},
                      margin={"b": 70 + 2 * sz["font"] + 10})
    fig.update_xaxes(title_text=name, rangemode="tozero")
    fig.update_yaxes(title_text="permutations (count)")
    return fig


def dispersion_figure(result, *, present: bool = False) -> go.Figure:
    """Each sample's distance to its group centre, by group, with the group means.

    Examples
    --------
    >>> import tallyform as tly
    >>> tab = tly.demo("mesocosm")
    >>> q = tly.dispersion_test(tly.dissimilarity(tab, "bray_curtis"),
    ...                         tab.samples["treatment"], n_permutations=99, rng=1)
    >>> [t.name for t in dispersion_figure(q).data]
    ['control', 'nutrient_low', 'nutrient_high', 'group mean']
    """
    if not isinstance(result, DispersionResult):
        raise InputError("`result` must be a DispersionResult (from tly.dispersion_test); got "
                         f"{type(result).__name__}.")
    if result.groups is None:
        raise InputError("this DispersionResult carries no group labels; rerun "
                         "tly.dispersion_test to draw it.")
    sz = sizes(present)
    fig = go.Figure()
    groups = result.groups.loc[result.distances.index]
    unit = f"distance to group {result.centre}"
    levels = _boxes(fig, result.distances, groups, sz=sz, unit=unit)
    means = result.group_means.reindex(levels)
    fig.add_trace(go.Scatter(
        x=levels, y=means["mean_distance"].to_numpy(dtype=float), mode="markers",
        name="group mean", marker={"color": OBSERVED, "symbol": "diamond-wide",
                                   "size": sz["marker"] + 8, "line": {"color": "white",
                                                                      "width": 1.5}},
        hovertext=[f"<b>{lv}</b><br>mean distance {m:.4g} (n = {int(n)})"
                   for lv, m, n in zip(levels, means["mean_distance"], means["n"])],
        hovertemplate="%{hovertext}<extra></extra>", meta={"role": "group mean"}))
    title = subtitle(f"Spread of each group: distances to the group {result.centre} "
                     f"({result.measure})",
                     f"F = {result.statistic:.4g} on {result.df[0]} and {result.df[1]} df, "
                     f"{p_words(result.pvalue)} ({result.scheme})")
    base_layout(fig, title=title, legend_title=str(groups.name), present=present, height=540)
    fig.update_yaxes(title_text=f"{unit} ({result.measure} units)", rangemode="tozero")
    fig.update_xaxes(title_text=str(groups.name))
    return fig


def audit_figure(result, *, present: bool = False) -> go.Figure:
    """The two false-alarm rates with their 95 % intervals, and a line at alpha.

    Examples
    --------
    >>> import tallyform as tly
    >>> a = tly.audit(tly.demo("mesocosm"), "treatment", n_sim=20, n_permutations=49, rng=1)
    >>> len(audit_figure(a).data)
    2
    """
    if not isinstance(result, AuditResult):
        raise InputError("`result` must be an AuditResult (from tly.audit); got "
                         f"{type(result).__name__}.")
    sz = sizes(present)
    frame = result.to_frame()
    fig = go.Figure()
    for (label, row), role in zip(frame.iterrows(), ("measure", "reference")):
        rate = float(row["false_alarm_rate"])
        lo, hi = float(row["ci_low"]), float(row["ci_high"])
        fig.add_trace(go.Scatter(
            x=[label], y=[rate], mode="markers", name=label,
            marker={"color": AUDIT_COLOURS[role], "size": sz["marker"] + 6,
                    "symbol": "circle" if role == "measure" else "square"},
            error_y={"type": "data", "symmetric": False, "array": [hi - rate],
                     "arrayminus": [rate - lo], "color": AUDIT_COLOURS[role],
                     "thickness": sz["line"], "width": 12},
            hovertext=[f"<b>{label}</b><br>false alarms: {int(row['rejections'])} of "
                       f"{int(row['n_sim'])} ({100 * rate:.1f} %)<br>95 % interval "
                       f"{100 * lo:.1f} to {100 * hi:.1f} %"],
            hovertemplate="%{hovertext}<extra></extra>",
            meta={"role": role, "rate": rate, "ci": (lo, hi)}))
    fig.add_hline(y=result.alpha, line={"color": OBSERVED, "width": 2, "dash": "dash"},
                  annotation={"text": f"alpha = {result.alpha:g}", "font": {"size": sz["small"]}},
                  annotation_position="top left")
    lines = [f"{result.n_sim} simulated data sets in which the {result.group} groups differ "
             "only in size", "PERMANOVA at alpha; bars: 95 % Clopper-Pearson intervals"]
    base_layout(fig, title=subtitle("How often 'composition differs' is a false alarm", *lines),
                legend_title="measure", present=present, height=540)
    # always the whole 0-100 % scale, so a rate looks as large as it is
    fig.update_yaxes(title_text="false-alarm rate (%)", tickformat=".0%", range=[-0.03, 1.05])
    fig.update_xaxes(title_text="measure", range=[-0.6, 1.6])
    return fig
