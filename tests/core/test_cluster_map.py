"""cluster_map without a client: the plain loop (order, progress, cancel), and the per-item
random streams of the audit (fixed before the loop, so any order of execution gives the same
numbers). The cluster side is in test_tiled_cluster.py. Data are synthetic."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
from tallyform.core.cluster_map import cluster_map
from tallyform.errors import Cancelled


def _square_plus(item, shared, cancel):
    return item * item + shared["add"], cancel is not None


def test_plain_loop_keeps_order_reports_and_passes_cancel():
    seen = []
    out = cluster_map(_square_plus, [3, 1, 2], shared={"add": 10},
                      progress=lambda d, t: seen.append((d, t)), cancel=lambda: False)
    assert out == [(19, True), (11, True), (14, True)]
    assert seen == [(1, 3), (2, 3), (3, 3)]
    assert cluster_map(_square_plus, [], shared={"add": 0}) == []


def test_plain_loop_cancel_says_how_far():
    calls = iter([False, False, True])
    with pytest.raises(Cancelled, match="after 2 of 5"):
        cluster_map(_square_plus, range(5), shared={"add": 0}, cancel=lambda: next(calls),
                    what="the squares")


def _table(seed=2, n=16, p=10):
    rng = np.random.default_rng(seed)
    info = pd.DataFrame({"g": np.repeat(["a", "b"], n // 2)},
                        index=[f"s{i}" for i in range(n)])
    lam = rng.gamma(1.0, 6.0, size=(1, p)) * np.where(info["g"] == "a", 1.0, 2.0)[:, None]
    x = rng.poisson(lam) + np.eye(n, p, dtype=int)                  # no empty sample
    return tly.CommunityTable(pd.DataFrame(x, index=info.index,
                                           columns=[f"t{j}" for j in range(p)]), info)


def test_audit_simulations_have_their_own_streams():
    # every simulation's table and tests come from a stream spawned before the loop, so the
    # first three simulations of a run of five are those of a run of three
    tab = _table()
    kw = dict(n_permutations=19, rng=5, progress=False)
    a = tly.audit(tab, "g", n_sim=3, **kw)
    b = tly.audit(tab, "g", n_sim=5, **kw)
    np.testing.assert_array_equal(b.pvalues[:3], a.pvalues)
    np.testing.assert_array_equal(b.reference_pvalues[:3], a.reference_pvalues)
    for k, v in a.extra_pvalues.items():
        np.testing.assert_array_equal(b.extra_pvalues[k][:3], v)
    c = tly.audit(tab, "g", n_sim=3, spread=False, rarefied=False, **kw)
    np.testing.assert_array_equal(c.pvalues, a.pvalues)      # extra rows: their own streams
