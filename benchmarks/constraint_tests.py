"""Speed of the constrained-ordination tests, as ratios against references timed in the run.

Run from the repository root:  python benchmarks/constraint_tests.py  [--quick]

n samples x p taxa (synthetic), a 3-level factor and a covariate, 999 permutations:

1. RDA (Hellinger), overall test, against the package's permutation engine
   (``permutation_f_test``) on the same Hellinger features and design (target <= 2x).
2. CCA, overall test: every permutation re-weights the design and recomputes its basis
   (the weights travel with the samples), plus a second run of permutations for the
   adjusted share (Peres-Neto et al. 2006), against the RDA test of (1) (target <= 4x).
3. db-RDA (Bray-Curtis, Gower path), overall test, against ``permutation_f_test`` on the
   same dissimilarities and design (target <= 2x).
4. Per-axis test of the RDA (one test per constrained axis, 3 here) against its overall
   test (expected about 3x).

Every timing is the best of ``--repeats`` runs; all runs are printed.
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tallyform.core.constrained import cca, db_rda, rda  # noqa: E402
from tallyform.core.constraint_tests import constraint_test  # noqa: E402
from tallyform.core.dissimilarity import dissimilarity  # noqa: E402
from tallyform.core.permutation import permutation_f_test  # noqa: E402
from tallyform.core.table import CommunityTable  # noqa: E402


def timed(fn, repeats):
    runs = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        runs.append(time.perf_counter() - t)
    return min(runs), runs


def fmt(runs):
    return ", ".join(f"{r:.3f}" for r in runs)


def table(n, p, rng):
    info = pd.DataFrame({"g": np.array(["a", "b", "c"])[np.arange(n) % 3],
                         "x": rng.standard_normal(n)}, index=[f"s{i}" for i in range(n)])
    base = rng.gamma(0.5, 1.0, size=p)
    mu = base * rng.lognormal(0, 0.5, size=(n, p)) * 30
    x = rng.poisson(mu).astype(float) + 1.0
    return CommunityTable(pd.DataFrame(x, index=info.index), info)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args(argv)
    n, p = (120, 40) if args.quick else (400, 100)
    perms = 999
    tab = table(n, p, np.random.default_rng(1))
    terms = ["g", "x"]
    o_rda = rda(tab, terms=terms, transform="hellinger")
    o_cca = cca(tab, terms=terms)
    bray = dissimilarity(tab, "bray_curtis")
    o_db = db_rda(bray, tab.samples, terms)
    hel = dissimilarity(tab, "hellinger")
    X = np.column_stack([(tab.samples["g"] == "b"), (tab.samples["g"] == "c"),
                         tab.samples["x"]]).astype(float)
    print(f"n = {n}, p = {p}, {perms} permutations, best of {args.repeats}")
    rows = [
        ("RDA all", lambda: constraint_test(o_rda, n_permutations=perms, rng=1, units=False),
         "engine (Hellinger features)",
         lambda: permutation_f_test(hel, X, n_permutations=perms, rng=1), 2.0),
        ("CCA all", lambda: constraint_test(o_cca, n_permutations=perms, rng=1, units=False),
         "RDA all", lambda: constraint_test(o_rda, n_permutations=perms, rng=1, units=False),
         4.0),
        ("db-RDA all (Gower)",
         lambda: constraint_test(o_db, n_permutations=perms, rng=1, units=False),
         "engine (Bray-Curtis, distances)",
         lambda: permutation_f_test(bray, X, n_permutations=perms, rng=1), 2.0),
        ("RDA each_axis",
         lambda: constraint_test(o_rda, "each_axis", n_permutations=perms, rng=1,
                                 units=False),
         "RDA all", lambda: constraint_test(o_rda, n_permutations=perms, rng=1, units=False),
         None),
    ]
    for name, fn, ref_name, ref, target in rows:
        t, runs = timed(fn, args.repeats)
        r, rruns = timed(ref, args.repeats)
        verdict = "" if target is None else ("ok" if t / r <= target else "SLOWER THAN TARGET")
        print(f"{name:22s} {t:7.3f} s  vs {ref_name:36s} {r:7.3f} s  ratio {t / r:5.2f} "
              f"{'(target <= ' + str(target) + ')' if target else ''} {verdict}")
        print(f"    runs: [{fmt(runs)}] vs [{fmt(rruns)}]")


if __name__ == "__main__":
    main()
