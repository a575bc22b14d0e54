"""The calls of an analysis spec, written once and used twice: executed by ``tly.run`` and
printed by ``spec.code()`` ("reproduce this").

Every step of :func:`tallyform.run` is a :class:`Call` (a public function or method, its
arguments and its keyword options). ``run`` evaluates the calls; ``spec.code()`` prints the
same calls as Python, so the two cannot drift apart: pasted into a fresh session, the code
gives the numbers ``run`` gave.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["Ref", "Expr", "Call", "literal", "resolve_spec_units", "SpecUnits",
           "contribution_units", "build_calls", "read_call", "first_two_levels", "spec_terms",
           "tried_family"]


# ---------------------------------------------------------------------------- values
@dataclass(frozen=True)
class Ref:
    """A variable of the reproduce-this namespace (``tab``, ``d``...), with item access."""

    name: str
    path: tuple = ()

    def __getitem__(self, key) -> "Ref":
        return Ref(self.name, self.path + (("item", key),))

    def attr(self, name: str) -> "Ref":
        return Ref(self.name, self.path + (("attr", name),))

    def code(self) -> str:
        out = self.name
        for kind, key in self.path:
            out += f".{key}" if kind == "attr" else f"[{literal(key)}]"
        return out

    def value(self, namespace: dict):
        out = namespace[self.name]
        for kind, key in self.path:
            out = getattr(out, key) if kind == "attr" else out[key]
        return out


@dataclass(frozen=True)
class Expr:
    """An expression written as code only (``spec.code()``); ``run`` passes the value it
    stands for instead."""

    text: str

    def code(self) -> str:
        return self.text


def literal(v) -> str:
    """Python source of a plain value (tuples written as lists, as the spec's JSON has them)."""
    if isinstance(v, (Ref, Expr)):
        return v.code()
    if isinstance(v, tuple):
        return "[" + ", ".join(literal(x) for x in v) + "]"
    if isinstance(v, list):
        return "[" + ", ".join(literal(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{literal(k)}: {literal(x)}" for k, x in v.items()) + "}"
    if isinstance(v, np.generic):          # np.int64(3) -> 3, as a fresh session reads it
        return repr(v.item())
    return repr(v)


def _value(v, namespace):
    if isinstance(v, Ref):
        return v.value(namespace)
    if isinstance(v, dict):
        return {k: _value(x, namespace) for k, x in v.items()}
    return v


@dataclass(frozen=True)
class Call:
    """``target = tly.func(*args, **kwargs)`` (or ``target = obj.method(...)``).

    ``func`` is a name of the ``tallyform`` namespace, or ``"<variable>.<method>"``.
    """

    step: str
    target: str
    func: str
    args: tuple = ()
    kwargs: dict = field(default_factory=dict)
    comment: str = ""

    def code(self, width: int = 92) -> str:
        head = f"{self.target} = " + (self.func if "." in self.func else f"tly.{self.func}")
        parts = [literal(a) for a in self.args] + [f"{k}={literal(v)}"
                                                   for k, v in self.kwargs.items()]
        line = f"{head}({', '.join(parts)})"
        lines = [line]
        if len(line) > width:          # wrap at the commas, continuation under the "("
            indent = " " * (len(head) + 1)
            lines, cur = [], f"{head}("
            for i, p in enumerate(parts):
                piece = p + (", " if i < len(parts) - 1 else ")")
                if len(cur) + len(piece.rstrip()) > width and cur.strip() not in ("", f"{head}("):
                    lines.append(cur.rstrip())
                    cur = indent
                cur += piece
            lines.append(cur)
        if self.comment:
            lines = [f"# {self.comment}"] + lines
        return "\n".join(lines)

    def function(self, namespace: dict):
        if "." in self.func:
            obj, method = self.func.split(".", 1)
            return getattr(namespace[obj], method)
        import tallyform
        return getattr(tallyform, self.func)

    def __call__(self, namespace: dict, **extra):
        args = [_value(a, namespace) for a in self.args]
        kwargs = {k: _value(v, namespace) for k, v in self.kwargs.items()}
        out = self.function(namespace)(*args, **kwargs, **extra)
        namespace[self.target] = out
        return out


# ---------------------------------------------------------------------------- units
@dataclass(frozen=True, eq=False)
class SpecUnits:
    """The sampling units of a spec on one table, resolved once for every step.

    Attributes
    ----------
    plan : UnitPlan or None
        None when the spec names no design and no units (samples independent).
    arg : str, list of str or False
        What every design-aware call receives as ``units=`` (the resolved columns, or False
        for independent samples), so all steps count the same replicates.
    contribution : None, str or Series
        ``units=`` of the taxon contributions: the units the group was applied to.
    contribution_code : str
        The same as code (``'tank'``, or the expression of nested labels).
    terms : tuple of str
        The terms the units were resolved against.
    requested : None, False, str or tuple
        What the spec asked for (``spec.units``).
    n_boot, scan_n_boot : int
        The spec's interval replicates of the partition (and ``compare_with``) and of the
        scan, or 0 when the units (or samples) are too few to leave a quarter out.
    boot_skipped : str or None
        Why the intervals were not made.
    """

    plan: object
    arg: object
    contribution: object
    contribution_code: str
    terms: tuple
    requested: object = None
    n_boot: int = 0
    scan_n_boot: int = 0
    boot_skipped: str | None = None


def spec_terms(spec) -> tuple:
    """The design terms of a spec (its PERMANOVA terms, and the group)."""
    terms = list(spec.model_terms)
    if spec.group and spec.group not in terms:
        terms.append(spec.group)
    return tuple(terms)


def resolve_spec_units(spec, table) -> SpecUnits:
    """Resolve ``spec.units`` against ``table`` (detection when None), once for every step
    of ``tly.run``."""
    from .units import resolve_units
    terms = spec_terms(spec)
    if not terms and spec.units in (None, False):
        return SpecUnits(None, False, None, "None", terms, spec.units,
                         **_intervals(spec, table.n_samples, "samples"))
    units = list(spec.units) if isinstance(spec.units, tuple) else spec.units
    plan = resolve_units(table.samples, list(terms), units, blocks=spec.blocks)
    names = [lv.name for lv in plan.levels]
    arg = False if not names else names[0] if len(names) == 1 else names
    value, code = contribution_units(table, plan, spec.group)
    items = (table.n_samples, "samples") if not names else \
        (plan.levels[0].m, f"units of {names[0]!r}")
    return SpecUnits(plan, arg, value, code, terms, spec.units, **_intervals(spec, *items))


def _intervals(spec, n_items: int, what: str) -> dict:
    """The interval replicates the partition can take: each leaves out a quarter of the
    items (samples, or units of the coarsest level) and keeps at least 4
    (:func:`tallyform.core.partition_resample.check_resampling`)."""
    if n_items - max(1, int(round(n_items / 4))) >= 4 or not (spec.n_boot or
                                                               spec.scan_n_boot):
        return {"n_boot": spec.n_boot, "scan_n_boot": spec.scan_n_boot}
    return {"n_boot": 0, "scan_n_boot": 0,
            "boot_skipped": (f"intervals of the partition's shares need at least 5 {what} "
                             f"(each replicate leaves out a quarter of them); there are "
                             f"{n_items}, so the shares are given without intervals.")}


def contribution_units(table, plan, group) -> tuple:
    """(value, code) of ``units=`` for :func:`tallyform.taxon_contributions`: the column of
    the units the group was applied to (None when the samples are the replicates); for a
    nested level, the labels "site/plot" of every sample, as :mod:`tallyform.core.units`
    labels nested units."""
    if plan is None or plan.independent or not group:
        return None, "None"
    lv = plan.level_of(group)
    if lv is None:
        return None, "None"
    k = [x.name for x in plan.levels].index(lv.name)
    if k == 0:
        return lv.name, repr(lv.name)
    cols = [x.name for x in plan.levels[:k + 1]]
    value = table.samples[cols].astype(str).agg("/".join, axis=1).rename(lv.name)
    code = (f"tab.samples[{literal(cols)}].astype(str).agg('/'.join, axis=1)"
            f".rename({lv.name!r})")
    return value, code


# ---------------------------------------------------------------------------- reading
def read_call(spec) -> Call | None:
    """``tab = tly.demo(...)`` or ``tab = tly.read_counts(...)`` from ``spec.source``."""
    src = spec.source
    if not src:
        return None
    if "demo" in src:
        return Call("read", "tab", "demo", (src["demo"],))
    opts = {k: v for k, v in src.items() if k != "counts"}
    opts.update(spec.table_options())
    return Call("read", "tab", "read_counts", (src["counts"],), opts)


# ---------------------------------------------------------------------------- calls
def build_calls(spec, *, contribution=None, contrast=None, n_boot=None,
                scan_n_boot=None) -> list[Call]:
    """Every call of ``spec`` in order, with ``units=units`` (a variable of the namespace).

    ``contribution`` is the ``units=`` of the taxon contributions and ``contrast`` the two
    groups compared when the spec names none; ``n_boot`` and ``scan_n_boot`` the interval
    replicates the data allow (default: the spec's): values for ``run``, :class:`Expr`
    for code.
    """
    n_boot = spec.n_boot if n_boot is None else n_boot
    scan_n_boot = spec.scan_n_boot if scan_n_boot is None else scan_n_boot
    tab = Ref("tab")
    seed = spec.seed
    tr = spec.transform_arg()
    trk = {"transform": tr} if tr is not None else {}
    u = Ref("units")
    calls = [Call("size_shape", "s", "size_shape", (tab, spec.measure), dict(
        **trk, size=spec.size, shape=spec.shape, shape_dims=spec.shape_dims,
        n_permutations=spec.n_permutations, n_boot=n_boot, units=u, rng=seed))]
    calls.append(Call("scan", "g", "scan", (tab, spec.scan_measures, spec.scan_transforms), dict(
        size=spec.size, shape=spec.shape, shape_dims=spec.shape_dims, n_boot=scan_n_boot,
        units=u, rng=seed)))
    if spec.compare_with:
        a = {"measure": spec.measure, "transform": tr, "size": spec.size, "shape": spec.shape,
             "shape_dims": spec.shape_dims}
        b = dict(a, **spec.compare_with)
        calls.append(Call("choices", "x", "compare_choices", (tab,), dict(
            a=a, b=b, n_boot=n_boot, units=u, rng=seed)))
    calls.append(Call("dissimilarity", "d", "dissimilarity", (tab, spec.measure), dict(trk)))
    if spec.ordination == "pcoa":
        calls.append(Call("ordination", "o", "pcoa", (Ref("d"),),
                          {"correction": spec.correction}))
    else:
        calls.append(Call("ordination", "o", "nmds", (Ref("d"),), {"rng": seed}))
    group = spec.group
    if group and spec.ellipse:
        calls.append(Call("ellipses", "e", "o.ellipses", (tab.attr("samples")[group],), dict(
            kind=spec.ellipse, level=spec.ellipse_level, rng=seed)))
    if group:
        calls.append(Call("comparison", "c", "compare_groups", (tab, group), dict(
            units=u, shape_measure=spec.shape_measure, size_method=spec.size_method,
            centre=spec.dispersion_centre, blocks=spec.blocks,
            n_permutations=spec.n_permutations, rng=seed, alpha=spec.alpha)))
    family = tried_family(spec)
    if group and family:
        calls.append(Call("choice_adjusted", "j", "choice_adjusted", (tab, group, family), dict(
            aspect="shape", units=u, blocks=spec.blocks, n_permutations=spec.n_permutations,
            rng=seed), comment=f"PERMANOVA of the group adjusted for the {len(family)} choices tried"))
    if spec.model_terms:
        calls.append(Call("permanova", "p", "permanova", (Ref("d"), tab,
                                                          list(spec.model_terms)), dict(
            units=u, blocks=spec.blocks, n_permutations=spec.n_permutations, ss=spec.ss,
            rng=seed)))
    if group:
        calls.append(Call("pairwise", "ds", "dissimilarity", (tab, spec.shape_measure)))
        calls.append(Call("pairwise", "w", "pairwise_permanova", (Ref("ds"), tab, group), dict(
            adjust=spec.pairwise_adjust, units=u, blocks=spec.blocks,
            statistic=spec.pairwise_statistic, n_permutations=spec.n_permutations,
            rng=seed)))
        a, b = spec.contrast or contrast or (Expr("levels[0]"), Expr("levels[1]"))
        calls.append(Call("contributions", "k", "taxon_contributions", (tab, group, a, b), dict(
            measure=spec.contribution_measure, units=contribution, rng=seed)))
        calls.append(Call("audit", "a", "audit", (tab, group, spec.measure), dict(
            **trk, reference=spec.audit_reference, n_sim=spec.audit_n_sim,
            n_permutations=spec.audit_n_permutations, model=spec.audit_model,
            alpha=spec.alpha, units=u, rng=seed)))
    return calls


def tried_family(spec) -> list:
    """The distinct choices of ``spec.choices_tried`` and its ``shape_measure`` (the choice
    reported), as ``choice_adjusted`` takes them; empty when fewer than two."""
    if not spec.choices_tried:
        return []
    from .choice_record import spec_choices
    entries, _ = spec_choices(spec)
    return [t.choice.as_dict() for t in entries] if len(entries) >= 2 else []


def first_two_levels(table, group):
    from .design import factor_levels
    levels = factor_levels(table.group(group, min_levels=2))
    return [levels[0], levels[1]]
