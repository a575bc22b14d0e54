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

from ..core.analysis import AnalysisResults, run
from ..core.fileio import write_text_atomic
from ..core.spec import AnalysisSpec
from .methods import methods_references, methods_text
from .tables import write_tables

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


def _table(frame: pd.DataFrame, *, floatfmt="{:.4g}", max_rows: int | None = None) -> str:
    if frame is None:
        return ""
    f = frame if max_rows is None else frame.head(max_rows)
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


def report_html(results: AnalysisResults, *, title: str | None = None) -> str:
    """The report of ``results`` as one self-contained HTML page."""
    import plotly.offline

    from . import plots
    spec, tab = results.spec, results.table
    figs = _Figures()
    group = spec.group
    samples = tab.samples

    def fig(make, height=None):
        f = _safe_figure(make)
        if isinstance(f, _FigureError):
            return f"<p class='skipped'>Figure not drawn: {_esc(f.err)}</p>"
        return figs.html(f, height=height)

    sections: list[tuple[str, str, str]] = []     # (anchor, title, body)
    src = tab.origin.file or "(in-memory table)"
    from ..core.scenarios import DEMO_LABEL
    synthetic = DEMO_LABEL in str(src)

    # 1. data
    body = _table(results.summary.to_frame("value"))
    if tab.notes:
        body += "<ul class='notes'>" + "".join(f"<li>{_esc(n)}</li>" for n in tab.notes) + \
            "</ul>"
    if results.totals is not None:
        body += f"<h3>Sample totals (size) by {_esc(group)}</h3>" + _table(results.totals)
        body += fig(lambda: plots.totals_figure(tab, group, log=True))
    if results.totals_per_effort is not None:
        body += (f"<h3>Totals per unit of effort ({_esc(tab.effort_name)}) by {_esc(group)}"
                 "</h3>" + _table(results.totals_per_effort))
        body += fig(lambda: plots.totals_figure(tab, group, log=True, per_effort=True))
    sections.append(("data", "Data", body))

    # 2. size and shape of the chosen measure
    s = results.size_shape
    if s is not None:
        fr = s.fractions
        name = f"{s.transform} + {s.measure}" if s.transform else s.measure
        reading = (f"Of the variation between samples in {name}, "
                   f"{100 * fr['size_only']:.1f} % is size only (total abundance), "
                   f"{100 * fr['shape_only']:.1f} % shape only (composition), "
                   f"{100 * fr['shared']:.1f} % cannot be attributed to either (shared) and "
                   f"{100 * fr['residual']:.1f} % is unexplained. {s.shape_dims_reason}.")
        body = f"<p class='reading'>{_esc(reading)}</p>"
        body += fig(lambda: plots.partition_bars(s))
        body += _table(s.to_frame()) + _table(s.r2) + _notes(s)
        body += "<h3>Stability: fractions against the number of shape dimensions</h3>"
        body += fig(lambda: plots.dims_figure(s))
        sections.append(("partition", "Size and shape of the chosen measure", body))

    # 3. scan
    g = results.scan
    if g is not None:
        body = ("<p>The size-only share for every measure and transformation of the grid: "
                "high values mean the measure mostly answers 'how much', not 'what'.</p>")
        body += fig(lambda: plots.scan_heatmap(g))
        body += fig(lambda: plots.partition_bars(g))
        body += _table(g.to_frame().drop(columns=["error"], errors="ignore")) + _notes(g)
        sections.append(("scan", "Which measure? The partition over a grid", body))

    # 4. ordination
    o = results.ordination
    if o is not None:
        body = fig(lambda: plots.ordination_figure(
            o, group=samples[group] if group else None, ellipses=results.ellipses))
        body += _notes(o)
        if results.ellipses is not None:
            body += _table(results.ellipses.to_frame()) + _notes(results.ellipses)
        body += "<h3>Eigenvalues</h3>" + fig(lambda: plots.scree_figure(o))
        sections.append(("ordination", "Ordination", body))

    # 5. size test, shape test, dispersion
    c = results.comparison
    if c is not None:
        body = f"<p class='reading'>{_esc(c.reading)}</p>"
        if c.size is not None:
            body += "<h3>Size: log total abundance</h3>" + _table(c.size.to_frame()) + \
                _notes(c.size)
        else:
            body += f"<h3>Size</h3><p>Not tested: {_esc(c.size_skipped)}</p>"
        rare = (f", every sample rarefied to {c.depth} individuals" if c.depth is not None
                else "")
        body += (f"<h3>Shape: Welch-type location test with a size-free measure{rare}</h3>" +
                 _table(c.shape.to_frame()) + _notes(c.shape))
        body += fig(lambda: c.shape.figure())
        body += (f"<h3>Spread: dispersion test{rare}</h3>" + _table(c.dispersion.to_frame()) +
                 _notes(c.dispersion))
        body += fig(lambda: c.dispersion.figure(kind="distances"))
        if c.permanova is not None:
            body += ("<h3>For reference: PERMANOVA on all individuals</h3>" +
                     _table(c.permanova.to_frame()) + _notes(c.permanova))
        sections.append(("tests", "Size test, shape test and dispersion", body))
    p = results.permanova
    if p is not None:
        body = (f"<p>PERMANOVA of the chosen measure ({_esc(spec.measure)}"
                f"{', ' + _esc(spec.transform) if spec.transform != 'none' else ''}) with "
                f"the terms {_esc(' + '.join(spec.model_terms))}: what this measure itself "
                "responds to (size and shape together).</p>")
        body += _table(p.to_frame()) + _notes(p)
        sections.append(("permanova", "PERMANOVA of the chosen measure", body))
    w = results.pairwise
    if w is not None:
        body = _table(w.to_frame()) + _notes(w)
        sections.append(("pairwise", "Pairwise contrasts (shape)", body))

    # 6. taxa
    k = results.contributions
    if k is not None:
        body = _notes(k)
        body += "<h3>Shape: which taxa make the composition differ</h3>"
        body += fig(lambda: k.figure("shape"))
        body += _table(k.to_frame(), max_rows=25)
        body += "<h3>Size: which taxa carry the change in abundance</h3>"
        body += fig(lambda: k.figure("size"))
        body += _table(k.size_frame(), max_rows=25)
        sections.append(("taxa", "Which taxa", body))

    # 7. audit
    a = results.audit
    if a is not None:
        body = f"<p class='reading'>{_esc(a.reading)}</p>" + fig(lambda: a.figure())
        body += _table(a.to_frame()) + _notes(a)
        sections.append(("audit", "Audit: would this measure mistake size for composition?",
                         body))

    # 8. methods, spec
    text = methods_text(spec, results)
    refs = methods_references(text)
    body = f"<p>{_esc(text)}</p><h3>References</h3><ul>" + \
        "".join(f"<li>{_esc(r)}</li>" for r in refs) + "</ul>"
    sections.append(("methods", "Methods", body))
    body = ("<p>Every choice of this analysis. Load it with "
            "<code>tly.AnalysisSpec.from_json(...)</code> and run "
            "<code>tly.run(spec, table)</code> to reproduce these results.</p>"
            f"<pre>{_esc(spec.to_json())}</pre><h3>The same, step by step</h3>"
            f"<pre>{_esc(spec.code())}</pre>")
    sections.append(("spec", "Analysis spec", body))
    if results.skipped:
        body = "<ul class='skipped'>" + "".join(
            f"<li><b>{_esc(k)}</b>: {_esc(v)}</li>" for k, v in results.skipped.items()) + \
            "</ul>"
        sections.insert(0, ("skipped", "Steps that could not run", body))

    title = title or "tallyform report"
    when = _dt.datetime.now().strftime("%Y-%m-%d %H:%M")
    nav = "<nav><ol>" + "".join(f"<li><a href='#{a}'>{_esc(t)}</a></li>"
                                for a, t, _ in sections) + "</ol></nav>"
    banner = ("<p class='synthetic'>These are the bundled demo data: invented (synthetic), "
              "no real survey behind them.</p>" if synthetic else "")
    content = "".join(f"<section id='{a}'><h2>{_esc(t)}</h2>{b}</section>"
                      for a, t, b in sections)
    plotly_js = plotly.offline.get_plotlyjs()
    return (
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
        f"<title>{_esc(title)}</title><style>{_CSS}</style>"
        f"<script type='text/javascript'>{plotly_js}</script></head><body>"
        f"<h1>{_esc(title)}</h1><p>{_esc(tab.n_samples)} samples &times; "
        f"{_esc(tab.n_taxa)} taxa from {_esc(src)}; written {_esc(when)} by tallyform "
        f"{_esc(results.software.get('tallyform', ''))}.</p>{banner}{nav}{content}"
        "</body></html>")


def write_report(results: AnalysisResults, path, *, title: str | None = None) -> Path:
    """Write the HTML report of ``results`` to ``path`` (atomic)."""
    return write_text_atomic(path, report_html(results, title=title))


def report(table, spec: AnalysisSpec | None = None, path="report.html", *,
           title: str | None = None, progress=None, cancel=None) -> Path:
    """Run ``spec`` on ``table`` and write the self-contained HTML report to ``path``.

    Parameters
    ----------
    table : CommunityTable
    spec : AnalysisSpec, dict or JSON text, optional
        Default: an AnalysisSpec with default choices (give at least ``group`` for the tests).
    path : str or path
        The HTML file (written atomically).

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
