"""Group ellipses: do they cover what their legends say (synthetic data)?

- prediction ellipses: a new sample of the group, band [0.94, 0.96] (exact under normal
  theory at every n, so the band is tight), n = 5, 8, 15, 40;
- confidence ellipses: the group's true centre (Hotelling), n = 5, 8, 15, 40;
- bootstrap ellipses (with the small-sample factor): the true centre, n = 6, 10, 30;
- the null picture: one composition for all samples, 3 groups of 8, the default ordination
  figure with ellipses (``o.ellipses(group)`` then ``o.figure(..., ellipses=e)``); the
  "rejection" is a figure with two confidence ellipses that do not overlap. Checked: CCA
  constrained by the groups (confidence ellipses withheld by default) and CA; reference:
  the CCA with ``constrained='draw'``.

Reference rows (not checked): the data ellipse read as a 95 % region for new samples.
Bivariate normal groups with correlated, unequal variances.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

import tallyform as tly
from tallyform.core.ellipses import ellipse_outline, group_ellipses, inside_ellipse

from .base import Cell

MU = np.array([1.0, -2.0])
SIGMA = np.array([[2.0, 1.2], [1.2, 1.0]])
_CHOL = np.linalg.cholesky(SIGMA)


def _normal(rng, n):
    return MU + rng.standard_normal((n, 2)) @ _CHOL.T


def _inside(e, point) -> bool:
    row = e.table.iloc[0]
    return bool(inside_ellipse(point, (row.centre_x, row.centre_y),
                               (row.semi_major, row.semi_minor), row.angle_rad)[0])


def _new_sample(kind, n):
    def replicate(rng):
        pts = _normal(rng, n + 1)
        e = group_ellipses(pts[:n], ["g"] * n, kind=kind, level=0.95)
        return _inside(e, pts[n:])
    return replicate


def _centre(kind, n):
    def replicate(rng):
        pts = _normal(rng, n)
        e = group_ellipses(pts, ["g"] * n, kind=kind, level=0.95, n_boot=199, rng=rng)
        return _inside(e, MU[None, :])
    return replicate


# ------------------------------------------------------------------ null picture
def _one_composition(rng, n=8, groups=3, p=25):
    base = np.sort(rng.lognormal(0, 1.2, p))[::-1]
    share = base * np.exp(0.5 * rng.standard_normal((n * groups, p)))
    share /= share.sum(axis=1, keepdims=True)
    x = rng.multinomial(rng.integers(300, 2000, n * groups), share).astype(float)
    labels = [f"s{i}" for i in range(n * groups)]
    info = pd.DataFrame({"g": np.repeat([f"g{k}" for k in range(groups)], n)}, index=labels)
    return tly.CommunityTable(pd.DataFrame(x, index=labels), info, empty="keep")


def overlap(e, a, b, k: int = 720) -> bool:
    """Do the ellipses of groups a and b share a point? (Boundary points of each tested
    against the other; containment is caught by the centres.)"""
    rows = e.table.loc[[a, b]]
    params = [((r.centre_x, r.centre_y), (r.semi_major, r.semi_minor), r.angle_rad)
              for r in rows.itertuples()]
    for (c1, s1, t1), (c2, s2, t2) in (params, params[::-1]):
        x, y = ellipse_outline(c1, s1, t1, k)
        pts = np.vstack([np.column_stack([x, y]), np.asarray(c1)[None, :]])
        if inside_ellipse(pts, c2, s2, t2).any():
            return True
    return False


def _separated_in_default_figure(method, constrained="withhold"):
    def replicate(rng):
        tab = _one_composition(rng)
        o = tly.cca(tab, terms=["g"]) if method == "cca" else tly.ca(tab)
        e = o.ellipses(tab.samples["g"], constrained=constrained)
        fig = o.figure(group=tab.samples["g"], ellipses=e)
        drawn = [t.meta["group"] for t in fig.data if (t.meta or {}).get("role") == "ellipse"]
        apart = any(not overlap(e, a, b) for i, a in enumerate(drawn) for b in drawn[i + 1:])
        return 0.0 if apart else 1.0         # "p <= alpha" = a separated pair is shown
    return replicate


def _cells():
    out = []
    for n in (5, 8, 15, 40):
        out.append(Cell(f"ellipses/prediction-n{n}", "ellipses",
                        "prediction ellipse holds a new sample of the group",
                        f"one bivariate-normal group of {n}", _new_sample("prediction", n),
                        kind="coverage", band=(0.94, 0.96), reps=10_000, short_reps=1000))
    for n in (5, 8, 15, 40):
        out.append(Cell(f"ellipses/confidence-n{n}", "ellipses",
                        "confidence ellipse covers the group's true centre",
                        f"one bivariate-normal group of {n}", _centre("confidence", n),
                        kind="coverage", reps=2000, short_reps=300))
    for n in (6, 10, 30):
        out.append(Cell(f"ellipses/bootstrap-n{n}", "ellipses",
                        "bootstrap ellipse (small-sample factor) covers the true centre",
                        f"one bivariate-normal group of {n}, 199 resamples",
                        _centre("bootstrap", n), kind="coverage", reps=1000,
                        short_reps=150))
    for n in (5, 8):
        out.append(Cell(f"ellipses/data-as-region-n{n}", "ellipses",
                        "data ellipse (a spread) read as a 95 % region for new samples",
                        f"one bivariate-normal group of {n}", _new_sample("data", n),
                        kind="coverage", reps=2000, short_reps=300, check=False))
    null = "one composition, 3 groups x 8, log-normal variation; separated pair shown"
    out.append(Cell("ellipses/null-picture-cca", "ellipses",
                    "default figure, CCA constrained by the groups (withheld)", null,
                    _separated_in_default_figure("cca"), band=(0.0, 0.05), reps=400,
                    short_reps=25))
    out.append(Cell("ellipses/null-picture-ca", "ellipses",
                    "default figure, CA (unconstrained)", null,
                    _separated_in_default_figure("ca"), band=(0.0, 0.05), reps=400,
                    short_reps=25))
    out.append(Cell("ellipses/null-picture-cca-drawn", "ellipses",
                    "CCA constrained by the groups, constrained='draw'", null,
                    _separated_in_default_figure("cca", "draw"), band=(0.0, 0.05),
                    reps=400, short_reps=25, check=False))
    return out


CELLS = _cells()
