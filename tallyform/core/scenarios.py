"""The two invented demo scenarios (synthetic data, no real taxa, places or people).

``mesocosm``
    Benthic invertebrates in 15 outdoor tanks: 3 treatments (control, nutrient_low,
    nutrient_high) x 5 tank blocks, each tank sampled in 4 weeks (60 samples, 36 invented
    morphotypes in four feeding groups). By construction ``nutrient_low`` *lowers total
    abundance* (to about 45 %) without changing composition, and ``nutrient_high`` *changes
    composition* (grazers and collectors up, shredders and predators down) with about the
    same totals.

``moths``
    Light-trap catches of moths at 12 sites along a land-use gradient (4 habitat classes),
    each visited in 4 months, trapping for 1-5 nights (48 samples, 60 invented
    morphospecies). Catches per night fall and composition shifts with land use, and raw
    totals are partly effort: the ``trap_nights`` column says how many nights each trap ran.
    The counts file has taxa as rows (a common export layout).

``soil``
    Amplicon-like read counts of 200 invented bacterial sequence variants in 24 soil cores from
    two land uses (forest, pasture; 4 sites each, 3 cores per site). By construction pasture
    soil holds *fewer* bacteria (about 0.45 times the forest load) with a shifted composition,
    but the pasture libraries were mostly sequenced in a deeper run (about 2.5 times the
    reads): read totals say the opposite of the truth. Each core has a qPCR load (16S copies
    per g of soil, counted in the spiked extract) and a synthetic spike-in sequence added in
    a known amount per g (``spike_in`` taxon), so the loads can be supplied two ways.
    The counts file has taxa (sequence variants) as rows.

The files in ``demo_data/`` are written by :func:`write_demo_data` from a fixed seed; the
test suite regenerates them and compares.
"""
from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputError
from .simulate import lognormal_profile, simulate_community
from .table import CommunityTable

__all__ = ["demo", "demo_names", "demo_dir", "build_scenario", "write_demo_data"]

SCENARIOS = {
    "mesocosm": "Nutrient-addition mesocosm: benthic invertebrate counts, 3 treatments x "
                "4 weeks x 5 tank blocks (synthetic).",
    "moths": "Light-trap moth survey along a land-use gradient with varying trap nights "
             "(synthetic).",
    "soil": "Soil bacteria of two land uses: amplicon read counts with a sequencing-depth "
            "batch effect, qPCR loads and a spike-in (synthetic).",
}
DEMO_LABEL = "bundled synthetic demo"
_SEED = {"mesocosm": 20261201, "moths": 20261202, "soil": 20261203}
SOIL_LOAD, SOIL_SPIKE = "qpcr_copies_per_g", "spike_in"


def demo_names() -> list[str]:
    return list(SCENARIOS)


def demo_dir() -> Path:
    """Folder holding the bundled demo CSVs (installed package or source checkout)."""
    pkg = Path(__file__).resolve().parent.parent
    for cand in (pkg / "demo_data", pkg.parent / "demo_data"):
        if (cand / "mesocosm_counts.csv").is_file():
            return cand
    raise InputError("the bundled demo data were not found (looked in "
                     f"{pkg / 'demo_data'} and {pkg.parent / 'demo_data'}).",
                     hint="Reinstall tallyform, or regenerate them with "
                          "`python -m tallyform.core.scenarios DIR`.")


def demo(name: str = "mesocosm") -> CommunityTable:
    """Load a bundled, synthetic demo scenario as a CommunityTable.

    Parameters
    ----------
    name : {'mesocosm', 'moths', 'soil'}
        ``'soil'`` is read as relative data (reads) with the qPCR load as each core's size,
        the spike-in taxon left out (``abundance='relative', load='qpcr_copies_per_g'``,
        then ``subset``); read ``soil_counts.csv`` yourself for other readings.

    Examples
    --------
    >>> tab = demo("mesocosm")
    >>> tab.shape
    (60, 36)
    """
    from .io import read_counts
    if name not in SCENARIOS:
        raise InputError(f"unknown demo {name!r}; choose one of {demo_names()}.")
    d = demo_dir()
    taxa = pd.read_csv(d / f"{name}_taxa.csv", index_col=0, dtype=str)
    if name == "mesocosm":
        tab = read_counts(d / "mesocosm_counts.csv", d / "mesocosm_samples.csv", taxa=taxa)
    elif name == "soil":
        # the qPCR counted every 16S copy of the spiked extract; leaving out the spike-in
        # taxon keeps every other taxon's absolute abundance (see CommunityTable.subset)
        tab = read_counts(d / "soil_counts.csv", d / "soil_samples.csv", taxa=taxa,
                          abundance="relative", load=SOIL_LOAD)
        notes = tab.notes
        tab = tab.subset(taxa=lambda t: t.index != SOIL_SPIKE)
        tab._notes = notes + (f"spike-in taxon {SOIL_SPIKE!r} left out of the profiles: the "
                              "loads are the qPCR loads less the spike-in's copies",)
    else:
        tab = read_counts(d / "moths_counts.csv", d / "moths_samples.csv", taxa=taxa,
                          effort="trap_nights")
    # name the bundled file, not this machine's install path (it ends up in shared outputs)
    tab._origin = dataclasses.replace(tab.origin, file=f"{name}_counts.csv ({DEMO_LABEL})")
    tab._notes = tuple(n.replace(str(d / f"{name}_counts.csv"), f"{name}_counts.csv")
                       for n in tab.notes)
    return tab


# ---------------------------------------------------------------------------- generators
def _mesocosm() -> tuple[CommunityTable, pd.DataFrame]:
    rng = np.random.default_rng(_SEED["mesocosm"])
    treatments = ["control", "nutrient_low", "nutrient_high"]
    rows = []
    tank = 0
    for b in range(1, 6):
        for tr in treatments:
            tank += 1
            for w in range(1, 5):
                rows.append({"sample": f"T{tank:02d}_w{w}", "treatment": tr, "week": f"w{w}",
                             "day": 7 * w, "tank": f"T{tank:02d}", "tank_block": f"b{b}"})
    design = pd.DataFrame(rows).set_index("sample")
    groups = ["grazer"] * 10 + ["collector"] * 10 + ["shredder"] * 8 + ["predator"] * 8
    labels = [f"{g}_{k:02d}" for g, k in zip(groups, _running(groups))]
    base = lognormal_profile(len(labels), sd=1.3, rng=rng)
    base = rng.permutation(base)          # dominance not tied to feeding group
    fold = {"grazer": 2.6, "collector": 1.7, "shredder": 0.35, "predator": 0.5}
    high = {t: fold[g] for t, g in zip(labels, groups)}
    late = {t: 1.5 for t, g in zip(labels, groups) if g == "collector"}
    tab = simulate_community(
        design, mean_total=320.0, base_profile=base, taxa=labels,
        size_effects={"treatment": {"nutrient_low": 0.45},
                      "week": {"w2": 1.1, "w3": 1.2, "w4": 1.25}},
        shape_effects={"treatment": {"nutrient_high": high}, "week": {"w4": late}},
        random_effects={"tank_block": (0.10, 0.05), "tank": (0.15, 0.08)},
        total_spread=0.2, profile_noise=0.015, rng=rng)
    taxa = pd.DataFrame({"feeding_group": groups}, index=pd.Index(labels, name="taxon"))
    return tab, taxa


def _moths() -> tuple[CommunityTable, pd.DataFrame]:
    rng = np.random.default_rng(_SEED["moths"])
    habitats = ["woodland", "mosaic", "pasture", "arable"]
    months = ["may", "jun", "jul", "aug"]
    rows = []
    for s in range(12):
        hab = habitats[s // 3]
        land_use = round(float(np.clip((s // 3) / 3 + rng.normal(0, 0.05), 0, 1)), 2)
        for m in months:
            rows.append({"sample": f"S{s + 1:02d}_{m}", "site": f"S{s + 1:02d}",
                         "habitat": hab, "land_use": land_use, "month": m,
                         "trap_nights": int(rng.integers(1, 6))})
    design = pd.DataFrame(rows).set_index("sample")
    hosts = (["woody"] * 22 + ["herb"] * 18 + ["grass"] * 12 + ["lichen"] * 8)
    labels = [f"moth_ms{j + 1:02d}" for j in range(len(hosts))]
    base = rng.permutation(lognormal_profile(len(labels), sd=1.6, rng=rng))
    per_unit = {"woody": 0.25, "herb": 1.0, "grass": 4.0, "lichen": 0.4}
    tab = simulate_community(
        design, mean_total=60.0, base_profile=base, taxa=labels, effort="trap_nights",
        size_effects={"land_use": 0.35, "month": {"jun": 1.4, "jul": 1.8, "aug": 1.3}},
        shape_effects={"land_use": {t: per_unit[h] for t, h in zip(labels, hosts)}},
        random_effects={"site": (0.2, 0.15)}, total_spread=0.25, profile_noise=0.02,
        rng=rng)
    taxa = pd.DataFrame({"larval_host": hosts}, index=pd.Index(labels, name="taxon"))
    return tab, taxa


def _soil() -> tuple[CommunityTable, pd.DataFrame]:
    """Reads of 200 sequence variants + a spike-in in 24 cores; the truth is in the module
    notes. Absolute abundance = load x profile; reads = multinomial(depth, shares of the
    spiked extract)."""
    rng = np.random.default_rng(_SEED["soil"])
    rows = []
    for use, prefix in (("forest", "F"), ("pasture", "P")):
        for s in range(1, 5):
            for c in range(1, 4):
                rows.append({"sample": f"{prefix}{s}_c{c}", "land_use": use,
                             "site": f"{prefix}{s}"})
    design = pd.DataFrame(rows).set_index("sample")
    n, p = len(design), 200
    pasture = (design["land_use"] == "pasture").to_numpy()
    site_codes = pd.factorize(design["site"])[0]
    # true loads: 16S copies per g of soil (pasture about 0.45 x forest), site + core noise
    site_eff = rng.normal(0.0, 0.15, site_codes.max() + 1)[site_codes]
    load = 2e9 * np.where(pasture, 0.45, 1.0) * np.exp(site_eff + rng.normal(0.0, 0.3, n))
    # composition: one base profile, a shift of six invented clades in pasture soil
    clades = np.repeat([f"clade_{c}" for c in "ABCDEFGH"], 25)
    base = rng.permutation(lognormal_profile(p, sd=1.8, rng=rng))
    fold = dict(zip([f"clade_{c}" for c in "ABCDEFGH"], [3.0, 2.0, 1.0, 1.0, 1.0, 1.0, 0.4,
                                                         0.25]))
    shift = np.array([fold[c] for c in clades])
    share = base[None, :] * np.where(pasture[:, None], shift[None, :], 1.0)
    site_noise = rng.normal(0.0, 0.3, (site_codes.max() + 1, p))[site_codes]
    share = share * np.exp(site_noise + rng.normal(0.0, 0.6, (n, p)))
    share /= share.sum(axis=1, keepdims=True)
    # extraction: 0.2-0.3 g of soil, 2e7 spike-in copies added to each extract
    soil_g = np.round(rng.uniform(0.20, 0.30, n), 3)
    spike_per_g = 2e7 / soil_g
    qpcr = (load + spike_per_g) * np.exp(rng.normal(0.0, 0.1, n))   # 16S copies, spike too
    # sequencing: run 2 (10 pasture cores, 2 forest cores) about 2.5 x deeper than run 1
    run2 = pasture.copy()
    run2[np.flatnonzero(pasture)[:2]] = False
    run2[np.flatnonzero(~pasture)[:2]] = True
    depth = np.rint(25000 * np.where(run2, 2.5, 1.0) * np.exp(rng.normal(0, 0.25, n)))
    extract = np.column_stack([share * load[:, None], spike_per_g])
    reads = rng.multinomial(depth.astype(np.int64), extract / extract.sum(axis=1)[:, None])
    labels = [f"asv_{j + 1:03d}" for j in range(p)] + [SOIL_SPIKE]
    info = design.assign(run=np.where(run2, "run2", "run1"), soil_g=soil_g,
                         qpcr_copies_per_g=np.round(qpcr, -4),
                         spike_copies_per_g=np.round(spike_per_g, -2))
    tab = CommunityTable(pd.DataFrame(reads.astype(float), index=design.index, columns=labels),
                         info, empty="keep")
    taxa = pd.DataFrame({"clade": list(clades) + ["spike-in (synthetic, added)"]},
                        index=pd.Index(labels, name="taxon"))
    return tab, taxa


def _running(groups):
    seen: dict[str, int] = {}
    for g in groups:
        seen[g] = seen.get(g, 0) + 1
        yield seen[g]


def build_scenario(name: str) -> tuple[CommunityTable, pd.DataFrame]:
    """Regenerate a demo scenario from its seed: (table, taxon information)."""
    if name == "mesocosm":
        return _mesocosm()
    if name == "moths":
        return _moths()
    if name == "soil":
        return _soil()
    raise InputError(f"unknown demo {name!r}; choose one of {demo_names()}.")


def write_demo_data(folder) -> list[Path]:
    """Write every scenario's CSV files (counts, samples, taxa) into ``folder``."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    written = []
    for name in SCENARIOS:
        tab, taxa = build_scenario(name)
        # a survey lists only what it caught: drop taxa that no sample holds
        tab = tab.subset(taxa=tab.values.sum(axis=0) > 0, empty="drop")
        taxa = taxa.loc[list(tab.taxon_labels)]
        counts = tab.counts.astype(np.int64)
        if name in ("moths", "soil"):           # exported with taxa as rows
            counts = counts.T
            counts.index.name = "taxon" if name == "moths" else "asv"
        else:
            counts.index.name = "sample"
        paths = {"counts": counts, "samples": tab.samples.rename_axis("sample"),
                 "taxa": taxa}
        for kind, frame in paths.items():
            p = folder / f"{name}_{kind}.csv"
            frame.to_csv(p, lineterminator="\n")
            written.append(p)
    return written


if __name__ == "__main__":  # python -m tallyform.core.scenarios DIR
    import sys
    for p in write_demo_data(sys.argv[1] if len(sys.argv) > 1 else "demo_data"):
        print(p)
