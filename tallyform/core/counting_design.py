"""Samples or sampling units, their rarefaction draws and their embedding as points.

Support for :mod:`tallyform.core.counting`: which replicates are compared (independent
samples, or whole sampling units whose rarefied samples are pooled), one data set per
rarefaction draw, and the feature matrix (or principal coordinates) with each replicate's
counting noise.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .counting_stats import Embedding
from .errors import DesignError, InputError, Location
from .rarefaction import check_depth, multinomial_noise, rarefied_counts, whole_counts

__all__ = ["embed", "Design", "design", "draw"]


# ---------------------------------------------------------------------------- embedding
def _is_linear(measure: str, transform: str) -> bool:
    """Measures that are Euclidean distances between linear maps of the profiles."""
    return (measure == "chi_square" and transform in ("none", "profile")) or \
           (measure == "euclidean" and transform == "profile")


def _features_or_distances(x: np.ndarray, labels, taxa, measure: str, transform,
                           params: dict):
    """(feature matrix or None, Dissimilarity or None, notes) of already-checked counts.

    The same steps as :func:`tallyform.core.dissimilarity.dissimilarity` (options, the
    transformation, its checks, the measure's kernel), without building a CommunityTable for
    counts that were validated once already: this runs once per rarefaction draw.
    tests/core/test_counting.py checks that both give the same distances for every measure.
    """
    from .dissimilarity import Dissimilarity
    from .measures import MeasureContext, get_measure
    from .transforms import get_transform
    rec = get_measure(measure)
    unknown = sorted(set(params) - set(rec.options))
    if unknown:
        raise InputError(f"measure {rec.name!r} has no option(s) {unknown}; its options are: "
                         f"{sorted(rec.options) or 'none'}.")
    tr = get_transform(transform)
    xt = tr.apply(x, labels=labels)
    if rec.nonnegative and np.any(xt < 0):
        raise InputError(f"the {rec.label} measure needs values >= 0, but the transformation "
                         f"{tr.name!r} gives negative values.")
    empty = np.flatnonzero(~(xt != 0).any(axis=1))
    if empty.size and rec.empty_samples == "error":
        raise InputError(f"the {rec.label} measure is undefined for samples with nothing in "
                         f"them; sample {labels[int(empty[0])]!r} is all 0 after the "
                         f"transformation {tr.name!r}.")
    ctx = MeasureContext(pd.Index(labels, dtype=object), pd.Index(taxa, dtype=object), dict(params),
                   np.dtype(np.float64))
    if rec.features is not None:
        return np.asarray(rec.features(xt, ctx), dtype=np.float64), None, tuple(ctx.notes)
    d = Dissimilarity(rec.pairwise(xt, ctx), list(labels), measure=rec.name,
                      transform=tr.name, _owned=True)
    return None, d, tuple(ctx.notes)


def embed(counts: np.ndarray, labels, taxa, measure: str, transform, params: dict, *,
          noise: bool) -> tuple[Embedding, tuple]:
    """Features (or principal coordinates) of the samples, and their counting noise.

    Taxa absent from every sample are left out first (chi-square needs positive column
    masses). Measures without a feature matrix are embedded by principal coordinates, the
    axes of negative eigenvalues entering with a minus sign (Gower 1966; Anderson 2006).
    ``noise=True`` adds the unbiased multinomial noise of every sample for measures linear
    in the profiles (chi-square, Euclidean on profiles); other measures get none.
    """
    from .dispersion import pcoa_axes
    from .measures import get_measure
    from .transforms import get_transform
    keep = counts.sum(axis=0) > 0
    x = counts[:, keep].astype(np.float64)
    params = dict(params)
    if params.get("column_masses") is not None:
        params["column_masses"] = np.asarray(params["column_masses"], dtype=float)[keep]
    f, d, notes = _features_or_distances(x, list(labels), np.asarray(taxa, dtype=object)[keep],
                                         measure, transform, params)
    sign = None
    if f is None:
        xp, xn = pcoa_axes(np.asarray(d.gower(), dtype=np.float64))
        f = np.hstack([xp, xn])
        if xn.shape[1]:
            sign = np.r_[np.ones(xp.shape[1]), -np.ones(xn.shape[1])]
    v = None
    tname = get_transform(transform).name
    mname = get_measure(measure).name
    if noise and _is_linear(mname, tname):
        if mname == "chi_square":
            xt = x if tname == "none" else x / x.sum(axis=1, keepdims=True)
            masses = (params["column_masses"] if params.get("column_masses") is not None
                      else xt.sum(axis=0) / xt.sum())
            w = 1.0 / np.asarray(masses, dtype=np.float64)
        else:
            w = None
        v = multinomial_noise(x, w)
    return Embedding(f, sign, v), notes


# ---------------------------------------------------------------------------- replicates
@dataclass(frozen=True, eq=False)
class Design:
    """What is compared: samples (or whole units), their groups, blocks and totals."""

    counts: np.ndarray            # int64 counts of the kept samples (n x p), or floats
    codes: np.ndarray             # group code of every replicate
    levels: list
    labels: list                  # replicate labels
    totals: np.ndarray            # observed total of every replicate
    unit_codes: np.ndarray | None  # unit of every kept sample (None: samples are replicates)
    unit_name: str | None
    blocks: np.ndarray | None
    block_name: str | None
    group_name: str
    depth: int | None
    left_out: tuple
    notes: tuple


def _group(tab, group, aspect: str) -> pd.Series:
    """The group column as a categorical (levels in factor order), checked."""
    from .design import factor_levels
    g = tab.group(group, min_levels=2)
    levels = [str(x) for x in factor_levels(tab.samples[group] if isinstance(group, str)
                                            else g)]
    counts = g.value_counts()
    small = [lv for lv in levels if counts.get(lv, 0) < 2]
    if small:
        raise DesignError(f"level(s) {small} of {g.name!r} hold a single sample; the {aspect} "
                          "test compares at least 2 samples per group.",
                          location=Location(column=repr(g.name)),
                          hint="Merge or drop those levels first.")
    return pd.Series(pd.Categorical(g.to_numpy(), categories=levels), index=g.index,
                     name=g.name)


def _blocks(tab, blocks) -> tuple[np.ndarray | None, str | None]:
    """Block label of every sample of the table (a column name, a Series matched by sample
    label, or a sequence in sample order), and the blocks' name."""
    if blocks is None:
        return None, None
    if isinstance(blocks, str):
        return tab.group(blocks).to_numpy(), blocks
    name = str(getattr(blocks, "name", None) or "blocks")
    if isinstance(blocks, pd.Series):
        b = blocks.copy()
        b.index = [str(i) for i in b.index]
        missing = [s for s in tab.sample_labels if s not in b.index]
        if missing:
            raise DesignError(f"`blocks` has no value for sample(s) {missing[:8]}.",
                              location=Location(column=repr(name)))
        values = b.loc[list(tab.sample_labels)].to_numpy()
    else:
        values = np.asarray(blocks, dtype=object).ravel()
        if values.size != tab.n_samples:
            raise InputError(f"`blocks` has {values.size} value(s) for {tab.n_samples} "
                             "samples.")
    if pd.isna(values).any():
        raise DesignError(f"`blocks` has missing values ({int(pd.isna(values).sum())}).",
                          location=Location(column=repr(name)))
    return values.astype(str), name


def design(tab, group, *, aspect, adjust, depth, units, blocks) -> Design:
    from .units import aggregate_by_unit, resolve_units, unit_blocks
    labels = tab.sample_labels
    g = _group(tab, group, aspect)
    gname = str(g.name)
    block_values, block_name = _blocks(tab, blocks)
    if adjust == "rarefaction":
        x = whole_counts(tab)
        depth, keep, notes = check_depth(x.sum(axis=1), depth, labels)
        if depth < 2:
            small = [str(s) for s in labels[x.sum(axis=1) < 2]]
            raise InputError(f"a rarefaction depth of {depth} individual leaves every sample "
                             "a single individual, with no composition to compare"
                             + (f"; sample(s) {small[:8]} hold fewer than 2" if small else "")
                             + ".", hint="Pass depth=... (at least 2) to leave the smallest "
                                         "samples out.")
    else:
        if depth is not None:
            raise InputError("`depth` is the rarefaction depth; it has no meaning with "
                             "adjust='none'.")
        x = tab.values.copy()
        keep, notes = np.ones(tab.n_samples, dtype=bool), []
    left_out = tuple(str(s) for s in labels[~keep])
    if left_out:
        kept = g[keep].value_counts()
        short = [lv for lv in g.cat.categories if kept.get(lv, 0) < 2]
        if short:
            raise DesignError(f"level(s) {short} of {gname!r} keep fewer than 2 samples with "
                              f"at least {depth} individuals, so the {aspect} test cannot "
                              "compare them at this depth.",
                              location=Location(column=repr(gname)),
                              hint="Lower `depth` (default: the smallest sample total).")
        tab = tab.subset(list(labels[keep]), empty="keep")
        x = x[keep]
        g = g[keep]
        block_values = None if block_values is None else block_values[keep]
    levels = list(g.cat.categories)
    codes = g.cat.codes.to_numpy().astype(np.intp)
    frame = pd.DataFrame(tab.samples.to_dict("series"), index=tab.sample_labels)
    frame.attrs = {}                       # a reader's line map is not needed (and slow to copy)
    frame[gname] = g.astype(str).to_numpy()
    block_codes = None if block_values is None else pd.factorize(block_values)[0]
    plan = resolve_units(frame, [gname], units,
                         blocks=blocks if isinstance(blocks, str) else None)
    notes += list(plan.notes)
    totals = x.sum(axis=1).astype(np.float64)
    if plan.independent:
        return Design(x, codes, levels, [str(s) for s in tab.sample_labels], totals, None,
                      None, block_codes, block_name, gname, depth, left_out, tuple(notes))
    lv = plan.level_of(gname)
    if lv is None:
        raise DesignError(
            f"{gname!r} varies within the units of {plan.levels[-1].name!r}, so its groups "
            "would be compared within units; shape_test and spread_test compare whole units "
            "(or independent samples) only.", location=Location(column=repr(gname)),
            hint="Pass units=False to treat the samples as independent (the result then "
                 "says that units repeat), or compare unit totals per level yourself.")
    ucodes = np.asarray(lv.codes)
    ug = np.empty(lv.m, dtype=np.intp)
    ug[ucodes] = codes
    ub = None
    if block_codes is not None:
        ub = pd.factorize(unit_blocks(lv, block_codes, block_name))[0]
    utot = aggregate_by_unit(totals, lv)
    sizes = lv.sizes
    if sizes.min() != sizes.max() and adjust == "rarefaction":
        notes.append(f"Units hold {sizes.min()}-{sizes.max()} samples: pooled units of more "
                     "samples average more communities, so whole units are exchangeable "
                     "under the null only when every unit holds the same number of samples.")
    return Design(x, ug, levels, list(lv.labels), utot, ucodes, lv.name, ub, block_name,
                  gname, depth, left_out, tuple(notes))


def draw(des: Design, rng) -> np.ndarray:
    """One data set of replicates: samples rarefied, then pooled by unit and (when units
    differ in size) rarefied again to the smallest unit total."""
    if des.depth is None:
        x = des.counts
        if des.unit_codes is None:
            return x
        out = np.zeros((des.codes.size, x.shape[1]))
        np.add.at(out, des.unit_codes, x)
        return out
    y = rarefied_counts(des.counts, des.depth, rng)
    if des.unit_codes is None:
        return y
    pooled = np.zeros((des.codes.size, y.shape[1]), dtype=np.int64)
    np.add.at(pooled, des.unit_codes, y)
    tot = pooled.sum(axis=1)
    if tot.min() != tot.max():
        pooled = rarefied_counts(pooled, int(tot.min()), rng)
    return pooled


