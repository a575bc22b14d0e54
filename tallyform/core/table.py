"""CommunityTable: counts (samples x taxa) with aligned sample and taxon information.

The table is the single funnel through which every input reaches the computations: it checks
the numbers once (finite, non-negative, unique labels), aligns the sample information by label,
and records what was dropped and where each value came from, so that later errors can still
point at the file, line and column the user typed.
"""
from __future__ import annotations

import hashlib

import numpy as np
import pandas as pd

from .errors import DesignError, InputError, Location
from .origin import Origin, _column_letter, _listing  # noqa: F401  (re-exported)
from .table_checks import (_align, _check_values, _labels, _numeric_values,
                           per_sample_values)

__all__ = ["CommunityTable", "Origin", "as_table", "EMPTY_POLICIES"]

EMPTY_POLICIES = ("error", "drop", "keep")


class CommunityTable:
    """Counts or biomass of taxa in samples, with aligned sample and taxon information.

    Parameters
    ----------
    counts : DataFrame or array_like, shape (n_samples, n_taxa)
        Non-negative, finite abundances; rows are samples, columns are taxa. Labels are
        taken from the index and columns (converted to strings); arrays get ``s1..`` and
        ``t1..``. The input is copied, never modified.
    samples : DataFrame, optional
        Sample information indexed by sample label (treatment, site, time, effort...).
        Matched to the counts by label; a label in one table and not the other is an error.
    taxa : DataFrame, optional
        Taxon information indexed by taxon label (group, trait...).
    effort : str or array_like, optional
        Sampling effort per sample (trap nights, volume filtered, reads): the name of a
        column of ``samples`` or one positive value per sample.
    empty : {'error', 'drop', 'keep'}, default 'error'
        What to do with samples whose total is 0 and taxa never observed. ``'drop'``
        removes them and records them in :attr:`dropped`; ``'keep'`` keeps them (measures
        that are undefined for them will say so).
    origin : Origin, optional
        Where the cells came from (set by the readers, used in error messages).

    Raises
    ------
    InputError
        A cell is not a finite number >= 0, labels repeat or are blank, the sample or taxon
        tables do not list the same labels, the effort is not positive, an empty sample or
        taxon is found under ``empty='error'``, or fewer than 2 samples remain.

    Examples
    --------
    >>> tab = CommunityTable([[3, 0, 1], [1, 1, 0]])
    >>> tab.totals.tolist()
    [4.0, 2.0]
    >>> tab.profiles.iloc[0].round(2).tolist()
    [0.75, 0.0, 0.25]
    """

    def __init__(self, counts, samples=None, taxa=None, *, effort=None, empty: str = "error",
                 origin: Origin | None = None):
        if empty not in EMPTY_POLICIES:
            raise InputError(f"`empty` must be one of {list(EMPTY_POLICIES)}; got {empty!r}.")
        origin = origin or Origin()
        df = self._as_frame(counts)
        sample_labels = _labels(df.index, "sample", origin)
        taxon_labels = _labels(df.columns, "taxon", origin)
        df = df.set_axis(sample_labels, axis=0).set_axis(taxon_labels, axis=1)
        if origin.row_numbers == {} and origin.column_numbers == {}:
            origin = Origin(file=origin.file, sheet=origin.sheet, rows="samples",
                            row_numbers={s: i + 1 for i, s in enumerate(sample_labels)},
                            column_numbers={t: j for j, t in enumerate(taxon_labels)})
        values = _numeric_values(df, origin)
        _check_values(values, sample_labels, taxon_labels, origin)

        sample_info = _align(samples, sample_labels, "sample", origin, "samples")
        taxon_info = _align(taxa, taxon_labels, "taxon", origin, "taxa")
        effort_values, effort_name = self._effort(effort, sample_info, sample_labels, origin)

        dropped_samples: list[str] = []
        dropped_taxa: list[str] = []
        if empty != "keep":
            row_zero = values.sum(axis=1) == 0
            col_zero = values.sum(axis=0) == 0
            if empty == "error" and row_zero.any():
                bad = sample_labels[row_zero]
                raise InputError(
                    f"{len(bad)} sample(s) have a total of 0: {_listing(bad)}.",
                    location=origin.label(bad[0], "samples"),
                    hint="Remove them, or load with empty='drop' (they are then listed in "
                         "table.dropped).")
            if empty == "error" and col_zero.any():
                bad = taxon_labels[col_zero]
                raise InputError(
                    f"{len(bad)} taxon/taxa are never observed (all counts 0): {_listing(bad)}.",
                    location=origin.label(bad[0], "taxa"),
                    hint="Remove them, or load with empty='drop' (they are then listed in "
                         "table.dropped).")
            if row_zero.any() or col_zero.any():
                dropped_samples = list(sample_labels[row_zero])
                keep_r = ~row_zero
                # taxa seen only in dropped samples become empty too
                col_zero = values[keep_r].sum(axis=0) == 0
                dropped_taxa = list(taxon_labels[col_zero])
                keep_c = ~col_zero
                values = values[keep_r][:, keep_c]
                sample_labels = sample_labels[keep_r]
                taxon_labels = taxon_labels[keep_c]
                sample_info = sample_info.loc[list(sample_labels)]
                taxon_info = taxon_info.loc[list(taxon_labels)]
                if effort_values is not None:
                    effort_values = effort_values[keep_r]
        if values.shape[0] < 2:
            raise InputError(
                f"the table has {values.shape[0]} sample(s); comparing samples needs at least 2"
                + (f" ({len(dropped_samples)} empty sample(s) were dropped)" if dropped_samples
                   else "") + ".",
                location=Location(file=origin.file),
                hint="Check that samples are rows (or pass rows='taxa' to the reader).")
        if values.shape[1] < 1:
            raise InputError("the table has no taxa with a count above 0.",
                             location=Location(file=origin.file))

        values = np.ascontiguousarray(values)
        values.setflags(write=False)
        self._values = values
        self._sample_labels = pd.Index(sample_labels, name="sample", dtype=object)
        self._taxon_labels = pd.Index(taxon_labels, name="taxon", dtype=object)
        sample_info.index = self._sample_labels
        taxon_info.index = self._taxon_labels
        self._samples = sample_info
        self._taxa = taxon_info
        if effort_values is not None:
            effort_values = effort_values.copy()
            effort_values.setflags(write=False)
        self._effort_values = effort_values
        self._effort_name = effort_name
        self._dropped = {"samples": tuple(dropped_samples), "taxa": tuple(dropped_taxa)}
        self._origin = origin
        self._notes: tuple[str, ...] = ()
        self._cache: dict = {}

    # ------------------------------------------------------------------ construction helpers
    @staticmethod
    def _as_frame(counts) -> pd.DataFrame:
        if isinstance(counts, CommunityTable):
            return counts.counts
        if isinstance(counts, pd.DataFrame):
            return counts.copy()
        try:
            arr = np.asarray(counts)
        except (ValueError, TypeError):  # ragged lists and the like
            raise InputError("counts could not be read as a table (rows of different "
                             "lengths, or cells that are not single values).",
                             hint="Give a DataFrame or a 2-D array of numbers, one row per "
                                  "sample.") from None
        if arr.ndim != 2:
            raise InputError(f"counts must be 2-dimensional (samples x taxa); got "
                             f"{arr.ndim} dimension(s) with shape {arr.shape}.")
        return pd.DataFrame(arr, index=[f"s{i + 1}" for i in range(arr.shape[0])],
                            columns=[f"t{j + 1}" for j in range(arr.shape[1])])

    @staticmethod
    def _effort(effort, info: pd.DataFrame, labels: pd.Index, origin: Origin):
        if effort is None:
            return None, None
        return per_sample_values(
            effort, info, labels, origin, role="effort", noun="sampling effort",
            hint="Effort (trap nights, volume, reads...) divides the totals; it cannot be "
                 "zero, negative or missing.")

    # ------------------------------------------------------------------ views
    @property
    def values(self) -> np.ndarray:
        """Counts as a read-only float64 array, shape (n_samples, n_taxa)."""
        return self._values

    @property
    def counts(self) -> pd.DataFrame:
        """Counts as a DataFrame (a copy: editing it never changes the table)."""
        return pd.DataFrame(self._values.copy(), index=self._sample_labels.copy(),
                            columns=self._taxon_labels.copy())

    @property
    def samples(self) -> pd.DataFrame:
        """Sample information, one row per sample in table order (a copy)."""
        return self._samples.copy()

    @property
    def taxa(self) -> pd.DataFrame:
        """Taxon information, one row per taxon in table order (a copy)."""
        return self._taxa.copy()

    @property
    def sample_labels(self) -> pd.Index:
        return self._sample_labels

    @property
    def taxon_labels(self) -> pd.Index:
        return self._taxon_labels

    @property
    def n_samples(self) -> int:
        return self._values.shape[0]

    @property
    def n_taxa(self) -> int:
        return self._values.shape[1]

    @property
    def shape(self) -> tuple[int, int]:
        return self._values.shape

    @property
    def totals(self) -> pd.Series:
        """Sample totals r_i = sum_j x_ij: each sample's *size*."""
        if "totals" not in self._cache:
            t = self._values.sum(axis=1)
            t.setflags(write=False)
            self._cache["totals"] = t
        return pd.Series(self._cache["totals"].copy(), index=self._sample_labels, name="total")

    @property
    def profiles(self) -> pd.DataFrame:
        """Relative abundances a_ij = x_ij / r_i: each sample's *shape* (rows sum to 1)."""
        t = self._values.sum(axis=1, keepdims=True)
        with np.errstate(invalid="ignore", divide="ignore"):
            prof = np.where(t > 0, self._values / np.where(t > 0, t, 1.0), 0.0)
        return pd.DataFrame(prof, index=self._sample_labels.copy(),
                            columns=self._taxon_labels.copy())

    @property
    def effort(self) -> pd.Series | None:
        """Sampling effort per sample, or None when the table has none."""
        if self._effort_values is None:
            return None
        return pd.Series(self._effort_values.copy(), index=self._sample_labels,
                         name=self._effort_name)

    @property
    def effort_name(self) -> str | None:
        return self._effort_name

    @property
    def dropped(self) -> dict[str, tuple[str, ...]]:
        """Samples and taxa removed by the ``empty='drop'`` policy (or by :meth:`subset`)."""
        return {k: tuple(v) for k, v in self._dropped.items()}

    @property
    def origin(self) -> Origin:
        return self._origin

    @property
    def notes(self) -> tuple[str, ...]:
        """What the reader decided on the user's behalf (orientation, summed duplicates...)."""
        return self._notes

    @property
    def is_integer(self) -> bool:
        """True when every value is a whole number (true counts, not biomass or cover)."""
        if "is_integer" not in self._cache:
            v = self._values
            self._cache["is_integer"] = bool(np.all(v == np.round(v)))
        return self._cache["is_integer"]

    @property
    def fingerprint(self) -> str:
        """A short hash of values, labels, sample information and effort (for caches)."""
        if "fingerprint" not in self._cache:
            h = hashlib.sha256()
            h.update(np.ascontiguousarray(self._values).tobytes())
            h.update("\x1f".join(self._sample_labels).encode())
            h.update("\x1e".join(self._taxon_labels).encode())
            h.update(pd.util.hash_pandas_object(self._samples.astype(str), index=True)
                     .to_numpy().tobytes())
            if self._effort_values is not None:
                h.update(self._effort_values.tobytes())
            self._cache["fingerprint"] = h.hexdigest()[:16]
        return self._cache["fingerprint"]

    # ------------------------------------------------------------------ design access
    def group(self, column: str, *, min_levels: int = 1) -> pd.Series:
        """A sample-table column as group labels (strings), checked for use as a factor.

        Raises DesignError naming the column when it is unknown, has missing values or has
        fewer than ``min_levels`` levels.
        """
        if isinstance(column, pd.Series):
            s = column.copy()
            s.index = [str(i) for i in s.index]
            if set(s.index) != set(self._sample_labels):
                raise DesignError("the group labels do not match the table's samples.")
            s = s.loc[list(self._sample_labels)]
            name = s.name or "group"
        else:
            if column not in self._samples.columns:
                raise DesignError(
                    f"column {column!r} is not in the sample table; columns are: "
                    f"{_listing(self._samples.columns, 20) or '(none)'}.",
                    location=Location(column=repr(column)),
                    hint="Load sample information with samples=... or pick one of those.")
            s, name = self._samples[column], column
        missing = s.isna()
        if missing.any():
            bad = list(s.index[missing])
            raise DesignError(f"column {name!r} has missing values for sample(s) "
                              f"{_listing(bad)}.", location=Location(column=repr(name)),
                              hint="Fill them in, or take a subset without those samples.")
        out = s.astype(str)
        out.index = self._sample_labels
        out.name = name
        n_levels = out.nunique()
        if n_levels < min_levels:
            raise DesignError(f"column {name!r} has {n_levels} level(s) "
                              f"({_listing(out.unique())}); this needs at least {min_levels}.",
                              location=Location(column=repr(name)),
                              hint="Pick a column that splits the samples into groups.")
        return out

    def totals_by(self, group, *, per_effort: bool = False) -> pd.DataFrame:
        """Sample totals summarised per group: n, mean, geometric mean, median, min, max.

        With ``per_effort=True`` the totals are divided by the sampling effort first.
        """
        g = self.group(group)
        t = self.totals
        if per_effort:
            if self._effort_values is None:
                raise DesignError("the table has no effort column; load it with effort=...")
            t = t / self._effort_values
        frame = pd.DataFrame({"total": t.to_numpy(), "group": g.to_numpy()})
        out = frame.groupby("group", sort=False)["total"].agg(
            n="count", mean="mean",
            geometric_mean=lambda x: float(np.exp(np.mean(np.log(x)))) if (x > 0).all()
            else float("nan"),
            median="median", min="min", max="max")
        out.index.name = g.name
        return out

    def summary(self) -> pd.Series:
        """Key facts about the table, as a labelled Series."""
        v = self._values
        t = v.sum(axis=1)
        occ = (v > 0).sum(axis=0)
        def num(x):            # whole numbers as int, others to 4 significant digits
            x = float(x)
            return int(x) if x.is_integer() and abs(x) < 2**53 else float(f"{x:.4g}")
        facts = {
            "samples": self.n_samples,
            "taxa": self.n_taxa,
            "grand total": num(v.sum()),
            "whole-number counts": self.is_integer,
            "sample total, min": num(t.min()),
            "sample total, median": num(np.median(t)),
            "sample total, max": num(t.max()),
            "max/min total ratio": num(t.max() / t.min()) if t.min() > 0 else float("inf"),
            "zero cells (%)": round(float(100.0 * np.mean(v == 0)), 1),
            "taxa in one sample only": int((occ == 1).sum()),
            "samples dropped (empty)": len(self._dropped["samples"]),
            "taxa dropped (empty)": len(self._dropped["taxa"]),
            "sample information columns": ", ".join(map(str, self._samples.columns)) or "(none)",
            "effort column": self._effort_name or "(none)",
        }
        if self._effort_values is not None:
            facts["effort, min"] = num(self._effort_values.min())
            facts["effort, max"] = num(self._effort_values.max())
        if self._origin.file:
            facts["file"] = self._origin.file
        return pd.Series(facts, name="table", dtype=object)

    # ------------------------------------------------------------------ subsetting
    def subset(self, samples=None, taxa=None, *, empty: str = "drop") -> "CommunityTable":
        """A new table with some samples and/or taxa.

        Parameters
        ----------
        samples, taxa : list of labels, boolean mask, or callable, optional
            Which to keep. A callable receives the sample (or taxon) information table and
            returns a boolean mask, e.g. ``tab.subset(lambda s: s.week == "w4")``.
        empty : {'drop', 'error', 'keep'}, default 'drop'
            Policy for samples or taxa left empty by the subset (taxa seen only in removed
            samples are the usual case); what is dropped is recorded in :attr:`dropped`.
        """
        rows = self._select(samples, self._sample_labels, self._samples, "sample")
        cols = self._select(taxa, self._taxon_labels, self._taxa, "taxon")
        counts = pd.DataFrame(self._values[np.ix_(rows, cols)],
                              index=self._sample_labels[rows], columns=self._taxon_labels[cols])
        effort = None if self._effort_values is None else self._effort_values[rows]
        out = CommunityTable(counts, self._samples.iloc[rows], self._taxa.iloc[cols],
                             effort=None if effort is None else pd.Series(
                                 effort, index=self._sample_labels[rows],
                                 name=self._effort_name),
                             empty=empty, origin=self._origin)
        prev = self._dropped
        out._dropped = {"samples": tuple(prev["samples"]) + out._dropped["samples"],
                        "taxa": tuple(prev["taxa"]) + out._dropped["taxa"]}
        return out

    @staticmethod
    def _select(which, labels: pd.Index, info: pd.DataFrame, what: str) -> np.ndarray:
        if which is None:
            return np.arange(len(labels))
        if callable(which):
            which = which(info.copy())
        if isinstance(which, (str, bytes)):
            which = [which]
        arr = np.asarray(which)
        if arr.dtype == bool:
            if arr.shape != (len(labels),):
                raise InputError(f"{what} mask has {arr.size} values for {len(labels)} {what}s.")
            idx = np.flatnonzero(arr)
        else:
            pos = {x: i for i, x in enumerate(labels)}
            wanted = [str(x) for x in arr.ravel()]
            unknown = [x for x in wanted if x not in pos]
            if unknown:
                raise InputError(f"unknown {what} label(s): {_listing(unknown)}.")
            idx = np.array([pos[x] for x in wanted], dtype=int)
        if len(idx) == 0:
            raise InputError(f"the subset keeps no {what}s.")
        return idx

    # ------------------------------------------------------------------ display
    def __repr__(self) -> str:
        src = f" from {self._origin.file!r}" if self._origin.file else ""
        eff = f", effort={self._effort_name!r}" if self._effort_name else ""
        return (f"CommunityTable({self.n_samples} samples x {self.n_taxa} taxa{src}; "
                f"sample information: {list(self._samples.columns)}{eff})")

    def _repr_html_(self) -> str:
        head = self.counts.iloc[:8, :10].to_html(float_format="{:g}".format)
        facts = self.summary().to_frame("value").to_html()
        return (f"<div><p><b>CommunityTable</b>: {self.n_samples} samples &times; "
                f"{self.n_taxa} taxa</p>{facts}<p>First rows and columns:</p>{head}</div>")

    def __len__(self) -> int:
        return self.n_samples


def as_table(data, samples=None, *, name: str = "table") -> CommunityTable:
    """The funnel: a CommunityTable from a CommunityTable, DataFrame or 2-D array."""
    if isinstance(data, CommunityTable):
        if samples is not None:
            raise InputError(f"`{name}` already carries its sample information; pass the "
                             "CommunityTable alone.")
        return data
    return CommunityTable(data, samples)
