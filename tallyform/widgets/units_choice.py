"""The sampling-units chooser of the dashboard: what the core detects, and the other choices.

Nothing is computed here: every option comes from :func:`tallyform.core.units.resolve_units`
(the detection ``compare_groups(..., units=None)`` would make, and the plan each column would
give), and is only worded for a dropdown. Option values are what the core's ``units=``
accepts: a column name, a tuple of nested column names (coarsest first), or ``False``
(samples independent).
"""
from __future__ import annotations

from dataclasses import dataclass

__all__ = ["UnitChoices", "unit_choices", "level_label", "NO_UNITS_LABEL"]

NO_UNITS_LABEL = "none: samples independent"


@dataclass(frozen=True)
class UnitChoices:
    """Dropdown options and the default.

    Attributes
    ----------
    options : list of (label, value)
        The detected column first (when there is one), then "none", then every other
        column of the sample information except the group.
    default : str or False
        The detected column, or False when nothing was detected.
    detected : str or None
        The column the core would detect (``units=None``), or None.
    """

    options: list
    default: object
    detected: str | None


def level_label(level, *, group: str | None = None, plan=None, detected: bool = False) -> str:
    """``"tank: 15 units, 4 samples each (detected)"`` from a :class:`UnitLevel` (words only)."""
    sizes = level.sizes
    each = (f"{sizes.min()} sample{'s' if sizes.min() != 1 else ''} each" if level.balanced
            else f"{sizes.min()}-{sizes.max()} samples each")
    text = f"{level.name}: {level.m} units, {each}"
    if group and plan is not None and plan.level_of(group) is None:
        text += f"; {group!r} compared within units"
    return text + (" (detected)" if detected else "")


def _frame(table, group: str | None):
    """The sample information as the core's tests see it (the group as its factor)."""
    frame = table.samples
    if group:
        from ..core.size_tests import group_factor
        try:
            frame = frame.copy()
            frame[group] = group_factor(table, group)
        except Exception:            # an unusable group: the run will say why
            frame = table.samples
    return frame


def _plan(frame, group, units, blocks):
    from ..core.units import resolve_units
    return resolve_units(frame, [group] if group else [], units, blocks=blocks or None)


def unit_choices(table, group: str | None = None, blocks: str | None = None,
                 extra=None) -> UnitChoices:
    """The units options for comparing the levels of ``group`` (blocks excluded from
    detection, as in the core).

    Parameters
    ----------
    table : CommunityTable
    group : str, optional
        The factor compared ('' or None: no group; no detection then).
    blocks : str, optional
    extra : str or tuple, optional
        A value to offer even if it is not a single column (nested units from a spec).

    Examples
    --------
    >>> import tallyform as tly
    >>> c = unit_choices(tly.demo("mesocosm"), "treatment")       # synthetic demo
    >>> c.options[0], c.default
    (('tank: 15 units, 4 samples each (detected)', 'tank'), 'tank')
    >>> c.options[1]
    ('none: samples independent', False)
    """
    frame = _frame(table, group)
    detected = None
    options: list = []
    if group:
        try:
            plan = _plan(frame, group, None, blocks)
        except Exception:              # the run reports the problem with the design
            plan = None
        if plan is not None and plan.detected and plan.levels:
            lv = plan.levels[0]
            detected = lv.name
            options.append((level_label(lv, group=group, plan=plan, detected=True),
                            lv.name))
    options.append((NO_UNITS_LABEL, False))
    for c in map(str, table.samples.columns):
        if c == group or c == detected:
            continue
        try:
            plan = _plan(frame, group, c, blocks)
        except Exception:              # e.g. the group varies within some units only
            options.append((f"{c}: does not fit the design of {group!r}" if group else c, c))
            continue
        if plan.independent:
            options.append((f"{c}: every sample its own unit", c))
        else:
            options.append((level_label(plan.levels[0], group=group, plan=plan), c))
    if extra is not None and extra is not False and extra not in [v for _, v in options]:
        name = " / ".join(extra) if isinstance(extra, tuple) else str(extra)
        options.append((f"{name} (nested)" if isinstance(extra, tuple) else name, extra))
    return UnitChoices(options, detected if detected is not None else False, detected)
