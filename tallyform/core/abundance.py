"""What the totals of a table mean: absolute abundances, or relative data with loads.

Counts of individuals or biomass are *absolute*: a sample's total is its size. Sequencing reads
(and percentages) are *relative*: the total is set by the laboratory (sequencing depth), so
comparing totals between groups compares library preparation, not communities. Size becomes
meaningful again when each sample's absolute abundance (its *load*) is known:

* measured: qPCR copies, flow-cytometry cell counts, biomass per sample (``load='column'``);
  absolute abundance = profile x load (quantitative profiling, Vandeputte et al. 2017);
* from a spike-in: a taxon added in a known amount ``added_i`` before extraction, read
  ``s_i`` times among ``N_i`` reads: load_i = added_i x (N_i - s_i) / s_i (Stammler et al.
  2016), since the reads of the community and of the spike-in are drawn in the proportions of
  their amounts. The spike-in taxon is then removed from the profiles.

References
----------
Warton DI, Wright ST, Wang Y (2012) Distance-based multivariate analyses confound location and
dispersion effects. Methods Ecol Evol 3:89-101.
Stammler F, Glasner J, Hiergeist A, et al. (2016) Adjusting microbiome profiles for
differences in microbial load by spike-in bacteria. Microbiome 4:28.
Vandeputte D, Kathagen G, D'hoe K, et al. (2017) Quantitative microbiome profiling links gut
community variation to microbial load. Nature 551:507-511.
"""
from __future__ import annotations

import numpy as np

from .errors import InputError, Location
from .origin import listing
from .table_checks import per_sample_values

__all__ = ["ABUNDANCE", "require_absolute", "counting_basis", "totals_meaning",
           "sequencing_hint"]

ABUNDANCE = ("absolute", "relative")
FEW_SPIKE_READS = 20          # below this, a spike-in load has a relative SE above ~22 %
DEPTH_RATIO_NOTE = 3.0        # depths more than 3-fold apart get a note

_LOAD_HINT = ("Give each sample's absolute abundance: load='column' (qPCR copies, cell counts "
              "or biomass per sample, from the sample table) or spike_in={'taxon': name, "
              "'added': 'column'} (a taxon added in a known amount). Composition and spread "
              "(permanova or dispersion_test with a size-free measure such as chi_square, "
              "hellinger or aitchison) need no loads.")


def check_abundance(abundance, load, spike_in) -> None:
    """The combination of ``abundance``, ``load`` and ``spike_in`` is one we can honour."""
    if abundance not in ABUNDANCE:
        raise InputError(f"`abundance` must be one of {list(ABUNDANCE)}; got {abundance!r}.",
                         hint="'absolute' for counts of individuals or biomass (totals are "
                              "sizes), 'relative' for sequencing reads or percentages.")
    given = [k for k, v in (("load", load), ("spike_in", spike_in)) if v is not None]
    if abundance == "absolute" and given:
        raise InputError(
            f"`{given[0]}=` gives each sample's absolute abundance, which is only needed for "
            "relative data; this table is abundance='absolute', so its own totals are its "
            "sizes and the load would be ignored.",
            hint=f"Pass abundance='relative' to read the counts as relative (reads) and take "
                 f"sizes from the {'load' if given[0] == 'load' else 'spike-in'}, or leave "
                 f"out {given[0]}=.")
    if len(given) == 2:
        raise InputError("give either `load=` (measured loads) or `spike_in=` (loads from a "
                         "spike-in taxon), not both: each defines every sample's size.",
                         hint="Keep the one you trust; the other can be compared afterwards "
                              "(tab.load of two tables).")


def spike_in_parts(spike_in) -> tuple[str, object]:
    """(taxon label, 'added' column name or values) from the ``spike_in`` mapping."""
    if not isinstance(spike_in, dict) or set(spike_in) != {"taxon", "added"}:
        shown = sorted(spike_in) if isinstance(spike_in, dict) else type(spike_in).__name__
        raise InputError(f"`spike_in` must be a dict with the keys 'taxon' and 'added'; got "
                         f"{shown}.",
                         hint="e.g. spike_in={'taxon': 'spike', 'added': 'spike_copies'}: the "
                              "spike-in's taxon label and the sample column with the amount "
                              "added to each sample.")
    taxon = spike_in["taxon"]
    if not isinstance(taxon, str) or not taxon.strip():
        raise InputError(f"spike_in['taxon'] must be a taxon label (text); got {taxon!r}.")
    return taxon.strip(), spike_in["added"]


def split_spike_in(values, taxon_labels, taxon_info, sample_info, sample_labels, origin,
                   spike_in):
    """Remove the spike-in column from the reads: (values, taxon labels, taxon info,
    spike reads, added amounts, spike-in description)."""
    taxon, added_spec = spike_in_parts(spike_in)
    where = np.flatnonzero(np.asarray(taxon_labels) == taxon)
    if where.size == 0:
        raise InputError(f"spike-in taxon {taxon!r} is not a taxon of the counts (taxa: "
                         f"{listing(taxon_labels)}).",
                         location=Location(file=origin.file),
                         hint="Name the spike-in exactly as its column (or row) is labelled; "
                              "case and spaces count.")
    j = int(where[0])
    added, added_name = per_sample_values(
        added_spec, sample_info, sample_labels, origin, role="spike-in amount",
        noun=f"the amount of spike-in {taxon!r} added", default_name="added",
        hint="The spike-in amount (copies or cells added per sample) scales every load; it "
             "cannot be zero, negative or missing.")
    spike = values[:, j].copy()
    keep = np.ones(values.shape[1], dtype=bool)
    keep[j] = False
    return (values[:, keep], taxon_labels[keep], taxon_info.loc[list(taxon_labels[keep])],
            spike, added, {"taxon": taxon, "added": added_name})


def load_values(load, sample_info, sample_labels, origin):
    """Measured loads (one positive number per sample) and their name."""
    return per_sample_values(
        load, sample_info, sample_labels, origin, role="load", noun="the absolute load",
        hint="The load (qPCR copies, cell counts, biomass per sample) is each sample's total "
             "absolute abundance; it cannot be zero, negative or missing. Measure it again "
             "or remove the sample.")


def absolute_from_reads(reads, load, sample_labels, origin, *, spike=None, added=None,
                        spike_taxon=None, load_name=None):
    """Absolute abundances profile x load from reads, with the loads used.

    With a spike-in, load_i = added_i x (N_i - s_i) / s_i (Stammler et al. 2016), where
    N_i - s_i is the sample's reads without the spike-in (``reads`` here). Raises an
    InputError naming the sample when a sample has no spike-in reads or no other reads.
    """
    depth = reads.sum(axis=1)
    notes = []
    if spike is not None:
        zero = spike <= 0
        if zero.any():
            i = int(np.flatnonzero(zero)[0])
            raise InputError(
                f"spike-in {spike_taxon!r} has no reads in sample {sample_labels[i]!r} "
                f"({int(zero.sum())} such sample(s): {listing(sample_labels[zero])}), so its "
                "load cannot be estimated (added x other reads / spike-in reads).",
                location=origin.cell(sample_labels[i], spike_taxon),
                hint="Remove those samples from the counts, or give measured loads with "
                     "load='column' instead of spike_in=.")
        load = added * depth / spike
        few = spike < FEW_SPIKE_READS
        if few.any():
            notes.append(f"spike-in {spike_taxon!r} has fewer than {FEW_SPIKE_READS} reads in "
                         f"{int(few.sum())} sample(s) ({listing(sample_labels[few])}): their "
                         "loads are uncertain (relative error about 1/sqrt(spike-in reads)).")
    empty = depth <= 0
    if empty.any():
        i = int(np.flatnonzero(empty)[0])
        raise InputError(
            f"sample {sample_labels[i]!r} has no reads" + (" besides the spike-in"
                                                           if spike is not None else "")
            + f", so its load ({load_name}) cannot be spread over taxa ({int(empty.sum())} "
            "such sample(s)).", location=origin.label(sample_labels[i], "samples"),
            hint="Remove the sample, or load with empty='drop'.")
    values = reads / depth[:, None] * load[:, None]
    return values, np.asarray(load, dtype=np.float64), notes


def depth_note(reads: np.ndarray) -> str | None:
    """A note when sequencing depths differ widely: counting noise shrinks as depth grows, so
    groups sequenced to different depths differ in profile spread (Warton et al. 2012)."""
    depth = reads.sum(axis=1)
    depth = depth[depth > 0]
    if depth.size < 2 or depth.max() <= DEPTH_RATIO_NOTE * depth.min():
        return None
    return (f"sequencing depths range from {depth.min():,.0f} to {depth.max():,.0f} reads "
            f"({depth.max() / depth.min():.1f}-fold): counting noise falls with depth, so "
            "composition and spread tests between groups sequenced to different depths can "
            "report differences made by depth alone (Warton et al. 2012); compare the depths "
            "of the groups (tab.depth) before reading them.")


def require_absolute(table, what: str, *, counts: bool = False) -> tuple[str, ...]:
    """Refuse a size result on relative totals; say what sizes are used otherwise.

    Parameters
    ----------
    table : CommunityTable
    what : str
        The result refused, as a noun phrase ("a size test", "the audit").
    counts : bool
        The method models counts (the negative-binomial size test): loads are not counts.

    Returns
    -------
    tuple of str
        Notes to show with the result (empty for absolute tables).

    Raises
    ------
    InputError
        The table is relative (``abundance='relative'``) and has no load, or ``counts`` is
        asked of a table whose sizes are loads.
    """
    abundance = getattr(table, "abundance", "absolute")
    if abundance == "absolute":
        return ()
    if table.load is None:
        raise InputError(
            f"{what} compares sample totals, but this table holds relative abundances "
            "(abundance='relative'): its totals are sequencing depths or percentages, set in "
            "the laboratory, not by the community, so a difference in them says nothing about "
            "abundance.", hint=_LOAD_HINT)
    if counts:
        raise InputError(
            "the negative-binomial size test models counts, but the sizes of this table are "
            f"absolute loads ({table.load_name}), measurements rather than counts.",
            hint="Use method='welch', 'anova', 'kruskal' or 'permutation' (log loads).")
    return ("Relative data with loads: " + totals_meaning(table) + ".",)


def totals_meaning(table, *, short: bool = False) -> str:
    """What the table's totals are, as a phrase (``short``: a few words for a summary)."""
    abundance = getattr(table, "abundance", "absolute")
    if abundance == "absolute":
        return ("absolute abundances" if short else
                "totals are absolute abundances (counts of individuals or biomass)")
    if table.load is None:
        return ("sequencing depths (technical)" if short else
                "totals are sequencing depths or percentages (abundance='relative'): "
                "technical, so size results are refused until loads are given")
    spike = table.spike_in
    if spike is not None:
        what = f"loads from spike-in {spike['taxon']!r} (amount added: {spike['added']!r})"
        how = ", load = added x (reads - spike-in reads) / spike-in reads (Stammler et al. 2016)"
    else:
        what, how = f"absolute loads {table.load_name!r}", ""
    if short:
        return what
    return (f"totals are the {what}{how}; abundances are profile x load (Vandeputte et al. "
            "2017); the reads are kept in tab.reads")


def counting_basis(table) -> tuple[np.ndarray, np.ndarray]:
    """The counts that were sampled and the per-sample factor from them to ``values``.

    Absolute tables: (values, 1). Relative tables: (reads, load / depth) with a load, and
    (reads, 1) without. Simulations of counting noise draw counts at the sampled totals and
    multiply by the factor, so that the simulated table has the table's sizes.
    """
    if getattr(table, "abundance", "absolute") == "absolute":
        return table.values, np.ones(table.n_samples)
    reads = table.reads.to_numpy()
    if table.load is None:
        return reads, np.ones(table.n_samples)
    return reads, table.load.to_numpy() / reads.sum(axis=1)


def sequencing_hint(values: np.ndarray, is_integer) -> str | None:
    """A note when an absolute table looks like sequencing output (whole numbers, hundreds of
    taxa, thousands per sample); nothing is changed. ``is_integer()`` is asked last."""
    n_taxa = values.shape[1]
    if n_taxa < 100:
        return None
    median = float(np.median(values.sum(axis=1)))
    if median < 1000 or not is_integer():
        return None
    return (f"these look like sequencing reads ({n_taxa} taxa, a median of {median:,.0f} per "
            "sample, whole numbers): if so, the totals are sequencing depths, not abundances. "
            "Load with abundance='relative' (and load= or spike_in= to compare sizes); "
            "nothing was changed.")


def relative_summary(table) -> dict:
    """Facts for :meth:`CommunityTable.summary` on what the totals mean."""
    facts = {"abundance": table.abundance, "totals are": totals_meaning(table, short=True)}
    if table.abundance == "relative" and table.load is not None:
        depth = table.depth.to_numpy()
        facts["reads per sample, min"] = float(depth.min())
        facts["reads per sample, median"] = float(np.median(depth))
        facts["reads per sample, max"] = float(depth.max())
    if table.spike_in is not None:
        spike = table.spike_reads.to_numpy()
        facts["spike-in taxon"] = table.spike_in["taxon"]
        facts["spike-in reads, min"] = float(spike.min())
        facts["spike-in share of reads, median"] = float(np.median(
            spike / (spike + table.depth.to_numpy())))
    return facts
