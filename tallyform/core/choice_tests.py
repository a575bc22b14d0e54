"""The per-choice tests of :func:`tallyform.core.choice_adjusted.choice_adjusted`, on one shared
set of relabellings.

Two parts, kept apart so that either can change alone:

- :func:`build_layout` reads the design once (the group, the sampling units and the stratum
  the group is tested in, the blocks) and builds the one relabelling scheme every choice is
  tested with: samples permuted (within blocks), whole units permuted (within their parent
  unit and blocks), or samples permuted within their unit, exactly as
  :func:`tallyform.core.inference.permanova` and :func:`tallyform.core.dispersion.dispersion_test`
  build theirs for the same design and seed (same seed, same relabellings, same p-value).
- A *choice test* (:class:`ChoiceTest`) turns one choice into per-relabelling statistics:
  ``prepare(table, choice, layout)`` computes the choice's dissimilarity once and returns a
  :class:`Prepared` whose ``evaluate(idx)`` returns the observed statistic and the statistic
  of every relabelling in a batch ``idx`` (rows as the scheme yields them). Larger is more
  extreme.
  The statistics themselves come from the engine: :func:`~tallyform.core.permutation.permuted_f`
  (samples, or within units), :func:`~tallyform.core.unit_engine.unit_f` (between units) and
  the dispersion test's residual permutation.

:data:`CHOICE_TESTS` maps an ``aspect`` to its test. Another test plugs in by registering an
object with the same ``prepare`` (and the attributes ``aspect``, ``what``, ``statistic_name``):
its statistic only has to be a function of the relabelled design with the data held fixed, so
that every choice is evaluated on the very same relabellings.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from .errors import DesignError, Location

__all__ = ["Layout", "Prepared", "ChoiceTest", "ShapeTest", "SpreadTest", "CHOICE_TESTS",
           "build_layout", "FixedBatch"]


class FixedBatch:
    """A relabelling scheme that yields one given batch (the engine's functions take a
    scheme with ``batches(size)`` and ``total``)."""

    exact = False

    def __init__(self, idx: np.ndarray):
        self.idx = idx
        self.total = int(idx.shape[0])

    def batches(self, size: int):
        size = max(1, int(size))
        for s in range(0, self.total, size):
            yield self.idx[s:s + size]


@dataclass(frozen=True, eq=False)
class Layout:
    """The design of a family of tests: what is compared and how it is relabelled.

    Attributes
    ----------
    group : str
    levels : list of str
        Group levels, in factor order.
    codes : ndarray (n,)
        Group code of every sample.
    kind : {'samples', 'units', 'within'}
        Samples as replicates; the group applied to whole units (compared between units);
        the group varying within units (compared within them).
    stratum : str
        ``'samples'``, ``"between 'tank'"`` or ``"within 'tank'"``.
    perms : Permutations or UnitPermutations
        The one scheme; ``batches(size)`` replays the same relabellings on every call.
    n_replicates : int
        Samples, or units, that are relabelled.
    replicates : str
        The same in words ("20 samples", "10 units of 'tank', 3 samples each").
    plan : UnitPlan
    notes : tuple of str
    """

    group: str
    levels: list
    codes: np.ndarray = field(repr=False)
    kind: str
    stratum: str
    perms: object = field(repr=False)
    n_replicates: int
    replicates: str
    plan: object = field(repr=False)
    notes: tuple = ()
    # samples and within: orthonormal basis of the group (centred within units for
    # 'within') and the residual degrees of freedom
    qt: np.ndarray | None = field(default=None, repr=False)
    df_res: int = 0
    # units: unit of every sample, the parent unit of every unit, the stratum's base and
    # the group's unit-level columns, and every unit's group code
    unit_codes: np.ndarray | None = field(default=None, repr=False)
    parent: np.ndarray | None = field(default=None, repr=False)
    base: np.ndarray | None = field(default=None, repr=False)
    tested: np.ndarray | None = field(default=None, repr=False)
    unit_groups: np.ndarray | None = field(default=None, repr=False)
    data_seed: int = 0

    @property
    def n(self) -> int:
        return int(self.codes.size)

    def stream(self, choice) -> np.random.Generator:
        """A random stream of the data side for one choice (e.g. the draw of a rarefied
        table), the same for the same seed and choice whatever the other choices."""
        import zlib
        return np.random.default_rng([self.data_seed, zlib.crc32(choice.name.encode())])


@dataclass(frozen=True, eq=False)
class Prepared:
    """One choice, ready to be evaluated on batches of relabellings: ``evaluate(idx)``
    returns (observed statistic, statistics of the relabellings in ``idx``)."""

    evaluate: Callable = field(repr=False)
    nbytes: int = 0
    notes: tuple = ()
    size_free: bool = False


class ChoiceTest:
    """How one choice is tested (the swappable part of :func:`choice_adjusted`)."""

    aspect: str = ""
    what: str = ""
    statistic_name: str = ""

    def prepare(self, table, choice, layout: Layout) -> Prepared:  # pragma: no cover
        raise NotImplementedError

    def working_bytes(self, choice, table) -> int:
        """A bound on the memory one prepared choice holds (to group choices in memory)."""
        from .measures import MEASURES
        n, p = table.n_samples, table.n_taxa
        if MEASURES[choice.measure].features is not None and p < n:
            return 8 * n * p
        return 8 * n * n * 2


class ShapeTest(ChoiceTest):
    """PERMANOVA of the group (the shape test of :func:`compare_groups`): pseudo-F with
    samples, whole units or samples within units relabelled."""

    aspect = "shape"
    what = "composition (PERMANOVA)"
    statistic_name = "pseudo-F"

    def prepare(self, table, choice, layout: Layout) -> Prepared:
        from .permutation import permuted_f, prepare_response
        from .unit_engine import precision_weights, unit_f
        d = choice.dissimilarity(table)
        resp = prepare_response(d)
        free = bool(d.properties.get("size_free", False))
        if layout.kind == "units":
            y, signs = resp.unit_means(layout.unit_codes)
            w, _ = precision_weights(resp, layout.unit_codes, y, signs, layout.parent)
            m = y.shape[0]
            none = np.empty((m, 0))
            args = (y, signs, w, layout.base, none, layout.tested, none, layout.base)

            def evaluate(idx):
                return unit_f(*args, FixedBatch(idx))[:2]
            return Prepared(evaluate, y.nbytes, d.notes, free)
        if layout.kind == "within":
            resp = resp.centred_within(layout.unit_codes)
        qt, nz = layout.qt, np.empty((layout.n, 0))

        def evaluate(idx):
            return permuted_f(resp, qt, 0, qt.shape[1], nz, FixedBatch(idx),
                              df_res=layout.df_res, batch_size=idx.shape[0])[:2]
        held = resp.features if resp.features is not None else resp.gower
        return Prepared(evaluate, held.nbytes, d.notes, free)


class SpreadTest(ChoiceTest):
    """The dispersion test of the group (the spread test of :func:`compare_groups`):
    ANOVA F of distances to group centroids, corrected for group size, the residuals about
    the centroids relabelled and every centroid recomputed (Anderson 2006)."""

    aspect = "spread"
    what = "spread (dispersion test)"
    statistic_name = "F of distances to centroids"

    def prepare(self, table, choice, layout: Layout) -> Prepared:
        from .dispersion import residual_null, sample_space
        from .permutation import prepare_response
        d = choice.dissimilarity(table)
        free = bool(d.properties.get("size_free", False))
        if layout.kind == "units":
            codes = layout.unit_groups
            y, signs = prepare_response(d).unit_means(layout.unit_codes)
            cent = np.vstack([y[codes == g].mean(axis=0) for g in range(len(layout.levels))])
            space = ("coords", y - cent[codes], signs)
        else:
            codes = layout.codes
            space = sample_space(d, codes)
        size = space[1].nbytes

        def evaluate(idx):
            return residual_null(space, codes, FixedBatch(idx), correction=True)[:2]
        return Prepared(evaluate, size, d.notes, free)


#: The test of each ``aspect`` (see the module notes to plug in another).
CHOICE_TESTS: dict = {"shape": ShapeTest(), "spread": SpreadTest()}


# ---------------------------------------------------------------------------- layout
def _group_frame(tab, group):
    from .size_tests import group_factor
    g = group_factor(tab, group)
    name = str(g.name)
    frame = tab.samples.copy()
    frame[name] = g
    levels = [str(x) for x in g.cat.categories]
    codes = g.cat.codes.to_numpy().astype(np.intp)
    return frame, name, levels, codes


def _blocks(frame, blocks, labels):
    from .inference import align_labels, block_labels
    if blocks is None or isinstance(blocks, str):
        return block_labels(frame, blocks)
    return block_labels(frame, align_labels(blocks, labels, "blocks"))


def _not_in_blocks(name, block_name, what):
    return DesignError(f"{name!r} is constant within the blocks of {block_name!r}, so "
                       f"{what} permuted within those blocks cannot test it.",
                       location=Location(column=repr(name)),
                       hint="Test it without those blocks, or at the level of the blocks.")


def build_layout(tab, group, *, units=None, blocks=None, n_permutations: int = 999,
                 rng=None) -> Layout:
    """The group, its stratum and the one relabelling scheme of a family of tests.

    ``rng`` is consumed exactly as :func:`permanova` consumes it for the same design (one
    draw seeds the scheme), so the relabellings are those of ``permanova(..., rng=rng)``;
    a second draw seeds :meth:`Layout.stream`.
    """
    from dataclasses import replace

    from .design import model_matrix
    from .inference import align_labels
    from .random import as_rng
    from .units import resolve_units
    rng = as_rng(rng)
    frame, name, levels, codes = _group_frame(tab, group)
    labels = pd.Index(tab.sample_labels)
    block_codes, block_name = _blocks(frame, blocks, labels)
    if isinstance(units, pd.Series):
        units = align_labels(units, labels, "units")
        units = units.rename(units.name if units.name is not None else "units")
    plan = resolve_units(frame, [name], units, blocks=block_name)
    mm = model_matrix(frame, [name])
    cols = mm.term_columns[name]
    common = dict(group=name, levels=levels, codes=codes, plan=plan)
    layout = _layout(frame, mm, cols, plan, block_codes, block_name, n_permutations, rng,
                     common)
    return replace(layout, data_seed=int(rng.integers(2**63)))


def _layout(frame, mm, cols, plan, block_codes, block_name, n_permutations, rng,
            common) -> Layout:
    from .permutation import Permutations, nested_bases
    from .schemes import label_symmetries
    from .strata import constant_within, main_effects
    name, n = common["group"], len(common["codes"])
    if plan.independent:
        if constant_within(mm.X[:, cols], block_codes):
            raise _not_in_blocks(name, block_name, "samples")
        sym = label_symmetries(main_effects(frame, [name]), block_codes)
        perms = Permutations(n, n_permutations, rng, blocks=block_codes,
                             block_name=block_name, design=mm.X, symmetries=sym)
        qt = nested_bases(None, mm.X)[1]
        return Layout(kind="samples", stratum="samples", perms=perms, n_replicates=n,
                      replicates=f"{n} samples", notes=_notes(plan, perms, name),
                      qt=qt, df_res=n - 1 - qt.shape[1], **common)
    lv = plan.level_of(name)
    if lv is None:
        return _within_layout(frame, mm, cols, plan, block_codes, block_name, n_permutations,
                              rng, common)
    return _unit_layout(frame, mm, cols, plan, lv, block_codes, block_name, n_permutations,
                        rng, common)


def _notes(plan, perms, name, replication=None) -> tuple:
    floor = perms.note(term=name, replication=replication)
    return tuple(plan.notes) + ((floor,) if floor else ())


def _within_layout(frame, mm, cols, plan, block_codes, block_name, n_permutations, rng,
                   common) -> Layout:
    from .permutation import nested_bases
    from .schemes import combine_codes, label_symmetries, within_units
    from .strata import constant_within, main_effects
    name = common["group"]
    lv = plan.levels[-1]
    ucodes, m = lv.codes, lv.m
    n = ucodes.size
    sums = np.zeros((m, mm.X.shape[1]))
    np.add.at(sums, ucodes, mm.X)
    xc = mm.X - (sums / lv.sizes[:, None])[ucodes]
    qt = nested_bases(None, xc[:, cols])[1]
    df_res = n - m - qt.shape[1]
    if df_res <= 0:
        raise DesignError(f"{name!r} varies within units of {lv.name!r}, but no within-unit "
                          "replication is left to test it against.",
                          location=Location(column=repr(name)),
                          hint="Use fewer levels, or more samples per unit.")
    strata = combine_codes(ucodes, block_codes)
    if constant_within(mm.X[:, cols], strata):
        raise _not_in_blocks(name, lv.name if block_codes is None
                             else f"{lv.name} x {block_name}", "samples")
    sym = label_symmetries(main_effects(frame, [name]), strata)
    perms = within_units(ucodes, n_permutations, rng, unit_name=lv.name, blocks=block_codes,
                         block_name=block_name, design=mm.X[:, cols], symmetries=sym)
    return Layout(kind="within", stratum=f"within {lv.name!r}", perms=perms, n_replicates=n,
                  replicates=f"{n} samples within {lv.describe()}",
                  notes=_notes(plan, perms, name), qt=qt, df_res=df_res, unit_codes=ucodes,
                  **common)


def _unit_layout(frame, mm, cols, plan, lv, block_codes, block_name, n_permutations, rng,
                 common) -> Layout:
    from .schemes import UnitPermutations, combine_codes, label_symmetries
    from .strata import constant_within, main_effects, replication_text
    from .unit_engine import full_rank_columns
    from .units import unit_blocks
    name = common["group"]
    k = plan.levels.index(lv)
    ucodes, m = lv.codes, lv.m
    if k == 0:
        base, parent = np.ones((m, 1)), None
    else:
        up = plan.levels[k - 1]
        parent = lv.parent
        base = np.eye(up.m)[parent]
    ub = unit_blocks(lv, block_codes, block_name) if block_codes is not None else None
    ublocks = combine_codes(parent, ub)
    names = ([plan.levels[k - 1].name] if k else []) + ([block_name or "blocks"]
                                                       if ub is not None else [])
    ub_name = " x ".join(names) or None
    first = np.unique(ucodes, return_index=True)[1]
    tested = mm.X[first][:, cols]
    _, counts = full_rank_columns([base, tested])
    if m - sum(counts) <= 0:
        raise DesignError(f"{name!r} uses all {m} units of {lv.name!r}, leaving no replicate "
                          "units to test it against.", location=Location(column=repr(name)),
                          hint="More units per level are needed.")
    if constant_within(tested, ublocks):
        raise _not_in_blocks(name, ub_name, "whole units")
    sym = label_symmetries(main_effects(frame, [name], rows=first), ublocks)
    perms = UnitPermutations(ucodes, n_permutations, rng, unit_name=lv.name, blocks=ublocks,
                             block_name=ub_name, design=tested, symmetries=sym)
    rep = replication_text(frame, name, lv, first)
    return Layout(kind="units", stratum=f"between {lv.name!r}", perms=perms, n_replicates=m,
                  replicates=lv.describe(), notes=_notes(plan, perms, name, rep),
                  unit_codes=ucodes, parent=parent, base=base, tested=tested,
                  unit_groups=common["codes"][first], **common)
