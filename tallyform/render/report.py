"""The shareable outputs: one self-contained HTML report, tables (CSV + XLSX), spec, methods.

The HTML embeds plotly.js once (no network is needed to view it) and every figure as data;
every label the user supplied is escaped (tables through pandas' escaping, text through
``html.escape``, figure data as JSON inside a script block whose closing sequences are
escaped), so a hostile sample or taxon name shows as text and never runs.
"""
from __future__ import annotations

import datetime as _dt
import html
import json
from pathlib import Path

import pandas as pd

from ..core.display import display_frame, p_words
from ..core.analysis import AnalysisResults, run
from ..core.errors import InputError
from ..core.fileio import write_text_atomic
from ..core.spec import AnalysisSpec
from .methods import methods_references, methods_text
from .tables import write_tables
from ..core.progress import reports_progress

__all__ = ["report", "write_report", "write_outputs", "report_html"]

_CSS = """
body{font-family:Arial,Helvetica,sans-serif;max-width:1150px;margin:2em auto;padding:0 1em;
color:#222;line-height:1.45;font-size:16px}
h1{font-size:28px} h2{font-size:22px;border-bottom:2px solid #ddd;padding-bottom:.2em;
margin-top:2em} h3{font-size:18px}
table{border-collapse:collapse;margin:.6em 0;font-size:14px}
th,td{border:1px solid #ccc;padding:3px 8px;text-align:right}
th{background:#f3f3f3} td:first-child,th:first-child{text-align:left}
.reading{background:#f6f9fc;border-left:4px solid #0072B2;padding:.6em 1em;margin:1em 0}
.notes{color:#7a3e00} .skipped{color:#a00}
pre{background:#f6f6f6;padding:1em;overflow-x:auto;font-size:13px}
nav ol{columns:2} .synthetic{background:#fff3cd;padding:.5em 1em}
.figure{margin:1em 0}
"""


def _esc(x) -> str:
    return html.escape(str(x), quote=True)


def _table(frame: pd.DataFrame, *, floatfmt="{:.4g}", max_rows: int | None = None,
           rename: dict | None = None) -> str:
    if frame is None:
        return ""
    f = frame if max_rows is None else frame.head(max_rows)
    f = display_frame(f, rename=rename)          # columns in words, p < 0.001, yes/no
    text = f.to_html(escape=True, float_format=floatfmt.format, border=0, na_rep="")
    if max_rows is not None and len(frame) > max_rows:
        text += f"<p>First {max_rows} of {len(frame)} rows (all rows in the CSV/XLSX tables).</p>"
    return text


def _notes(result) -> str:
    notes = getattr(result, "notes", ()) or ()
    if not notes:
        return ""
    return "<ul class='notes'>" + "".join(f"<li>{_esc(n)}</li>" for n in notes) + "</ul>"


class _Figures:
    """Figures as <div>s sharing one copy of plotly.js (loaded once in the page head)."""

    def __init__(self):
        self.count = 0

    def html(self, fig, *, height: int | None = None) -> str:
        if fig is None:
            return ""
        self.count += 1
        if height:
            fig.update_layout(height=height)
        div = fig.to_html(full_html=False, include_plotlyjs=False,
                          div_id=f"tallyform-fig-{self.count}",
                          config={"displaylogo": False, "responsive": True})
        return f"<div class='figure'>{_script_safe(div)}</div>"


def _script_safe(fragment: str) -> str:
    """Make sure no label inside a figure's JSON can close the script block early."""
    head, sep, rest = fragment.partition("<script")
    if not sep:
        return fragment
    open_end = rest.index(">") + 1
    body, close, tail = rest[open_end:].rpartition("</script>")
    body = body.replace("</", "<\\/").replace("<!--", "<\\!--")
    return head + sep + rest[:open_end] + body + close + tail


def _safe_figure(make):
    try:
        return make()
    except Exception as err:           # a figure must never sink the whole report
        return _FigureError(err)


class _FigureError:
    def __init__(self, err):
        self.err = err


class _Page:
    """What every section builder needs: the results, the figures and escaped helpers."""

    def __init__(self, results: AnalysisResults):
        from . import plots
        self.results, self.plots = results, plots
        self.spec, self.tab = results.spec, results.table
        self.figs = _Figures()

    def fig(self, make, height=None) -> str:
        f = _safe_figure(make)
        if isinstance(f, _FigureError):
            return f"<p class='skipped'>Figure not drawn: {_esc(f.err)}</p>"
        return self.figs.html(f, height=height)


def _pct(x) -> str:
    return f"{100 * float(x):.1f}"


def _data_section(pg: _Page) -> str:
    from .wording import totals_heading, units_paragraph
    res, tab, group = pg.results, pg.tab, pg.spec.group
    body = _table(res.summary.to_frame("value"))
    if tab.notes:
        body += "<ul class='notes'>" + "".join(f"<li>{_esc(n)}</li>" for n in tab.notes) + \
            "</ul>"
    units = res.units
    if units is not None and units.terms:
        body += "<h3>Sampling units</h3>"
        body += f"<p class='reading'>{_esc(units_paragraph(units))}</p>"
        if units.plan is not None and not units.plan.independent:
            from ..core.analysis import units_frame
            body += _table(units_frame(units))
    body += _outliers_html(res.outliers)
    if res.totals is not None:
        body += f"<h3>{_esc(totals_heading(tab, group))}</h3>" + _table(res.totals)
        body += pg.fig(lambda: pg.plots.totals_figure(tab, group, log=True))
    if res.totals_per_effort is not None:
        body += (f"<h3>Totals per unit of effort ({_esc(tab.effort_name)}) by {_esc(group)}"
                 "</h3>" + _table(res.totals_per_effort))
        body += pg.fig(lambda: pg.plots.totals_figure(tab, group, log=True, per_effort=True))
    return body


def _outliers_html(outliers) -> str:
    """Samples that stand out: the sentence, and the flagged rows (none: the sentence)."""
    if outliers is None:
        return ""
    cls = "reading flag" if outliers.flagged else "reading"
    body = f"<h3>Samples that stand out</h3><p class='{cls}'>{_esc(outliers.summary)}</p>"
    if outliers.flagged:
        body += _table(outliers.table.loc[outliers.flagged])
    return body + _notes(outliers)


def _partition_reading(s) -> str:
    """The partition in words: every share with its interval, the Monte Carlo test."""
    fr, ci = s.fractions, s.fractions_ci

    def share(f):
        if ci is None or f not in ci.index:
            return f"{_pct(fr[f])} %"
        return f"{_pct(fr[f])} % (95 % interval {_pct(ci.loc[f, 'low'])} to " \
               f"{_pct(ci.loc[f, 'high'])})"
    name = f"{s.transform} + {s.measure}" if s.transform else s.measure
    text = (f"Of the variation between samples in {name}, {share('size_only')} is size only "
            f"(total abundance), {share('shape_only')} shape only (composition), "
            f"{share('shared')} cannot be attributed to either (shared) and "
            f"{share('residual')} is unexplained. {s.shape_dims_reason}.")
    if s.tests is not None and "shape_only" in s.tests.index:
        p = float(s.tests.loc["shape_only", "pvalue"])
        n_sim = s.tests.loc["shape_only"].get("n_simulations", None)
        null = s.null_shares
        rng = ""
        if null is not None and "shape_only" in null.index:
            rng = (f"; counting noise alone gave {_pct(null.loc['shape_only', 'null_low'])} to "
                   f"{_pct(null.loc['shape_only', 'null_high'])} %")
        sims = f" on {int(n_sim)} simulated tables" if n_sim is not None else ""
        text += (f" Monte Carlo test of the shape-only share against one composition for all "
                 f"samples (shape axes re-derived on each of them){sims}: {p_words(p)}{rng}.")
    return text


def _partition_section(pg: _Page) -> str:
    s = pg.results.size_shape
    body = f"<p class='reading'>{_esc(_partition_reading(s))}</p>"
    body += pg.fig(lambda: pg.plots.partition_bars(s))
    body += _table(s.to_frame()) + _table(s.r2) + _notes(s)
    if s.null_shares is not None:
        body += ("<p>Columns null_median, null_low, null_high: every share over tables "
                 "simulated with one composition for all samples, each sample's counts drawn "
                 "at its observed total (what counting noise alone gives).</p>")
    body += "<h3>Stability: fractions against the number of shape dimensions</h3>"
    body += pg.fig(lambda: pg.plots.dims_figure(s))
    x = pg.results.choices
    if x is not None:
        body += "<h3>Compared with another choice</h3>"
        body += f"<p class='reading'>{_esc(x.reading)}</p>"
        body += pg.fig(lambda: x.figure()) + _table(x.to_frame()) + _notes(x)
    return body


def _scan_section(pg: _Page) -> str:
    g = pg.results.scan
    body = ("<p>The size-only share for every measure and transformation of the grid: "
            "high values mean the measure mostly answers 'how much', not 'what'.</p>")
    body += pg.fig(lambda: pg.plots.scan_heatmap(g))
    body += pg.fig(lambda: pg.plots.partition_bars(g))
    body += _table(g.to_frame().drop(columns=["error"], errors="ignore")) + _notes(g)
    return body


def _ordination_section(pg: _Page) -> str:
    o, e, group = pg.results.ordination, pg.results.ellipses, pg.spec.group
    body = pg.fig(lambda: pg.plots.ordination_figure(
        o, group=pg.tab.samples[group] if group else None, ellipses=e))
    body += _notes(o)
    if e is not None:
        body += f"<p>Ellipses: {_esc(e.covers)}.</p>"
        body += _table(e.to_frame()) + _notes(e)
    body += "<h3>Eigenvalues</h3>" + pg.fig(lambda: pg.plots.scree_figure(o))
    return body


def _tests_section(pg: _Page) -> str:
    from .wording import size_test_words, test_label
    c = pg.results.comparison
    body = f"<p class='reading'>{_esc(c.reading)}</p>" + _table(c.to_frame())
    if c.size is not None:
        body += (f"<h3>Size: total abundance</h3><p>{_esc(size_test_words(c.size))}; "
                 f"{p_words(c.size.pvalue)}.</p>" + _table(c.size.to_frame()) + _notes(c.size))
    else:
        body += f"<h3>Size</h3><p>Not tested: {_esc(c.size_skipped)}</p>"
    body += f"<h3>Shape: {_esc(test_label(c, 'shape'))}</h3>"
    body += ("<p>Each group may have its own spread (Alekseyenko 2016; Hamidi et al. 2019)"
             + (f"; every sample rarefied to {c.depth} individuals, so unequal totals do not "
                "make it significant" if c.depth is not None else "") + ".</p>")
    scheme = getattr(c.shape, "scheme", "")
    if scheme:
        body += f"<p>Permutations: {_esc(scheme)}.</p>"
    body += _table(c.shape.to_frame()) + _notes(c.shape)
    body += pg.fig(lambda: c.shape.figure())
    body += (f"<h3>Spread: {_esc(test_label(c, 'spread'))}</h3>"
             + _table(c.dispersion.to_frame()) + _notes(c.dispersion))
    body += pg.fig(lambda: c.dispersion.figure(kind="distances"))
    if c.permanova is not None:
        body += (f"<h3>For reference: {_esc(test_label(c, 'permanova'))}</h3>"
                 "<p>PERMANOVA responds to unequal spread and, when totals differ, to "
                 "counting noise; read it beside the two tests above.</p>"
                 + _table(c.permanova.to_frame()) + _notes(c.permanova))
    return body


def _tried_section(pg: _Page) -> str:
    from ..core.choice_record import (ORIGINS, SEARCH_NOTE, adjusted_sentence,
                                      origin_sentence, spec_choices)
    j, spec = pg.results.choice_adjusted, pg.spec
    entries, current = spec_choices(spec)
    lead = (origin_sentence(current, group=spec.group, n_choices=j.n_choices,
                            session=False) + " "
            + adjusted_sentence(j, current.name))
    body = f"<p class='reading'>{_esc(lead)}</p>"
    items = "".join(f"<li>{_esc(t.name)}: chosen {_esc(ORIGINS[t.origin])}</li>"
                    for t in entries)
    body += (f"<p>The {len(entries)} choices whose shape test p-value was looked at for "
             f"{_esc(spec.group)} (the spec's <code>choices_tried</code> and the measure "
             f"reported):</p><ul>{items}</ul>")
    body += (f"<p>{_esc(j.reading)}</p><p>The adjustment is that of PERMANOVA of the group, "
             "the test every choice is repeated with on shared relabellings; the Welch-type "
             "shape test and the spread test above are not adjusted for the choices "
             "tried.</p>")
    body += f"<p class='notes'>{_esc(SEARCH_NOTE)}</p>"
    body += pg.fig(lambda: j.figure()) + _table(j.to_frame()) + _notes(j)
    return body


def _permanova_section(pg: _Page) -> str:
    spec, p = pg.spec, pg.results.permanova
    body = (f"<p>PERMANOVA of the chosen measure ({_esc(spec.measure)}"
            f"{', ' + _esc(spec.transform) if spec.transform != 'none' else ''}) with "
            f"the terms {_esc(' + '.join(spec.model_terms))}: what this measure itself "
            "responds to (size and shape together).</p>")
    if p.reading:
        body += f"<p class='reading'>{_esc(p.reading)}</p>"
    body += _table(p.to_frame())
    if p.schemes is not None:
        body += "<h3>How each term was tested</h3>" + _table(p.schemes)
    return body + _notes(p)


def _taxa_section(pg: _Page) -> str:
    k = pg.results.contributions
    how = ("delete-one jackknife-t intervals"
           + (f", one unit of {k.provenance['units']!r} left out at a time"
              if k.provenance.get("units") else "") if k.interval_method != "none"
           else "no intervals")
    body = (f"<p>{_esc(k.a)} against {_esc(k.b)}; {int(100 * k.level)} % "
            f"{_esc(how)}.</p>" + _notes(k))
    body += "<h3>Shape: which taxa make the composition differ</h3>"
    body += pg.fig(lambda: k.figure("shape"))
    body += _table(k.to_frame(), max_rows=25, rename=k.display_labels())
    body += "<h3>Size: which taxa carry the change in abundance</h3>"
    body += pg.fig(lambda: k.figure("size"))
    body += _table(k.size_frame(), max_rows=25, rename=k.display_labels())
    return body


def _methods_section(pg: _Page) -> str:
    text = methods_text(pg.spec, pg.results)
    refs = methods_references(text)
    return (f"<p>{_esc(text)}</p><h3>References</h3><ol>"
            + "".join(f"<li>{_esc(r)}</li>" for r in refs) + "</ol>")


def _spec_section(pg: _Page) -> str:
    return ("<p>Every choice of this analysis. Load it with "
            "<code>tly.AnalysisSpec.from_json(...)</code> and run "
            "<code>tly.run(spec, table)</code> to reproduce these results.</p>"
            f"<pre>{_esc(pg.spec.to_json())}</pre><h3>The same in Python, from reading "
            "the data on</h3>"
            f"<pre>{_esc(pg.results.code())}</pre>")


_SECTIONS = [  # (anchor, title, result that must exist, builder)
    ("data", "Data", "summary", _data_section),
    ("partition", "Size and shape of the chosen measure", "size_shape", _partition_section),
    ("scan", "Which measure? The partition over a grid", "scan", _scan_section),
    ("ordination", "Ordination", "ordination", _ordination_section),
    ("tests", "Size test, shape test and dispersion", "comparison", _tests_section),
    ("choices-tried", "Choices tried: p-values adjusted for them", "choice_adjusted",
     _tried_section),
    ("permanova", "PERMANOVA of the chosen measure", "permanova", _permanova_section),
    ("pairwise", "Pairwise contrasts (shape)", "pairwise",
     lambda pg: _table(pg.results.pairwise.to_frame()) + _notes(pg.results.pairwise)),
    ("taxa", "Which taxa", "contributions", _taxa_section),
    ("audit", "Audit: would this measure mistake size for composition?", "audit",
     lambda pg: (f"<p class='reading'>{_esc(pg.results.audit.reading)}</p>"
                 + pg.fig(lambda: pg.results.audit.figure())
                 + _table(pg.results.audit.to_frame()) + _notes(pg.results.audit))),
    ("methods", "Methods", None, _methods_section),
    ("spec", "Analysis spec", None, _spec_section),
]


def report_html(results: AnalysisResults, *, title: str | None = None) -> str:
    """The report of ``results`` as one self-contained HTML page."""
    import plotly.offline

    from .wording import units_headline
    pg = _Page(results)
    tab = results.table
    sections = [(a, t, build(pg)) for a, t, need, build in _SECTIONS
                if need is None or getattr(results, need) is not None]
    if results.skipped:
        body = "<ul class='skipped'>" + "".join(
            f"<li><b>{_esc(k)}</b>: {_esc(v)}</li>" for k, v in results.skipped.items()) + \
            "</ul>"
        sections.insert(0, ("skipped", "Steps that could not run", body))
    src = tab.origin.file or "(in-memory table)"
    from ..core.scenarios import DEMO_LABEL
    title = title or "tallyform report"
    when = _dt.datetime.now().strftime("%Y-%m-%d %H:%M")
    nav = "<nav><ol>" + "".join(f"<li><a href='#{a}'>{_esc(t)}</a></li>"
                                for a, t, _ in sections) + "</ol></nav>"
    banner = ("<p class='synthetic'>These are the bundled demo data: invented (synthetic), "
              "no real survey behind them.</p>" if DEMO_LABEL in str(src) else "")
    content = "".join(f"<section id='{a}'><h2>{_esc(t)}</h2>{b}</section>"
                      for a, t, b in sections)
    plan = results.units.plan if results.units is not None else None
    head = units_headline(tab.n_samples, plan)
    return (
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
        f"<title>{_esc(title)}</title><style>{_CSS}</style>"
        f"<script type='text/javascript'>{plotly.offline.get_plotlyjs()}</script></head><body>"
        f"<h1>{_esc(title)}</h1><p>{_esc(head)} &times; {_esc(tab.n_taxa)} taxa from "
        f"{_esc(src)}; written {_esc(when)} by tallyform "
        f"{_esc(results.software.get('tallyform', ''))}.</p>{banner}{nav}{content}"
        "</body></html>")


def write_report(results: AnalysisResults, path, *, title: str | None = None) -> Path:
    """Write the HTML report of ``results`` to ``path`` (atomic); a missing folder is
    created, as ``tly.plots.save`` does."""
    _make_folder(Path(path).parent)
    return write_text_atomic(path, report_html(results, title=title))


def _make_folder(folder: Path) -> None:
    """Create ``folder`` (and its parents); a path in the way is named, not a traceback."""
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except (FileExistsError, NotADirectoryError):
        raise InputError(f"cannot create the folder {str(folder)!r}: a file of that name is "
                         "in the way.", hint="Choose another path for the report.") from None
    except OSError as err:
        raise InputError(f"cannot create the folder {str(folder)!r}: {err.strerror}.",
                         hint="Choose a folder you can write to.") from None


@reports_progress("Report")
def report(table, spec: AnalysisSpec | None = None, path="report.html", *,
           title: str | None = None, progress=None, cancel=None) -> Path:
    """Run ``spec`` on ``table`` and write the self-contained HTML report to ``path``.

    Parameters
    ----------
    table : CommunityTable
    spec : AnalysisSpec, dict or JSON text, optional
        Default: an AnalysisSpec with default choices (give at least ``group`` for the tests).
    path : str or path
        The HTML file (written atomically; missing folders are created).

    Returns
    -------
    Path
    """
    spec = spec if spec is not None else AnalysisSpec()
    results = run(spec, table, progress=progress, cancel=cancel)
    return write_report(results, path, title=title)


def write_outputs(results: AnalysisResults, folder, *, title: str | None = None) -> dict:
    """Write report.html, tables/ (CSV per table + tables.xlsx), spec.json and methods.txt."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    out = {"report": write_report(results, folder / "report.html", title=title)}
    out["tables"] = write_tables(results.tables(), folder / "tables")
    out["spec"] = folder / "spec.json"
    results.spec.to_json(out["spec"])
    text = methods_text(results.spec, results)
    refs = "\n".join(methods_references(text))
    out["methods"] = write_text_atomic(folder / "methods.txt", f"{text}\n\nReferences\n{refs}\n")
    out["summary"] = write_text_atomic(folder / "summary.json", json.dumps(
        {"skipped": results.skipped, "software": results.software}, indent=2))
    return out
