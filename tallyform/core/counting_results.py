"""The result of a shape or spread test protected against counting noise, and its wording."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .display import p_words
from .counting_stats import spread_distances
from .results import ResultMixin, readonly

__all__ = ["CountingTestResult", "make_result", "RATIO_NOTE"]

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
    df : tuple
        (groups - 1, replicates - groups): the degrees of freedom of the F statistics.
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
    df: tuple = (0, 0)
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
               f"statistic = {self.statistic:.4g}, {p_words(self.pvalue)}"

    def __str__(self) -> str:
        return super().__str__() + "\n" + self.reading


    def as_test(self):
        """The test as the engine's result it matches: a DispersionResult for spread, a
        PermutationTest for shape (what the figures draw)."""
        return self._as_dispersion() if self.aspect == "spread" else self._as_permutation()

    def _as_permutation(self):
        from .permutation import PermutationTest
        return PermutationTest(statistic=self.statistic, pvalue=self.pvalue,
                               null_distribution=self.null_distribution,
                               n_permutations=self.n_permutations, exact=self.exact,
                               n_distinct=None, scheme=self.scheme, df=self.df, ss=(0.0, 0.0),
                               path="features", notes=self.notes)

    def _as_dispersion(self):
        from .dispersion import DispersionResult
        means = self.summary[["n", "mean_distance"]].copy()
        on = self.measure if self.depth is None else \
            f"{self.measure}, rarefied to {self.depth}"
        return DispersionResult(statistic=self.statistic, pvalue=self.pvalue,
                                distances=self.distances, group_means=means, df=self.df,
                                centre="mean", null_distribution=self.null_distribution,
                                n_permutations=self.n_permutations, exact=self.exact,
                                scheme=self.scheme, measure=on, notes=self.notes,
                                groups=self.groups)


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


def make_result(aspect, des, tab, group, measure, tname, adjust, n_draws, statistic,
                noise_correction, alpha, pvals, pvalue, observed, null, emb, ng, perms,
                mnotes) -> CountingTestResult:
    """The result object, its notes and its reading, from one finished run."""
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
        units=des.unit_name, df=(int(ng.size - 1), int(ng.sum() - ng.size)),
        left_out=des.left_out, reading=reading,
        notes=tuple(dict.fromkeys(notes)),
        provenance={"aspect": aspect, "measure": measure, "transform": tname,
                    "adjust": adjust, "depth": des.depth, "n_draws": n_draws,
                    "statistic": statistic if aspect == "shape" else "anova_f_distances",
                    "noise_correction": corrected, "n_permutations": int(perms.total),
                    "units": des.unit_name, "group": str(group)})


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


