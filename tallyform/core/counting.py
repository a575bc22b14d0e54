"""Shape and spread tests that a pure difference in size cannot fool.

:func:`shape_test` asks whether groups differ in composition (the location of their
profiles), :func:`spread_test` whether they differ in how variable their compositions are.
Both keep their level when the groups differ only in their totals, at any ratio of totals,
for any measure, without a model of the between-sample variation: every sample is rarefied
to a common number of individuals first (Sanders 1968; Hurlbert 1971), which makes the
samples exchangeable under the null "same law of composition in every group", and the
statistic is recomputed for every relabelling (:mod:`tallyform.core.counting_stats`), so the
permutation test is exact. ``adjust='none'`` runs the same statistics on the counts as they
are (what an unadjusted analysis does; shown as a reference).

Why. A profile drawn from N individuals carries counting noise of variance about q(1 - q) / N
per taxon, so a group of small samples looks more spread out than a group of large samples
of the same communities (Warton, Wright & Wang 2012), and a transform that is not linear in
the proportions (Hellinger's square root, log-ratios after zero replacement) also moves the
group centroids (Jensen's inequality). Measured (benchmarks/counting.py, docs/calibration.md):
the unadjusted spread test rejects 30-100 % of size-only data sets at a 4- to 10-fold ratio of
totals, the unadjusted Hellinger shape test up to 80 %.

What was tried and left out (measured, see benchmarks/counting.py): tests keeping every
individual - a Welch-type statistic on the full profiles, and the noise-corrected spread
statistic with a studentised permutation or a Welch t reference - reject 8-19 % of
size-only data sets in some designs with 6-14 samples per group (Dirichlet-multinomial and
gamma-Poisson biology, unbalanced groups), so they are not offered. Chi-square column masses
pooled over samples of unequal totals are set by the large samples and inflate even the
balanced shape test (18 % at 500 vs 5000 individuals); after rarefaction all samples weigh
alike.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from .counting_stats import (Embedding, batch_size, location_statistic, spread_distances,
                             spread_statistic)
from .errors import Cancelled, DesignError, InputError, Location
from .inference import check_n_permutations, check_option
from .permutation import Permutations, pvalue_from_null
from .random import as_rng
from .rarefaction import check_depth, combine_draws, multinomial_noise, rarefied_counts, \
    whole_counts
from .results import ResultMixin, readonly
from .table import as_table

__all__ = ["shape_test", "spread_test", "CountingTestResult", "ADJUSTMENTS",
           "SHAPE_STATISTICS"]

#: How counting noise is handled: one rarefaction per draw, or not at all (reference).
ADJUSTMENTS = ("rarefaction", "none")
#: Statistics of the shape test.
SHAPE_STATISTICS = ("welch", "pseudo_f")
#: Above this ratio of group totals (geometric means) a result says what noise would do.
RATIO_NOTE = 1.5


# ---------------------------------------------------------------------------- result
@dataclass(frozen=True, eq=False)
class CountingTestResult(ResultMixin):
    """A shape or spread test between groups that pure size differences cannot fool.

    Attributes
    ----------
    aspect : {'shape', 'spread'}
    statistic : float
        Welch-type statistic or pseudo-F (shape), ANOVA F of the distances to the group
        centroids (spread), from the draw whose p-value is reported.
    pvalue : float
        Permutation p-value; with ``n_draws > 1``, Rueger's (1978) combination of the
        per-draw p-values.
    method : str
        The test in words (what was computed on what).
    adjust : {'rarefaction', 'none'}
    depth : int or None
        The common number of individuals per sample after rarefaction (None: unadjusted).
    n_draws : int
    draw_pvalues : ndarray
        p-value of every rarefaction draw.
    measure, transform : str
    group : str
    summary : DataFrame
        Per group: ``n`` (samples or units), ``total_geometric_mean``, ``total_min``,
        ``total_max`` (observed totals) and, for spread, ``mean_distance``.
    distances : Series or None
        Spread only: every replicate's distance to its group centroid (rescaled, and
        noise-corrected where stated), for the reported draw.
    groups : Series or None
        Group label of every replicate (indexed like ``distances``).
    size_ratio : float
        Largest over smallest geometric mean total between groups.
    null_distribution : ndarray
    n_permutations : int
    exact : bool
    scheme : str
    units : str or None
        The sampling-unit column when whole units were compared.
    left_out : tuple of str
        Samples with fewer individuals than ``depth``.
    reading : str
    notes : tuple of str
    provenance : dict
    """

    aspect: str
    statistic: float
    pvalue: float
    method: str
    adjust: str
    depth: int | None
    n_draws: int
    draw_pvalues: np.ndarray = field(repr=False)
    measure: str = ""
    transform: str | None = None
    group: str = ""
    summary: pd.DataFrame = field(default=None, repr=False)
    distances: pd.Series | None = field(default=None, repr=False)
    groups: pd.Series | None = field(default=None, repr=False)
    size_ratio: float = 1.0
    null_distribution: np.ndarray = field(default=None, repr=False)
    n_permutations: int = 0
    exact: bool = False
    scheme: str = ""
    units: str | None = None
    left_out: tuple = ()
    reading: str = ""
    notes: tuple = ()
    provenance: dict = field(default_factory=dict)

    def __post_init__(self):
        object.__setattr__(self, "draw_pvalues", readonly(self.draw_pvalues))
        object.__setattr__(self, "null_distribution", readonly(self.null_distribution))

    def to_frame(self) -> pd.DataFrame:
        return self.summary.copy()

    def _title(self) -> str:
        name = {"shape": "Shape (composition)", "spread": "Spread"}[self.aspect]
        return f"{name} test between levels of {self.group!r}: {self.method}; " \
               f"statistic = {self.statistic:.4g}, p = {self.pvalue:.4g}"

    def __str__(self) -> str:
        return super().__str__() + "\n" + self.reading

    def _repr_html_(self) -> str:
        import html
        return super()._repr_html_().replace(
            "</div>", f"<p>{html.escape(self.reading)}</p></div>", 1)

    def figure(self, *, kind: str = "null", **kwargs):
        """``kind='null'``: the permutation distribution with the observed statistic;
        ``'distances'`` (spread only): distances to the group centroids by group."""
        check_option("kind", kind, ("null", "distances"))
        if kind == "distances":
            if self.aspect != "spread":
                raise InputError("kind='distances' is drawn for spread tests only.")
            from ..render.inference_plots import dispersion_figure  # lazy: plotly
            return dispersion_figure(self._as_dispersion(), **kwargs)
        from ..render.inference_plots import null_distribution_figure  # lazy: plotly
        fig = null_distribution_figure(self._as_dispersion() if self.aspect == "spread"
                                       else self._as_permutation(), **kwargs)
        return fig.update_layout(title_text=self._title())

    def _as_permutation(self):
        from .permutation import PermutationTest
        return PermutationTest(statistic=self.statistic, pvalue=self.pvalue,
                               null_distribution=self.null_distribution,
                               n_permutations=self.n_permutations, exact=self.exact,
                               n_distinct=None, scheme=self.scheme, df=(0, 0), ss=(0.0, 0.0),
                               path="features", notes=self.notes)

    def _as_dispersion(self):
        from .dispersion import DispersionResult
        means = self.summary[["n", "mean_distance"]].copy()
        return DispersionResult(statistic=self.statistic, pvalue=self.pvalue,
                                distances=self.distances, group_means=means, df=(0, 0),
                                centre="mean", null_distribution=self.null_distribution,
                                n_permutations=self.n_permutations, exact=self.exact,
                                scheme=self.scheme, measure=self.measure, notes=self.notes,
                                groups=self.groups)


# ---------------------------------------------------------------------------- embedding
def _is_linear(measure: str, transform: str) -> bool:
    """Measures that are Euclidean distances between linear maps of the profiles."""
    return (measure == "chi_square" and transform in ("none", "profile")) or \
           (measure == "euclidean" and transform == "profile")


def embed(counts: np.ndarray, labels, taxa, measure: str, transform, params: dict, *,
          noise: bool) -> tuple[Embedding, tuple]:
    """Features (or principal coordinates) of the samples, and their counting noise.

    Taxa absent from every sample are left out first (chi-square needs positive column
    masses). ``noise=True`` adds the unbiased multinomial noise of every sample for measures
    linear in the profiles (chi-square, Euclidean on profiles); other measures get none.
    """
    from .dispersion import pcoa_axes
    from .dissimilarity import dissimilarity
    from .transforms import get_transform
    keep = counts.sum(axis=0) > 0
    x = counts[:, keep].astype(np.float64)
    params = dict(params)
    if params.get("column_masses") is not None:
        params["column_masses"] = np.asarray(params["column_masses"], dtype=float)[keep]
    frame = pd.DataFrame(x, index=pd.Index(labels, dtype=object),
                         columns=pd.Index(np.asarray(taxa, dtype=object)[keep]))
    d = dissimilarity(frame, measure, transform=transform, **params)
    if d.features is not None:
        emb_f, sign = np.asarray(d.features, dtype=np.float64), None
    else:
        xp, xn = pcoa_axes(np.asarray(d.gower(), dtype=np.float64))
        emb_f = np.hstack([xp, xn])
        sign = np.r_[np.ones(xp.shape[1]), -np.ones(xn.shape[1])] if xn.shape[1] else None
    v = None
    tname = get_transform(transform).name
    if noise and _is_linear(d.measure, tname):
        if d.measure == "chi_square":
            xt = x if tname == "none" else x / x.sum(axis=1, keepdims=True)
            masses = (params["column_masses"] if params.get("column_masses") is not None
                      else xt.sum(axis=0) / xt.sum())
            w = 1.0 / np.asarray(masses, dtype=np.float64)
        else:
            w = None
        v = multinomial_noise(x, w)
    return Embedding(emb_f, sign, v), tuple(d.notes)


# ---------------------------------------------------------------------------- replicates
@dataclass(frozen=True, eq=False)
class _Design:
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


def _design(tab, group, *, aspect, adjust, depth, units, blocks) -> _Design:
    from .units import aggregate_by_unit, resolve_units, unit_blocks
    labels = tab.sample_labels
    g = _group(tab, group, aspect)
    gname = str(g.name)
    if adjust == "rarefaction":
        x = whole_counts(tab)
        depth, keep, notes = check_depth(x.sum(axis=1), depth, labels)
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
    levels = list(g.cat.categories)
    codes = g.cat.codes.to_numpy().astype(np.intp)
    frame = pd.DataFrame(tab.samples.to_dict("series"), index=tab.sample_labels)
    frame.attrs = {}                       # a reader's line map is not needed (and slow to copy)
    frame[gname] = g.astype(str).to_numpy()
    block_name = blocks if isinstance(blocks, str) else (
        None if blocks is None else str(getattr(blocks, "name", None) or "blocks"))
    block_codes = None
    if blocks is not None:
        b = tab.group(blocks) if isinstance(blocks, str) else tab.group(pd.Series(blocks))
        block_codes = pd.factorize(b.to_numpy())[0]
    plan = resolve_units(frame, [gname], units, blocks=block_name)
    notes += list(plan.notes)
    totals = x.sum(axis=1).astype(np.float64)
    if plan.independent:
        return _Design(x, codes, levels, [str(s) for s in tab.sample_labels], totals, None,
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
    return _Design(x, ug, levels, list(lv.labels), utot, ucodes, lv.name, ub, block_name,
                   gname, depth, left_out, tuple(notes))


def _draw(des: _Design, rng) -> np.ndarray:
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


# ---------------------------------------------------------------------------- the run
def _check_common(adjust, n_draws, n_permutations, alpha):
    check_option("adjust", adjust, ADJUSTMENTS)
    if isinstance(n_draws, bool) or not isinstance(n_draws, (int, np.integer)) or n_draws < 1:
        raise InputError(f"`n_draws` must be a whole number >= 1; got {n_draws!r}.")
    if adjust == "none" and n_draws != 1:
        raise InputError("`n_draws` counts rarefaction draws; with adjust='none' there is "
                         "one data set only (n_draws=1).")
    n_permutations = check_n_permutations(n_permutations)
    if n_permutations < 19:
        raise InputError(f"`n_permutations` must be at least 19 for a p-value that can reach "
                         f"0.05; got {n_permutations}.")
    if not 0 < alpha < 1:
        raise InputError(f"`alpha` must be between 0 and 1; got {alpha!r}.")
    return int(n_draws), n_permutations


def _run(aspect, table, group, *, measure, transform, adjust, depth, n_draws, statistic,
         noise_correction, n_permutations, units, blocks, alpha, rng, progress, cancel,
         params):
    from .measures import get_measure
    from .transforms import get_transform
    n_draws, n_permutations = _check_common(adjust, n_draws, n_permutations, alpha)
    measure = get_measure(measure).name
    tname = get_transform(transform).name
    tab = as_table(table)
    des = _design(tab, group, aspect=aspect, adjust=adjust, depth=depth, units=units,
                  blocks=blocks)
    ng = np.bincount(des.codes, minlength=len(des.levels))
    if ng.min() < 2:
        small = [lv for lv, k in zip(des.levels, ng) if k < 2]
        what = "unit" if des.unit_name else "sample"
        raise DesignError(f"level(s) {small} of {des.group_name!r} keep a single {what}"
                          + (" after samples below the depth were left out" if des.left_out
                             else "") + f"; the {aspect} test needs at least 2 per group.",
                          location=Location(column=repr(des.group_name)),
                          hint="Lower `depth`, or merge or drop those levels.")
    rng = as_rng(rng)
    streams = rng.spawn(n_draws + 1)
    onehot = (des.codes[:, None] == np.arange(ng.size)[None, :]).astype(float)
    perms = Permutations(des.codes.size, n_permutations, streams[0], blocks=des.blocks,
                         block_name=des.block_name, design=onehot)
    total = n_draws * perms.total
    pvals, draws = np.empty(n_draws), []
    labels = [str(x) for x in des.labels]
    for k in range(n_draws):
        y = _draw(des, streams[k + 1])
        emb, mnotes = embed(y, labels, tab.taxon_labels, measure, transform, params,
                            noise=(noise_correction and aspect == "spread"
                                   and adjust == "rarefaction"))
        stat = _statistic(aspect, emb, ng, statistic)
        observed = float(stat(des.codes[None, :])[0])
        null = np.empty(perms.total)
        done = 0
        for idx in perms.batches(batch_size(emb.n, emb.features.shape[1], ng.size)):
            if cancel is not None and cancel():
                raise Cancelled(f"the {aspect} test was cancelled after "
                                f"{k * perms.total + done} of {total} permutations; no "
                                "result was kept.")
            null[done:done + idx.shape[0]] = stat(des.codes[idx])
            done += idx.shape[0]
            if progress is not None:
                progress(k * perms.total + done, total)
        pvals[k] = pvalue_from_null(observed, null, exact=perms.exact)
        draws.append((observed, null, emb, mnotes))
    pvalue, which = combine_draws(pvals)
    observed, null, emb, mnotes = draws[max(which, 0)]
    return _result(aspect, des, tab, des.group_name, measure, tname, adjust, n_draws, statistic,
                   noise_correction, alpha, pvals, pvalue, observed, null, emb, ng, perms,
                   mnotes)


def _statistic(aspect, emb, ng, statistic):
    norms = emb.norms()
    if aspect == "shape":
        return lambda lab: location_statistic(emb, lab, ng, statistic=statistic, norms=norms)
    return lambda lab: spread_statistic(emb, lab, ng, norms=norms)


# ---------------------------------------------------------------------------- wording
def _p(p: float) -> str:
    return "p < 0.001" if p < 0.001 else f"p = {p:.3g}"


def _method(aspect, measure, tname, adjust, depth, n_draws, statistic, corrected, units):
    on = measure if tname == "none" else f"{tname} + {measure}"
    if aspect == "shape":
        what = ("Welch-type statistic of the group centroids" if statistic == "welch"
                else "PERMANOVA pseudo-F")
    else:
        what = ("ANOVA F of distances to the group centroids"
                + (" (counting noise removed)" if corrected else ""))
    parts = [what, on]
    if units:
        parts.append(f"whole units of {units!r}")
    if adjust == "none":
        parts.append("counts as observed (unadjusted)")
    else:
        draws = "one rarefaction" if n_draws == 1 else f"{n_draws} rarefactions combined"
        parts.append(f"{draws} to {depth} individuals per sample")
    return "; ".join(parts)


def _result(aspect, des, tab, group, measure, tname, adjust, n_draws, statistic,
            noise_correction, alpha, pvals, pvalue, observed, null, emb, ng, perms, mnotes):
    codes, levels = des.codes, des.levels
    logt = np.log(np.maximum(des.totals, 1e-300))
    gm = np.array([np.exp(logt[codes == k].mean()) for k in range(len(levels))])
    ratio = float(gm.max() / gm.min())
    summary = pd.DataFrame({"n": ng.astype(int), "total_geometric_mean": gm,
                            "total_min": [des.totals[codes == k].min() for k in range(ng.size)],
                            "total_max": [des.totals[codes == k].max() for k in range(ng.size)]},
                           index=pd.Index(levels, name=str(group)))
    distances = groups = None
    corrected = emb.noise is not None
    if aspect == "spread":
        z = spread_distances(emb, codes[None, :], ng)[0]
        summary["mean_distance"] = [float(z[codes == k].mean()) for k in range(ng.size)]
        index = pd.Index(des.labels, name="unit" if des.unit_name else "sample")
        distances = pd.Series(z, index=index, name="distance_to_mean")
        groups = pd.Series([levels[c] for c in codes], index=index.copy(), name=str(group))
    method = _method(aspect, measure, tname, adjust, des.depth, n_draws, statistic, corrected,
                     des.unit_name)
    notes = list(des.notes) + _noise_notes(aspect, adjust, ratio, des, tab, measure, tname,
                                           n_draws, pvals, noise_correction, corrected)
    notes += [n for n in mnotes if adjust == "none"]
    pnote = perms.note()
    if pnote:
        notes.append(pnote)
    reading = _reading(aspect, pvalue, alpha, group, levels, method, ratio, adjust)
    scheme = perms.describe() + "; every statistic recomputed for each relabelling"
    return CountingTestResult(
        aspect=aspect, statistic=float(observed), pvalue=float(pvalue), method=method,
        adjust=adjust, depth=des.depth, n_draws=n_draws, draw_pvalues=pvals, measure=measure,
        transform=None if tname == "none" else tname, group=str(group), summary=summary,
        distances=distances, groups=groups, size_ratio=ratio, null_distribution=null,
        n_permutations=int(perms.total), exact=bool(perms.exact), scheme=scheme,
        units=des.unit_name, left_out=des.left_out, reading=reading,
        notes=tuple(dict.fromkeys(notes)),
        provenance={"aspect": aspect, "measure": measure, "transform": tname,
                    "adjust": adjust, "depth": des.depth, "n_draws": n_draws,
                    "statistic": statistic if aspect == "shape" else "anova_f_distances",
                    "noise_correction": corrected, "n_permutations": int(perms.total),
                    "units": des.unit_name, "group": str(group), "table": tab.fingerprint})


def _noise_notes(aspect, adjust, ratio, des, tab, measure, tname, n_draws, pvals,
                 noise_correction, corrected) -> list[str]:
    from .measures import get_measure
    what = "a difference in composition" if aspect == "shape" else "a difference in spread"
    notes = []
    if adjust == "none":
        if ratio > RATIO_NOTE:
            notes.append(f"Group totals differ {ratio:.2g}-fold (geometric means): profiles "
                         "from fewer individuals carry more counting noise, which this "
                         f"unadjusted test can read as {what} (Warton et al. 2012); "
                         "adjust='rarefaction' removes it.")
        if not get_measure(measure).size_free and tname not in ("profile", "hellinger"):
            notes.append(f"{measure} is not size-free, so this unadjusted test also responds "
                         "to differences in totals.")
        return notes
    med = float(np.median(des.counts.sum(axis=1)))
    kept = 100.0 * des.depth / med if med > 0 else 100.0
    notes.append(f"Every sample was rarefied to {des.depth} individuals, drawn without "
                 f"replacement (Sanders 1968; Hurlbert 1971): the median sample keeps "
                 f"{kept:.3g} % of its individuals. Samples of the same communities are then "
                 "exchangeable whatever their totals, so the permutation test is exact.")
    if ratio > RATIO_NOTE:
        notes.append(f"Group totals differ {ratio:.2g}-fold (geometric means): without "
                     "rarefaction, the extra counting noise of the smaller samples would have "
                     f"been read as {what} (Warton et al. 2012).")
    if des.depth < 0.25 * med:
        notes.append(f"The smallest sample sets the depth ({des.depth} individuals, a quarter "
                     f"of the median total or less); a larger `depth` leaves out the smallest "
                     "samples and keeps more of every other one.")
    if n_draws == 1:
        notes.append("The p-value comes from one random rarefaction (fixed by `rng`); another "
                     "draw gives another, equally valid p-value. n_draws=K combines K draws "
                     "into one p-value that no longer rests on a single draw (Rueger 1978), "
                     "at some cost in power.")
    else:
        notes.append(f"The p-value combines {n_draws} rarefactions: (K / k) times the k-th "
                     f"smallest of the K = {n_draws} p-values, k = {int(np.ceil(n_draws / 2))} "
                     "(Rueger 1978), valid whatever their dependence; single-draw p-values "
                     f"ranged {pvals.min():.3g}-{pvals.max():.3g}.")
    if aspect == "spread" and noise_correction and not corrected:
        notes.append(f"No closed-form counting noise is known for {measure}"
                     + ("" if tname == "none" else f" after {tname}")
                     + "; distances are compared as they are (rarefaction alone keeps the "
                       "test exact).")
    return notes


def _reading(aspect, p, alpha, group, levels, method, ratio, adjust) -> str:
    sig = p <= alpha
    if aspect == "shape":
        text = (f"The levels of {group!r} differ in composition ({method}, {_p(p)})."
                if sig else
                f"No difference in composition between the levels of {group!r} was detected "
                f"({method}, {_p(p)}); this does not show that they are the same.")
    else:
        text = (f"The levels of {group!r} differ in how variable their compositions are "
                f"({method}, {_p(p)})." if sig else
                f"No difference in spread between the levels of {group!r} was detected "
                f"({method}, {_p(p)}); this does not show that the spreads are equal.")
    if adjust == "rarefaction" and ratio > RATIO_NOTE:
        text += (f" Their totals differ {ratio:.2g}-fold; because every sample was rarefied "
                 "to the same number of individuals, that difference in size cannot by itself "
                 "make this test significant.")
    elif adjust == "none" and ratio > RATIO_NOTE:
        text += (f" Their totals differ {ratio:.2g}-fold, and this unadjusted test can mistake "
                 "the counting noise of the smaller samples for a difference in "
                 f"{'composition' if aspect == 'shape' else 'spread'}.")
    return text


# ---------------------------------------------------------------------------- public
_DOC_COMMON = """
    Parameters
    ----------
    table : CommunityTable, DataFrame or array
        Whole-number counts (individuals) with sample information.
    group : str
        A factor column of the sample table.
    measure : str, default 'chi_square'
        Any measure of :data:`tallyform.MEASURES` ('chi_square', 'hellinger', 'aitchison',
        'bray_curtis'...); after rarefaction every sample has the same total, so even a
        measure that is not size-free compares compositions only.
    transform : optional
        Transformation applied to the (rarefied) counts before the measure.
    adjust : {'rarefaction', 'none'}, default 'rarefaction'
        'rarefaction': every sample is rarefied to ``depth`` individuals first (exact);
        'none': the counts as they are (a reference; not protected against counting noise).
    depth : int, optional
        Individuals kept per sample; default the smallest sample total. Samples with fewer
        individuals are left out and listed in ``left_out``.
    n_draws : int, default 1
        Independent rarefactions; with more than one, their p-values are combined by
        Rueger's (1978) rule, so the answer no longer rests on one draw (at some cost in
        power).
    n_permutations : int, default 999
        Relabellings (all distinct ones when there are fewer).
    units : None, False, str or list of str
        Sampling units (:func:`tallyform.core.units.resolve_units`): None detects a column
        within which ``group`` is constant; whole units are then compared (their rarefied
        samples pooled). False treats samples as independent.
    blocks : str or Series, optional
        Permute only within these blocks.
    alpha : float, default 0.05
        Level used in the reading.
    rng : None, int or numpy.random.Generator
        Seeds the rarefactions and the permutations: the same seed gives the same answer.
    progress : callable(done, total), optional
    cancel : callable() -> bool, optional
        True stops the run with :class:`tallyform.errors.Cancelled`.
    **measure_options
        Options of the measure (e.g. ``zeros='pseudocount'`` for Aitchison).

    Returns
    -------
    CountingTestResult

    Raises
    ------
    InputError
        Fractional counts with adjust='rarefaction', a bad option value.
    DesignError
        Unknown group column, a level with fewer than 2 samples (or units), a group that
        varies within sampling units.
"""


def shape_test(table, group, *, measure="chi_square", transform=None,
               adjust: str = "rarefaction", depth: int | None = None, n_draws: int = 1,
               statistic: str = "welch", n_permutations: int = 999, units=None, blocks=None,
               alpha: float = 0.05, rng=None,
               progress: Callable[[int, int], None] | None = None,
               cancel: Callable[[], bool] | None = None,
               **measure_options) -> CountingTestResult:
    """Do the groups differ in composition? A test that differences in size cannot fool.

    Every sample is rarefied to a common number of individuals, then the group centroids on
    ``measure`` are compared by permutation, every statistic recomputed for each
    relabelling. Under the null (the same law of composition in every group, whatever the
    groups' totals) the rarefied samples are exchangeable, so the test is exact.
    {common}
    statistic : {{'welch', 'pseudo_f'}}, default 'welch'
        'welch': the Welch-type statistic, each group weighted by the precision of its own
        centroid (robust to unequal spreads); 'pseudo_f': PERMANOVA's pseudo-F.

    Notes
    -----
    See :mod:`tallyform.core.counting` and :mod:`tallyform.core.counting_stats` for the
    formulas and what was measured (benchmarks/counting.py; the calibration table in
    docs/calibration.md).

    References
    ----------
    Sanders, H. L. (1968). Am. Nat. 102, 243-282. Hurlbert, S. H. (1971). Ecology 52,
    577-586. Anderson, M. J. (2001). Austral Ecol. 26, 32-46. Welch, B. L. (1951).
    Biometrika 38, 330-336. Rueger, B. (1978). Metrika 25, 171-178. Warton, D. I., Wright, S.
    T. & Wang, Y. (2012). Methods Ecol. Evol. 3, 89-101.

    Examples
    --------
    >>> import tallyform as tly
    >>> tab = tly.demo("mesocosm")                      # synthetic
    >>> res = shape_test(tab, "treatment", n_permutations=99, rng=1)
    >>> res.aspect, res.depth == int(tab.totals.min())
    ('shape', True)
    """
    check_option("statistic", statistic, SHAPE_STATISTICS)
    return _run("shape", table, group, measure=measure, transform=transform, adjust=adjust,
                depth=depth, n_draws=n_draws, statistic=statistic, noise_correction=False,
                n_permutations=n_permutations, units=units, blocks=blocks, alpha=alpha,
                rng=rng, progress=progress, cancel=cancel, params=measure_options)


def spread_test(table, group, *, measure="chi_square", transform=None,
                adjust: str = "rarefaction", depth: int | None = None, n_draws: int = 1,
                noise_correction: bool = True, n_permutations: int = 999, units=None,
                blocks=None, alpha: float = 0.05, rng=None,
                progress: Callable[[int, int], None] | None = None,
                cancel: Callable[[], bool] | None = None,
                **measure_options) -> CountingTestResult:
    """Do the groups differ in spread? A dispersion test that differences in size cannot fool.

    Every sample is rarefied to a common number of individuals; distances of samples to
    their group centroid (Anderson 2006), rescaled by n_g / (n_g - 1), are compared by an
    ANOVA F whose permutation distribution recomputes the centroids for each relabelling
    (exact under "the same law of composition in every group"). For measures linear in
    the profiles (chi-square, Euclidean on profiles) the counting noise that remains at the
    common depth is removed from every squared distance (unbiased multinomial estimate),
    which leaves the biological spread and adds power.
    {common}
    noise_correction : bool, default True
        Remove the estimated counting noise where a closed form exists (chi-square,
        Euclidean on profiles); the test is exact either way.

    References
    ----------
    Anderson, M. J. (2006). Biometrics 62, 245-253. Sanders, H. L. (1968). Am. Nat. 102,
    243-282. Hurlbert, S. H. (1971). Ecology 52, 577-586. Rueger, B. (1978). Metrika 25,
    171-178. Warton, D. I., Wright, S. T. & Wang, Y. (2012). Methods Ecol. Evol. 3, 89-101.

    Examples
    --------
    >>> import tallyform as tly
    >>> tab = tly.demo("mesocosm")                      # synthetic
    >>> res = spread_test(tab, "treatment", n_permutations=99, rng=1)
    >>> list(res.summary.columns)[-1]
    'mean_distance'
    """
    if not isinstance(noise_correction, (bool, np.bool_)):
        raise InputError(f"`noise_correction` must be True or False; got {noise_correction!r}.")
    return _run("spread", table, group, measure=measure, transform=transform, adjust=adjust,
                depth=depth, n_draws=n_draws, statistic=None, noise_correction=noise_correction,
                n_permutations=n_permutations, units=units, blocks=blocks, alpha=alpha,
                rng=rng, progress=progress, cancel=cancel, params=measure_options)


if shape_test.__doc__:                                  # None under python -OO
    shape_test.__doc__ = shape_test.__doc__.format(common=_DOC_COMMON.rstrip())
    spread_test.__doc__ = spread_test.__doc__.format(common=_DOC_COMMON.rstrip())
