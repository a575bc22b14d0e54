"""``tly.run(spec, table)``: every result of an analysis spec, in one object.

Each step is one public call with the spec's choices (so ``spec.code()`` reproduces it step by
step with the same numbers: every random step gets ``rng=spec.seed``). A step that cannot run
on these data (a DesignError, e.g. a group with one sample) is recorded with its message and
the others still run; nothing is silently skipped.
"""
from __future__ import annotations

import importlib.metadata
import platform
from dataclasses import dataclass, field

import pandas as pd

from .errors import Cancelled, DesignError, InputError
from .spec import AnalysisSpec
from .table import CommunityTable, as_table

__all__ = ["run", "AnalysisResults", "software_versions"]

# relative cost of each step, for a progress bar that moves evenly
_STEPS = [("summary", 1), ("size_shape", 3), ("scan", 3), ("ordination", 2),
          ("comparison", 6), ("permanova", 4), ("pairwise", 4), ("contributions", 4),
          ("audit", 12)]


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

    def tables(self) -> dict[str, pd.DataFrame]:
        """Every result table, named for export (CSV files / XLSX sheets)."""
        out = {"summary": self.summary.to_frame("value")}
        if self.totals is not None:
            out["totals_by_group"] = self.totals
        if self.totals_per_effort is not None:
            out["totals_per_effort"] = self.totals_per_effort
        if self.size_shape is not None:
            out["size_shape"] = self.size_shape.to_frame()
            out["size_shape_by_dims"] = self.size_shape.by_dims()
        if self.scan is not None:
            out["scan"] = self.scan.to_frame()
        if self.ordination is not None:
            out["ordination_axes"] = self.ordination.to_frame()
            out["ordination_scores"] = self.ordination.scores
        if self.ellipses is not None:
            out["ellipses"] = self.ellipses.to_frame()
        if self.comparison is not None:
            if self.comparison.size is not None:
                out["size_test"] = self.comparison.size.to_frame()
            out["shape_test"] = self.comparison.shape.to_frame()
            if self.comparison.permanova is not None:
                out["shape_permanova"] = self.comparison.permanova.to_frame()
            out["dispersion_test"] = self.comparison.dispersion.to_frame()
        if self.permanova is not None:
            out["permanova"] = self.permanova.to_frame()
        if self.pairwise is not None:
            out["pairwise"] = self.pairwise.to_frame()
        if self.contributions is not None:
            out["taxa_shape"] = self.contributions.to_frame()
            out["taxa_size"] = self.contributions.size_frame()
        if self.audit is not None:
            out["audit"] = self.audit.to_frame()
        return out

    def __repr__(self) -> str:
        done = [k for k, _ in _STEPS if getattr(self, k, None) is not None]
        return (f"AnalysisResults({self.table.n_samples} samples x {self.table.n_taxa} taxa; "
                f"{', '.join(done)}; skipped: {list(self.skipped) or 'none'})")


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
    """
    from .audit import audit
    from .dissimilarity import dissimilarity
    from .inference import pairwise_permanova, permanova
    from .nmds import nmds
    from .ordination import pcoa
    from .partition import size_shape
    from .scan import scan
    from .comparison import compare_groups
    if isinstance(spec, dict):
        spec = AnalysisSpec.from_dict(spec)
    elif isinstance(spec, str):
        spec = AnalysisSpec.from_json(spec)
    if not isinstance(spec, AnalysisSpec):
        raise InputError("`spec` must be an AnalysisSpec (or its dict or JSON).")
    table = as_table(table)
    spec.validate(table)
    total = sum(w for _, w in _STEPS)
    done = 0
    res: dict = {}
    skipped: dict = {}

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

    def check():
        if cancel is not None and cancel():
            raise Cancelled("the analysis was cancelled; no result was kept.")

    tr = spec.transform_arg()
    seed = spec.seed
    group = spec.group
    for name, weight in _STEPS:
        check()
        needs_group = name in ("comparison", "pairwise", "contributions", "audit")
        if needs_group and not group:
            skipped[name] = "no group column in the spec"
            tick(weight)
            continue
        try:
            if name == "summary":
                res["summary"] = table.summary()
                res["totals"] = table.totals_by(group) if group else None
                res["totals_per_effort"] = (table.totals_by(group, per_effort=True)
                                            if group and table.effort is not None else None)
            elif name == "size_shape":
                res["size_shape"] = size_shape(
                    table, spec.measure, transform=tr, size=spec.size, shape=spec.shape,
                    shape_dims=spec.shape_dims, n_permutations=spec.n_permutations,
                    rng=seed, progress=sub(weight), cancel=cancel)
            elif name == "scan":
                res["scan"] = scan(table, spec.scan_measures, spec.scan_transforms,
                                   size=spec.size, shape=spec.shape,
                                   shape_dims=spec.shape_dims, progress=sub(weight),
                                   cancel=cancel)
            elif name == "ordination":
                d = dissimilarity(table, spec.measure, transform=tr)
                res["dissimilarity"] = d
                o = (pcoa(d, correction=spec.correction) if spec.ordination == "pcoa"
                     else nmds(d, rng=seed, cancel=cancel))
                res["ordination"] = o
                if group and spec.ellipse:
                    res["ellipses"] = o.ellipses(table.samples[group], kind=spec.ellipse,
                                                 level=spec.ellipse_level, rng=seed)
            elif name == "comparison":
                res["comparison"] = compare_groups(
                    table, group, shape_measure=spec.shape_measure,
                    size_method=spec.size_method, centre=spec.dispersion_centre,
                    blocks=spec.blocks, n_permutations=spec.n_permutations, rng=seed,
                    alpha=spec.alpha, progress=sub(weight), cancel=cancel)
            elif name == "permanova":
                if not spec.model_terms:
                    skipped[name] = "no terms or group in the spec"
                else:
                    d = res.get("dissimilarity") or dissimilarity(table, spec.measure,
                                                                   transform=tr)
                    res["permanova"] = permanova(
                        d, table, list(spec.model_terms), blocks=spec.blocks,
                        n_permutations=spec.n_permutations, rng=seed, ss=spec.ss,
                        progress=sub(weight), cancel=cancel)
            elif name == "pairwise":
                ds = dissimilarity(table, spec.shape_measure)
                res["pairwise"] = pairwise_permanova(
                    ds, table, group, adjust=spec.pairwise_adjust, blocks=spec.blocks,
                    n_permutations=spec.n_permutations, rng=seed, progress=sub(weight),
                    cancel=cancel)
            elif name == "contributions":
                from .contributions import taxon_contributions
                a, b = spec.contrast or _first_two_levels(table, group)
                res["contributions"] = taxon_contributions(
                    table, group, a, b, measure=spec.contribution_measure, rng=seed,
                    progress=sub(weight), cancel=cancel)
            elif name == "audit":
                res["audit"] = audit(
                    table, group, spec.measure, transform=tr,
                    reference=spec.audit_reference, n_sim=spec.audit_n_sim,
                    n_permutations=spec.audit_n_permutations,
                    model=spec.audit_model, alpha=spec.alpha, rng=seed,
                    progress=sub(weight), cancel=cancel)
        except (DesignError, InputError) as err:
            skipped[name] = str(err)
        tick(weight)
    keys = ["summary", "totals", "totals_per_effort", "size_shape", "scan", "dissimilarity",
            "ordination", "ellipses", "comparison", "permanova", "pairwise", "contributions",
            "audit"]
    return AnalysisResults(spec=spec, table=table, skipped=skipped,
                           software=software_versions(), **{k: res.get(k) for k in keys})


def _first_two_levels(table, group):
    from .design import factor_levels
    levels = factor_levels(table.group(group, min_levels=2))
    return levels[0], levels[1]
