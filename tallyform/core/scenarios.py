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
}
DEMO_LABEL = "bundled synthetic demo"
_SEED = {"mesocosm": 20261201, "moths": 20261202}


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
    name : {'mesocosm', 'moths'}

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
        if name == "moths":                     # exported with taxa as rows
            counts = counts.T
            counts.index.name = "taxon"
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
