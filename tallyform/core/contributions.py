"""Which taxa make the difference between two groups: shape contributions and size ratios.

Shape side. For a measure that is the Euclidean distance between rows of a feature matrix F
(Hellinger, chi-square, chord, Aitchison, Euclidean), the squared distance between the two
group centroids splits exactly into one term per taxon:

    D^2 = ||fbar_a - fbar_b||^2 = sum_j (fbar_aj - fbar_bj)^2,

and D^2 is what a two-group PERMANOVA tests: its between-group sum of squares is
n_a n_b / (n_a + n_b) D^2 (Anderson 2001). For Bray-Curtis and the other measures that are
sums over taxa of one pair's terms, no single distance between the groups exists; each
taxon's term is averaged over all n_a n_b between-group pairs (Clarke 1993), and the sum of
the averages is the mean between-group dissimilarity: an average, not a split.

Size side. Per taxon, log2 of the ratio of mean abundances (per unit of effort when the table
has an effort column) in b over a, beside the same ratio for the total: when every taxon's
ratio equals the total's, the groups differ by size alone.

Intervals are percentile bootstraps that resample samples within each group (Efron &
Tibshirani 1993); the shape and the size side use the same resamples.
"""
from __future__ import annotations

import html
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .random import as_rng
from .errors import DesignError, InputError
from .results import ResultMixin
from .abundance import require_absolute
from .table import CommunityTable, _listing, as_table
from .taxon_terms import (PAIR_MEASURES, SPLIT_MEASURES, Ticker, boot_weights, interval,
                          pair_terms, size_ratios, split_terms)

__all__ = ["TaxonContributions", "taxon_contributions", "SPLIT_MEASURES", "PAIR_MEASURES"]

# measures with a feature matrix: exact split of the squared centroid distance


# ============================================================================== result
@dataclass(frozen=True, eq=False)
class TaxonContributions(ResultMixin):
    """Per-taxon contributions to the shape difference and ratios for the size difference.

    Attributes
    ----------
    group : str
        The grouping column (or the name of the group labels).
    a, b : str
        The two groups compared (ratios are b over a).
    measure, transform : str
        The shape measure and the transformation applied before it.
    exact : bool
        True: ``shape['term']`` splits the squared centroid distance exactly. False: the terms
        are averages over between-group pairs (Bray-Curtis and the like).
    total : float
        Sum of the terms: the squared centroid distance D^2 (exact) or the mean
        between-group dissimilarity (average).
    total_ci : tuple of float
        Bootstrap interval of ``total`` (NaN when no interval could be made, see ``notes``).
    noise : float or None
        Expected D^2 if the two groups had the same centroid: sum_j (s2_aj / n_a +
        s2_bj / n_b), or its form for units (exact split only, groups of 2 units or more).
    shape : DataFrame
        One row per taxon, largest term first: ``term``, ``share_pct``, ``ci_low``,
        ``ci_high`` (bootstrap interval of ``share_pct``), ``cumulative_pct``, ``higher_in``
        (the group whose feature centroid, or mean transformed value, is higher),
        ``mean_a``, ``mean_b`` (mean relative abundance, untransformed), ``feature_a``,
        ``feature_b`` (group centroids of the features, or mean transformed values) and,
        for an exact split, ``noise`` (the taxon's term expected with equal centroids) and
        ``noise_pct`` (the same as a percentage of ``total``).
    size : DataFrame
        One row per taxon, largest absolute change first: ``mean_a``, ``mean_b`` (mean
        abundance per sample, or per unit of effort), ``change`` (mean_b - mean_a; the
        changes sum to the change of the total), ``log2_ratio``, ``ci_low``, ``ci_high``,
        ``departure`` (log2_ratio minus the total's log2 ratio), ``departure_ci_low``,
        ``departure_ci_high``, ``differs_from_total`` (the departure interval excludes 0;
        missing when there is no interval), ``only_in`` (the group a taxon was seen in, if
        only one).
    size_reference : dict
        The total: ``mean_a``, ``mean_b``, ``log2_ratio``, ``ci_low``, ``ci_high``.
    n : dict
        Samples per group.
    excluded : tuple of str
        Taxa absent from every sample of both groups (left out of both sides).
    per_effort : str or None
        The effort column the size side divides by.
    n_boot : int
    level : float
    notes : tuple of str
    provenance : dict
    """

    group: str
    a: str
    b: str
    measure: str
    transform: str
    exact: bool
    total: float
    total_ci: tuple
    noise: float | None
    shape: pd.DataFrame = field(repr=False)
    size: pd.DataFrame = field(repr=False)
    size_reference: dict = field(default_factory=dict)
    n: dict = field(default_factory=dict)
    excluded: tuple = ()
    per_effort: str | None = None
    n_boot: int = 0
    level: float = 0.95
    notes: tuple = ()
    provenance: dict = field(default_factory=dict)

    @property
    def distance(self) -> float:
        """The distance between the group centroids, sqrt(total) (exact split only)."""
        if not self.exact:
            raise InputError(f"{self.measure} has no distance between group centroids; "
                             "`total` is the mean between-group dissimilarity.")
        return float(np.sqrt(self.total))

    @property
    def what(self) -> str:
        """What the shares are shares of (for titles and axis labels)."""
        if self.exact:
            return f"squared {self.measure} distance between group centroids"
        return f"mean {self.measure} dissimilarity between groups (average over pairs)"

    def to_frame(self) -> pd.DataFrame:
        """The shape table (largest contribution first)."""
        return self.shape.copy()

    def size_frame(self) -> pd.DataFrame:
        """The size table (largest absolute change in abundance first)."""
        return self.size.copy()

    def _title(self) -> str:
        return (f"Taxon contributions, {self.a} vs {self.b} ({self.group}): shares of the "
                f"{self.what}")

    def figure(self, kind: str = "shape", *, top: int = 15, **kwargs):
        """A plotly figure: ``kind='shape'`` (diverging bars of the largest shares) or
        ``'size'`` (log2 ratios with intervals against the total's ratio)."""
        from ..render.plots import taxon_shape_figure, taxon_size_figure
        if kind == "shape":
            return taxon_shape_figure(self, top=top, **kwargs)
        if kind == "size":
            return taxon_size_figure(self, top=top, **kwargs)
        raise InputError(f"`kind` must be 'shape' or 'size'; got {kind!r}.")

    def _repr_html_(self) -> str:
        fmt = "{:.4g}".format
        head = f"<p><b>{html.escape(self._title())}</b><br>{html.escape(self._summary())}</p>"
        shape = self.shape.head(15).to_html(float_format=fmt)
        size = self.size.head(15).to_html(float_format=fmt)
        return (f"<div>{head}<p>Shape (top 15 of {len(self.shape)})</p>{shape}"
                f"<p>Size (top 15 of {len(self.size)})</p>{size}{self._notes_html()}</div>")

    def _summary(self) -> str:
        lo, hi = self.total_ci
        ci = (f" ({self.level:.0%} interval {lo:.4g} to {hi:.4g})" if np.isfinite(lo)
              else " (no interval)")
        noise = f", noise level {self.noise:.4g}" if self.noise is not None else ""
        ref = self.size_reference
        n = ", ".join(f"{k}: {v}" for k, v in self.n.items())
        return (f"total = {self.total:.4g}{ci}{noise}; samples {n}; log2 ratio of total "
                f"abundance ({self.b} / {self.a}) = {ref['log2_ratio']:.3g}")

    def __str__(self) -> str:
        with pd.option_context("display.float_format", "{:.4g}".format, "display.width", 140):
            text = (f"{self._title()}\n{self._summary()}\n"
                    f"{self.shape.head(15).to_string()}\n\nsize (b / a):\n"
                    f"{self.size.head(15).to_string()}")
        if self.notes:
            text += "\n" + "\n".join(f"note: {n}" for n in self.notes)
        return text


# ============================================================================== helpers
def _group_labels(tab: CommunityTable, group, name: str = "group") -> pd.Series:
    if isinstance(group, (str, pd.Series)):
        return tab.group(group)
    values = np.asarray(group, dtype=object)
    if values.ndim != 1 or len(values) != tab.n_samples:
        raise DesignError(f"`{name}` must be a column of the sample table or one label per "
                          f"sample ({tab.n_samples}); got shape {values.shape}.")
    return tab.group(pd.Series(values, index=tab.sample_labels, name=name))


def _check_int(name: str, value, low: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
        raise InputError(f"`{name}` must be a whole number of at least {low}; got {value!r}.")
    return int(value)


# ============================================================================== public
def taxon_contributions(table, group, a, b, *, measure: str = "hellinger", transform=None,
                        n_boot: int = 999, level: float = 0.95, pseudocount: float = 0.5,
                        units=None, rng=None, progress=None, cancel=None,
                        **params) -> TaxonContributions:
    """Which taxa make the difference between groups ``a`` and ``b``, in shape and in size.

    Parameters
    ----------
    table : CommunityTable (or DataFrame / array with ``group`` given as labels)
    group : str, Series or sequence
        A column of the sample table, or one group label per sample.
    a, b : str
        The two groups; ratios and differences are b relative to a.
    measure : str, default 'hellinger'
        Exact split: 'hellinger', 'chi_square', 'chord', 'aitchison', 'euclidean'.
        Average over between-group pairs: 'bray_curtis', 'sorensen',
        'quantitative_jaccard', 'jaccard', 'manhattan', 'canberra'.
    transform : None, str or Transform
        Applied to the counts before the shape measure (the size side always uses the
        counts as given).
    n_boot : int, default 999
        Bootstrap resamples (samples drawn with replacement within each group); 0 gives no
        intervals.
    level : float, default 0.95
        Coverage of the percentile intervals.
    pseudocount : float >= 0, default 0.5
        Size side: added to every count of sample i as ``pseudocount * r_i / rbar`` (r_i its
        total, rbar the mean total of the two groups' samples), so that a taxon absent from
        one group still has a finite ratio. Because it is proportional to each sample's
        total, it cannot itself make taxa differ: under a pure size change every taxon keeps
        the total's ratio. 0 uses the raw means (a taxon absent from one group then gets an
        infinite ratio, listed in ``notes``).
    units : str, Series or sequence, optional
        The independent sampling units when samples are not independent (repeated visits of
        one tank or site): a column of the sample table or one label per sample. The
        bootstrap then draws units with replacement within each group, keeping a unit's
        samples together, and ``noise`` is computed from unit totals. Default: every sample
        is its own unit.
    rng : None, int or numpy.random.Generator
        Seed of the bootstrap (one stream for both sides: the same resamples).
    progress : callable(done, total), optional
    cancel : callable() -> bool, optional
        Return True to stop; raises :class:`~tallyform.errors.Cancelled`.
    **params
        Options of the measure (``aitchison``: ``zeros``, ``pseudocount``, ``delta``;
        ``chi_square``: ``column_masses``).

    Returns
    -------
    TaxonContributions
        ``shape`` and ``size`` tables, ``total`` (D^2 or the mean dissimilarity) with its
        interval, ``noise``, ``size_reference``, ``excluded``, ``notes``.

    Raises
    ------
    DesignError
        ``group`` is not a column, ``a`` or ``b`` is not one of its levels, or a == b.
    InputError
        An unsupported measure (the message lists the supported ones), bad options, samples
        on which the measure is undefined, a group whose total abundance is 0.

    Notes
    -----
    Exact split (Euclidean-embeddable measures with feature matrix F, computed from the
    samples of the two groups only):

        D^2 = ||fbar_b - fbar_a||^2 = sum_j (fbar_bj - fbar_aj)^2,  share_j = term_j / D^2.

    D is the distance between group centroids that a two-group PERMANOVA uses (between-group
    sum of squares n_a n_b / (n_a + n_b) D^2; Anderson 2001). For chi-square the features are
    profiles / sqrt(c_j), c_j the column masses of the two groups' samples pooled (so the
    answer for a vs b does not depend on which other groups the table holds; pass
    ``column_masses`` to use others); the features are linear in the profiles, so D is also
    the chi-square distance between the two mean profiles. For Aitchison the centroid of the
    clr rows is the clr of the closed geometric mean, so D is the Aitchison distance between
    the groups' geometric-mean compositions (zeros replaced first). For Hellinger and chord,
    the centroid of the features is not the feature of any mean profile; D is still the
    centroid distance, and D^2 = mean_{i in a, k in b} d_ik^2 - (W_a + W_b) / 2 with W_g the
    mean of d^2 over all ordered pairs of group g (pairs of a sample with itself included).
    The expected value of term_j when the two centroids are equal is
    ``noise_j = s2_aj / n_a + s2_bj / n_b`` (with ``units``, the linearised variance of each
    centroid from its unit totals): shares of a D^2 not well above its noise mostly describe
    sampling noise. Taxa absent from both groups are left out (and listed);
    quantities that depend on several samples (chi-square column masses, Wisconsin maxima)
    are held at their observed values in the bootstrap.

    Average over pairs (Clarke 1993) for measures that are, for one pair (i, k), a sum of
    per-taxon terms: Bray-Curtis |x_ij - x_kj| / (r_i + r_k); quantitative Jaccard
    |x_ij - x_kj| / sum_l max(x_il, x_kl); Sorensen and Jaccard the same on presence;
    Manhattan |x_ij - x_kj|; Canberra |x_ij - x_kj| / (|x_ij| + |x_kj|). Each is averaged
    over the n_a n_b between-group pairs; the averages sum to the mean between-group
    dissimilarity. It is not a split of one distance, and for measures that are not
    size-free it mixes size and shape.

    Size side: rate_gj = sum_{i in g} (x_ij + pseudo_i) / sum_{i in g} e_i (e_i the
    effort, 1 without an effort column), log2_ratio_j = log2(rate_bj / rate_aj); the
    reference is the same ratio for the totals; ``departure_j`` = log2_ratio_j - reference
    (the change of taxon j's share of the pooled total). Without effort and pseudocount,
    exp of the ratio is the group coefficient of a Poisson or negative-binomial regression
    of the taxon's counts on the group; with effort, of a Poisson regression with log-effort
    offset. Intervals are per taxon and not adjusted for multiplicity.

    Percentile intervals of shares are of a squared quantity: the interval of a share with no
    true difference still lies above 0.

    References
    ----------
    Anderson, M. J. (2001). A new method for non-parametric multivariate analysis of variance.
    Austral Ecology 26, 32-46.
    Clarke, K. R. (1993). Non-parametric multivariate analyses of changes in community
    structure. Australian Journal of Ecology 18, 117-143.
    Efron, B. & Tibshirani, R. J. (1993). An Introduction to the Bootstrap. Chapman & Hall.

    Examples
    --------
    >>> import tallyform as tly
    >>> tab = tly.demo("mesocosm")
    >>> k = tly.taxon_contributions(tab, "treatment", "control", "nutrient_high",
    ...                             n_boot=99, rng=1)
    >>> round(float(k.shape["share_pct"].sum()), 6)
    100.0
    >>> bool(abs(k.shape["term"].sum() - k.total) < 1e-12)
    True
    """
    from .measures import get_measure
    from .transforms import get_transform

    # ------------------------------------------------------------------ validate
    tab = as_table(table)
    require_absolute(tab, "the size side of taxon_contributions")
    labels = _group_labels(tab, group)
    unit_labels = None if units is None else _group_labels(tab, units, "units")
    gname = str(labels.name)
    a, b = str(a), str(b)
    levels = list(dict.fromkeys(labels))
    missing = [g for g in (a, b) if g not in levels]
    if missing:
        raise DesignError(f"group(s) {missing} are not levels of {gname!r}; its levels are "
                          f"{_listing(levels, 20)}.")
    if a == b:
        raise DesignError(f"`a` and `b` are both {a!r}; choose two different groups of "
                          f"{gname!r}.")
    rec = get_measure(measure)
    if rec.name not in SPLIT_MEASURES and rec.name not in PAIR_MEASURES:
        raise InputError(f"taxon contributions are not available for {rec.name!r}; supported "
                         f"measures are {list(SPLIT_MEASURES)} (exact split) and "
                         f"{list(PAIR_MEASURES)} (average over between-group pairs).")
    unknown = sorted(set(params) - set(rec.options))
    if unknown:
        raise InputError(f"measure {rec.name!r} has no option(s) {unknown}; its options are: "
                         f"{sorted(rec.options) or 'none'}.")
    tr = get_transform(transform)
    n_boot = _check_int("n_boot", n_boot, 0)
    if isinstance(level, bool) or not isinstance(level, (int, float)) or not 0 < level < 1:
        raise InputError(f"`level` must be a number between 0 and 1 (e.g. 0.95); got "
                         f"{level!r}.")
    if isinstance(pseudocount, bool) or not isinstance(pseudocount, (int, float)) or \
            not (np.isfinite(pseudocount) and pseudocount >= 0):
        raise InputError(f"`pseudocount` must be a number >= 0; got {pseudocount!r}.")
    rng = as_rng(rng)

    g = labels.to_numpy()
    rows = np.flatnonzero((g == a) | (g == b))
    x_all = tab.values[rows]
    kept = x_all.sum(axis=0) > 0
    excluded = tuple(str(t) for t in tab.taxon_labels[~kept])
    if not kept.any():
        raise InputError(f"groups {a!r} and {b!r} hold no individuals of any taxon.")
    x = x_all[:, kept]
    taxa = pd.Index(tab.taxon_labels[kept], name="taxon")
    gsub = g[rows]
    ia, ib = np.flatnonzero(gsub == a), np.flatnonzero(gsub == b)
    na, nb = len(ia), len(ib)
    e = (np.ones(len(rows)) if tab.effort is None
         else tab.effort.to_numpy(dtype=np.float64)[rows])
    for lab, idx in ((a, ia), (b, ib)):
        if x[idx].sum() <= 0:
            raise InputError(f"group {lab!r} has a total abundance of 0 over its {len(idx)} "
                             "sample(s); there is nothing to compare.")
    params = dict(params)
    if rec.name == "chi_square" and params.get("column_masses") is not None:
        m = np.asarray(params["column_masses"], dtype=np.float64).ravel()
        if m.shape == (tab.n_taxa,):
            params["column_masses"] = m[kept]
    sub = CommunityTable(pd.DataFrame(x, index=tab.sample_labels[rows], columns=taxa),
                         empty="keep")

    # ------------------------------------------------------------------ compute
    notes: list[str] = []
    if unit_labels is None:
        codes_a, codes_b = np.arange(na), np.arange(nb)
        what = "sample"
    else:
        u = unit_labels.to_numpy()[rows]
        codes_a = np.unique(u[ia], return_inverse=True)[1].ravel()
        codes_b = np.unique(u[ib], return_inverse=True)[1].ravel()
        what = "unit"
    ma, mb = int(codes_a.max()) + 1, int(codes_b.max()) + 1
    boot = n_boot > 0 and min(ma, mb) >= 2
    if n_boot == 0:
        notes.append("n_boot = 0: no bootstrap, so no intervals (ci columns are NaN).")
    if n_boot > 0 and not boot:
        small = [repr(lab) for lab, m in ((a, ma), (b, mb)) if m < 2]
        who = (f"group {small[0]} has" if len(small) == 1
               else f"groups {small[0]} and {small[1]} each have")
        notes.append(f"{who} only one {what}: resampling cannot show the variation within "
                     "a group, so no intervals are given (ci columns are NaN).")
    if unit_labels is not None:
        notes.append(f"the bootstrap resamples the {ma} and {mb} units of "
                     f"{unit_labels.name!r} in {a!r} and {b!r}, keeping each unit's samples "
                     "together.")
    elif boot:
        notes.append("intervals treat the samples as independent; if some share a tank, "
                     "site or plot, pass units=... (they are too narrow otherwise).")
    if boot and min(ma, mb) < 10:
        notes.append(f"only {min(ma, mb)} {what}s in the smaller group: percentile bootstrap "
                     "intervals from so few tend to be too narrow; read them as rough.")
    Wa = boot_weights(rng, codes_a, n_boot) if boot else None
    Wb = boot_weights(rng, codes_b, n_boot) if boot else None
    ticker = Ticker(2 * n_boot if boot else 0, progress, cancel)
    exact = rec.name in SPLIT_MEASURES
    if exact:
        terms, bt, btot, extra = split_terms(sub, ia, ib, rec.name, tr, params, Wa, Wb,
                                             ticker, codes_a=codes_a, codes_b=codes_b)
    else:
        terms, bt, btot, extra = pair_terms(sub, ia, ib, rec, tr, Wa, Wb, ticker)
    sz = size_ratios(x, e, ia, ib, float(pseudocount), Wa, Wb, ticker)

    # ------------------------------------------------------------------ assemble: shape
    total = float(terms.sum())
    p = len(taxa)
    nan = np.full(p, np.nan)
    if total > 0:
        share = 100.0 * terms / total
    else:
        share = np.zeros(p)
        notes.append("the two groups have the same centroid: there is no difference to split "
                     "(every share is 0).")
    lo = hi = nan
    total_ci = (np.nan, np.nan)
    if bt is not None:
        ok = btot > 0
        if ok.any():
            lo, hi = interval(100.0 * bt[ok] / btot[ok, None], level)
        tl, th = interval(btot, level)
        total_ci = (float(tl), float(th))
    prof = x / np.where(x.sum(axis=1, keepdims=True) > 0, x.sum(axis=1, keepdims=True), 1.0)
    diff = extra["diff"]
    higher = np.where(diff > 0, b, np.where(diff < 0, a, "equal"))
    shape = pd.DataFrame({
        "term": terms, "share_pct": share, "ci_low": lo, "ci_high": hi,
        "higher_in": higher.astype(object),
        "mean_a": prof[ia].mean(axis=0), "mean_b": prof[ib].mean(axis=0),
        "feature_a": extra["feature_a"], "feature_b": extra["feature_b"]}, index=taxa)
    noise_total = None
    if exact:
        shape["noise"] = extra["noise"]
        shape["noise_pct"] = 100.0 * extra["noise"] / total if total > 0 else np.nan
        if min(ma, mb) >= 2:
            noise_total = float(np.sum(extra["noise"]))
    shape = shape.sort_values("term", ascending=False, kind="stable")
    shape.insert(4, "cumulative_pct", shape["share_pct"].cumsum())

    # ------------------------------------------------------------------ assemble: size
    ratio = sz["log2_ratio"]
    dep = ratio - sz["ref"]
    rlo = rhi = dlo = dhi = nan
    differs = pd.array([pd.NA] * p, dtype="boolean")
    ref_ci = (np.nan, np.nan)
    if "boot" in sz:
        rlo, rhi = interval(sz["boot"], level)
        with np.errstate(invalid="ignore"):
            dlo, dhi = interval(sz["boot"] - sz["boot_ref"][:, None], level)
        differs = pd.array((dlo > 0) | (dhi < 0), dtype="boolean")
        differs[np.isnan(dlo) | np.isnan(dhi)] = pd.NA
        undefined = int(np.isnan(sz["boot"]).any(axis=0).sum())
        if undefined:
            notes.append(f"size side: for {undefined} taxon/taxa some resamples held none of "
                         "the taxon in either group (ratio 0/0); their intervals use the "
                         "resamples where the ratio is defined.")
        ref_ci = tuple(float(v) for v in interval(sz["boot_ref"], level))
    seen_a, seen_b = x[ia].sum(axis=0) > 0, x[ib].sum(axis=0) > 0
    only = np.where(seen_a & ~seen_b, a, np.where(seen_b & ~seen_a, b, ""))
    size = pd.DataFrame({
        "mean_a": sz["mean_a"], "mean_b": sz["mean_b"], "change": sz["mean_b"] - sz["mean_a"],
        "log2_ratio": ratio, "ci_low": rlo, "ci_high": rhi, "departure": dep,
        "departure_ci_low": dlo, "departure_ci_high": dhi,
        "differs_from_total": differs, "only_in": only.astype(object)}, index=taxa)
    order = np.argsort(-np.abs(size["change"].to_numpy()), kind="stable")
    size = size.iloc[order]
    size_reference = {"mean_a": float(sz["tot_a"]), "mean_b": float(sz["tot_b"]),
                      "log2_ratio": sz["ref"], "ci_low": ref_ci[0], "ci_high": ref_ci[1]}

    # ------------------------------------------------------------------ notes
    if exact:
        notes.insert(0, f"each term is one taxon's part of the squared {rec.label} distance "
                        f"between the two group centroids (D^2 = {total:.4g}); the terms sum "
                        "to D^2 exactly, and shares are of D^2, not of D.")
        if noise_total is not None and total < 2 * noise_total:
            notes.append(f"D^2 = {total:.3g} is less than twice the {noise_total:.3g} expected "
                         "from sampling noise alone if the groups had the same centroid: the "
                         "shares mostly describe noise, not a difference in composition.")
        if rec.name == "chi_square" and "column_masses" not in params:
            notes.append(f"chi-square column masses are those of groups {a!r} and {b!r} "
                         "pooled (not of the whole table).")
        agree = np.sign(diff) == np.sign(prof[ib].mean(axis=0) - prof[ia].mean(axis=0))
        if rec.name in ("hellinger", "chord", "aitchison") and not agree.all():
            notes.append(f"for {int((~agree).sum())} taxon/taxa the feature centroid and the "
                         "mean relative abundance point to different groups; `higher_in` "
                         f"follows the {rec.label} features.")
    else:
        notes.insert(0, f"each term is the average, over all {na * nb} pairs of a sample of "
                        f"{a!r} with a sample of {b!r}, of the taxon's part of the pair's "
                        f"{rec.label} dissimilarity; the terms sum to the mean between-group "
                        f"dissimilarity ({total:.4g}). This is an average over pairs, not a "
                        "split of one distance between the groups.")
    if not extra["size_free"] and not tr.removes_size:
        notes.append(f"{rec.label} on {tr.name!r} values is not size-free: the shape terms "
                     "also respond to differences in total abundance.")
    notes.extend(extra["notes"])
    if excluded:
        notes.append(f"{len(excluded)} taxon/taxa absent from every sample of both groups "
                     f"were left out: {_listing(excluded)}.")
    if tab.effort is not None:
        notes.append(f"size side: abundances are per unit of {tab.effort_name!r} (sum of "
                     "counts over sum of effort in each group); the shape side uses profiles, "
                     "which do not depend on effort.")
    if pseudocount > 0:
        n_only = int((only != "").sum())
        notes.append(f"size side: {pseudocount:g} count per sample of average total (scaled "
                     "by each sample's total) was added before the ratios; it keeps ratios "
                     f"finite ({n_only} taxon/taxa are seen in one group only) and pulls rare "
                     "taxa towards the total's ratio, never away from it.")
    else:
        inf = [str(t) for t, o in zip(taxa, only) if o]
        if inf:
            notes.append(f"size side: {len(inf)} taxon/taxa are seen in one group only and "
                         f"have an infinite log2 ratio: {_listing(inf)}.")
    if "boot" in sz:
        k = int(np.sum(differs.to_numpy(dtype=bool, na_value=False)))
        notes.append(f"size side: {k} of {p} taxa have a log2 ratio whose {level:.0%} "
                     "interval excludes the total's ratio (intervals not adjusted for "
                     f"multiplicity: about {(1 - level) * p:.1f} expected by chance if all "
                     "taxa changed alike).")
    prov = {"function": "taxon_contributions", "group": gname, "a": a, "b": b,
            "measure": rec.name, "transform": tr.name, **extra["params"], "n_boot": n_boot,
            "level": float(level), "pseudocount": float(pseudocount),
            "units": None if unit_labels is None else str(unit_labels.name),
            "per_effort": tab.effort_name, "n_samples": {a: na, b: nb},
            "table": tab.fingerprint}
    return TaxonContributions(
        group=gname, a=a, b=b, measure=rec.name, transform=tr.name, exact=exact, total=total,
        total_ci=total_ci, noise=noise_total, shape=shape, size=size,
        size_reference=size_reference, n={a: na, b: nb}, excluded=excluded,
        per_effort=tab.effort_name, n_boot=n_boot if boot else 0, level=float(level),
        notes=tuple(notes), provenance=prov)
