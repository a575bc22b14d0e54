"""``tly.run(spec, table)``: every result of an analysis spec, in one object.

Each step is one public call with the spec's choices, the calls written once in
:mod:`tallyform.core.steps` (so ``spec.code()`` prints exactly the calls made here and gives
the same numbers: every random step gets ``rng=spec.seed``). The sampling units are resolved
once (:func:`tallyform.core.steps.resolve_spec_units`) and every step gets the same ones. A
step that cannot run on these data (a DesignError, e.g. a group with one sample) is recorded
with its message and the others still run; nothing is silently skipped.
"""
from __future__ import annotations

import importlib.metadata
import platform
from dataclasses import dataclass, field

import pandas as pd

from .errors import Cancelled, DesignError, InputError
from .spec import AnalysisSpec
from .outliers import outlier_samples
from .table import CommunityTable, as_table
from .progress import reports_progress

__all__ = ["run", "AnalysisResults", "software_versions"]

# relative cost of each step, for a progress bar that moves evenly
_STEPS = [("summary", 1), ("size_shape", 3), ("scan", 3), ("choices", 2),
          ("dissimilarity", 1), ("ordination", 2), ("ellipses", 1), ("comparison", 6),
          ("choice_adjusted", 3), ("permanova", 4), ("pairwise", 4), ("contributions", 4), ("audit", 12)]
_NEEDS_GROUP = ("comparison", "choice_adjusted", "pairwise", "contributions", "audit")
# caution added to centre regions drawn from the samples of a design with units
_ELLIPSE_UNITS_NOTE = (
    "The ellipses are drawn from the samples, as if each were an independent replicate; "
    "here samples share sampling units ({units}), so a region for a group's centre drawn "
    "from them is too small when samples of a unit resemble each other. The tests count "
    "units; read these regions as descriptive.")


def software_versions() -> dict:
    out = {"python": platform.python_version()}
    for pkg in ("tallyform", "numpy", "scipy", "pandas", "statsmodels", "scikit-learn"):
        try:
            out[pkg] = importlib.metadata.version(pkg)
        except importlib.metadata.PackageNotFoundError:
            if pkg == "tallyform":
                from .. import __version__
                out[pkg] = __version__
    return out


@dataclass(frozen=True, eq=False)
class AnalysisResults:
    """All results of one spec on one table (attributes are None when a step did not run;
    ``skipped`` says why)."""

    spec: AnalysisSpec
    table: CommunityTable
    summary: pd.Series
    totals: pd.DataFrame | None
    totals_per_effort: pd.DataFrame | None
    size_shape: object
    scan: object
    dissimilarity: object
    ordination: object
    ellipses: object
    comparison: object
    permanova: object
    pairwise: object
    contributions: object
    audit: object
    skipped: dict = field(default_factory=dict)
    software: dict = field(default_factory=dict)
    choices: object = None
    units: object = None
    outliers: object = None
    choice_adjusted: object = None

    def code(self) -> str:
        """Python that reproduces these results in a fresh session (``spec.code(table)``)."""
        return self.spec.code(self.table)

    def tables(self) -> dict[str, pd.DataFrame]:
        """Every result table, named for export (CSV files / XLSX sheets)."""
        out = {"summary": self.summary.to_frame("value")}
        if self.outliers is not None:
            out["outlier_samples"] = self.outliers.to_frame()
        if self.totals is not None:
            out["totals_by_group"] = self.totals
        if self.totals_per_effort is not None:
            out["totals_per_effort"] = self.totals_per_effort
        if self.units is not None and self.units.plan is not None:
            out["sampling_units"] = units_frame(self.units)
        for name in ("size_shape", "choices", "scan", "ordination", "ellipses", "comparison",
                     "choice_adjusted", "permanova", "pairwise", "contributions", "audit"):
            result = getattr(self, name)
            if result is None:
                continue
            if name == "choice_adjusted":       # named for what it holds in a run
                out["choices_tried"] = result.to_frame()
            else:
                out.update(result.tables())
        return out

    def __repr__(self) -> str:
        done = [k for k, _ in _STEPS if getattr(self, k, None) is not None]
        return (f"AnalysisResults({self.table.n_samples} samples x {self.table.n_taxa} taxa; "
                f"{', '.join(done)}; skipped: {list(self.skipped) or 'none'})")


@reports_progress("Analysis")
def run(spec: AnalysisSpec, table, *, progress=None, cancel=None) -> AnalysisResults:
    """Run every step of ``spec`` on ``table``.

    Parameters
    ----------
    spec : AnalysisSpec (or a dict / JSON text of one)
    table : CommunityTable
    progress : callable(done, total), optional
    cancel : callable() -> bool, optional
        Checked between and inside the long steps; True raises :class:`Cancelled` and no
        result is returned.

    Returns
    -------
    AnalysisResults
        ``units`` holds the sampling units every step used (resolved once).

    Raises
    ------
    InputError, DesignError
        A spec that does not fit the table (unknown columns, a table read with other
        ``abundance``/``load``/``spike_in``, sampling units that do not fit the design).
    """
    from .steps import build_calls, first_two_levels, resolve_spec_units
    if isinstance(spec, dict):
        spec = AnalysisSpec.from_dict(spec)
    elif isinstance(spec, str):
        spec = AnalysisSpec.from_json(spec)
    if not isinstance(spec, AnalysisSpec):
        raise InputError("`spec` must be an AnalysisSpec (or its dict or JSON).")
    table = as_table(table)
    spec.validate(table)
    units = resolve_spec_units(spec, table)
    group = spec.group
    contrast = None
    if group and not spec.contrast:
        try:
            contrast = tuple(first_two_levels(table, group))
        except (DesignError, InputError):
            contrast = None          # the steps that need it say why
    calls: dict[str, list] = {}
    for call in build_calls(spec, contribution=units.contribution, contrast=contrast,
                            n_boot=units.n_boot, scan_n_boot=units.scan_n_boot):
        calls.setdefault(call.step, []).append(call)
    total = sum(w for _, w in _STEPS)
    done = 0
    space: dict = {"tab": table, "units": units.arg}
    res: dict = {}
    skipped: dict = {}
    if units.boot_skipped:
        skipped["partition intervals"] = units.boot_skipped

    def tick(step_weight):
        nonlocal done
        done += step_weight
        if progress is not None:
            progress(done, total)

    def sub(weight):
        if progress is None:
            return None
        start = done
        return lambda d, t: progress(start + weight * d / max(t, 1), total)

    for name, weight in _STEPS:
        if cancel is not None and cancel():
            raise Cancelled("the analysis was cancelled; no result was kept.")
        if name == "summary":
            res["summary"] = table.summary()
            try:
                res["outliers"] = outlier_samples(table, group)
            except (DesignError, InputError) as err:
                skipped["outlier flags"] = str(err)
            res["totals"] = table.totals_by(group) if group else None
            res["totals_per_effort"] = (table.totals_by(group, per_effort=True)
                                        if group and table.effort is not None else None)
        elif name == "choice_adjusted" and name not in calls:
            pass                 # fewer than two choices tried: nothing to adjust for
        elif name in _NEEDS_GROUP and not group:
            skipped[name] = "no group column in the spec"
        elif name == "permanova" and not spec.model_terms:
            skipped[name] = "no terms or group in the spec"
        else:
            try:
                _run_step(name, calls.get(name, []), space, res, sub(weight), cancel)
            except (DesignError, InputError, _Missing) as err:
                skipped[name] = str(err)
        tick(weight)
    e = res.get("ellipses")
    if e is not None and units.plan is not None and not units.plan.independent:
        import dataclasses
        what = "; ".join(lv.describe() for lv in units.plan.levels)
        e = dataclasses.replace(e, notes=e.notes + (_ELLIPSE_UNITS_NOTE.format(units=what),))
        res["ellipses"] = e
    keys = ["summary", "totals", "totals_per_effort", "size_shape", "scan", "dissimilarity",
            "ordination", "ellipses", "comparison", "permanova", "pairwise", "contributions",
            "audit", "choices", "outliers", "choice_adjusted"]
    return AnalysisResults(spec=spec, table=table, skipped=skipped, units=units,
                           software=software_versions(), **{k: res.get(k) for k in keys})


class _Missing(Exception):
    """A step's input comes from a step that could not run."""


# where each step's result is kept (the variable of the reproduce-this code -> result name)
_KEEP = {"s": "size_shape", "g": "scan", "x": "choices", "d": "dissimilarity",
         "o": "ordination", "e": "ellipses", "c": "comparison", "p": "permanova",
         "w": "pairwise", "k": "contributions", "a": "audit",
         "j": "choice_adjusted"}
# calls that take progress / cancel callbacks
_CALLBACKS = {"size_shape": ("progress", "cancel"), "scan": ("progress", "cancel"),
              "compare_choices": ("progress", "cancel"), "nmds": ("cancel",),
              "compare_groups": ("progress", "cancel"),
              "choice_adjusted": ("progress", "cancel"), "permanova": ("progress", "cancel"),
              "pairwise_permanova": ("progress", "cancel"),
              "taxon_contributions": ("progress", "cancel"), "audit": ("progress", "cancel")}


def _run_step(name, calls, space, res, progress, cancel) -> None:
    """Evaluate the calls of one step in ``space`` (the reproduce-this namespace)."""
    from .steps import Ref
    for call in calls:
        missing = [v.name for v in list(call.args) + list(call.kwargs.values())
                   if isinstance(v, Ref) and v.name not in space]
        if missing:
            raise _Missing(f"needs {', '.join(missing)} from a step that did not run")
        extra = {}
        wanted = _CALLBACKS.get(call.func, ())
        if "progress" in wanted and progress is not None:
            extra["progress"] = progress
        if "cancel" in wanted and cancel is not None:
            extra["cancel"] = cancel
        out = call(space, **extra)
        if call.target in _KEEP:
            res[_KEEP[call.target]] = out


def units_frame(units) -> pd.DataFrame:
    """The sampling units of a run: one row per level, then the stratum of every term."""
    plan = units.plan
    rows = {}
    for lv in plan.levels:
        s = lv.sizes
        rows[f"units: {lv.name}"] = {"what": "units", "n": lv.m,
                                     "samples_each": (f"{s.min()}" if lv.balanced
                                                      else f"{s.min()}-{s.max()}"),
                                     "stratum": "", "detected": plan.detected}
    for t in units.terms:
        rows[f"term: {t}"] = {"what": "term", "n": None, "samples_each": "",
                              "stratum": plan.stratum_name(t), "detected": plan.detected}
    for k, v in rows.items():
        if v["n"] is None:
            v["n"] = pd.NA
    out = pd.DataFrame.from_dict(rows, orient="index")
    out["n"] = pd.array(out["n"].tolist(), dtype="Int64")
    out.index.name = "item"
    return out
