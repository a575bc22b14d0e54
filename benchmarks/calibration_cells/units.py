"""Design-aware PERMANOVA (sampling units, error strata, random crossed factors): level under
a true null of the tested term, with unit random effects, for Euclidean data and for counts
with a size-free measure; reference rows show the same data analysed without the units.
All data are synthetic.

Designs: repeated visits of tanks (balanced; unbalanced, with missing visits and unequal
numbers of tanks per treatment), a split plot in blocks, sites nested in habitats with
unequal visits, plots nested in sites (two unit levels), before/after x control/impact with
sites as units, a fixed treatment crossed with random sites. Power rows (``check=False``)
compare a real effect's detection with a PERMANOVA of the unit means.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from tallyform.core.dissimilarity import Dissimilarity, dissimilarity
from tallyform.core.inference import permanova
from tallyform.core.simulate import simulate_community

from .base import Cell

PERMS = 199
Q = 5                         # variables of the Euclidean data


def _labels(n):
    return [f"s{i}" for i in range(n)]


def _visits(rng, tanks=(5, 5, 5), visits=4, missing=0.0):
    """Treatments x tanks x visits; with ``missing``, each visit is lost with that chance
    (every tank keeps at least 2)."""
    rows = []
    k = 0
    for g, m in enumerate(tanks):
        for _ in range(m):
            keep = rng.random(visits) >= missing
            if keep.sum() < 2:
                keep[rng.choice(visits, 2, replace=False)] = True
            for v in np.flatnonzero(keep):
                rows.append(dict(treatment=f"t{g}", tank=f"T{k:02d}", week=f"w{v}"))
            k += 1
    return pd.DataFrame(rows, index=_labels(len(rows)))


def _euclid(info, rng, effects, noise=0.5, shifts=None):
    """Sum of random effects per level of the named columns (sd given) plus noise;
    ``shifts``: {column: {level: shift on every variable}} fixed effects."""
    n = len(info)
    x = noise * rng.standard_normal((n, Q))
    for col, sd in effects.items():
        levels, codes = np.unique(info[col].astype(str).to_numpy(), return_inverse=True)
        x += sd * rng.standard_normal((levels.size, Q))[codes]
    for col, shift in (shifts or {}).items():
        x += np.asarray([shift.get(v, 0.0) for v in info[col].astype(str)])[:, None]
    return Dissimilarity.from_features(x, list(info.index), measure="euclidean")


def _p(d, info, terms, term, **kw):
    return float(permanova(d, info, terms, n_permutations=PERMS, rng=kw.pop("rng"),
                           **kw).pvalue[term])


# ---------------------------------------------------------------------------- visits
def visits(rng, *, term="treatment", tanks=(5, 5, 5), missing=0.0, units="tank",
           shift=0.0, tank_sd=1.0, noise=0.5):
    info = _visits(rng, tanks, missing=missing)
    d = _euclid(info, rng, {"tank": tank_sd}, noise=noise,
                shifts={"treatment": {"t1": shift}})
    return _p(d, info, ["treatment", "week", "treatment:week"], term, units=units, rng=rng)


def visits_unit_means(rng, *, tanks=(5, 5, 5), missing=0.0, shift=0.0, tank_sd=1.0,
                      noise=0.5):
    """The same data, analysed as one PERMANOVA of the tank means (one row per tank)."""
    info = _visits(rng, tanks, missing=missing)
    d = _euclid(info, rng, {"tank": tank_sd}, noise=noise,
                shifts={"treatment": {"t1": shift}})
    f = pd.DataFrame(d.features, index=info.index).groupby(info["tank"]).mean()
    tinfo = info.groupby("tank")[["treatment"]].first()
    dm = Dissimilarity.from_features(f.to_numpy(), list(f.index), measure="euclidean")
    return float(permanova(dm, tinfo, ["treatment"], n_permutations=PERMS,
                           rng=rng).pvalue["treatment"])


def visits_counts(rng, *, term="treatment", units="tank", size=2.0):
    """Counts: tank random effects on totals and shares, treatment t1 multiplies totals by
    ``size`` (no change of composition), Hellinger distances (size-free)."""
    info = _visits(rng, (4, 5, 6), missing=0.2)
    tab = simulate_community(info, n_taxa=25, mean_total=1500,
                             size_effects={"treatment": {"t1": size}},
                             random_effects={"tank": (0.3, 0.4)}, profile_noise=0.01,
                             rng=rng)
    d = dissimilarity(tab, "hellinger")
    return _p(d, info, ["treatment", "week"], term, units=units, rng=rng)


# ---------------------------------------------------------------------------- split plot
def split_plot(rng, *, term="A", units="plot"):
    """6 blocks x 3 whole plots (factor A) x 4 subplots (factor B); block and plot random
    effects, no effect of A or B."""
    rows = []
    for b in range(6):
        for a in rng.permutation(3):
            for s in range(4):
                rows.append(dict(block=f"b{b}", A=f"a{a}", B=f"B{s}", plot=f"b{b}a{a}"))
    info = pd.DataFrame(rows, index=_labels(len(rows)))
    d = _euclid(info, rng, {"block": 1.0, "plot": 1.0})
    return _p(d, info, ["block", "A", "B", "A:B"], term, units=units, blocks="block",
              rng=rng)


# ---------------------------------------------------------------------------- nested
def nested_habitat(rng, *, units="site"):
    """Habitats of 4 and 5 sites, 2-5 visits per site, site effects; no habitat effect."""
    rows = []
    for s in range(9):
        for v in range(int(rng.integers(2, 6))):
            rows.append(dict(habitat="wood" if s < 4 else "field", site=f"S{s}", visit=v))
    info = pd.DataFrame(rows, index=_labels(len(rows)))
    d = _euclid(info, rng, {"site": 1.0})
    return _p(d, info, ["habitat"], "habitat", units=units, rng=rng)


def nested_plots(rng, *, term="treatment", units=("site", "plot")):
    """10 sites (5 per habitat) x 2 plots (treatment x / y) x 3 visits; site and plot random
    effects; no treatment or habitat effect."""
    rows = []
    for s in range(10):
        for p, t in enumerate(rng.permutation(["x", "y"])):
            for v in range(3):
                rows.append(dict(habitat="wood" if s < 5 else "field", site=f"S{s}",
                                 plot=f"p{p}", treatment=t, visit=f"v{v}"))
    info = pd.DataFrame(rows, index=_labels(len(rows)))
    info["plot_id"] = info["site"] + info["plot"]
    d = _euclid(info, rng, {"site": 1.0, "plot_id": 0.7})
    return _p(d, info, ["habitat", "treatment"], term,
              units=list(units) if not isinstance(units, bool) else units, rng=rng)


# ---------------------------------------------------------------------------- BACI
def baci(rng, *, term="CI:BA", units="site"):
    """5 control + 5 impact sites, 3 visits before and 3 after; site effects, random visit
    effects common to all sites and a before/after shift; no impact. The visits (times
    within periods) are in the model, as a before/after-control/impact analysis needs."""
    rows = []
    for s in range(10):
        for v in range(6):
            rows.append(dict(CI="impact" if s >= 5 else "control", site=f"S{s}",
                             BA="after" if v >= 3 else "before", visit=f"v{v}"))
    info = pd.DataFrame(rows, index=_labels(len(rows)))
    d = _euclid(info, rng, {"site": 1.0, "visit": 0.5}, shifts={"BA": {"after": 1.0}})
    return _p(d, info, ["CI", "BA", "visit", "CI:BA"], term, units=units, rng=rng)


# ---------------------------------------------------------------------------- random
def crossed_random(rng, *, random=("site",)):
    """Fixed treatment (3 levels) x random site (6), 2 samples per cell; site and
    treatment x site random effects; no treatment effect."""
    rows = [dict(treatment=f"t{t}", site=f"S{s}") for s in range(6) for t in range(3)
            for _ in range(2)]
    info = pd.DataFrame(rows, index=_labels(len(rows)))
    info["cell"] = info["treatment"] + info["site"]
    d = _euclid(info, rng, {"site": 1.0, "cell": 0.7})
    kw = dict(random=list(random)) if random else dict(units=False)
    return _p(d, info, ["treatment", "site", "treatment:site"], "treatment", rng=rng, **kw)


CELLS = [
    Cell("units/visits-balanced", "PERMANOVA units", "permanova(units='tank'), treatment",
         "3 treatments x 5 tanks x 4 visits, tank effects, Euclidean", visits,
         reps=1000, short_reps=150),
    Cell("units/visits-balanced-week", "PERMANOVA units", "permanova(units='tank'), week",
         "3 treatments x 5 tanks x 4 visits, tank effects, Euclidean",
         lambda rng: visits(rng, term="week"), reps=1000, short_reps=100),
    Cell("units/visits-unbalanced", "PERMANOVA units", "permanova(units='tank'), treatment",
         "4/5/7 tanks, 2-4 of 4 visits, tank effects, Euclidean",
         lambda rng: visits(rng, tanks=(4, 5, 7), missing=0.3), reps=1000, short_reps=150),
    Cell("units/visits-unbalanced-week", "PERMANOVA units", "permanova(units='tank'), week",
         "4/5/7 tanks, 2-4 of 4 visits, tank effects, Euclidean",
         lambda rng: visits(rng, term="week", tanks=(4, 5, 7), missing=0.3),
         reps=1000, short_reps=100),
    Cell("units/visits-unbalanced-no-units", "PERMANOVA units",
         "permanova(units=False), treatment",
         "4/5/7 tanks, 2-4 of 4 visits, tank effects, Euclidean",
         lambda rng: visits(rng, tanks=(4, 5, 7), missing=0.3, units=False),
         reps=400, check=False),
    Cell("units/visits-counts", "PERMANOVA units", "permanova(units='tank'), treatment",
         "counts, Hellinger; 4/5/6 tanks, missing visits, tank effects on totals and shares, "
         "totals x2 in one treatment", visits_counts, reps=1000, short_reps=100),
    Cell("units/visits-counts-week", "PERMANOVA units", "permanova(units='tank'), week",
         "counts, Hellinger; 4/5/6 tanks, missing visits, tank effects",
         lambda rng: visits_counts(rng, term="week"), reps=1000, short_reps=100),
    Cell("units/visits-counts-no-units", "PERMANOVA units",
         "permanova(units=False), treatment",
         "counts, Hellinger; 4/5/6 tanks, missing visits, tank effects",
         lambda rng: visits_counts(rng, units=False), reps=400, check=False),
    Cell("units/split-plot", "PERMANOVA units",
         "permanova(units='plot', blocks='block'), whole-plot A",
         "6 blocks x 3 whole plots x 4 subplots, block and plot effects", split_plot,
         reps=1000, short_reps=150),
    Cell("units/split-plot-subplot", "PERMANOVA units",
         "permanova(units='plot', blocks='block'), subplot B",
         "6 blocks x 3 whole plots x 4 subplots, block and plot effects",
         lambda rng: split_plot(rng, term="B"), reps=1000, short_reps=100),
    Cell("units/split-plot-no-units", "PERMANOVA units", "permanova(units=False), A",
         "6 blocks x 3 whole plots x 4 subplots, block and plot effects",
         lambda rng: split_plot(rng, units=False), reps=400, check=False),
    Cell("units/nested-habitat", "PERMANOVA units", "permanova(units='site'), habitat",
         "4 + 5 sites in 2 habitats, 2-5 visits per site, site effects", nested_habitat,
         reps=1000, short_reps=150),
    Cell("units/nested-habitat-no-units", "PERMANOVA units",
         "permanova(units=False), habitat",
         "4 + 5 sites in 2 habitats, 2-5 visits per site, site effects",
         lambda rng: nested_habitat(rng, units=False), reps=400, check=False),
    Cell("units/nested-plots", "PERMANOVA units",
         "permanova(units=['site', 'plot']), plot treatment",
         "10 sites x 2 plots (treatment) x 3 visits, site and plot effects", nested_plots,
         reps=1000, short_reps=150),
    Cell("units/nested-plots-habitat", "PERMANOVA units",
         "permanova(units=['site', 'plot']), habitat",
         "10 sites (5 per habitat) x 2 plots x 3 visits, site and plot effects",
         lambda rng: nested_plots(rng, term="habitat"), reps=1000, short_reps=100),
    Cell("units/baci", "PERMANOVA units", "permanova(units='site'), CI:BA",
         "5 control + 5 impact sites x 3 before + 3 after, site and visit effects; terms CI, "
         "BA, visit, CI:BA", baci,
         reps=1000, short_reps=100),
    Cell("units/baci-ci", "PERMANOVA units", "permanova(units='site'), CI",
         "5 control + 5 impact sites x 3 before + 3 after, site and visit effects",
         lambda rng: baci(rng, term="CI"), reps=1000, short_reps=100),
    Cell("units/baci-no-units", "PERMANOVA units", "permanova(units=False), CI",
         "5 control + 5 impact sites x 3 before + 3 after, site and visit effects",
         lambda rng: baci(rng, term="CI", units=False), reps=400, check=False),
    Cell("units/crossed-random", "PERMANOVA units",
         "permanova(random=['site']), fixed treatment",
         "3 treatments x 6 random sites x 2, site and treatment x site effects",
         crossed_random, reps=1000, short_reps=150),
    Cell("units/crossed-fixed", "PERMANOVA units",
         "permanova(), treatment against the residual",
         "3 treatments x 6 random sites x 2, site and treatment x site effects",
         lambda rng: crossed_random(rng, random=()), reps=400, check=False),
    Cell("units/power-visits", "PERMANOVA units", "power: permanova(units='tank')",
         "4/5/7 tanks, missing visits, tank effects, treatment t1 shifted by 1.2",
         lambda rng: visits(rng, tanks=(4, 5, 7), missing=0.3, shift=1.2), reps=400,
         check=False),
    Cell("units/power-visits-unit-means", "PERMANOVA units",
         "power: permanova of the tank means",
         "4/5/7 tanks, missing visits, tank effects, treatment t1 shifted by 1.2",
         lambda rng: visits_unit_means(rng, tanks=(4, 5, 7), missing=0.3, shift=1.2),
         reps=400, check=False),
    Cell("units/power-visits-noisy", "PERMANOVA units", "power: permanova(units='tank')",
         "4/5/7 tanks, 1-4 of 4 visits (60 % missing), weak tank effects (sd 0.3), noise sd "
         "1.5, treatment t1 shifted by 1.0",
         lambda rng: visits(rng, tanks=(4, 5, 7), missing=0.6, shift=1.0, tank_sd=0.3,
                            noise=1.5), reps=400, check=False),
    Cell("units/power-visits-noisy-unit-means", "PERMANOVA units",
         "power: permanova of the tank means",
         "4/5/7 tanks, 1-4 of 4 visits (60 % missing), weak tank effects (sd 0.3), noise sd "
         "1.5, treatment t1 shifted by 1.0",
         lambda rng: visits_unit_means(rng, tanks=(4, 5, 7), missing=0.6, shift=1.0,
                                       tank_sd=0.3, noise=1.5), reps=400, check=False),
]
