"""Size and shape: how much of a dissimilarity's variation is total abundance, how much composition.

The variation of the chosen dissimilarity (its Gower-centred matrix G, Gower 1966) is
partitioned by distance-based redundancy analysis (db-RDA; Legendre & Anderson 1999, McArdle &
Anderson 2001) between two predictor sets (docs/methods.md, sections 1 and 5):

* size S: one column, the log of each sample's total (or the total, or log total per effort);
* shape T: the leading k principal coordinates of a size-free dissimilarity among the
  profiles (chi-square by default; Hellinger, Aitchison, or the measure under study applied to
  rows rescaled to a common total).

With R^2(Z) = tr(H_Z G) / tr(G) and Ezekiel's (1930) adjusted R^2, the fractions of Borcard et
al. (1992) and Peres-Neto et al. (2006) are::

    size only  [a] = R2a(S+T) - R2a(T)        shape only [c] = R2a(S+T) - R2a(S)
    shared     [b] = R2a(S) + R2a(T) - R2a(S+T)   (may be negative: shown, never clipped)
    residual   [d] = 1 - R2a(S+T)

The traces hold for non-Euclidean D as well (McArdle & Anderson 2001); the share of negative
eigenvalues of G is reported beside the fractions.

Inference (``n_permutations``, ``n_boot``): a Monte Carlo test of the shape-only share whose
null re-derives the shape coordinates (:mod:`tallyform.core.partition_null`), the share each
fraction takes under that null, and delete-d jackknife intervals for every share
(:mod:`tallyform.core.partition_resample`). The arithmetic is in
:mod:`tallyform.core.partition_math`; resampled and simulated partitions in
:mod:`tallyform.core.partition_engine`.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .errors import DesignError, InputError
from .partition_math import (FRACTIONS, SHAPE_INERTIA_TARGET, SHAPE_OPTIONS,  # noqa: F401
                             SIZE_OPTIONS, Variation, centred_unit, check_option,
                             partition_by_dims, shape_dissimilarity, adjusted_r2,
                             default_dims, shape_dims_limit, fractions_from_r2, negative_share,
                             shape_coordinates, size_predictor)
from .random import as_rng
from .results import ResultMixin
from .table import as_table
from .progress import reports_progress

__all__ = ["size_shape", "SizeShapeResult", "SIZE_OPTIONS", "SHAPE_OPTIONS", "FRACTIONS",
           "size_predictor", "shape_coordinates", "Variation", "fractions_from_r2"]


# ---------------------------------------------------------------------------- result
@dataclass(frozen=True, eq=False)
class SizeShapeResult(ResultMixin):
    """The size and shape partition of one (transform, measure) choice.

    Attributes
    ----------
    fractions : Series
        Adjusted shares ``size_only``, ``shared``, ``shape_only``, ``residual`` (sum to 1).
    fractions_unadjusted : Series
        The same from unadjusted R^2.
    r2 : DataFrame
        R^2, adjusted R^2 and degrees of freedom of size, shape and both together.
    shape_dims : int
        Number of shape coordinates used; ``shape_dims_reason`` says why.
    negative_share : float
        Share of the negative eigenvalues of G (0 for Euclidean-embeddable measures).
    tests : DataFrame or None
        The Monte Carlo test of the shape-only share (``n_permutations`` > 0): statistic (the
        observed share), pvalue, n_simulations and the null hypothesis in words.
    null_shares : DataFrame or None
        Every share beside its distribution over the simulated null tables (null_median,
        null_low, null_high: median and 2.5 / 97.5 % points): what counting noise alone gives.
    null_distribution : ndarray (B, 4) or None
        The shares (columns in the order of ``FRACTIONS``) of every simulated null table.
    fractions_ci : DataFrame or None
        95 % interval (columns ``low``, ``high``) of every share (``n_boot`` > 0), and the
        bias-corrected share at its centre (``bias_corrected``).
    """

    measure: str
    transform: str | None
    size: str
    shape: str
    n: int
    fractions: pd.Series
    fractions_unadjusted: pd.Series
    r2: pd.DataFrame
    shape_dims: int
    shape_dims_reason: str
    shape_inertia_share: float
    negative_share: float
    shape_negative_share: float
    tests: pd.DataFrame | None = None
    notes: tuple = ()
    provenance: dict = field(default_factory=dict)
    _dims: pd.DataFrame = field(default=None, repr=False)
    null_shares: pd.DataFrame | None = None
    null_distribution: np.ndarray | None = field(default=None, repr=False)
    fractions_ci: pd.DataFrame | None = None

    @property
    def statistic(self) -> float:
        """The shape-only share (the statistic of the Monte Carlo test)."""
        return float(self.fractions["shape_only"])

    @property
    def pvalue(self) -> float:
        """p-value of the Monte Carlo test of the shape-only share (NaN when not run)."""
        if self.tests is None:
            return float("nan")
        return float(self.tests.loc["shape_only", "pvalue"])

    def by_dims(self) -> pd.DataFrame:
        """Fractions for k = 1 .. kmax shape dimensions (adjusted, then unadjusted columns);
        kmax is the k used when the result was computed with ``all_dims=False``."""
        return self._dims.copy()

    def tables(self) -> dict:
        return {"size_shape": self.to_frame(), "size_shape_by_dims": self.by_dims()}

    def to_frame(self) -> pd.DataFrame:
        """One row per share: share, share_unadjusted, then (when computed) its 95 % interval
        (low, high), its null range (null_median, null_low, null_high) and the p-value."""
        out = pd.DataFrame({"share": self.fractions,
                            "share_unadjusted": self.fractions_unadjusted})
        if self.fractions_ci is not None:
            out = out.join(self.fractions_ci[["low", "high"]], how="left")
        if self.null_shares is not None:
            out = out.join(self.null_shares[["null_median", "null_low", "null_high"]],
                           how="left")
        if self.tests is not None:
            out = out.join(self.tests[["pvalue"]], how="left")
        out.index.name = "fraction"
        return out

    @property
    def reading(self) -> str:
        """The four shares in words, and the shape-only test when one was run."""
        f = self.fractions
        text = (f"Of the between-sample variation in {self.measure}: size alone "
                f"{100 * f['size_only']:.1f} %, shared by size and shape "
                f"{100 * f['shared']:.1f} %, shape alone {100 * f['shape_only']:.1f} %, "
                f"unexplained {100 * f['residual']:.1f} % (adjusted shares).")
        if self.tests is not None and "shape_only" in getattr(self.tests, "index", ()):
            from .display import p_words
            p = self.tests.loc["shape_only", "pvalue"]
            text += f" Shape-only share tested: {p_words(p)}."
        return text

    def _title(self) -> str:
        tr = f"{self.transform} + " if self.transform and self.transform != "none" else ""
        return (f"Size and shape of {tr}{self.measure} (n = {self.n}; size: {self.size}; "
                f"shape: {self.shape_dims} {self.shape} dimension(s))")


# ---------------------------------------------------------------------------- public
@reports_progress("Size and shape", knob=("n_permutations", "n_boot"))
def size_shape(table, measure: str = "bray_curtis", *, transform=None,
               size: str = "log_total", shape: str = "chi_square", shape_dims: int | None = None,
               n_permutations: int = 0, n_boot: int = 0, units=None, overdispersion=None,
               chunks: int | None = None, spectrum: bool = True, all_dims: bool = True,
               rng=None, progress=None, cancel=None) -> SizeShapeResult:
    """Partition the variation of a dissimilarity into size, shared, shape and residual.

    Parameters
    ----------
    table : CommunityTable, DataFrame or array, shape (n_samples, n_taxa)
    measure : str
        The dissimilarity under study (a key of ``tallyform.MEASURES``).
    transform : str or Transform, optional
        Applied to the counts before ``measure``.
    size : {'log_total', 'total', 'log_total_per_effort'}
        The size predictor.
    shape : {'chi_square', 'hellinger', 'aitchison', 'same_measure'}
        Size-free dissimilarity whose principal coordinates are the shape predictors;
        ``'same_measure'`` applies ``measure`` (and ``transform``) to rows rescaled to the mean
        total.
    shape_dims : int, optional
        Number of shape coordinates; default the fewest holding 75 % of the shape inertia,
        capped at floor((n - 2) / 3).
    n_permutations : int, default 0
        Simulated tables for the Monte Carlo test of the shape-only share (0: no test). The
        null: one composition for all samples, counts varying only by sampling at each
        sample's observed total; every simulated table is partitioned anew (shape
        coordinates and their number re-derived). Needs whole-number counts.
    n_boot : int, default 0
        Replicates for the 95 % interval of every share (``fractions_ci``; 0: none). Each
        leaves out a quarter of the samples (or units) and recomputes the partition from the
        dissimilarities already computed, with the number of shape dimensions held.
    units : str or list of str, optional
        Sample-information column(s) of the sampling units (tank, site): the intervals then
        leave out whole units (the coarsest level when nested). Samples are independent
        otherwise.
    overdispersion : float, optional
        Dirichlet-multinomial intra-class correlation rho in [0, 1) for the Monte Carlo null
        (default: multinomial counting only).
    chunks : int, optional
        Compute ``measure`` as a tiled dissimilarity (``dissimilarity(..., chunks=N)``: tiles
        on the workers of the active Dask client, or local threads) and the fractions from
        tile products; the n x n matrix is never gathered. The same fractions as without
        ``chunks`` (to rounding); ``n_boot`` intervals run on the tiles too. Needs a measure
        without a feature matrix (those run in O(n p) memory anyway) and a shape measure
        with one (not ``'same_measure'``); ``n_permutations`` must be 0. The share of
        negative eigenvalues is not computed (NaN) unless the measure is Euclidean.
    spectrum : bool, default True
        Measure ``negative_share`` from every eigenvalue of G: an O(n^3) step that takes
        most of the time past about a thousand samples. ``False`` skips it unless the
        eigenvalues are already known or the measure is Euclidean (then 0):
        ``negative_share`` is NaN and a note says it was not measured. The fractions do not
        depend on it. (The dashboard's slider does this while it moves, and measures it
        once the slider settles.)
    all_dims : bool, default True
        :meth:`SizeShapeResult.by_dims` tabulates the fractions for every number of shape
        dimensions k up to floor((n - 2) / 3) (or ``shape_dims`` when larger, and at most
        the number of shape coordinates). ``False`` stops the table at the k used: G is then
        multiplied by k shape coordinates instead of all of them, which saves time when k
        is well below that limit (the dashboard's slider does this while it moves). The
        fractions do not depend on it.
    rng : None, int or numpy.random.Generator
        One seed gives the same test and intervals; the two use independent streams.
    progress, cancel : callables, optional
        ``progress(done, total)`` and ``cancel() -> bool`` for the simulations and
        resamples (cancel raises :class:`~tallyform.errors.Cancelled`).

    Returns
    -------
    SizeShapeResult

    Notes
    -----
    R^2 of predictors Z is tr(H G) / tr(G), H the hat matrix of [1, Z] (McArdle & Anderson
    2001); adjusted R^2 after Ezekiel (1930); fractions after Borcard et al. (1992) and
    Peres-Neto et al. (2006). The shared fraction can be negative (suppression); it is
    reported as computed. The size-only share is not tested (see
    :mod:`tallyform.core.partition_null` for the measurements behind this).

    References
    ----------
    Borcard D, Legendre P, Drapeau P (1992) Ecology 73:1045-1055.
    Davison AC, Hinkley DV (1997) Bootstrap Methods and their Application, ch. 4.
    Ezekiel M (1930) Methods of correlation analysis. Wiley.
    Gower JC (1966) Biometrika 53:325-338.
    Legendre P, Anderson MJ (1999) Ecological Monographs 69:1-24.
    McArdle BH, Anderson MJ (2001) Ecology 82:290-297.
    Peres-Neto PR, Legendre P, Dray S, Borcard D (2006) Ecology 87:2614-2625.
    Shao J, Wu CFJ (1989) Annals of Statistics 17:1176-1197.
    """
    from .dissimilarity import dissimilarity
    check_option("size", size, SIZE_OPTIONS)
    check_option("shape", shape, SHAPE_OPTIONS)
    n_permutations = check_count("n_permutations", n_permutations)
    n_boot = check_count("n_boot", n_boot)
    table = as_table(table)
    n = table.n_samples
    if n < 5:
        raise DesignError(f"the partition needs at least 5 samples; the table has {n}.")
    codes, unit_name = resampling_units(table, units) if n_boot else (None, None)
    if chunks is not None:
        from .partition_tiled import refuse_tiled_partition
        refuse_tiled_partition(n_permutations=n_permutations, shape=shape, measure=measure)
    d = dissimilarity(table, measure, transform=transform, chunks=chunks)
    res = size_shape_from(table, d, measure=measure, transform=transform, size=size,
                           shape=shape, shape_dims=shape_dims, n_permutations=0, rng=None,
                           progress=None, cancel=None, spectrum=bool(spectrum),
                           all_dims=bool(all_dims))
    if chunks is not None:
        from dataclasses import replace
        res = replace(res, provenance=dict(res.provenance, chunks=chunks))
    if not (n_permutations or n_boot):
        return res
    test_rng, boot_rng = as_rng(rng).spawn(2)
    total = n_permutations + n_boot
    notes = list(res.notes)
    extra = {}
    choice = dict(measure=measure, transform=transform, size=size, shape=shape)
    if n_permutations:
        extra.update(_null_test(table, res, choice, shape_dims, n_permutations,
                                overdispersion, test_rng, progress, cancel, total, notes))
    if n_boot:
        extra["fractions_ci"] = _leave_out_intervals(
            table, d, res, choice, shape_dims, n_boot, boot_rng, codes, unit_name, progress,
            cancel, n_permutations, total, notes)
    prov = dict(res.provenance, n_permutations=n_permutations, n_boot=n_boot,
                units=unit_name, overdispersion=overdispersion)
    from dataclasses import replace
    return replace(res, notes=tuple(dict.fromkeys(notes)), provenance=prov, **extra)


def _null_test(table, res, choice, shape_dims, n_permutations, overdispersion, rng,
               progress, cancel, total, notes: list) -> dict:
    """The Monte Carlo test of the fractions (appending its notes); the result's fields."""
    from .partition_null import shape_null_test
    z, _ = size_predictor(table, choice["size"])
    sub = None if progress is None else (lambda dn, tt: progress(dn, total))
    tests, null_shares, null, more = shape_null_test(
        table, res.fractions, measure=choice["measure"], transform=choice["transform"],
        shape=choice["shape"], shape_dims=shape_dims, z=z, n_sim=n_permutations,
        overdispersion=overdispersion, rng=rng, progress=sub, cancel=cancel)
    notes.extend(more)
    return dict(tests=tests, null_shares=null_shares, null_distribution=null)


def _leave_out_intervals(table, d, res, choice, shape_dims, n_boot, rng, codes, unit_name,
                         progress, cancel, done_before, total, notes: list):
    """Leave-out intervals of the shares (appending their notes)."""
    from .partition_resample import leave_out_sets
    arrays = prepared_arrays(table, d, **choice)
    kept, dd, items = leave_out_sets(table.n_samples, n_boot, rng, unit_codes=codes)
    ci, more = share_intervals(arrays, res, kept, dd, items, unit_name=unit_name,
                               fixed=shape_dims is not None, progress=progress,
                               cancel=cancel, done_before=done_before, total=total,
                               size_free=bool(d.properties.get("size_free")))
    notes.extend(more)
    return ci


def check_count(name, value) -> int:
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, np.integer)) \
            or value < 0:
        raise InputError(f"`{name}` must be a whole number >= 0; got {value!r}.")
    return int(value)


def resampling_units(table, units):
    """(unit code of every sample, name) for ``units``, or (None, None) without units."""
    if units is None or units is False:
        return None, None
    from .units import resolve_units
    plan = resolve_units(table.samples, [], units)
    if plan.independent:
        return None, None
    level = plan.levels[0]
    return np.asarray(level.codes), level.name


def prepared_arrays(table, d, *, measure, transform, size, shape):
    """PartitionArrays of one choice on the whole table (for resampling)."""
    from .partition_engine import PartitionArrays
    from .tiled import TiledDissimilarity
    z, _ = size_predictor(table, size)
    sd = shape_dissimilarity(table, shape, measure, transform)
    if isinstance(d, TiledDissimilarity):          # replicates from tile products
        from .partition_tiled import TiledPartitionArrays
        return TiledPartitionArrays(d, z, sd)
    return PartitionArrays.from_dissimilarities(d, z, sd)


def share_intervals(arrays, res, kept, d, items, *, unit_name=None, fixed=True,
                    progress=None, cancel=None, done_before=0, total=None, size_free=False):
    """(fractions_ci DataFrame, notes) of one partition from its leave-out replicates."""
    from .partition_resample import (check_resampling, jackknife_interval, replicate_shares,
                                     small_n_note)
    what = "units" if unit_name else "samples"
    check_resampling(items, res.shape_dims, what)
    reps = replicate_shares(arrays, kept, res.shape_dims, progress=progress, cancel=cancel,
                            done_before=done_before, total=total)
    est = res.fractions.reindex(list(FRACTIONS)).to_numpy(dtype=float)
    low, high, centre = jackknife_interval(est, reps, items=items, d=d)
    ci = pd.DataFrame({"low": low, "high": high, "bias_corrected": centre},
                      index=pd.Index(FRACTIONS, name="fraction"))
    notes = [interval_note(len(kept), unit_name, fixed, res.shape_dims)]
    failed = int(np.isnan(reps).any(axis=1).sum())
    if failed:
        notes.append(f"{failed} of {len(kept)} replicates could not be partitioned (too few "
                     "distinct samples left for the shape dimensions) and were ignored.")
    small = small_n_note(items, what)
    if small:
        notes.append(small)
    if size_free:
        notes.append(SIZE_FREE_NOTE)
    return ci, notes


SIZE_FREE_NOTE = ("this measure is size-free, so its size-only share is near 0; there the "
                  "intervals of the size-only and residual shares are conservative, wider "
                  "than needed (in simulation, 20 samples, they covered the true share in "
                  "100 % and 98.7 % of studies, against 95 % asked): near 0 the leave-out "
                  "replicates overstate the size-only share's spread about 2-fold.")


def interval_note(n_boot, unit_name, fixed, k) -> str:
    """How the intervals were made, in words (printed with the result)."""
    from .partition_resample import INTERVAL_METHOD
    how = (f"95 % intervals: {INTERVAL_METHOD}; {n_boot} replicates"
           + (f" leaving out whole units of {unit_name!r}" if unit_name else ""))
    if fixed:
        return how + f"; {k} shape dimension(s) as given."
    return (how + f"; {k} shape dimension(s) held as chosen from these data. When that number "
            "includes axes of unstructured variation, the residual interval can be too "
            "narrow (in simulation it covered the true share in 87-90 % of studies, the "
            "others in 93-99 %); fixing shape_dims at the number of clear axes avoids it.")


def cached_shape(table, shape, measure, transform, local=None):
    """Shape coordinates, from a per-call dict, the shared cache, or computed."""
    from .cache import shared_cache
    from .transforms import get_transform
    key = ("shape", table.fingerprint, shape)
    if shape == "same_measure":
        key += (str(measure), get_transform(transform).name)
    if local is not None and key in local:
        return local[key]
    hit = shared_cache.get(key)
    if hit is None:
        sd = shape_dissimilarity(table, shape, measure, transform)
        u, ev, neg = shape_coordinates(sd)
        u.setflags(write=False)
        ev.setflags(write=False)
        hit = shared_cache.put(key, (u, ev, neg, sd.measure), u.nbytes + ev.nbytes)
    if local is not None:
        local[key] = hit
    return hit


def _variation(d):
    """Variation of an in-memory dissimilarity, or its tile-product twin for tiled ones."""
    from .tiled import TiledDissimilarity
    if isinstance(d, TiledDissimilarity):
        from .partition_tiled import TiledVariation
        return TiledVariation(d)
    return Variation(d)


def size_shape_from(table, d, *, measure, transform, size, shape, shape_dims,
                     n_permutations, rng, progress, cancel, shape_cache=None,
                     spectrum: bool = True, all_dims: bool = True):
    """The partition of one choice (no inference: ``n_permutations`` must be 0)."""
    if n_permutations:
        raise ValueError("size_shape_from computes no tests; use size_shape.")
    n = table.n_samples
    z_raw, size_label = size_predictor(table, size)
    z = centred_unit(z_raw)
    u, ev, shape_neg, shape_measure = cached_shape(table, shape, measure, transform,
                                                    shape_cache)
    var = _variation(d)
    notes = list(d.notes)
    shape_total = float(ev.sum())
    cap = max(1, (n - 2) // 3)
    if shape_dims is None:
        k, reason = default_dims(ev, n, total=shape_total)
    else:
        k = int(shape_dims)
        limit = shape_dims_limit(n, ev.size)
        if not 1 <= k <= limit:
            raise InputError(f"`shape_dims` must be between 1 and {limit} for these data "
                             f"({ev.size} shape coordinate(s), {n} samples); got {shape_dims}.")
        reason = (f"{k} shape dimension(s), as requested; they hold "
                  f"{100 * ev[:k].sum() / shape_total:.1f} % of the variation in composition "
                  "(shape inertia)")
        if k > cap:
            notes.append(f"{k} shape dimensions exceed floor((n - 2) / 3) = {cap}: adjusted "
                         "R^2 values become unstable with so many predictors.")
    kmax = min(ev.size, max(cap, k)) if all_dims else k
    dims = partition_by_dims(var, z, u[:, :kmax], n)
    row = dims.loc[k]
    if z is None:
        notes.append("every sample has the same size, so the size fraction is 0 by definition.")
    elif row["m_size"] == 0:
        notes.append("the size predictor lies in the span of the shape coordinates: size only "
                     "is 0 and all size-related variation is counted as shared.")
    euclidean = bool(d.properties.get("euclidean"))
    if euclidean or spectrum:
        eig = None if euclidean else var.eigenvalues()
    else:                                          # only when already known
        eig = d.spectrum(compute=False)
    if euclidean:                                  # embeddable: no negative eigenvalue
        neg = 0.0
    elif not spectrum and eig is None:
        neg = float("nan")
        notes.append("the share of the variation held by negative eigenvalues was not "
                     "measured (spectrum=False); the fractions do not depend on it.")
    elif eig is None:                              # tiled: no whole spectrum
        from .partition_tiled import negative_share_note
        neg, note = negative_share_note(d)
        notes.extend([note] if note else [])
    else:
        neg = negative_share(eig)
    if neg > 0.001:
        from .measures import setting_name
        notes.append(f"negative eigenvalues hold {100 * neg:.1f} % of the variation of "
                     f"{setting_name(measure, transform)!r} (it is not Euclidean): the "
                     "fractions are computed from traces, which stay exact, but a PCoA of "
                     "this measure cannot show all of it.")
    if row["shared"] < -0.01:
        notes.append(f"the shared fraction is negative ({100 * row['shared']:.1f} %): size and "
                     "shape act as suppressors of each other here; it is shown, not clipped.")
    frac = pd.Series({f: float(row[f]) for f in FRACTIONS}, name="share")
    frac_raw = pd.Series({f: float(row[f"{f}_unadjusted"]) for f in FRACTIONS},
                         name="share_unadjusted")
    m_s = int(row["m_size"])
    r2 = pd.DataFrame({
        "r2": [row["r2_size"], row["r2_shape"], row["r2_both"]],
        "adj_r2": [adjusted_r2(row["r2_size"], n, m_s), adjusted_r2(row["r2_shape"], n, k),
                   adjusted_r2(row["r2_both"], n, m_s + k)],
        "df": [m_s, k, m_s + k]}, index=pd.Index(["size", "shape", "size + shape"],
                                                  name="predictors"))
    tr_name = None if d.transform in (None, "none") else d.transform
    prov = {"measure": measure, "transform": tr_name, "size": size, "size_label": size_label,
            "shape": shape, "shape_measure": shape_measure, "shape_dims": k,
            "shape_dims_given": shape_dims is not None, "n_permutations": 0,
            "all_dims": bool(all_dims),
            "n_samples": n, "table": table.fingerprint}
    return SizeShapeResult(
        measure=measure, transform=tr_name, size=size, shape=shape, n=n, fractions=frac,
        fractions_unadjusted=frac_raw, r2=r2, shape_dims=k, shape_dims_reason=reason,
        shape_inertia_share=float(ev[:k].sum() / shape_total), negative_share=neg,
        shape_negative_share=shape_neg, tests=None, notes=tuple(notes), provenance=prov,
        _dims=dims)
