"""Tiled dissimilarities on a local Dask cluster (2 worker processes on 127.0.0.1, one
thread each), each worker limited to less memory than the n x n float64 matrix needs:
PERMANOVA, the dispersion test and PCoA (3 axes) equal the in-memory path, the tiles are
spread evenly over both workers and their products run there, and killing a worker in the middle of a PERMANOVA changes nothing
(Dask recomputes the lost tiles from the task graph). On the same cluster: the size and
shape partition from tile products, and the independent tasks of scan and audit
(cluster_map) equal the runs without a client, ran on the workers, and stop on cancel.
Data are synthetic."""
from __future__ import annotations

import os
import signal

import numpy as np
import pandas as pd
import pytest

distributed = pytest.importorskip("distributed")

import tallyform as tly  # noqa: E402

N = 9000                      # the float64 matrix needs 8 N^2 = 648 MB
LIMIT = 640_000_000           # per worker: less than that (each holds 10 or 11 of the 21
                              # tiles, about 200 MB, beside some 280 MB of Python, numpy,
                              # pandas, numba, dask and tallyform: 490 MB measured at most)


@pytest.fixture(scope="module")
def client():
    import dask
    from distributed import Client, LocalCluster
    # the limit is enforced (a worker past 95 % of it is killed); spilling and pausing are
    # off so that a slow disk cannot stand in for memory, and work stealing is off so that
    # the tiles stay where tallyform placed them (on a busy machine an idle worker steals
    # tile builds and ends up holding most of them)
    cfg = {"distributed.worker.memory.target": False, "distributed.worker.memory.spill": False,
           "distributed.worker.memory.pause": False,
           "distributed.scheduler.work-stealing": False}
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
    from distributed import futures_of, get_task_stream, wait
    assert LIMIT < 8 * N * N
    x, info = _data(N)
    before = set(client.scheduler_info()["workers"])
    assert len(before) == 2
    t = tly.dissimilarity(x, "bray_curtis", chunks=1500)
    wait(futures_of(list(t._tiles.tiles.values())))
    held = {w: sum("make_tile" in str(k) for k in keys)
            for w, keys in client.has_what().items()}
    # the 21 tiles are spread evenly (11 and 10), not left where a busy scheduler put them:
    # neither worker holds more than about half of the upper triangle
    assert set(held) == before and sorted(held.values()) == [10, 11]
    with get_task_stream(client) as ts:
        b = tly.permanova(t, info, ["g"], units=False, n_permutations=19, rng=2)
    hosts = {r["worker"] for r in ts.data if "tile_quad" in str(r["key"])}
    assert hosts and hosts <= before      # tile products ran on the workers, where tiles lie
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


def _small_table(n=24, p=12, seed=3):
    rng = np.random.default_rng(seed)
    info = pd.DataFrame({"g": np.repeat(["a", "b"], n // 2)},
                        index=[f"s{i}" for i in range(n)])
    lam = rng.gamma(1.0, 5.0, size=(1, p)) * rng.lognormal(0.0, 0.7, size=(n, 1))
    x = rng.poisson(lam) + np.eye(n, p, dtype=int)                  # no empty sample
    return tly.CommunityTable(pd.DataFrame(x, index=info.index,
                                           columns=[f"t{j}" for j in range(p)]), info)


def _ran_on(ts, name):
    return {r["worker"] for r in ts.data if str(r["key"]).startswith(name)}


def test_tiled_partition_on_the_workers_equals_in_memory(client):
    from distributed import get_task_stream
    tab = _small_table(n=40)
    a = tly.size_shape(tab, "bray_curtis", n_boot=20, rng=1, progress=False)
    with get_task_stream(client) as ts:
        b = tly.size_shape(tab, "bray_curtis", n_boot=20, rng=1, chunks=10, progress=False)
    assert any("tile_quad" in str(r["key"]) for r in ts.data)     # tile products on workers
    np.testing.assert_allclose(b.fractions, a.fractions, rtol=0, atol=1e-9)
    np.testing.assert_allclose(b.fractions_ci.to_numpy(), a.fractions_ci.to_numpy(), rtol=0,
                               atol=1e-9)


def test_scan_and_audit_as_tasks_equal_the_plain_loop(client):
    from distributed import get_task_stream
    from tallyform.core import tiled
    tab = _small_table()
    grid = dict(measures=["bray_curtis", "hellinger", "aitchison"], transforms=[1.0, 0.5],
                n_boot=10, rng=2)
    kw = dict(n_sim=4, n_permutations=19, rng=5)
    seen = []
    with get_task_stream(client) as ts:
        s1 = tly.scan(tab, progress=lambda d, t: seen.append((d, t)), **grid)
        a1 = tly.audit(tab, "g", progress=False, **kw)
    assert seen == [(i, 6) for i in range(1, 7)]                   # one report per cell
    # the tasks ran on the workers (a worker the nanny replaced in between is still one)
    for name, count in (("scan_cell", 6), ("one_simulation", 4)):
        hosts = _ran_on(ts, name)
        assert hosts and all(h.startswith("tcp://127.0.0.1:") for h in hosts)
        assert len({r["key"] for r in ts.data if str(r["key"]).startswith(name)}) == count
    real = tiled.active_client
    try:                                    # the same calls without a client: a plain loop
        tiled.active_client = lambda: None
        s0 = tly.scan(tab, progress=False, **grid)
        a0 = tly.audit(tab, "g", progress=False, **kw)
    finally:
        tiled.active_client = real
    # to rounding: numpy's sums may pair terms differently in another process (alignment)
    pd.testing.assert_frame_equal(s1.frame, s0.frame, check_exact=False, rtol=1e-12,
                                  atol=1e-12)
    np.testing.assert_array_equal(a1.pvalues, a0.pvalues)
    np.testing.assert_array_equal(a1.reference_pvalues, a0.reference_pvalues)
    for k, v in a0.extra_pvalues.items():
        np.testing.assert_array_equal(a1.extra_pvalues[k], v)
    assert a1.reading == a0.reading


def test_cancel_on_the_cluster_stops_and_cancels_the_tasks(client):
    import time
    tab = _small_table()
    polls = {"n": 0}

    def cancel():
        polls["n"] += 1
        return polls["n"] > 2
    with pytest.raises(tly.errors.Cancelled, match="audit was cancelled"):
        tly.audit(tab, "g", n_sim=60, n_permutations=19, rng=5, progress=False, cancel=cancel)
    deadline = time.monotonic() + 10
    while any(client.processing().values()) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert not any(client.processing().values())          # nothing left running
