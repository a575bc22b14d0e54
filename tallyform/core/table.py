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
from .origin import Origin, column_letter, listing  # noqa: F401  (re-exported)
from .abundance import (absolute_from_reads, check_abundance, depth_note, load_values,
                        relative_summary, sequencing_hint, split_spike_in)
from .table_checks import (align_to_samples, check_values, checked_labels, numeric_values, empty_policy,
                           per_sample_values)

__all__ = ["CommunityTable", "Origin", "as_table", "EMPTY_POLICIES"]

EMPTY_POLICIES = ("error", "drop", "keep")


def _frozen(a, *, copy: bool = True):
    """A contiguous read-only float64 array (a copy unless ``copy=False``); None stays None."""
    if a is None:
        return None
    a = np.array(a, dtype=np.float64, order="C") if copy else \
        np.ascontiguousarray(a, dtype=np.float64)
    a.setflags(write=False)
    return a


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
    abundance : {'absolute', 'relative'}, default 'absolute'
        What the totals mean. ``'absolute'``: counts of individuals or biomass, so a
        sample's total is its size. ``'relative'``: sequencing reads or percentages, whose
        totals are technical (sequencing depth): size results (size tests, the size fraction
        of a partition, the size side of taxon contributions, the audit) are refused unless
        a ``load`` or ``spike_in`` gives each sample's absolute abundance. Shape and spread
        analyses run as usual. Nothing is ever switched for you; a table that looks like
        sequencing output gets a note.
    load : str or array_like, optional
        With ``abundance='relative'``: each sample's absolute abundance (qPCR copies, cell
        counts, biomass per sample), a column of ``samples`` or one positive value per
        sample. The table's :attr:`values` become profile x load (Vandeputte et al. 2017)
        and :attr:`totals` the loads; the reads stay in :attr:`reads`.
    spike_in : dict, optional
        With ``abundance='relative'``: ``{'taxon': label, 'added': column}``, a taxon added
        to every sample in a known amount (column of ``samples`` or values). Each sample's
        load is added x (reads - spike-in reads) / spike-in reads (Stammler et al. 2016);
        the spike-in taxon is then removed from the taxa.

    Raises
    ------
    InputError
        A cell is not a finite number >= 0, labels repeat or are blank, the sample or taxon
        tables do not list the same labels, the effort is not positive, an empty sample or
        taxon is found under ``empty='error'``, or fewer than 2 samples remain. A load or
        spike-in amount that is zero, negative or missing, a spike-in taxon that is not in
        the counts or has no reads in a sample, ``load``/``spike_in`` with
        ``abundance='absolute'``, or both together.

    Notes
    -----
    What each view holds, by kind of table:

    ============================  ===============  ==================  ===================
    view                          absolute         relative            relative + load
    ============================  ===============  ==================  ===================
    ``values`` / ``counts``       as given         reads               profile x load
    ``totals``                    row sums         depths (technical)  loads
    ``profiles``                  values / totals  reads / depth       reads / depth
    ``reads``, ``depth``          None             reads, depth        reads, depth
    ``load``                      None             None                loads
    ============================  ===============  ==================  ===================

    Examples
    --------
    >>> tab = CommunityTable([[3, 0, 1], [1, 1, 0]])
    >>> tab.totals.tolist()
    [4.0, 2.0]
    >>> tab.profiles.iloc[0].round(2).tolist()
    [0.75, 0.0, 0.25]
    """

    def __init__(self, counts, samples=None, taxa=None, *, effort=None, empty: str = "error",
                 origin: Origin | None = None, abundance: str = "absolute", load=None,
                 spike_in: dict | None = None):
        if empty not in EMPTY_POLICIES:
            raise InputError(f"`empty` must be one of {list(EMPTY_POLICIES)}; got {empty!r}.")
        check_abundance(abundance, load, spike_in)
        origin = origin or Origin()
        df = self._as_frame(counts)
        sample_labels = checked_labels(df.index, "sample", origin)
        taxon_labels = checked_labels(df.columns, "taxon", origin)
        df = df.set_axis(sample_labels, axis=0).set_axis(taxon_labels, axis=1)
        if origin.row_numbers == {} and origin.column_numbers == {}:
            origin = Origin(file=origin.file, sheet=origin.sheet, rows="samples",
                            row_numbers={s: i + 1 for i, s in enumerate(sample_labels)},
                            column_numbers={t: j for j, t in enumerate(taxon_labels)})
        values = numeric_values(df, origin)
        check_values(values, sample_labels, taxon_labels, origin)

        sample_info = align_to_samples(samples, sample_labels, "sample", origin, "samples")
        taxon_info = align_to_samples(taxa, taxon_labels, "taxon", origin, "taxa")
        effort_values, effort_name = self._effort(effort, sample_info, sample_labels, origin)
        per_sample = {"effort": effort_values}
        spike = None
        if spike_in is not None:
            values, taxon_labels, taxon_info, per_sample["spike"], per_sample["added"], spike = \
                split_spike_in(values, taxon_labels, taxon_info, sample_info, sample_labels,
                               origin, spike_in)
        load_name = None
        if load is not None:
            per_sample["load"], load_name = load_values(load, sample_info, sample_labels,
                                                        origin)
        elif spike is not None:
            load_name = f"load from spike-in {spike['taxon']!r}"

        keep_r, keep_c, dropped_samples, dropped_taxa = empty_policy(
            values, sample_labels, taxon_labels, origin, empty)
        if dropped_samples or dropped_taxa:
            values = values[keep_r][:, keep_c]
            sample_labels, taxon_labels = sample_labels[keep_r], taxon_labels[keep_c]
            sample_info = sample_info.loc[list(sample_labels)]
            taxon_info = taxon_info.loc[list(taxon_labels)]
            per_sample = {k: (None if v is None else v[keep_r]) for k, v in per_sample.items()}
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

        notes: list[str] = []
        reads = loads = None
        if abundance == "relative":
            reads = _frozen(values, copy=False)
            notes += [n for n in [depth_note(reads)] if n]
            if load_name is not None:
                values, loads, load_notes = absolute_from_reads(
                    reads, per_sample.get("load"), sample_labels, origin,
                    spike=per_sample.get("spike"), added=per_sample.get("added"),
                    spike_taxon=None if spike is None else spike["taxon"], load_name=load_name)
                notes += load_notes
        self._values = _frozen(values, copy=False)
        self._sample_labels = pd.Index(sample_labels, name="sample", dtype=object)
        self._taxon_labels = pd.Index(taxon_labels, name="taxon", dtype=object)
        sample_info.index = self._sample_labels
        taxon_info.index = self._taxon_labels
        self._samples = sample_info
        self._taxa = taxon_info
        self._effort_values = _frozen(per_sample["effort"])
        self._effort_name = effort_name
        self._abundance = abundance
        self._reads = reads
        self._load_values = _frozen(loads)
        self._load_name = load_name
        self._spike_in = spike
        self._spike_reads = _frozen(per_sample.get("spike"))
        self._dropped = {"samples": tuple(dropped_samples), "taxa": tuple(dropped_taxa)}
        self._origin = origin
        self._cache: dict = {}
        if abundance == "absolute":
            hint = sequencing_hint(self._values, lambda: self.is_integer)
            notes += [hint] if hint else []
        self._notes: tuple[str, ...] = tuple(notes)

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
        """The abundances analyses use, as a read-only float64 array (n_samples, n_taxa).

        The counts as given, except for a relative table with loads: there, the absolute
        abundances profile x load (the reads are in :attr:`reads`).
        """
        return self._values

    @property
    def counts(self) -> pd.DataFrame:
        """:attr:`values` as a DataFrame (a copy: editing it never changes the table)."""
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
        """Sample totals r_i = sum_j x_ij: each sample's *size*.

        For a relative table with loads, the loads themselves (the absolute sizes that size
        tests use); for a relative table without loads, the sequencing depths, which size
        results refuse (see :attr:`abundance`).
        """
        if "totals" not in self._cache:
            t = (self._values.sum(axis=1) if self._load_values is None
                 else self._load_values.copy())
            t.setflags(write=False)
            self._cache["totals"] = t
        return pd.Series(self._cache["totals"].copy(), index=self._sample_labels, name="total")

    @property
    def profiles(self) -> pd.DataFrame:
        """Relative abundances a_ij = x_ij / r_i: each sample's *shape* (rows sum to 1).

        The same for every reading of the totals (from the reads in a relative table).
        """
        v = self._values if self._reads is None else self._reads
        t = v.sum(axis=1, keepdims=True)
        with np.errstate(invalid="ignore", divide="ignore"):
            prof = np.where(t > 0, v / np.where(t > 0, t, 1.0), 0.0)
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
    def abundance(self) -> str:
        """'absolute' (totals are sizes) or 'relative' (reads, percentages: totals are
        technical unless a load is given)."""
        return self._abundance

    @property
    def load(self) -> pd.Series | None:
        """Absolute abundance per sample of a relative table (measured, or from the
        spike-in), or None."""
        if self._load_values is None:
            return None
        return pd.Series(self._load_values.copy(), index=self._sample_labels,
                         name=self._load_name)

    @property
    def load_name(self) -> str | None:
        return self._load_name

    @property
    def spike_in(self) -> dict | None:
        """``{'taxon': label, 'added': column}`` of the spike-in (removed from the taxa)."""
        return None if self._spike_in is None else dict(self._spike_in)

    @property
    def spike_reads(self) -> pd.Series | None:
        """Reads of the spike-in taxon per sample, or None."""
        if self._spike_reads is None:
            return None
        return pd.Series(self._spike_reads.copy(), index=self._sample_labels,
                         name=f"{self._spike_in['taxon']} reads")

    @property
    def reads(self) -> pd.DataFrame | None:
        """The reads of a relative table as given (spike-in removed), or None for an
        absolute table. Methods that need counts (rarefaction, counting noise) use them."""
        if self._reads is None:
            return None
        return pd.DataFrame(self._reads.copy(), index=self._sample_labels.copy(),
                            columns=self._taxon_labels.copy())

    @property
    def depth(self) -> pd.Series | None:
        """Reads per sample (sequencing depth, spike-in excluded) of a relative table."""
        if self._reads is None:
            return None
        return pd.Series(self._reads.sum(axis=1), index=self._sample_labels, name="reads")

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
            if self._abundance != "absolute":
                h.update(f"{self._abundance}\x1d{self._load_name}\x1d{self._spike_in}".encode())
                if self._reads is not None and self._load_values is not None:
                    h.update(self._reads.tobytes())
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
                    f"{listing(self._samples.columns, 20) or '(none)'}.",
                    location=Location(column=repr(column)),
                    hint="Load sample information with samples=... or pick one of those.")
            s, name = self._samples[column], column
        missing = s.isna()
        if missing.any():
            bad = list(s.index[missing])
            raise DesignError(f"column {name!r} has missing values for sample(s) "
                              f"{listing(bad)}.", location=Location(column=repr(name)),
                              hint="Fill them in, or take a subset without those samples.")
        out = s.astype(str)
        out.index = self._sample_labels
        out.name = name
        n_levels = out.nunique()
        if n_levels < min_levels:
            raise DesignError(f"column {name!r} has {n_levels} level(s) "
                              f"({listing(out.unique())}); this needs at least {min_levels}.",
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
            **{k: num(x) if isinstance(x, float) else x
               for k, x in relative_summary(self).items()},
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
        labels = self._sample_labels[rows]
        source = self._values if self._reads is None else self._reads
        counts = pd.DataFrame(source[np.ix_(rows, cols)], index=labels,
                              columns=self._taxon_labels[cols])
        effort = None if self._effort_values is None else self._effort_values[rows]
        relative = {}
        if self._abundance == "relative":
            relative["abundance"] = "relative"
        if self._load_values is not None:
            # the kept taxa keep their absolute abundances: the load is their sum (samples
            # left without reads get a placeholder, then follow the empty policy)
            kept = self._values[np.ix_(rows, cols)].sum(axis=1)
            relative["load"] = pd.Series(np.where(kept > 0, kept, 1.0), index=labels,
                                         name=self._load_name)
        out = CommunityTable(counts, self._samples.iloc[rows], self._taxa.iloc[cols],
                             effort=None if effort is None else pd.Series(
                                 effort, index=labels, name=self._effort_name),
                             empty=empty, origin=self._origin, **relative)
        if self._spike_in is not None:
            at = {s: i for i, s in enumerate(self._sample_labels)}
            out._spike_in = dict(self._spike_in)
            out._spike_reads = _frozen(self._spike_reads[[at[s] for s in out.sample_labels]])
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
                raise InputError(f"unknown {what} label(s): {listing(unknown)}.")
            idx = np.array([pos[x] for x in wanted], dtype=int)
        if len(idx) == 0:
            raise InputError(f"the subset keeps no {what}s.")
        return idx

    # ------------------------------------------------------------------ display
    def __repr__(self) -> str:
        src = f" from {self._origin.file!r}" if self._origin.file else ""
        eff = f", effort={self._effort_name!r}" if self._effort_name else ""
        if self._abundance != "absolute":
            eff += f", abundance={self._abundance!r}"
            eff += (f", spike_in={self._spike_in!r}" if self._spike_in is not None else
                    f", load={self._load_name!r}" if self._load_name else "")
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
