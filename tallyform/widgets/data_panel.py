"""The Data panel: what the table holds, what its totals mean (absolute abundances,
sequencing depths, or loads), totals by group, empty and rare taxa, effort.

Core calls: ``tab.summary()``, ``tab.totals_by(column, per_effort=...)``; the figure is
``tly.plots.totals_figure(tab, column, per_effort=...)``.
"""
from __future__ import annotations

import html

import ipywidgets as widgets
import traitlets

from .common import (TABLE, Call, MessageArea, Ref, copy_figure, given, html_table,
                     new_figure_widget, plots)
from .help import add_help
from .shape_panel import default_group, group_options

__all__ = ["DataPanel"]


class DataPanel(widgets.VBox):
    """Summary of the table and its totals by group.

    Attributes
    ----------
    group, per_effort : widgets
    summary : Series
        ``tab.summary()``.
    result : DataFrame or None
        ``tab.totals_by(group, per_effort=...)`` (None without a group or after an error).
    totals_plot : plotly FigureWidget
    messages : MessageArea
    calls : dict
    """

    revision = traitlets.Int(0)

    def __init__(self, table, *, group: str | None = None, present: bool = False, core=None):
        import tallyform
        self._table = table
        self._core = tallyform if core is None else core
        self._present = present
        self.result = None
        self.error: BaseException | None = None
        tab = Ref(TABLE, table)
        self.calls = {"summary": Call("summary", obj=tab)}

        self.group = widgets.Dropdown(options=group_options(table), description="Group",
                                      value=default_group(table) if group is None else group)
        self.group.add_class("tf-group")
        self.per_effort = widgets.Checkbox(
            value=False, indent=False,
            description=f"totals per {table.effort_name}" if table.effort is not None
            else "totals per effort", disabled=table.effort is None)
        self.per_effort.add_class("tf-per-effort")
        if table.effort is None:
            self.per_effort.layout.display = "none"
        self.controls = [self.group, self.per_effort]
        for w in self.controls:
            add_help(w)

        self.facts = widgets.HTML()
        self.facts.add_class("tf-data-summary")
        self.facts.layout.margin = "0 32px 0 0"
        self.facts.layout.max_width = "560px"
        self.meaning = widgets.HTML(_meaning_html(table))
        self.meaning.add_class("tf-abundance")
        self.meaning.layout.max_width = "640px"
        self.totals = widgets.HTML()
        self.totals.add_class("tf-totals-table")
        self.outliers = widgets.HTML()
        self.outliers.add_class("tf-outliers")
        self.outlier_result = None
        self.totals_plot = new_figure_widget("tf-totals-plot")
        self.messages = MessageArea()
        super().__init__([
            widgets.HBox([self.facts, widgets.VBox([self.meaning, widgets.HBox(self.controls),
                                                    self.totals])],
                         layout=widgets.Layout(flex_flow="row wrap")),
            self.outliers, self.messages, self.totals_plot])
        self.add_class("tf-panel-data")

        try:
            self.summary = self.calls["summary"].run(self._core)
            self.facts.value = _facts_html(table, self.summary)
        except Exception as err:
            self.summary = None
            self.messages.show_error(err)
        for w in self.controls:
            w.observe(self.refresh, names="value")
        self.refresh()

    def spec_values(self) -> dict:
        """This panel's choices under their :class:`tallyform.AnalysisSpec` names (with how
        a relative table was read: ``abundance``, ``load``, ``spike_in``)."""
        from ..core.spec import AnalysisSpec
        out = {"group": self.group.value or None}
        if self._table.abundance != "absolute":
            out.update(AnalysisSpec.options_of(self._table))
        return out

    def _flag_outliers(self, column) -> None:
        """Samples that stand out (``tly.outlier_samples``), compared within the group."""
        call = Call("outlier_samples", (Ref(TABLE, self._table),),
                    given(group=column or None))
        self.calls["outliers"] = call
        try:
            self.outlier_result = call.run(self._core)
        except Exception as err:         # no flags rather than no panel; say why
            self.outlier_result = None
            self.outliers.value = (f"<p style='color:#A33'>Outlier flags not computed: "
                                   f"{html.escape(str(err))}</p>")
            return
        self.outliers.value = _outliers_html(self.outlier_result)

    def refresh(self, change=None) -> None:
        """Totals by the chosen group: table and figure; samples that stand out."""
        self.error = None
        self.messages.clear()
        column = self.group.value
        if hasattr(self._core, "outlier_samples"):
            self._flag_outliers(column)
        if not column:
            self.calls.pop("totals", None)
            self.result = None
            self.totals.value = "<p>Choose a group to compare sample totals.</p>"
            with self.totals_plot.batch_update():
                self.totals_plot.data = ()
            self.revision += 1
            return
        per_effort = bool(self.per_effort.value)
        call = Call("totals_by", (column,), given(per_effort=per_effort or None),
                    obj=Ref(TABLE, self._table))
        self.calls["totals"] = call
        try:
            self.result = call.run(self._core)
            fig = plots().totals_figure(self._table, column, log=True, per_effort=per_effort,
                                        present=self._present)
        except Exception as err:
            self.error, self.result = err, None
            self.messages.show_error(err)
            self.totals.value = ""
            with self.totals_plot.batch_update():
                self.totals_plot.data = ()
        else:
            what = {"absolute": "sample totals", "relative": "sequencing depths",
                    "load": "absolute loads"}[_kind(self._table)]
            what = f"{what} per effort" if per_effort else what
            self.totals.value = (f"<p><b>{html.escape(what.capitalize())} by "
                                 f"{html.escape(column)}</b></p>" + html_table(self.result))
            copy_figure(self.totals_plot, fig)
        self.revision += 1

    def set_present(self, on: bool = True) -> None:
        self._present = on
        for w in self.controls:
            w.layout.display = "none" if on or (w is self.per_effort
                                                 and self._table.effort is None) else None
        self.refresh()


def _outliers_html(result) -> str:
    """The sentence, and the flagged samples' rows (formatting only)."""
    if not result.flagged:
        return (f"<p class='tf-no-outliers' style='color:#555'>"
                f"{html.escape(result.summary)}</p>")
    rows = result.table.loc[result.flagged, ["total", "times_median_total", "total_score",
                                             "profile_score", "why"]]
    return ("<div class='tf-outlier-flags' style='border-left:4px solid #D55E00;"
            "padding:2px 10px;margin:6px 0;max-width:900px'>"
            f"<p><b>Samples that stand out</b>: {html.escape(result.summary)}</p>"
            f"{html_table(rows, float_format='{:.3g}'.format)}</div>")


def _kind(table) -> str:
    if table.abundance == "absolute":
        return "absolute"
    return "relative" if table.load is None else "load"


def _meaning_html(table) -> str:
    """What the totals mean, in words (the core's phrase), with what follows from it."""
    from ..core.abundance import totals_meaning
    text = html.escape(totals_meaning(table).replace("totals are ", "", 1))
    kind = _kind(table)
    if kind == "absolute":
        return f"<p><b>Totals</b> are {text}, so sizes can be compared.</p>"
    if kind == "relative":
        return ("<p class='tf-warning' style='color:#A33'><b>Totals are not sizes</b>: they "
                f"are {text}. Give each sample's absolute abundance when reading the table "
                "(<code>load='column'</code> or <code>spike_in={'taxon': ..., 'added': "
                "'column'}</code>) to test size; composition and spread tests run as "
                "usual.</p>")
    return f"<p><b>Totals</b> are {text}.</p>"


def _facts_html(table, summary) -> str:
    """The summary facts, the samples and taxa dropped as empty, and the reader's notes."""
    out = ["<div class='tf-facts'>", "<b>The table</b>",
           html_table(summary.to_frame("value"))]
    dropped = table.dropped
    for what in ("samples", "taxa"):
        if dropped.get(what):
            names = ", ".join(html.escape(str(x)) for x in dropped[what][:30])
            more = f" (the first 30 of {len(dropped[what])})" if len(dropped[what]) > 30 else ""
            out.append(f"<p>Empty {what} dropped: {names}{more}.</p>")
    if table.notes:
        out.append("<ul class='tf-notes'>" + "".join(
            f"<li>{html.escape(str(n))}</li>" for n in table.notes) + "</ul>")
    out.append("</div>")
    return "".join(out)
