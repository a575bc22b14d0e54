"""Counting noise: false alarms, power and speed of the shape and spread tests.

Run from the repository root:

    python benchmarks/counting.py null  [--reps 400]   # size-only data sets: rejection rates
    python benchmarks/counting.py power [--reps 400]   # real differences: power
    python benchmarks/counting.py speed                # time against PERMANOVA, same run
    python benchmarks/counting.py stability [--reps 100]  # how much one draw matters

All data are synthetic (benchmarks/calibration_cells/counting.py:size_only_table). Rates are
shares of data sets with p <= 0.05 (199 permutations each), with 95 % Clopper-Pearson
intervals in the null table.

Methods compared (``shape`` / ``spread``):
- ``rarefaction``: the defaults of shape_test / spread_test (one rarefaction to the
  smallest total; Welch-type statistic; chi-square spread with the counting noise removed).
- ``rarefaction, pseudo-F`` / ``rarefaction, no noise correction``: the alternatives.
- ``draws=5``, ``draws=9``: Rueger's (1978) combination of several rarefactions.
- ``unadjusted``: the same statistics on the counts as observed (reference).
- ``full data*``: variants that keep every individual, measured and NOT shipped: the
  Welch-type shape statistic on the observed profiles (chi-square with column masses from
  the mean profile, so that every sample weighs alike), and the spread statistic with each
  sample's unbiased multinomial noise subtracted, tested by a studentised permutation
  (Welch t of the corrected squared distances, recomputed for every relabelling; Janssen
  1997, Chung & Romano 2013) or against Welch's t distribution.
"""
from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

import numpy as np
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from benchmarks.calibration_cells.base import clopper_pearson  # noqa: E402
from benchmarks.calibration_cells.counting import size_only_table  # noqa: E402
from tallyform.core.counting import shape_test, spread_test  # noqa: E402
from tallyform.core.counting_stats import Embedding, location_statistic  # noqa: E402
from tallyform.core.permutation import Permutations, pvalue_from_null  # noqa: E402
from tallyform.core.rarefaction import multinomial_noise  # noqa: E402

PERMS = 199


# ---------------------------------------------------------------- full-data variants
def _full_chi_square(x):
    """Chi-square features of the observed profiles, masses = mean profile, and noise."""
    x = x[:, x.sum(axis=0) > 0]
    a = x / x.sum(axis=1, keepdims=True)
    c = a.mean(axis=0)
    return a / np.sqrt(c), multinomial_noise(x, 1.0 / c)


def _corrected_u(f, v, labels, ng):
    """Noise-corrected, rescaled squared distances to the group centroids (B x n)."""
    b, n = labels.shape
    m = np.zeros((b, ng.size, n))
    m[np.arange(b)[:, None], labels, np.arange(n)[None, :]] = 1.0
    c = (m.reshape(b * ng.size, n) @ f).reshape(b, ng.size, -1) / ng[None, :, None]
    r = (f ** 2).sum(axis=1)
    cn = (c ** 2).sum(axis=2)
    cross = (f @ c.reshape(b * ng.size, -1).T).reshape(n, b, ng.size)
    own = np.take_along_axis(cross.transpose(1, 0, 2), labels[:, :, None], 2)[:, :, 0]
    z2 = r[None, :] - 2 * own + np.take_along_axis(cn, labels, 1)
    nl = ng[labels].astype(float)
    vg = m @ v
    z2 -= (1 - 2 / nl) * v[None, :] + np.take_along_axis(vg, labels, 1) / nl ** 2
    return nl / (nl - 1) * z2, m


def _welch_t(u, m, ng):
    gm = np.einsum("bgn,bn->bg", m, u) / ng
    ss = np.einsum("bgn,bn->bg", m, u ** 2) - ng * gm ** 2
    s2 = ss / (ng - 1)
    se2 = s2[:, 0] / ng[0] + s2[:, 1] / ng[1]
    t = (gm[:, 0] - gm[:, 1]) / np.sqrt(se2)
    df = se2 ** 2 / ((s2[:, 0] / ng[0]) ** 2 / (ng[0] - 1) + (s2[:, 1] / ng[1]) ** 2
                     / (ng[1] - 1))
    return np.abs(t), df


def full_data_pvalues(tab, rng):
    """p-values of the variants that keep every individual (two groups)."""
    x = tab.values
    codes = (tab.samples["g"].to_numpy() == "b").astype(np.intp)
    ng = np.bincount(codes)
    f, v = _full_chi_square(x)
    perms = Permutations(len(codes), PERMS, rng,
                         design=np.c_[codes == 0, codes == 1].astype(float))
    emb = Embedding(f)
    obs_loc = location_statistic(emb, codes[None, :], ng)[0]
    u0, m0 = _corrected_u(f, v, codes[None, :], ng)
    t0, df0 = _welch_t(u0, m0, ng)
    null_loc, null_t = [], []
    for idx in perms.batches(256):
        lab = codes[idx]
        null_loc.append(location_statistic(emb, lab, ng))
        u, m = _corrected_u(f, v, lab, ng)
        null_t.append(_welch_t(u, m, ng)[0])
    null_loc, null_t = np.concatenate(null_loc), np.concatenate(null_t)
    return {"full data: shape, Welch-type": pvalue_from_null(obs_loc, null_loc,
                                                             exact=perms.exact),
            "full data: spread, studentised permutation": pvalue_from_null(
                t0[0], null_t, exact=perms.exact),
            "full data: spread, Welch t reference": float(2 * stats.t.sf(t0[0], df0[0]))}


# ---------------------------------------------------------------- the methods
def method_pvalues(tab, rng, *, measures=("chi_square", "hellinger"), extra=True,
                   full=True) -> dict:
    out = {}
    seeds = rng.integers(2**32, size=16)
    s = iter(seeds)
    for measure in measures:
        kw = dict(measure=measure, n_permutations=PERMS, units=False)
        out[f"{measure}: shape, rarefaction"] = shape_test(tab, "g", rng=next(s), **kw).pvalue
        out[f"{measure}: spread, rarefaction"] = spread_test(tab, "g", rng=next(s), **kw).pvalue
        out[f"{measure}: shape, unadjusted"] = shape_test(tab, "g", adjust="none",
                                                          rng=next(s), **kw).pvalue
        out[f"{measure}: spread, unadjusted"] = spread_test(tab, "g", adjust="none",
                                                            rng=next(s), **kw).pvalue
        if extra and measure == "chi_square":
            out[f"{measure}: shape, rarefaction, pseudo-F"] = shape_test(
                tab, "g", statistic="pseudo_f", rng=next(s), **kw).pvalue
            out[f"{measure}: spread, rarefaction, no noise correction"] = spread_test(
                tab, "g", noise_correction=False, rng=next(s), **kw).pvalue
            for k in (5, 9):
                out[f"{measure}: shape, draws={k}"] = shape_test(tab, "g", n_draws=k,
                                                                 rng=next(s), **kw).pvalue
                out[f"{measure}: spread, draws={k}"] = spread_test(tab, "g", n_draws=k,
                                                                   rng=next(s), **kw).pvalue
    if full:
        out.update({f"chi_square: {k}": p for k, p in
                    full_data_pvalues(tab, np.random.default_rng(next(s))).items()})
    return out


def rates(design: dict, reps: int, seed: int, **kw):
    hits: dict = {}
    for i in range(reps):
        rng = np.random.default_rng([seed, i])
        tab = size_only_table(rng, **design)
        for k, p in method_pvalues(tab, rng, **kw).items():
            hits.setdefault(k, []).append(p <= 0.05)
    return {k: (int(np.sum(v)), len(v)) for k, v in hits.items()}


NULL_DESIGNS = {
    "log-normal, 10+10, totals 200/200": dict(generator="lognormal", totals=(200, 200)),
    "log-normal, 10+10, totals 100/400": dict(generator="lognormal", totals=(100, 400)),
    "log-normal, 10+10, totals 50/500": dict(generator="lognormal"),
    "log-normal, 10+10, totals 500/5000": dict(generator="lognormal", totals=(500, 5000)),
    "log-normal, 6 (50) + 14 (500)": dict(generator="lognormal", sizes=(6, 14)),
    "log-normal, 14 (50) + 6 (500)": dict(generator="lognormal", sizes=(14, 6)),
    "Dirichlet-mult., 10+10, totals 50/500": dict(generator="dirichlet"),
    "Dirichlet-mult., 6 (50) + 14 (500)": dict(generator="dirichlet", sizes=(6, 14)),
    "Dirichlet-mult., 10+10, totals 500/5000": dict(generator="dirichlet",
                                                    totals=(500, 5000)),
    "gamma-Poisson, 10+10, totals 50/500": dict(generator="gamma_poisson"),
    "gamma-Poisson, 6 (50) + 14 (500)": dict(generator="gamma_poisson", sizes=(6, 14)),
    "mixture, 6 (50) + 14 (500)": dict(generator="mixture", sizes=(6, 14)),
}

POWER_DESIGNS = {
    "spread differs, equal totals (sd 0.5 vs 0.8; 200/200)":
        dict(generator="lognormal", totals=(200, 200), group_kw=({"sd": 0.5}, {"sd": 0.8})),
    "spread differs AGAINST totals (low-total group tighter: sd 0.5 at 100, 0.8 at 400)":
        dict(generator="lognormal", totals=(100, 400), group_kw=({"sd": 0.5}, {"sd": 0.8})),
    "spread differs WITH totals (low-total group wider: sd 0.8 at 100, 0.5 at 400)":
        dict(generator="lognormal", totals=(100, 400), group_kw=({"sd": 0.8}, {"sd": 0.5})),
    "spread differs, Dirichlet-mult. icc 0.03 vs 0.08, 200/200":
        dict(generator="dirichlet", totals=(200, 200),
             group_kw=({"icc": 0.03}, {"icc": 0.08})),
    "centroids equal, spreads differ, unbalanced: Dirichlet-mult. icc 0.10 in 6 vs 0.02 in 14"
    " (200/200; a location test should stay near 0.05)":
        dict(generator="dirichlet", sizes=(6, 14), totals=(200, 200),
             group_kw=({"icc": 0.10}, {"icc": 0.02})),
    "5 of 40 taxa x 2, equal totals (200/200)":
        dict(generator="lognormal", totals=(200, 200), shift=2.0),
    "5 of 40 taxa x 2, 4x totals (100/400)":
        dict(generator="lognormal", totals=(100, 400), shift=2.0),
    "5 of 40 taxa x 2, 4x totals, unbalanced 6 (100) + 14 (400)":
        dict(generator="lognormal", sizes=(6, 14), totals=(100, 400), shift=2.0),
}


def table(designs: dict, reps: int, seed: int, *, ci: bool):
    for name, design in designs.items():
        t = time.perf_counter()
        res = rates(design, reps, seed)
        print(f"\n{name}  ({reps} data sets, {time.perf_counter() - t:.0f} s)", flush=True)
        for k, (h, n) in res.items():
            lo, hi = clopper_pearson(h, n)
            extra = f"  [{lo:.3f}, {hi:.3f}]" if ci else ""
            print(f"  {k:58s} {h / n:6.3f}{extra}", flush=True)


def stability(reps: int, seed: int = 99):
    """How much does the answer depend on the rarefaction draw? Nine draws per data set:
    the spread (interquartile range) of their p-values, and the share of data sets in which
    the draws disagree about p <= 0.05."""
    for name, design in POWER_DESIGNS.items():
        out = {"shape": [], "spread": []}
        for i in range(reps):
            rng = np.random.default_rng([seed, i])
            tab = size_only_table(rng, **design)
            for aspect, fn in (("shape", shape_test), ("spread", spread_test)):
                p = fn(tab, "g", n_draws=9, n_permutations=PERMS, units=False,
                       rng=rng).draw_pvalues
                q1, q3 = np.percentile(p, [25, 75])
                dec = p <= 0.05
                out[aspect].append((q3 - q1, dec.any() and not dec.all(), dec.mean()))
        print(f"\n{name}  ({reps} data sets, 9 draws each)")
        for aspect, rows in out.items():
            r = np.array(rows, dtype=float)
            print(f"  {aspect:7s} median IQR of p over draws {np.median(r[:, 0]):.3f}; draws "
                  f"disagree in {r[:, 1].mean():.2f} of data sets; mean share of draws with "
                  f"p <= 0.05 (single-draw power) {r[:, 2].mean():.3f}", flush=True)


def speed(repeats: int = 3):
    """shape_test and spread_test against PERMANOVA on the same (rarefied) table."""
    from tallyform.core.dissimilarity import dissimilarity
    from tallyform.core.inference import permanova
    from tallyform.core.rarefaction import rarefied_table
    rng = np.random.default_rng(7)
    for n, p in ((40, 100), (200, 500), (1000, 300)):
        tab = size_only_table(rng, "lognormal", (n // 2, n // 2), (500, 5000), p=p)

        def best(fn):
            runs = []
            for _ in range(repeats):
                t = time.perf_counter()
                fn()
                runs.append(time.perf_counter() - t)
            return min(runs)
        ref = best(lambda: permanova(dissimilarity(rarefied_table(tab, rng=1), "chi_square"),
                                     tab.samples, ["g"], n_permutations=999, rng=1))
        t_shape = best(lambda: shape_test(tab, "g", n_permutations=999, units=False, rng=1))
        t_spread = best(lambda: spread_test(tab, "g", n_permutations=999, units=False, rng=1))
        print(f"n = {n}, p = {p}, 999 permutations: rarefaction + PERMANOVA {ref:.3f} s; "
              f"shape_test {t_shape:.3f} s ({t_shape / ref:.2f}x); spread_test "
              f"{t_spread:.3f} s ({t_spread / ref:.2f}x)", flush=True)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("what", choices=["null", "power", "speed", "stability"])
    ap.add_argument("--reps", type=int, default=400)
    ap.add_argument("--only", default=None, help="designs whose name contains this")
    args = ap.parse_args(argv)
    if args.what == "speed":
        speed()
        return 0
    if args.what == "stability":
        stability(args.reps)
        return 0
    designs = NULL_DESIGNS if args.what == "null" else POWER_DESIGNS
    if args.only:
        designs = {k: v for k, v in designs.items() if args.only in k}
    table(designs, args.reps, 20261203 if args.what == "null" else 4242,
          ci=args.what == "null")
    return 0


if __name__ == "__main__":
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    raise SystemExit(main())
