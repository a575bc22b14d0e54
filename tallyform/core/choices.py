"""Comparing two analysis choices on the same samples: how much size does a choice remove?

Each choice (measure, transform, size predictor, shape basis, shape dimensions) gives its own
size and shape partition of the same table. The shares of two choices are strongly
correlated across resamples of the samples (the same samples drive both), so their paired
difference b - a is much better determined than either share: its interval comes from the
same leave-out replicates as the shares' (delete-d jackknife, see
:mod:`tallyform.core.partition_resample`), applied to the difference replicate by replicate.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .errors import InputError
from .partition import (FRACTIONS, SHAPE_OPTIONS, SIZE_OPTIONS, check_option,
                        size_shape_from, interval_note, prepared_arrays, resampling_units)
from .random import as_rng
from .results import ResultMixin
from .table import as_table
from .progress import reports_progress

__all__ = ["compare_choices", "ChoiceComparison", "CHOICE_KEYS"]

CHOICE_KEYS = ("measure", "transform", "size", "shape", "shape_dims")
_DEFAULTS = {"measure": "bray_curtis", "transform": None, "size": "log_total",
             "shape": "chi_square", "shape_dims": None}
_LABELS = {"size_only": "size", "shared": "shared variation", "shape_only": "shape",
           "residual": "residual variation"}


def _normalise(choice, name: str) -> dict:
    if not isinstance(choice, dict):
        raise InputError(f"`{name}` must be a dict of choices with keys from "
                         f"{list(CHOICE_KEYS)}; got {type(choice).__name__}.")
    unknown = sorted(set(choice) - set(CHOICE_KEYS))
    if unknown:
        raise InputError(f"`{name}` has unknown key(s) {unknown}; the keys are "
                         f"{list(CHOICE_KEYS)}.")
    out = dict(_DEFAULTS, **choice)
    check_option(f"{name}['size']", out["size"], SIZE_OPTIONS)
    check_option(f"{name}['shape']", out["shape"], SHAPE_OPTIONS)
    return out


def describe_choice(choice: dict) -> str:
    """``'fourth_root + bray_curtis'`` (with size / shape settings when not default)."""
    from .transforms import get_transform
    tr = get_transform(choice["transform"]).name
    text = choice["measure"] if tr in (None, "none") else f"{tr} + {choice['measure']}"
    extra = [f"{k}={choice[k]}" for k in ("size", "shape", "shape_dims")
             if choice[k] != _DEFAULTS[k]]
    return text + (f" ({', '.join(extra)})" if extra else "")


def _change(a: dict, b: dict) -> str:
    """What b changes relative to a, as the subject of a sentence."""
    from .transforms import get_transform
    ta, tb = get_transform(a["transform"]).name, get_transform(b["transform"]).name
    diff = [k for k in CHOICE_KEYS if (ta != tb if k == "transform" else a[k] != b[k])]
    if diff == ["transform"]:
        return f"a {tb} transform (instead of {ta})" if ta != "none" else f"a {tb} transform"
    if diff == ["measure"]:
        return f"{b['measure']} instead of {a['measure']}"
    if not diff:
        return "the second choice (identical to the first)"
    return f"{describe_choice(b)} instead of {describe_choice(a)}"


def _capital(text: str) -> str:
    return text[:1].upper() + text[1:]


def _pts(x: float) -> str:
    return f"{100 * x:.1f}"


def _sentence(change: str, share: str, diff: float, low: float, high: float) -> str:
    what = _LABELS[share]
    ci = f"95 % interval {_pts(low)} to {_pts(high)} points"
    if not np.isfinite(diff):
        return f"{change}: the change in {what} is undefined for these data."
    if np.isfinite(low) and low <= 0 <= high and not (low == high == 0):
        return (f"{change} changes the {what} share by {_pts(diff)} points ({ci}: no clear "
                "change).")
    verb = "removes" if diff < 0 else "adds"
    if not np.isfinite(low):
        return f"{change} {verb} {_pts(abs(diff))} points of {what}."
    lo, hi = sorted((abs(low), abs(high)))
    return f"{change} {verb} {_pts(abs(diff))} points of {what} (95 % interval {_pts(lo)}-" \
           f"{_pts(hi)})."


@dataclass(frozen=True, eq=False)
class ChoiceComparison(ResultMixin):
    """Every share under two choices and their paired difference b - a.

    Attributes
    ----------
    a, b : dict
        The two choices (with defaults filled in).
    frame : DataFrame
        One row per share: ``a``, ``b``, ``difference`` (b - a) and, with resampling,
        ``a_low``, ``a_high``, ``b_low``, ``b_high``, ``low``, ``high`` (95 % intervals; the
        last two for the difference).
    result_a, result_b : SizeShapeResult
        The two partitions.
    reading : str
        One sentence per share, e.g. "a fourth_root transform removes 12.7 points of size
        (95 % interval 3.0-20.1)."
    statistic : float
        The difference in the size-only share (b - a).
    """

    a: dict
    b: dict
    frame: pd.DataFrame
    result_a: object = field(repr=False)
    result_b: object = field(repr=False)
    n: int = 0
    n_boot: int = 0
    reading: str = ""
    notes: tuple = ()
    provenance: dict = field(default_factory=dict)

    @property
    def statistic(self) -> float:
        return float(self.frame.loc["size_only", "difference"])

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    def tables(self) -> dict:
        return {"choice_comparison": self.to_frame()}

    def _title(self) -> str:
        return (f"{describe_choice(self.b)} minus {describe_choice(self.a)} (n = {self.n}"
                + (f", {self.n_boot} replicates)" if self.n_boot else ")"))

    def __str__(self) -> str:
        return super().__str__() + ("\n" + self.reading if self.reading else "")


@reports_progress("Choice comparison", knob="n_boot")
def compare_choices(table, a: dict, b: dict, *, n_boot: int = 999, rng=None,
                    units=None, progress=None, cancel=None) -> ChoiceComparison:
    """Shares of the size and shape partition under two choices, and their difference.

    Parameters
    ----------
    table : CommunityTable, DataFrame or array
    a, b : dict
        Choices with keys ``measure``, ``transform``, ``size``, ``shape``, ``shape_dims``
        (as in :func:`tallyform.size_shape`; missing keys take its defaults).
    n_boot : int, default 999
        Leave-out replicates shared by both choices (0: shares and differences only).
    rng : None, int or numpy.random.Generator
    units : str or list of str, optional
        Sampling-unit column(s): replicates leave out whole units.
    progress, cancel : callables, optional

    Returns
    -------
    ChoiceComparison

    Notes
    -----
    Both partitions are computed exactly as :func:`tallyform.size_shape` computes them (the
    same numbers). Every replicate leaves out the same samples under both choices, so the
    interval of b - a is a paired one; each choice keeps its own number of shape dimensions.
    Identical choices give a difference of exactly 0 with a zero-width interval.

    Examples
    --------
    >>> import tallyform as tly
    >>> x = tly.compare_choices(tly.demo("mesocosm"), a={"measure": "bray_curtis"},
    ...                         b={"measure": "bray_curtis", "transform": "fourth_root"},
    ...                         n_boot=0)
    >>> bool(x.frame.loc["size_only", "difference"] < 0)
    True
    """
    from .dissimilarity import dissimilarity
    from .partition import check_count
    from .partition_resample import jackknife_interval, leave_out_sets, replicate_shares
    a, b = _normalise(a, "a"), _normalise(b, "b")
    n_boot = check_count("n_boot", n_boot)
    table = as_table(table)
    same = _key(a) == _key(b)
    results, arrays = [], []
    for ch in ((a,) if same else (a, b)):
        d = dissimilarity(table, ch["measure"], transform=ch["transform"])
        results.append(size_shape_from(
            table, d, measure=ch["measure"], transform=ch["transform"], size=ch["size"],
            shape=ch["shape"], shape_dims=ch["shape_dims"], n_permutations=0, rng=None,
            progress=None, cancel=None))
        if n_boot:
            arrays.append(prepared_arrays(table, d, measure=ch["measure"],
                                          transform=ch["transform"], size=ch["size"],
                                          shape=ch["shape"]))
    ra, rb = results[0], results[-1]
    fa = ra.fractions.reindex(list(FRACTIONS)).to_numpy(float)
    fb = rb.fractions.reindex(list(FRACTIONS)).to_numpy(float)
    frame = pd.DataFrame({"a": fa, "b": fb, "difference": fb - fa},
                         index=pd.Index(FRACTIONS, name="fraction"))
    notes = list(ra.notes) if same else [f"a: {x}" for x in ra.notes] + \
        [f"b: {x}" for x in rb.notes]
    unit_name = None
    if n_boot:
        codes, unit_name = resampling_units(table, units)
        boot_rng = as_rng(rng).spawn(2)[1]      # the stream size_shape uses for intervals
        kept, dd, items = leave_out_sets(table.n_samples, n_boot, boot_rng, unit_codes=codes)
        from .partition_resample import check_resampling, small_n_note
        check_resampling(items, max(ra.shape_dims, rb.shape_dims))
        total = n_boot * len(arrays)
        reps = [replicate_shares(arr, kept, res.shape_dims, progress=progress, cancel=cancel,
                                 done_before=i * n_boot, total=total)
                for i, (arr, res) in enumerate(zip(arrays, results))]
        rep_a, rep_b = reps[0], reps[-1]
        for name, est, rep in (("a", fa, rep_a), ("b", fb, rep_b),
                               ("", fb - fa, rep_b - rep_a)):
            low, high, _ = jackknife_interval(est, rep, items=items, d=dd)
            pre = f"{name}_" if name else ""
            frame[f"{pre}low"], frame[f"{pre}high"] = low, high
        notes.append(interval_note(n_boot, unit_name, a["shape_dims"] is not None
                                   and b["shape_dims"] is not None,
                                   f"{ra.shape_dims} (a) and {rb.shape_dims} (b)"))
        small = small_n_note(items, "units" if unit_name else "samples")
        if small:
            notes.append(small)
    change = _change(a, b)
    reading = " ".join(_capital(_sentence(change, f, frame.loc[f, "difference"],
                                 frame.loc[f, "low"] if n_boot else np.nan,
                                 frame.loc[f, "high"] if n_boot else np.nan))
                       for f in ("size_only", "shape_only"))
    prov = {"a": a, "b": b, "n_boot": n_boot, "units": unit_name, "n_samples": table.n_samples,
            "table": table.fingerprint}
    return ChoiceComparison(a=a, b=b, frame=frame, result_a=ra, result_b=rb,
                            n=table.n_samples, n_boot=n_boot, reading=reading,
                            notes=tuple(notes), provenance=prov)


def _key(choice: dict):
    from .transforms import get_transform
    return (choice["measure"], get_transform(choice["transform"]).name, choice["size"],
            choice["shape"], choice["shape_dims"])
