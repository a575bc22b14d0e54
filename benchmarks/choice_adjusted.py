"""Speed of choice_adjusted against its parts done one by one, timed in the same run.

Run from the repository root:  python benchmarks/choice_adjusted.py  [--repeats 3]

30 distinct choices (the default family's 27 plus Aitchison, Jensen-Shannon and
Morisita-Horn), 999 permutations, 200 samples x 100 taxa in 3 groups (synthetic counts):

- reference: for every choice, its dissimilarity and one PERMANOVA of the group
  (``permanova(d, samples, [group], n_permutations=999, rng=seed)``: the same relabellings
  for every choice, since the seed is the same);
- choice_adjusted: the same 30 tests on the same relabellings plus the min-P adjustment.

Target: choice_adjusted costs at most 1.5x the reference. The dissimilarity cache is cleared
before every run, so both compute every dissimilarity. Every timing is the best of
``--repeats`` runs, all runs printed (the machine may be shared).
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tallyform.core.cache import clear_cache  # noqa: E402
from tallyform.core.choice_adjusted import choice_adjusted  # noqa: E402
from tallyform.core.choice_grid import as_choices, default_choices  # noqa: E402
from tallyform.core.inference import permanova  # noqa: E402
from tallyform.core.table import CommunityTable  # noqa: E402

EXTRA = [{"measure": "aitchison"}, {"measure": "jensen_shannon"},
         {"measure": "morisita_horn"}]


def synthetic_table(n, p, rng):
    """Counts in three groups with slightly different profiles (synthetic)."""
    base = rng.gamma(0.5, 1.0, size=p) + 0.01
    groups = np.arange(n) % 3
    shift = rng.gamma(4.0, 0.25, size=(3, p))
    mu = base * shift[groups] * rng.lognormal(0, 0.3, size=(n, 1)) * 40
    counts = rng.poisson(mu).astype(float)
    counts[counts.sum(axis=1) == 0, 0] = 1.0
    labels = [f"s{i:03d}" for i in range(n)]
    info = pd.DataFrame({"group": [f"g{g}" for g in groups]}, index=labels)
    return CommunityTable(pd.DataFrame(counts, index=labels,
                                       columns=[f"t{j:03d}" for j in range(p)]), info)


def timed(fn, repeats):
    runs = []
    for _ in range(repeats):
        clear_cache()
        t = time.perf_counter()
        fn()
        runs.append(time.perf_counter() - t)
    return min(runs), runs


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--n", type=int, default=200)
    ap.add_argument("--p", type=int, default=100)
    ap.add_argument("--perms", type=int, default=999)
    args = ap.parse_args(argv)
    rng = np.random.default_rng(20240601)
    tab = synthetic_table(args.n, args.p, rng)
    family, _ = as_choices([*default_choices(), *EXTRA])
    print(f"{len(family)} distinct choices, {args.perms} permutations, "
          f"{tab.n_samples} samples x {tab.n_taxa} taxa")
    seed = 7

    def reference():
        out = []
        for c in family:
            d = c.dissimilarity(tab)
            out.append(float(permanova(d, tab.samples, ["group"], units=False,
                                       n_permutations=args.perms, rng=seed)
                             .pvalue["group"]))
        return out

    def adjusted():
        return choice_adjusted(tab, "group", [c.as_dict() for c in family], units=False,
                               n_permutations=args.perms, rng=seed, progress=False)

    ref_p = reference()
    res = adjusted()
    same = np.allclose(res.pvalue.to_numpy(), ref_p)
    print(f"raw p-values equal to the one-by-one PERMANOVAs: {same}")
    t_ref, r_ref = timed(reference, args.repeats)
    t_adj, r_adj = timed(adjusted, args.repeats)
    print(f"reference (30 dissimilarities + 30 PERMANOVAs): {t_ref:.3f} s  "
          f"[{', '.join(f'{r:.3f}' for r in r_ref)}]")
    print(f"choice_adjusted:                                 {t_adj:.3f} s  "
          f"[{', '.join(f'{r:.3f}' for r in r_adj)}]")
    ratio = t_adj / t_ref
    print(f"ratio: {ratio:.2f} (target <= 1.5): {'ok' if ratio <= 1.5 else 'TOO SLOW'}")
    return 0 if same and ratio <= 1.5 else 1


if __name__ == "__main__":
    sys.exit(main())
