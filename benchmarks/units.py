"""Speed of design-aware PERMANOVA, as ratios against references timed in the same run.

Run from the repository root:  python benchmarks/units.py  [--quick]

1. Whole-unit permutations against free permutations of the same samples: 300 tanks x 4
   visits (n = 1200), 3 treatments, the treatment tested between tanks (``units='tank'``)
   and as if the samples were independent (``units=False``), on the distance path
   (Bray-Curtis) and on the feature path (Hellinger, 60 taxa); balanced tanks, and tanks with
   missing visits (the unit-level basis is then recomputed for every permutation). Target:
   whole units at most 1.2x free.
2. The term-order change: every term tested by permuting the residuals of the model without
   it (the first term included, with the fitted part and its cross terms) against the
   former scheme (first term by raw permutation, later terms after the terms before them),
   run with the same engine on a two-way design with interaction, n = 1000, Bray-Curtis.

The machine may be shared: every timing is the best of ``--repeats`` runs, and all runs are
printed so the noise is visible. Data are synthetic.
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tallyform.core.design import model_matrix  # noqa: E402
from tallyform.core.dissimilarity import Dissimilarity, dissimilarity  # noqa: E402
from tallyform.core.inference import permanova  # noqa: E402
from tallyform.core.permutation import (Permutations, permutation_f_test,  # noqa: E402
                                        prepare_response)


def timed(fn, repeats):
    runs = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        runs.append(time.perf_counter() - t)
    return min(runs), runs


def fmt(runs):
    return ", ".join(f"{r:.3f}" for r in runs)


def tanks(n_tanks, visits, rng, missing=0.0):
    """Counts of 60 taxa for tanks visited repeatedly, tank effects on the shares."""
    rows = []
    for t in range(n_tanks):
        keep = rng.random(visits) >= missing
        keep[0] = True
        for v in np.flatnonzero(keep):
            rows.append(dict(treatment=f"t{t % 3}", tank=f"T{t:03d}", week=f"w{v}"))
    info = pd.DataFrame(rows, index=[f"s{i}" for i in range(len(rows))])
    codes = pd.factorize(info["tank"])[0]
    base = rng.gamma(0.6, 1.0, size=60)
    mu = base * rng.lognormal(0, 0.5, size=(n_tanks, 60))[codes] * 20
    x = rng.poisson(mu).astype(float)
    x[:, 0] += 1
    return info, x


def bench_units(n_tanks, visits, n_perm, repeats):
    rng = np.random.default_rng(1)
    for label, missing in (("balanced", 0.0), ("missing visits", 0.25)):
        info, x = tanks(n_tanks, visits, rng, missing)
        for measure in ("bray_curtis", "hellinger"):
            d = dissimilarity(x, measure)
            d = Dissimilarity(d.condensed, list(info.index), measure=measure,
                              features=d.features)
            free, r_free = timed(lambda: permanova(d, info, ["treatment"], units=False,
                                                   n_permutations=n_perm, rng=1), repeats)
            unit, r_unit = timed(lambda: permanova(d, info, ["treatment"], units="tank",
                                                   n_permutations=n_perm, rng=1), repeats)
            path = prepare_response(d).path
            print(f"  {label:15s} {measure:12s} ({path:9s}, n = {len(info)}): whole units "
                  f"{unit:.3f} s [{fmt(r_unit)}], free {free:.3f} s [{fmt(r_free)}]: "
                  f"ratio {unit / free:.2f} (target <= 1.2)")


def former_scheme(d, info, terms, n_perm):
    """The former PERMANOVA: one shared scheme, each term after the terms before it (the
    first by raw permutation), later terms in the residual model only."""
    mm = model_matrix(info, terms)
    perms = Permutations(d.n, n_perm, np.random.default_rng(1), design=mm.X)
    resp = prepare_response(d)
    for i, t in enumerate(terms):
        before = mm.submatrix(terms[:i]) if i else None
        full = mm.submatrix(terms[:i + 1])
        later = mm.X[:, [c for u in terms[i + 1:] for c in mm.term_columns[u]]]
        permutation_f_test(resp, full, before, X_later=later if later.size else None,
                           permutations=perms)


def bench_order(n, n_perm, repeats):
    rng = np.random.default_rng(2)
    a = rng.choice(["a0", "a1", "a2"], n)
    b = rng.choice(["b0", "b1"], n)
    info = pd.DataFrame({"a": a, "b": b}, index=[f"s{i}" for i in range(n)])
    x = rng.poisson(rng.gamma(0.6, 1.0, size=(n, 40)) * 20).astype(float)
    x[:, 0] += 1
    d = dissimilarity(x, "bray_curtis")
    d = Dissimilarity(d.condensed, list(info.index), measure="bray_curtis")
    terms = ["a", "b", "a:b"]
    new, r_new = timed(lambda: permanova(d, info, terms, units=False, n_permutations=n_perm,
                                         rng=1), repeats)
    old, r_old = timed(lambda: former_scheme(d, info, terms, n_perm), repeats)
    print(f"  unbalanced a x b with interaction, Bray-Curtis, n = {n}, {n_perm} permutations: "
          f"every term by reduced-model residuals {new:.3f} s [{fmt(r_new)}], former scheme "
          f"{old:.3f} s [{fmt(r_old)}]: ratio {new / old:.2f}")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller sizes, fewer permutations")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--permutations", type=int, default=None)
    args = ap.parse_args(argv)
    n_perm = args.permutations or (999 if args.quick else 9999)
    n_tanks = 60 if args.quick else 300
    print("1. whole-unit permutations against free permutations of the same samples")
    bench_units(n_tanks, 4, n_perm, args.repeats)
    print("2. term order: every term by residuals of the model without it, against before")
    bench_order(300 if args.quick else 1000, n_perm, args.repeats)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
