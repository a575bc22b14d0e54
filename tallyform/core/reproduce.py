"""``spec.code()``: the Python that reproduces ``tly.run(spec, table)`` in a fresh session.

The calls are those :func:`tallyform.run` makes (:func:`tallyform.core.steps.build_calls`);
this module only adds what a fresh session needs first: reading the table and resolving the
sampling units and the default contrast.
"""
from __future__ import annotations

import functools

from .errors import DesignError, InputError
from .steps import (Expr, build_calls, first_two_levels, literal, read_call,
                    resolve_spec_units)

__all__ = ["spec_code", "demo_name_of", "units_comment"]


@functools.lru_cache(maxsize=8)
def _demo_fingerprint(name: str) -> str:
    from .scenarios import demo
    return demo(name).fingerprint


def demo_name_of(table) -> str | None:
    """The bundled demo ``table`` is (unchanged), or None."""
    from .scenarios import DEMO_LABEL, demo_names
    file = str(getattr(table.origin, "file", "") or "")
    for name in demo_names():
        if file == f"{name}_counts.csv ({DEMO_LABEL})":
            return name if table.fingerprint == _demo_fingerprint(name) else None
    return None


def _try_read(call):
    """The table a read call gives, or None when it cannot be read here."""
    try:
        return call({})
    except (InputError, DesignError, OSError):
        return None


def units_comment(resolved) -> str:
    """What ``units = ...`` stands for, in a few words."""
    plan = resolved.plan
    if plan is None or plan.independent:
        return "samples are the replicates (no sampling units)"
    how = "detected from the design" if plan.detected else "as given"
    return f"sampling units ({how}): " + "; ".join(lv.describe() for lv in plan.levels)


def read_lines(spec, table) -> tuple[list[str], object]:
    """Lines that make ``tab`` in a fresh session, and the table (when known)."""
    rc = read_call(spec)
    if rc is not None:
        return [rc.code()], table if table is not None else _try_read(rc)
    name = demo_name_of(table) if table is not None else None
    if name is not None:
        return [f"tab = tly.demo({name!r})"], table
    opts = spec.table_options()
    how = (" is read with " + ", ".join(f"{k}={literal(v)}" for k, v in opts.items())
           + " (what its totals mean)") if opts else ""
    file = getattr(getattr(table, "origin", None), "file", None) if table is not None else None
    where = f"{file!r}" if file else "'counts.csv'"
    extra = "".join(f", {k}={literal(v)}" for k, v in opts.items())
    return [f"# tab{how}: the table analysed. Read it as before, e.g.",
            f"# tab = tly.read_counts({where}, samples='samples.csv'{extra})",
            "# (give the spec a 'source' and this line is written for you)"], table


def spec_code(spec, table=None) -> str:
    """See :meth:`tallyform.AnalysisSpec.code`."""
    lines = ["import tallyform as tly", ""]
    read, table = read_lines(spec, table)
    lines += read
    if table is not None:
        lines.append(f"# the table analysed: {table.n_samples} samples x {table.n_taxa} taxa "
                     f"(tab.fingerprint == {table.fingerprint!r})")
    lines += ["", f"spec = tly.AnalysisSpec.from_json({spec.to_json(indent=None)!r})",
              "results = tly.run(spec, tab)          # every result at once", "",
              "# or step by step, with the same numbers:"]
    resolved = None
    if table is not None:
        try:
            resolved = resolve_spec_units(spec, table)
        except (InputError, DesignError):
            resolved = None
    contrast = None
    boot = {}
    if resolved is not None:
        lines.append(f"units = {literal(resolved.arg)}   # {units_comment(resolved)}")
        contribution = Expr(resolved.contribution_code)
        if resolved.boot_skipped:
            lines.append(f"# n_boot=0: {resolved.boot_skipped}")
            boot = {"n_boot": resolved.n_boot, "scan_n_boot": resolved.scan_n_boot}
        if spec.group and not spec.contrast:
            try:
                contrast = tuple(first_two_levels(table, spec.group))
            except (InputError, DesignError):
                contrast = None
    else:
        lines += ["u = tly.core.steps.resolve_spec_units(spec, tab)   # sampling units, as "
                  "tly.run resolves them", "units = u.arg"]
        contribution = Expr("u.contribution")
        boot = {"n_boot": Expr("u.n_boot"), "scan_n_boot": Expr("u.scan_n_boot")}
    if spec.group and not spec.contrast and contrast is None:
        lines.append(f"levels = tly.core.steps.first_two_levels(tab, {spec.group!r})   "
                     "# the first two groups")
    for call in build_calls(spec, contribution=contribution, contrast=contrast, **boot):
        lines.append(call.code())
    return "\n".join(lines)
