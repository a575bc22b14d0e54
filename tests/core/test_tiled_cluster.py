"""Tiled dissimilarities on a local Dask cluster (2 worker processes on 127.0.0.1, one
thread each), each worker limited to less memory than the n x n float64 matrix needs:
PERMANOVA, the dispersion test and PCoA (3 axes) equal the in-memory path, the tile tasks
run on both workers, and killing a worker in the middle of a PERMANOVA changes nothing
(Dask recomputes the lost tiles from the task graph). Data are synthetic."""
from __future__ import annotations

import os
import signal

import numpy as np
import pandas as pd
import pytest

distributed = pytest.importorskip("distributed")

import tallyform as tly  # noqa: E402

N = 9000                      # the float64 matrix needs 8 N^2 = 648 MB
LIMIT = 620_000_000           # per worker: less than that (each holds about a quarter of it,
                              # beside some 220 MB of Python, numpy, pandas, numba, dask)


@pytest.fixture(scope="module")
def client():
    import dask
    from distributed import Client, LocalCluster
    # the limit is enforced (a worker past 95 % of it is killed); spilling and pausing are
    # off so that a slow disk cannot stand in for memory
    cfg = {"distributed.worker.memory.target": False, "distributed.worker.memory.spill": False,
           "distributed.worker.memory.pause": False}
    with dask.config.set(cfg):
        with LocalCluster(host="127.0.0.1", n_workers=2, threads_per_worker=1,
                          memory_limit=LIMIT, dashboard_address=None, processes=True) as cl, \
                Client(cl) as c:
            yield c


def _data(n, seed=11):
    rng = np.random.default_rng(seed)
    info = pd.DataFrame({"g": rng.choice(["a", "b", "c"], n)},
                        index=[f"s{i + 1}" for i in range(n)])   # the labels of an array
    x = rng.poisson(rng.gamma(2.0, 1.5, size=(1, 10)), size=(n, 10)).astype(float)
    x[:, 0] += 1                                         # no empty sample
    return x, info


def test_large_matrix_on_workers_equals_in_memory(client):
    from distributed import get_task_stream
    assert LIMIT < 8 * N * N
    x, info = _data(N)
    before = set(client.scheduler_info()["workers"])
    assert len(before) == 2
    t = tly.dissimilarity(x, "bray_curtis", chunks=1500)
    with get_task_stream(client) as ts:
        b = tly.permanova(t, info, ["g"], units=False, n_permutations=19, rng=2)
    hosts = {r["worker"] for r in ts.data if "tile_quad" in str(r["key"])}
    assert hosts == before                               # tile tasks ran on both workers
    held = {w for w, keys in client.has_what().items()
            if any("make_tile" in str(k) for k in keys)}
    assert held == before                                # the tiles are spread over both
    q2 = tly.dispersion_test(t, info["g"], n_permutations=19, rng=3)
    o2 = tly.pcoa(t, dims=3)
    assert set(client.scheduler_info()["workers"]) == before    # no worker ran out of memory

    d = tly.dissimilarity(x, "bray_curtis")
    a = tly.permanova(d, info, ["g"], units=False, n_permutations=19, rng=2)
    assert b.statistic["g"] == pytest.approx(a.statistic["g"], rel=1e-9)
    assert b.pvalue["g"] == a.pvalue["g"]
    np.testing.assert_allclose(b.null_distribution["g"], a.null_distribution["g"], rtol=1e-9)
    q1 = tly.dispersion_test(d, info["g"], n_permutations=19, rng=3)
    assert q2.statistic == pytest.approx(q1.statistic, rel=1e-9) and q2.pvalue == q1.pvalue
    o1 = tly.pcoa(d, dims=3)
    np.testing.assert_allclose(o2.eigenvalues, o1.eigenvalues, rtol=1e-9)
    np.testing.assert_allclose(np.abs(o2.scores.to_numpy()), np.abs(o1.scores.to_numpy()),
                               rtol=1e-6, atol=1e-9)


def test_killing_a_worker_mid_permanova_gives_the_same_result(client):
    x, info = _data(1500, seed=4)
    t = tly.dissimilarity(x, "bray_curtis", chunks=500)
    t.total_ss()                                         # tiles computed and held
    pids = client.run(os.getpid)
    victim = sorted(pids.values())[0]
    tiles = t._tiles
    original = tiles.quad
    calls = {"n": 0}

    def quad_then_kill(W):
        calls["n"] += 1
        if calls["n"] == 3:                              # the pass of permuted designs
            os.kill(victim, signal.SIGKILL)              # a worker this test started
        return original(W)
    tiles.quad = quad_then_kill
    b = tly.permanova(t, info, ["g"], units=False, n_permutations=99, rng=8)
    assert calls["n"] >= 3
    assert victim not in client.run(os.getpid).values()   # it was replaced
    a = tly.permanova(tly.dissimilarity(x, "bray_curtis"), info, ["g"], units=False,
                      n_permutations=99, rng=8)
    assert b.statistic["g"] == pytest.approx(a.statistic["g"], rel=1e-9)
    assert b.pvalue["g"] == a.pvalue["g"]
    np.testing.assert_allclose(b.null_distribution["g"], a.null_distribution["g"], rtol=1e-9)
