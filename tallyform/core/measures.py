"""The registry of dissimilarity measures: one frozen :class:`Measure` record per measure.

Each record says how to compute the measure (a feature map for the measures that are
Euclidean distances in some feature space, a pairwise kernel for the others) and declares
its properties: ``metric`` (triangle inequality holds), ``euclidean`` (embeddable in a
Euclidean space: a PCoA of it has no negative eigenvalues), ``size_free`` (scaling one sample
by a constant leaves every distance unchanged), the behaviour on double zeros (taxa absent
from both samples) and on empty samples. Dropdowns, docs and validation all read
:data:`MEASURES`, so they cannot drift apart.

Notation: rows x, y of the (transformed) table; r_x = sum_j x_j; profile a_x = x / r_x;
c_j = x_+j / N the column mass of the whole table.

References
----------
Legendre, P. & Legendre, L. (2012). Numerical Ecology, 3rd English ed., ch. 7. Elsevier.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable, Mapping

import numpy as np

from . import kernels as K
from .errors import InputError
from .transforms import Chord as _Chord
from .transforms import Clr, listing

__all__ = ["Measure", "MEASURES", "get_measure", "measure_names"]


class MeasureContext:
    """What a measure's function may read (labels, options) and write (notes, flags)."""

    def __init__(self, labels, taxa, params: dict, dtype):
        self.labels = labels
        self.taxa = taxa
        self.params = params
        self.dtype = dtype
        self.notes: list[str] = []
        self.properties: dict = {}
        self.record: dict = {}      # resolved options, kept in Dissimilarity.params


@dataclass(frozen=True, eq=False)
class Measure:
    """One dissimilarity measure and what it guarantees.

    Attributes
    ----------
    name : str
        Canonical name (a key of :data:`MEASURES`).
    label : str
        Name for display.
    formula : str
        The definition, in plain text.
    metric : bool
        The triangle inequality holds for every table.
    euclidean : bool
        Every set of samples embeds isometrically in a Euclidean space (PCoA has no negative
        eigenvalues).
    size_free : bool
        Scaling one sample by a constant leaves every distance unchanged (exactly when
        ``size_free_exact``; chi-square only nearly, since the column masses move).
    size_free_exact : bool
    double_zero : str
        What taxa absent from both samples do to the distance.
    empty_samples : {'error', 'allowed'}
        Whether a sample with a total of 0 is an error (the measure is undefined for it).
    nonnegative : bool
        The measure needs values >= 0 after the transformation.
    features : callable or None
        ``features(x, ctx) -> F`` for measures that are Euclidean distances between rows
        of F (computed by the fast Gram kernel).
    pairwise : callable or None
        ``pairwise(x, ctx) -> condensed`` for the others.
    options : mapping
        Measure options and their defaults (passed as keywords to ``dissimilarity``).
    references : tuple of str
    """

    name: str
    label: str
    formula: str
    metric: bool
    euclidean: bool
    size_free: bool
    double_zero: str
    references: tuple[str, ...]
    features: Callable | None = field(default=None, repr=False)
    pairwise: Callable | None = field(default=None, repr=False)
    size_free_exact: bool | None = None
    empty_samples: str = "error"
    nonnegative: bool = True
    options: Mapping = field(default_factory=dict)

    def __post_init__(self):
        if (self.features is None) == (self.pairwise is None):
            raise ValueError(f"measure {self.name!r}: give exactly one of features/pairwise")
        if self.size_free_exact is None:
            object.__setattr__(self, "size_free_exact", self.size_free)

    @property
    def has_features(self) -> bool:
        return self.features is not None

    @property
    def kernel(self) -> Callable:
        """The function that computes it (feature map or pairwise kernel)."""
        return self.features if self.features is not None else self.pairwise

    def describe(self) -> dict:
        """The declared properties as a plain dict (for tables and docs)."""
        return {"name": self.name, "label": self.label, "formula": self.formula,
                "metric": self.metric, "euclidean": self.euclidean,
                "size_free": self.size_free, "size_free_exact": self.size_free_exact,
                "double_zero": self.double_zero, "empty_samples": self.empty_samples,
                "references": "; ".join(self.references)}


# ---------------------------------------------------------------------- helpers
def _totals(x):
    return x.sum(axis=1)


def _profiles(x):
    return x / x.sum(axis=1, keepdims=True)


def _presence(x):
    return (x > 0).astype(np.float64)


# ---------------------------------------------------------------------- feature maps
def _f_euclidean(x, ctx):
    return x


def _f_hellinger(x, ctx):
    return np.sqrt(_profiles(x))


def _f_chord(x, ctx):
    return _Chord()._apply(x, ctx.labels)       # x is private to this call


def _f_chi_square(x, ctx):
    masses = ctx.params.get("column_masses")
    if masses is None:
        col = x.sum(axis=0)
        if np.any(col < 0):
            raise InputError("the chi-square distance needs non-negative values; some taxa "
                             "have a negative total.")
        empty = np.flatnonzero(col <= 0)
        masses = col / col.sum()
        ctx.record["column_masses"] = "table"
        if empty.size:
            # a taxon absent from every sample adds 0 to every distance (its profile
            # differences are all 0), so leaving it out is exact, not an approximation
            names = [str(ctx.taxa[j]) for j in empty]
            ctx.notes.append(f"{len(names)} taxon/taxa absent from every sample "
                             f"({listing(names)}) were left out of the chi-square distance: "
                             "it divides by each taxon's total, and an absent taxon adds "
                             "nothing to any distance.")
            keep = col > 0
            out = np.zeros_like(x, dtype=np.float64)
            out[:, keep] = _profiles(x)[:, keep] / np.sqrt(masses[keep])
            return out
    else:
        try:
            masses = np.asarray(masses, dtype=np.float64).ravel()
        except (TypeError, ValueError):
            masses = np.array([np.nan])
        if masses.shape != (x.shape[1],) or not np.all(np.isfinite(masses)) or np.any(masses <= 0):
            raise InputError(f"`column_masses` must hold {x.shape[1]} positive numbers, one "
                             "per taxon.")
        ctx.record["column_masses"] = [float(m) for m in masses]
        ctx.properties["size_free_exact"] = True
    return _profiles(x) / np.sqrt(masses)


def _f_aitchison(x, ctx):
    p = ctx.params
    clr = Clr(zeros=p.get("zeros", "multiplicative"), pseudocount=p.get("pseudocount", 1.0),
              delta=p.get("delta"))
    delta = clr.delta if clr.delta is not None else 1.0 / x.shape[1] ** 2
    ctx.record.update(zeros=clr.zeros,
                      pseudocount=clr.pseudocount if clr.zeros == "pseudocount" else None,
                      delta=delta if clr.zeros == "multiplicative" else None)
    n_zero = int((x == 0).sum())
    if n_zero and clr.zeros == "multiplicative":
        ctx.notes.append(f"{n_zero} zero(s) were replaced by multiplicative replacement "
                         f"(Martin-Fernandez et al. 2003) with delta = {delta:.3g} of the "
                         "sample total before the log-ratios.")
    if n_zero and clr.zeros == "pseudocount":
        ctx.properties["size_free_exact"] = False
        ctx.notes.append(f"{clr.pseudocount:g} was added to every value before the "
                         "log-ratios; a fixed pseudocount is a larger share of a small "
                         "sample than of a large one, so sample size leaks into the "
                         "distances (multiplicative replacement avoids this).")
    return clr._apply(x, ctx.labels)            # x is private to this call


# ---------------------------------------------------------------------- pairwise kernels
def _p_manhattan(x, ctx):
    return K.abs_condensed(x, dtype=ctx.dtype)


def _p_bray_curtis(x, ctx):
    return K.abs_condensed(x, mode=K.RATIO, t=_totals(x), dtype=ctx.dtype)


def _p_quantitative_jaccard(x, ctx):
    return K.abs_condensed(x, mode=K.RUZICKA, t=_totals(x), dtype=ctx.dtype)


def _p_jaccard(x, ctx):
    q = _presence(x)
    return K.abs_condensed(q, mode=K.RUZICKA, t=_totals(q), dtype=ctx.dtype)


def _p_sorensen(x, ctx):
    q = _presence(x)
    return K.abs_condensed(q, mode=K.RATIO, t=_totals(q), dtype=ctx.dtype)


def _p_kulczynski(x, ctx):
    return K.kulczynski_condensed(x, _totals(x), dtype=ctx.dtype)


def _p_canberra(x, ctx):
    return K.canberra_condensed(x, dtype=ctx.dtype)


def _p_morisita_horn(x, ctx):
    a = _profiles(x)
    return K.sqeuclidean_condensed(a, mode=K.RATIO, t=np.einsum("ij,ij->i", a, a),
                                   dtype=ctx.dtype)


def _p_jensen_shannon(x, ctx):
    return K.jensen_shannon_condensed(_profiles(x), dtype=ctx.dtype)


def _p_gower(x, ctx):
    rng = x.max(axis=0) - x.min(axis=0)
    keep = rng > 0
    n_const = int((~keep).sum())
    ctx.record["constant_taxa_left_out"] = n_const
    if n_const:
        names = [str(ctx.taxa[j]) for j in np.flatnonzero(~keep)]
        ctx.notes.append(f"{n_const} taxon/taxa have the same value in every sample (range 0) "
                         f"and were left out of the Gower mean: {listing(names)}.")
    if not keep.any():
        ctx.notes.append("every taxon is constant, so every Gower dissimilarity is 0.")
        return np.zeros(x.shape[0] * (x.shape[0] - 1) // 2, dtype=ctx.dtype)
    xs = x[:, keep] / rng[keep]
    return K.abs_condensed(xs, mode=K.SCALE, scale=1.0 / keep.sum(), dtype=ctx.dtype)


# ---------------------------------------------------------------------- the registry
_LL = "Legendre & Legendre (2012), Numerical Ecology, ch. 7"
_DZ_IGNORED = ("ignored: a taxon absent from both samples adds nothing to the numerator or "
               "the denominator")

_RECORDS = [
    Measure("euclidean", "Euclidean", "sqrt(sum_j (x_j - y_j)^2)", True, True, False,
            "counted as agreement: two samples that share no taxa can be closer than two "
            "that share many (the double-zero paradox, Orloci 1978)", (_LL,),
            features=_f_euclidean, empty_samples="allowed", nonnegative=False),
    Measure("manhattan", "Manhattan", "sum_j |x_j - y_j|", True, False, False,
            "counted as agreement (adds 0), as for Euclidean", (_LL,),
            pairwise=_p_manhattan, empty_samples="allowed", nonnegative=False),
    Measure("bray_curtis", "Bray-Curtis", "sum_j |x_j - y_j| / sum_j (x_j + y_j)",
            False, False, False, _DZ_IGNORED + "; samples sharing no taxa are at 1",
            ("Bray & Curtis (1957)", _LL), pairwise=_p_bray_curtis),
    Measure("chi_square", "Chi-square distance",
            "sqrt(sum_j (a_xj - a_yj)^2 / c_j) (some texts multiply by sqrt(N), N the grand "
            "total: the same ordering, rescaled)",
            True, True, True, _DZ_IGNORED + "; rare taxa (small c_j) weigh heavily",
            (_LL, "Greenacre (1984), Theory and Applications of Correspondence Analysis"),
            features=_f_chi_square, size_free_exact=False,
            options={"column_masses": None}),
    Measure("hellinger", "Hellinger", "sqrt(sum_j (sqrt(a_xj) - sqrt(a_yj))^2); max sqrt(2)",
            True, True, True, _DZ_IGNORED + "; samples sharing no taxa are at sqrt(2)",
            ("Rao (1995)", "Legendre & Gallagher (2001)"), features=_f_hellinger),
    Measure("chord", "Chord", "||x / ||x|| - y / ||y||||; max sqrt(2)", True, True, True,
            _DZ_IGNORED + "; samples sharing no taxa are at sqrt(2)",
            ("Orloci (1967)", _LL), features=_f_chord),
    Measure("aitchison", "Aitchison", "||clr(x) - clr(y)||, zeros replaced first",
            True, True, True,
            "not ignored: after zero replacement, a taxon absent from both samples still "
            "adds to the distance whenever the two samples' log-ratio centres differ",
            ("Aitchison (1986)", "Martin-Fernandez et al. (2003)"), features=_f_aitchison,
            options={"zeros": "multiplicative", "pseudocount": 1.0, "delta": None}),
    Measure("jaccard", "Jaccard (presence)", "1 - a / (a + b + c) on presence/absence",
            True, False, True, _DZ_IGNORED + " (d, the double absences, is not used)",
            ("Jaccard (1912)", _LL), pairwise=_p_jaccard),
    Measure("quantitative_jaccard", "Quantitative Jaccard (Ruzicka)",
            "1 - sum_j min(x_j, y_j) / sum_j max(x_j, y_j)", True, False, False,
            _DZ_IGNORED, ("Ruzicka (1958)", _LL), pairwise=_p_quantitative_jaccard),
    Measure("sorensen", "Sorensen", "(b + c) / (2a + b + c): Bray-Curtis on presence/absence",
            False, False, True, _DZ_IGNORED, ("Sorensen (1948)", _LL),
            pairwise=_p_sorensen),
    Measure("kulczynski", "Kulczynski (quantitative)",
            "1 - (sum_j min(x_j, y_j) / r_x + sum_j min(x_j, y_j) / r_y) / 2", False, False,
            False, _DZ_IGNORED, ("Kulczynski (1928)", _LL), pairwise=_p_kulczynski),
    Measure("canberra", "Canberra", "sum_j |x_j - y_j| / (x_j + y_j) over taxa not absent "
            "from both", True, False, False,
            "excluded from the sum; every taxon present in only one of the two samples adds "
            "exactly 1, whatever its abundance", ("Lance & Williams (1966)", _LL),
            pairwise=_p_canberra, empty_samples="allowed", nonnegative=False),
    Measure("morisita_horn", "Morisita-Horn",
            "1 - 2 sum_j x_j y_j / ((l_x + l_y) r_x r_y), l_x = sum_j x_j^2 / r_x^2",
            False, False, True, _DZ_IGNORED, ("Morisita (1959)", "Horn (1966)"),
            pairwise=_p_morisita_horn),
    Measure("jensen_shannon", "Jensen-Shannon",
            "sqrt((KL(a_x || m) + KL(a_y || m)) / 2), m = (a_x + a_y) / 2, natural log",
            True, True, True, _DZ_IGNORED + "; samples sharing no taxa are at sqrt(log 2)",
            ("Lin (1991)", "Endres & Schindelin (2003)", "Fuglede & Topsoe (2004)"),
            pairwise=_p_jensen_shannon),
    Measure("gower", "Gower (range-standardised)",
            "(1/p') sum_j |x_j - y_j| / range_j over the p' taxa whose range is not 0",
            True, False, False,
            "counted as agreement (adds 0 while counting in the mean), so many shared "
            "absences pull samples together", ("Gower (1971)",), pairwise=_p_gower,
            empty_samples="allowed", nonnegative=False),
]

MEASURES: dict[str, Measure] = {m.name: m for m in _RECORDS}
"""Every measure by canonical name, in display order."""

_ALIASES = {"braycurtis": "bray_curtis", "bray": "bray_curtis", "cityblock": "manhattan",
            "chisquare": "chi_square", "chi2": "chi_square", "ruzicka": "quantitative_jaccard",
            "dice": "sorensen", "jensenshannon": "jensen_shannon", "horn": "morisita_horn"}
# names that mean another measure elsewhere: an error that names ours
_MISLEADING = {
    "morisita": "'morisita' usually names Morisita's original index (for counts), which "
                "tallyform does not compute; write measure='morisita_horn' for the "
                "Morisita-Horn index (Horn 1966).",
}


def setting_name(measure, transform=None) -> str:
    """A measure with its transform, as notes name it: ``'sqrt + bray_curtis'``
    (the measure alone without a transform)."""
    name = getattr(measure, "name", measure)
    tr = getattr(transform, "name", transform)
    return str(name) if tr in (None, "", "none") else f"{tr} + {name}"


def measure_names() -> list[str]:
    """Canonical measure names in display order."""
    return list(MEASURES)


def get_measure(measure) -> Measure:
    """The :class:`Measure` record for a name (hyphens, spaces and case are forgiven) or a
    record.

    >>> get_measure("Bray-Curtis").name
    'bray_curtis'
    """
    if isinstance(measure, Measure):
        return measure
    if not isinstance(measure, str):
        raise InputError(f"`measure` must be a name; got {type(measure).__name__}.")
    key = measure.strip().lower().replace("-", "_").replace(" ", "_")
    if key in _MISLEADING:
        raise InputError(f"measure {measure!r} is not one of ours: {_MISLEADING[key]}",
                         hint=f"choose one of {measure_names()}.")
    key = _ALIASES.get(key, key)
    if key not in MEASURES:
        raise InputError(f"unknown measure {measure!r}; choose one of {measure_names()}.")
    return MEASURES[key]
