"""Speed and power of the Welch-type test (welch_permanova), against PERMANOVA in the same run.

Run from the repository root:  python benchmarks/welch.py  [--quick] [--power-reps 1000]

1. Speed, distance path: n = 1000 samples, 3 groups, Bray-Curtis (no feature matrix, so
   both tests work on the n x n Gower matrix), 999 permutations: time of welch_permanova
   divided by the time of a one-factor permanova with the same permutations
   (target <= 1.5).
2. Speed, feature path: n = 5000 samples, p = 200 taxa, Hellinger (features), 999
   permutations; the same ratio (target <= 1.5).
3. Power with a real shift and equal spreads (Euclidean, 5 normal variables, groups of
   10 / 30 and 3 x 12; chi-square on Dirichlet-multinomial counts, 10 / 30; 1000 data sets
   each, 199 permutations): the rejection
   rate at alpha = 0.05 of both tests on the same data sets; the Welch-type test should be
   within 10 % (relative) of PERMANOVA.

Every timing is the best of ``--repeats`` runs, all runs printed (the machine may be shared).
Data are synthetic.
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from benchmarks.calibration_cells.generators import base_profile, counts_from  # noqa: E402
from tallyform.core.dissimilarity import Dissimilarity, dissimilarity  # noqa: E402
from tallyform.core.inference import permanova  # noqa: E402
from tallyform.core.welch import welch_permanova  # noqa: E402


def timed(fn, repeats):
    runs = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        runs.append(time.perf_counter() - t)
    return min(runs), runs


def synthetic_counts(n, p, rng, groups=3):
    """Counts with groups of slightly different profiles (synthetic)."""
    base = rng.gamma(0.5, 1.0, size=p)
    g = np.arange(n) % groups
    shift = rng.gamma(2.0, 0.5, size=(groups, p))
    mu = base * shift[g] * rng.lognormal(0, 0.3, size=(n, 1)) * 30
    x = rng.poisson(mu).astype(float) + (rng.random((n, p)) < 0.02)
    x[x.sum(axis=1) == 0, 0] = 1.0
    labels = [f"s{i}" for i in range(n)]
    info = pd.DataFrame({"g": np.array(["a", "b", "c"])[g]}, index=labels)
    return pd.DataFrame(x, index=labels), info


def speed(d, info, perms, repeats, what):
    d.gower() if not d.has_features else None          # build the cached matrix first
    t_w, runs_w = timed(lambda: welch_permanova(d, info, "g", n_permutations=perms, rng=1,
                                                units=False), repeats)
    t_p, runs_p = timed(lambda: permanova(d, info, ["g"], n_permutations=perms, rng=1),
                        repeats)
    ratio = t_w / t_p
    print(f"{what}: welch_permanova {t_w:.3f} s (runs {', '.join(f'{r:.3f}' for r in runs_w)})"
          f"; permanova {t_p:.3f} s (runs {', '.join(f'{r:.3f}' for r in runs_p)}); "
          f"ratio {ratio:.2f} (target <= 1.5) {'ok' if ratio <= 1.5 else 'SLOW'}", flush=True)
    return ratio


def power(reps, perms=199):
    designs = {
        "Euclidean 10 / 30, shift 1 sd on 1 of 5 variables, equal sd": (
            (10, 30), "euclid", 1.0),
        "Euclidean 3 x 12, shift 1.2 sd (group 3) on 1 of 5 variables, equal sd": (
            (12, 12, 12), "euclid", 1.2),
        "Dirichlet-multinomial 10 / 30 at 3000 counts, icc 0.02 both, chi-square, "
        "2 taxa traded 30 %": ((10, 30), "dm", 0.3),
    }
    for name, (sizes, kind, effect) in designs.items():
        hits = np.zeros(2)
        for i in range(reps):
            rng = np.random.default_rng([99, i])
            n = sum(sizes)
            labels = [f"s{j}" for j in range(n)]
            g = np.repeat(np.arange(len(sizes)), sizes)
            info = pd.DataFrame({"g": [f"g{k}" for k in g]}, index=labels)
            if kind == "euclid":
                x = rng.standard_normal((n, 5))
                x[g == len(sizes) - 1, 0] += effect
                d = Dissimilarity.from_features(x, labels)
            else:
                base = base_profile(30, rng)
                shifted = base.copy()
                shifted[[0, 1]] = base[[0, 1]] * [1 - effect, 1 + effect * base[0] / base[1]]
                parts = [counts_from("dirichlet", np.full(m, 3000),
                                     shifted if k == len(sizes) - 1 else base, rng, icc=0.02)
                         for k, m in enumerate(sizes)]
                d = dissimilarity(pd.DataFrame(np.vstack(parts), index=labels), "chi_square",
                                  column_masses=base)
            pw = welch_permanova(d, info, "g", n_permutations=perms, rng=rng,
                                 units=False).pvalue
            pp = permanova(d, info, ["g"], n_permutations=perms, rng=rng).pvalue["g"]
            hits += [pw <= 0.05, pp <= 0.05]
        rate = hits / reps
        rel = rate[0] / rate[1] - 1 if rate[1] > 0 else float("nan")
        print(f"power, {name} ({reps} data sets): welch {rate[0]:.3f}, permanova "
              f"{rate[1]:.3f}, relative difference {rel:+.1%} (target within 10 %)",
              flush=True)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller sizes, fewer repeats")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--power-reps", type=int, default=1000)
    ap.add_argument("--no-power", action="store_true")
    args = ap.parse_args(argv)
    repeats = 1 if args.quick else args.repeats
    rng = np.random.default_rng(1)
    n_dist, n_feat = (300, 1000) if args.quick else (1000, 5000)
    x, info = synthetic_counts(n_dist, 40, rng)
    speed(dissimilarity(x, "bray_curtis"), info, 999, repeats,
          f"distance path (Bray-Curtis, n = {n_dist}, 3 groups, 999 permutations)")
    x, info = synthetic_counts(n_feat, 200, rng)
    speed(dissimilarity(x, "hellinger"), info, 999, repeats,
          f"feature path (Hellinger, n = {n_feat}, p = 200, 3 groups, 999 permutations)")
    if not args.no_power:
        power(100 if args.quick else args.power_reps)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
