"""Sampling units: which samples share a tank, a site or a plot, and at which level each term
of a design was applied.

Samples that share an experimental or observational unit (a tank sampled every week, a site
visited each month, plots within a block) are not independent replicates of a factor applied
to the units (pseudoreplication, Hurlbert 1984). Every design-aware test in tallyform starts
here: :func:`resolve_units` reads the ``units=`` argument (a column name, or a list of nested
columns, coarsest first), or detects the unit column when none is given, checks it, and says
in which *stratum* each term of the design lies:

- stratum ``k`` (0 <= k < number of levels): the term is constant within every unit of level
  ``k`` (and of every finer level) but not within the units of any coarser level, so it is
  tested between the units of level ``k`` (whole units are permuted);
- stratum ``len(levels)``: the term varies within the finest units (a visit, a week), so it
  is tested within units (samples are permuted within their unit).

Detection (``units=None``): a column of the sample information within which a tested main
effect is constant, with at least two units in every level of that factor (three distinct
units for a numeric covariate) and some unit holding more than one sample; the coarsest such
column (fewest units) is used, and the plan says so. ``units=False`` treats samples as
independent, and the plan notes when they do repeat units.

References
----------
Hurlbert, S. H. (1984). Pseudoreplication and the design of ecological field experiments.
Ecological Monographs 54, 187-211.
Nelder, J. A. (1965). The analysis of randomized experiments with orthogonal block structure.
Proc. R. Soc. Lond. A 283, 147-178, 163-178 (error strata).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .design import as_samples
from .errors import DesignError, InputError, Location

__all__ = ["UnitLevel", "UnitPlan", "resolve_units", "unit_centroid_gower",
           "aggregate_by_unit", "unit_blocks", "suggest_blocks"]


# ---------------------------------------------------------------------------- objects
@dataclass(frozen=True, eq=False)
class UnitLevel:
    """One level of sampling units (e.g. every tank).

    Attributes
    ----------
    name : str
        The sample-information column (for nested levels given as ``["site", "plot"]``, the
        finer column; its units are the (site, plot) combinations).
    codes : ndarray of int, shape (n,)
        Unit of every sample, 0..m-1 in order of first appearance.
    labels : tuple of str
        Label of every unit, in code order (``"S01/p2"`` for nested levels).
    parent : ndarray of int, shape (m,) or None
        For a nested level, the code of the enclosing unit of the coarser level.
    """

    name: str
    codes: np.ndarray = field(repr=False)
    labels: tuple = field(repr=False)
    parent: np.ndarray | None = field(default=None, repr=False)

    def __post_init__(self):
        c = np.array(self.codes, dtype=np.intp, copy=True)
        c.setflags(write=False)
        object.__setattr__(self, "codes", c)
        if self.parent is not None:
            p = np.array(self.parent, dtype=np.intp, copy=True)
            p.setflags(write=False)
            object.__setattr__(self, "parent", p)

    @property
    def m(self) -> int:
        """Number of units."""
        return len(self.labels)

    @property
    def sizes(self) -> np.ndarray:
        """Number of samples in every unit."""
        return np.bincount(self.codes, minlength=self.m)

    @property
    def balanced(self) -> bool:
        """True when every unit holds the same number of samples."""
        s = self.sizes
        return bool(s.min() == s.max())

    def describe(self) -> str:
        """``"15 units of 'tank', 4 samples each"`` or ``"..., 2-4 samples each (unbalanced)"``."""
        s = self.sizes
        each = (f"{s.min()} sample{'s' if s.min() != 1 else ''} each" if self.balanced
                else f"{s.min()}-{s.max()} samples each (unbalanced)")
        return f"{self.m} units of {self.name!r}, {each}"


@dataclass(frozen=True, eq=False)
class UnitPlan:
    """The sampling units of one analysis and the stratum of each term.

    Attributes
    ----------
    levels : tuple of UnitLevel
        Coarsest first; empty when samples are treated as independent.
    strata : dict term -> int
        Level index at which each term is tested (``len(levels)``: within the finest units).
    detected : bool
        True when the unit column was found automatically (``units=None``).
    requested : None, False, str or tuple of str
        What was asked for.
    notes : tuple of str
        What a reader of the result must know (the detection, repeated units ignored...).
    n : int
        Number of samples.
    """

    levels: tuple
    strata: dict
    detected: bool
    requested: object
    notes: tuple
    n: int

    @property
    def independent(self) -> bool:
        """True when every sample is treated as its own replicate."""
        return not self.levels

    @property
    def within(self) -> int:
        """The stratum index of terms that vary within the finest units."""
        return len(self.levels)

    def level_of(self, term: str) -> UnitLevel | None:
        """The unit level a term is tested between, or None (tested within units/samples)."""
        k = self.strata.get(term, self.within)
        return self.levels[k] if k < len(self.levels) else None

    def stratum_name(self, term: str) -> str:
        """Plain name of a term's stratum: ``"between 'tank'"``, ``"within 'tank'"`` or
        ``"samples"`` when there are no units."""
        if self.independent:
            return "samples"
        k = self.strata.get(term, self.within)
        if k < len(self.levels):
            return f"between {self.levels[k].name!r}"
        return f"within {self.levels[-1].name!r}"

    def describe(self, term: str | None = None) -> str:
        """One sentence for a reading, e.g. "tested at the level of 'tank': 15 units of 'tank',
        4 samples each; 'treatment' is constant within each 'tank'"."""
        if self.independent:
            return "samples treated as independent replicates"
        if term is None:
            return "; ".join(lv.describe() for lv in self.levels)
        lv = self.level_of(term)
        if lv is None:
            return (f"tested within units ({self.levels[-1].describe()}); {term!r} varies "
                    f"within each {self.levels[-1].name!r}")
        return f"tested at the level of {lv.name!r}: {lv.describe()}; {term!r} is constant " \
               f"within each {lv.name!r}"

    def provenance(self) -> dict:
        return {"units": [lv.name for lv in self.levels], "detected": self.detected,
                "strata": {t: self.stratum_name(t) for t in self.strata}}


# ---------------------------------------------------------------------------- helpers
def _term_values(frame: pd.DataFrame, term: str) -> np.ndarray:
    """One code per sample for a main effect or an interaction (combinations of levels)."""
    parts = [p.strip() for p in term.split(":")]
    for p in parts:
        if p not in frame.columns:
            raise DesignError(f"column {p!r} is not in the sample table; columns are "
                              f"{list(map(str, frame.columns))}.",
                              location=Location(column=repr(p)),
                              hint="Check the spelling (case counts).")
    if len(parts) == 1:
        col = frame[parts[0]]
        return pd.factorize(col.astype(str) if col.dtype == object else col)[0]
    codes = np.column_stack([pd.factorize(frame[p].astype(str))[0] for p in parts])
    return np.unique(codes, axis=0, return_inverse=True)[1].ravel()


def _constant_within(values: np.ndarray, codes: np.ndarray) -> np.ndarray:
    """Boolean per unit: the values take one value within the unit."""
    m = int(codes.max()) + 1 if codes.size else 0
    v = np.asarray(values, dtype=np.int64)
    lo = np.full(m, np.iinfo(np.int64).max)
    hi = np.full(m, np.iinfo(np.int64).min)
    np.minimum.at(lo, codes, v)
    np.maximum.at(hi, codes, v)
    return (lo >= hi) | (lo == np.iinfo(np.int64).max)


def _unit_codes(col: pd.Series) -> tuple[np.ndarray, tuple]:
    codes, uniques = pd.factorize(col.astype(str), sort=False)
    return codes.astype(np.intp), tuple(str(u) for u in uniques)


def _is_unit_like(col: pd.Series) -> bool:
    """Could this column name sampling units? Text, categories, booleans or whole numbers."""
    if col.isna().any():
        return False
    if pd.api.types.is_bool_dtype(col) or not pd.api.types.is_numeric_dtype(col):
        return True
    x = pd.to_numeric(col, errors="coerce").to_numpy(dtype=float)
    return bool(np.isfinite(x).all() and np.all(x == np.round(x)))


def _is_numeric_term(frame: pd.DataFrame, term: str) -> bool:
    if ":" in term:
        return False
    col = frame[term]
    return pd.api.types.is_numeric_dtype(col) and not pd.api.types.is_bool_dtype(col)


def _qualifies(frame: pd.DataFrame, term: str, codes: np.ndarray) -> bool:
    """Is ``term`` applied to these units, with replication of units in each level?"""
    values = _term_values(frame, term)
    if not _constant_within(values, codes).all():
        return False
    per_unit = pd.Series(values).groupby(codes).first()
    if _is_numeric_term(frame, term):
        return per_unit.size >= 3 and per_unit.nunique() >= 2
    counts = per_unit.value_counts()
    return counts.size >= 2 and int(counts.min()) >= 2


def _main_effects(terms) -> list[str]:
    out = []
    for t in terms:
        for p in str(t).split(":"):
            p = p.strip()
            if p and p not in out:
                out.append(p)
    return out


def _candidates(frame: pd.DataFrame, terms, exclude) -> list[tuple[int, int, str, np.ndarray]]:
    mains = _main_effects(terms)
    n = len(frame)
    out = []
    for pos, c in enumerate(frame.columns):
        name = str(c)
        if name in mains or name in exclude:
            continue
        col = frame[c]
        if not _is_unit_like(col):
            continue
        codes, labels = _unit_codes(col)
        m = len(labels)
        if m >= n or m < 2:
            continue
        if not any(_qualifies(frame, t, codes) for t in mains):
            continue
        numeric = int(pd.api.types.is_numeric_dtype(col) and not pd.api.types.is_bool_dtype(col))
        out.append((m, numeric, pos, name, codes))
    out.sort(key=lambda r: r[:3])
    return [(m, pos, name, codes) for m, _, pos, name, codes in out]


def _level_from(frame: pd.DataFrame, name, parent: UnitLevel | None) -> UnitLevel:
    if isinstance(name, pd.Series):
        col = name
        name = str(col.name if col.name is not None else "units")
    else:
        name = str(name)
        if name not in frame.columns:
            raise DesignError(f"units column {name!r} is not in the sample table; columns are "
                              f"{list(map(str, frame.columns))}.",
                              location=Location(column=repr(name)),
                              hint="Name the column that identifies the tank, site or plot "
                                   "each sample came from.")
        col = frame[name]
    if col.isna().any():
        bad = list(col.index[col.isna()].astype(str))[:8]
        raise DesignError(f"units column {name!r} has no unit for sample(s) {bad}"
                          f"{' ...' if col.isna().sum() > 8 else ''}.",
                          location=Location(column=repr(name)),
                          hint="Every sample must name the unit it came from.")
    if parent is None:
        codes, labels = _unit_codes(col)
        return UnitLevel(name, codes, labels)
    # nested: units are (parent unit, this label) combinations; a label may repeat across
    # parents ("p1" in every site), but a combination belongs to one parent by construction
    keys = pd.MultiIndex.from_arrays([np.asarray(parent.labels, dtype=object)[parent.codes],
                                      col.astype(str).to_numpy()])
    codes, uniques = pd.factorize(keys, sort=False)
    labels = tuple(f"{a}/{b}" for a, b in uniques)
    parent_of = np.empty(len(labels), dtype=np.intp)
    parent_of[codes] = parent.codes
    return UnitLevel(name, codes, labels, parent=parent_of)


def _stratum(frame: pd.DataFrame, term: str, levels: tuple) -> int:
    """Coarsest level within whose (multi-sample) units ``term`` is constant."""
    values = _term_values(frame, term)
    for k, lv in enumerate(levels):
        multi = lv.sizes >= 2
        const = _constant_within(values, lv.codes)
        if not multi.any():
            return k
        if const[multi].all():
            return k
        if k == len(levels) - 1 and const[multi].any():
            # partly nested in the finest units: neither between nor within
            where_c = lv.labels[int(np.flatnonzero(const & multi)[0])]
            where_v = lv.labels[int(np.flatnonzero(~const & multi)[0])]
            raise DesignError(
                f"{term!r} is constant within some units of {lv.name!r} (e.g. {where_c!r}) "
                f"but varies within others (e.g. {where_v!r}), so it is neither applied to "
                f"whole units nor within them.", location=Location(column=repr(lv.name)),
                hint="Check the units column (is every unit named uniquely?), or pass "
                     "units=False to treat samples as independent.")
    return len(levels)


def _check_replication(frame: pd.DataFrame, term: str, lv: UnitLevel) -> None:
    """A term tested between units needs at least two units in each of its levels."""
    values = frame[term] if ":" not in term else None
    if values is None or _is_numeric_term(frame, term):
        return
    per_unit = pd.Series(values.astype(str).to_numpy()).groupby(lv.codes).first()
    counts = per_unit.value_counts()
    single = [str(x) for x in counts.index[counts < 2]]
    if single:
        lone = [lv.labels[int(u)] for u in per_unit.index[per_unit.isin(single)]][:4]
        raise DesignError(
            f"level(s) {single} of {term!r} hold a single unit of {lv.name!r} ({lone}), so "
            f"{term!r} cannot be tested between units: there is no replication of the units "
            "it was applied to.", location=Location(column=repr(lv.name)),
            hint="Merge levels, add units, or (if the samples really are independent "
                 "replicates) pass units=False.")


# ---------------------------------------------------------------------------- public
def resolve_units(samples, terms, units=None, *, blocks=None) -> UnitPlan:
    """The sampling units of a design and the stratum in which each term is tested.

    Parameters
    ----------
    samples : DataFrame or CommunityTable
        Sample information, one row per sample (in the order of the analysis).
    terms : str or list of str
        The terms of the design (factors, covariates, ``"a:b"`` interactions).
    units : None, False, str, list of str or Series
        None: detect (see the module notes); False: samples are independent; a column name;
        a list of nested column names, coarsest first (``["site", "plot"]``); or the unit
        label of every sample as a Series.
    blocks : str, optional
        The blocking column, never taken as the units by detection.

    Returns
    -------
    UnitPlan

    Raises
    ------
    DesignError
        Unknown units column, a sample with no unit, a term constant within some units but
        varying within others, a factor level with a single unit, nested units that
        interleave.

    Examples
    --------
    >>> import pandas as pd
    >>> info = pd.DataFrame({"treatment": ["a"] * 8 + ["b"] * 8,
    ...                      "tank": [f"T{i // 4}" for i in range(16)],
    ...                      "week": [f"w{i % 4}" for i in range(16)]})      # synthetic
    >>> plan = resolve_units(info, ["treatment", "week"])
    >>> plan.detected, plan.levels[0].name, plan.stratum_name("treatment"), plan.stratum_name("week")
    (True, 'tank', "between 'tank'", "within 'tank'")
    """
    frame = as_samples(samples)
    if isinstance(terms, str):
        terms = [terms]
    terms = [str(t).strip() for t in terms]
    n = len(frame)
    block_name = blocks if isinstance(blocks, str) else None
    notes: list[str] = []
    if units is False:
        found = _candidates(frame, terms, {block_name} if block_name else set())
        if found:
            m, _, name, codes = found[0]
            lv = UnitLevel(name, codes, _unit_codes(frame[name])[1])
            notes.append(f"Samples were treated as independent replicates (units=False), "
                         f"although they repeat units ({lv.describe()}); p-values count "
                         "repeated samples of a unit as if they were separate units.")
        return UnitPlan((), {t: 0 for t in terms}, False, False, tuple(notes), n)
    if units is None:
        found = _candidates(frame, terms, {block_name} if block_name else set())
        if not found:
            return UnitPlan((), {t: 0 for t in terms}, False, None, (), n)
        m, _, name, codes = found[0]
        levels = (UnitLevel(name, codes, _unit_codes(frame[name])[1]),)
        detected = True
        requested = None
    else:
        if isinstance(units, (str, pd.Series)):
            names = [units]
        elif isinstance(units, (list, tuple)) and units and all(isinstance(u, str)
                                                                 for u in units):
            names = list(units)
        else:
            raise InputError(f"`units` must be None, False, a column name, a list of nested "
                             f"column names (coarsest first) or a Series; got {units!r}.")
        if len(set(map(str, names))) != len(names):
            raise DesignError(f"a units column is listed twice: {names}.")
        for nm in names:
            if isinstance(nm, str) and nm in _main_effects(terms):
                raise DesignError(f"{nm!r} is both a tested term and the units column.",
                                  location=Location(column=repr(nm)),
                                  hint="The units are the tanks, sites or plots the "
                                       "factor was applied to, not the factor itself.")
        levels, parent = [], None
        for nm in names:
            lv = _level_from(frame, nm, parent)
            levels.append(lv)
            parent = lv
        levels = tuple(levels)
        detected = False
        requested = tuple(str(getattr(u, "name", u)) for u in names)
    strata = {t: _stratum(frame, t, levels) for t in terms}
    for t, k in strata.items():
        if k < len(levels) and ":" not in t:
            _check_replication(frame, t, levels[k])
    if all(lv.m == n for lv in levels):
        notes.append("Every sample is its own unit, so the units change nothing.")
        return UnitPlan((), {t: 0 for t in terms}, detected, requested, tuple(notes), n)
    between = [t for t in terms if strata[t] < len(levels)]
    if detected:
        lv = levels[0]
        what = (f"{', '.join(repr(t) for t in between)} "
                f"{'is' if len(between) == 1 else 'are'} constant within each {lv.name!r}"
                if between else "")
        notes.append(f"Sampling units detected: {lv.describe()}"
                     + (f"; {what}" if what else "")
                     + f", so {'it is' if len(between) == 1 else 'they are'} tested between "
                       f"units (pass units=False to treat samples as independent).")
    return UnitPlan(levels, strata, detected, requested, tuple(notes), n)


def unit_blocks(level: UnitLevel, block_codes: np.ndarray | None,
                block_name: str | None = None) -> np.ndarray | None:
    """The block of every unit (for permuting whole units within blocks).

    Raises DesignError naming a unit that lies in two blocks.
    """
    if block_codes is None:
        return None
    b = np.asarray(block_codes)
    const = _constant_within(pd.factorize(b)[0], level.codes)
    if not const.all():
        u = level.labels[int(np.flatnonzero(~const)[0])]
        raise DesignError(f"unit {u!r} of {level.name!r} has samples in more than one block of "
                          f"{block_name!r}, so whole units cannot be permuted within blocks.",
                          location=Location(column=repr(block_name or "blocks")),
                          hint="Blocks must group whole units (e.g. tanks within a bench).")
    out = np.empty(level.m, dtype=object)
    out[level.codes] = b
    return out


def aggregate_by_unit(values, level: UnitLevel) -> np.ndarray:
    """Sum the rows of ``values`` (n x p, or n) over the samples of each unit (m x p, or m)."""
    v = np.asarray(values, dtype=np.float64)
    one = v.ndim == 1
    v2 = v[:, None] if one else v
    out = np.zeros((level.m, v2.shape[1]))
    np.add.at(out, level.codes, v2)
    return out[:, 0] if one else out


def unit_centroid_gower(gower: np.ndarray, level: UnitLevel) -> np.ndarray:
    """Gower matrix of the unit centroids (m x m): A' G A with A averaging the samples of
    each unit (the principal-coordinate centroids of the units, imaginary axes included)."""
    G = np.asarray(gower, dtype=np.float64)
    A = np.zeros((G.shape[0], level.m))
    A[np.arange(G.shape[0]), level.codes] = 1.0
    A /= level.sizes[None, :]
    out = A.T @ G @ A
    return (out + out.T) / 2


def suggest_blocks(samples, group: str, units=None) -> str | None:
    """A column that looks like the blocks of a randomised complete block design, or None.

    A column qualifies when it is not the group nor a unit column, has at least 2 levels,
    every one of its levels holds every level of ``group`` (complete blocks), the group
    varies within each of its levels, and every unit lies inside one block (without
    units nothing is suggested).
    The blocks restrict the permutations and enter the size test as a factor; they are a
    suggestion, named as such by whoever shows it (the Tests panel's default). Among
    several, the one with the fewest levels is taken (ties: the first in the table).
    """
    frame = as_samples(samples)
    if not group or group not in frame.columns:
        return None
    g = frame[group].astype(str).to_numpy()
    n_groups = len(pd.unique(g))
    if n_groups < 2:
        return None
    unit_cols = [] if units in (None, False) else (
        [units] if isinstance(units, str) else [str(u) for u in units])
    if not unit_cols:
        return None                      # blocks are suggested only as groups of units
    best = None
    for col in frame.columns:
        col = str(col)
        if col == group or col in unit_cols or not _is_unit_like(frame[col]):
            continue
        b = frame[col].astype(str).to_numpy()
        levels = pd.unique(b)
        if not 2 <= len(levels) < len(b) / 2:
            continue
        per_block = pd.Series(g).groupby(b).nunique()
        if int(per_block.min()) != n_groups:
            continue                     # not complete: some block lacks a group
        if unit_cols:
            u = frame[unit_cols[0]].astype(str).to_numpy()
            if int(pd.Series(b).groupby(u).nunique().max()) != 1:
                continue                 # a unit spans blocks: not blocks of these units
        if best is None or len(levels) < best[0]:
            best = (len(levels), col)
    return None if best is None else best[1]
