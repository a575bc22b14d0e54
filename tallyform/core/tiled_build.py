"""Building tiled dissimilarities: ``dissimilarity(..., chunks=N)``.

The samples are split into blocks of N rows; every tile D[I, J] (I <= J) is one task that
runs the measure's own kernel (:mod:`tallyform.core.kernels`, compiled loops and sparse
kernels included) on the rows of both blocks and keeps the cross part. The input rows travel
in the task graph, so the scheduler can recompute a tile that a dead worker held. Products
over the tiles are in :mod:`tallyform.core.tiled`.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from .dissimilarity import measure_properties, resolve_dtype
from .errors import InputError
from .tiled import TiledDissimilarity, Tiles, need_dask, put_blocks

__all__ = ["tiled_dissimilarity"]


def _make_tile(xi, xj, same: bool, measure: str, params: dict, dtype: str, i0: int, j0: int,
               labels_i, labels_j):
    """One tile D[I, J] from the row blocks of I and J with the measure's kernel."""
    from .measures import MeasureContext, get_measure
    from scipy.spatial.distance import squareform
    rec = get_measure(measure)
    xi = np.asarray(xi, dtype=np.float64)
    ctx = MeasureContext(None, None, dict(params), np.dtype(dtype))
    if same:
        tile = squareform(np.asarray(rec.pairwise(xi, ctx), dtype=np.float64), checks=False)
    else:
        xj = np.asarray(xj, dtype=np.float64)
        ti, tj = xi.shape[0], xj.shape[0]
        m = ti + tj
        cond = rec.pairwise(np.vstack([xi, xj]), ctx)
        tile = np.empty((ti, tj), dtype=np.float64)
        for a in range(ti):                  # row a's pairs with block J are contiguous
            s = m * a - a * (a + 1) // 2 + (ti - a - 1)
            tile[a] = cond[s:s + tj]
        del cond
    bad = ~(np.isfinite(tile) & (tile >= 0))
    if bad.any():
        r, c = np.argwhere(bad)[0]
        raise InputError(f"the {rec.label} dissimilarity between {labels_i[r]!r} and "
                         f"{labels_j[c]!r} is undefined for these data.")
    if np.dtype(dtype) == np.float64:       # kept squared: every product needs D^2
        tile *= tile
        return tile
    return tile.astype(dtype, copy=False)


def _prepare_block(x, transform, measure: str, params: dict, labels, r0: int):
    """Checks and transformation of one row block of a Dask table (on a worker)."""
    from .measures import get_measure
    from .transforms import get_transform
    x = np.asarray(x, dtype=np.float64)
    bad = ~(np.isfinite(x) & (x >= 0))
    if bad.any():
        r, c = np.argwhere(bad)[0]
        raise InputError(f"sample {labels[r]!r} (row {r0 + r + 1}), column {c + 1}: "
                         f"{float(x[r, c])!r} is not a count (counts must be finite and >= 0).")
    out = get_transform(transform).apply(x, labels=pd.Index(labels))
    rec = get_measure(measure)
    empty = np.flatnonzero(~(out != 0).any(axis=1))
    if empty.size and rec.empty_samples == "error":
        raise InputError(f"the {rec.label} measure is undefined for samples with nothing in "
                         f"them; sample {labels[empty[0]]!r} (row {r0 + empty[0] + 1}) is "
                         "all 0.", hint="Remove empty samples first.")
    return out


# ---------------------------------------------------------------------- building
def _check_chunks(chunks, n: int) -> int:
    if isinstance(chunks, bool) or not isinstance(chunks, (int, np.integer)) or chunks < 2:
        raise InputError(f"`chunks` must be a whole number of samples >= 2; got {chunks!r}.")
    return int(min(chunks, n))


def _is_dask(data) -> bool:
    mod = type(data).__module__ or ""
    return mod.startswith("dask.") or mod.startswith("dask_expr")


def tiled_dissimilarity(data, measure, *, transform=None, dtype="float64", chunks: int,
                        **params) -> TiledDissimilarity:
    """The body of ``dissimilarity(..., chunks=N)`` (see :func:`tallyform.dissimilarity`)."""
    from .measures import get_measure
    from .transforms import get_transform
    need_dask()
    dt = resolve_dtype(dtype)
    rec = get_measure(measure)
    if rec.pairwise is None:
        raise InputError(f"the {rec.label} measure has a feature matrix: its tests and "
                         "ordinations already run in O(n p) memory without tiles.",
                         hint=f"Call dissimilarity(table, {rec.name!r}) without chunks=.")
    if rec.name == "gower":
        raise InputError("Gower's measure scales every taxon by its range over all samples, "
                         "which tiles computed block by block cannot share.",
                         hint="Use another measure for tiles (bray_curtis, manhattan, "
                              "canberra, ...), or compute it without chunks= on a subset.")
    tr = get_transform(transform)
    unknown = sorted(set(params) - set(rec.options))
    if unknown:
        raise InputError(f"measure {rec.name!r} has no option(s) {unknown}.")
    if _is_dask(data):
        return _from_dask(data, rec, tr, dt, chunks, params)
    from .dissimilarity import prepare_measure
    tab, rec, tr, x, ctx = prepare_measure(data, measure, transform, params, dt)
    n = x.shape[0]
    chunks = _check_chunks(chunks, n)
    edges = np.unique(np.r_[np.arange(0, n, chunks), n])
    labels = tab.sample_labels
    blocks = put_blocks([np.ascontiguousarray(x[edges[b]:edges[b + 1]])
                   for b in range(len(edges) - 1)])
    opts = {k: ctx.params.get(k, v) for k, v in rec.options.items()}
    return _assemble(blocks, edges, labels, rec, tr, dt, chunks, dict(ctx.params), opts,
                     measure_properties(rec, tr, ctx), tuple(ctx.notes))


def _from_dask(data, rec, tr, dt, chunks, params):
    import dask
    from .measures import MeasureContext
    from . import transforms as T
    if not isinstance(tr, (T.Identity, T.Power, T.Log1p, T.Presence, T.Profile, T.Hellinger,
                           T.Chord)):
        raise InputError(f"the transformation {tr.name!r} needs every sample at once; a Dask "
                         "table is transformed block by block.",
                         hint="Use one that acts on each sample alone (a power such as "
                              "'sqrt', 'log1p', 'presence', 'profile', 'hellinger', "
                              "'chord'), or apply it before.")
    if hasattr(data, "to_dask_array"):                      # a Dask DataFrame
        labels = [str(x) for x in data.index.compute()]
        arr = data.to_dask_array(lengths=True)
    else:
        arr = data
        labels = [f"s{i + 1}" for i in range(arr.shape[0])]
    if arr.ndim != 2:
        raise InputError("the Dask table must be 2-D (samples x taxa).")
    n = int(arr.shape[0])
    if n < 2:
        raise InputError("a dissimilarity needs at least 2 samples.")
    chunks = _check_chunks(chunks, n)
    arr = arr.rechunk((chunks, arr.shape[1])).astype(np.float64)
    edges = np.r_[0, np.cumsum(arr.chunks[0])]
    prep = dask.delayed(_prepare_block, pure=True)
    raw = arr.to_delayed()[:, 0]
    blocks = [prep(raw[b], tr.name, rec.name, dict(params), labels[edges[b]:edges[b + 1]],
                   int(edges[b])) for b in range(len(raw))]
    ctx = MeasureContext(pd.Index(labels), None, dict(params), dt)
    opts = {k: params.get(k, v) for k, v in rec.options.items()}
    notes = ("computed from a Dask table block by block; empty samples were checked per "
             "block",)
    return _assemble(blocks, edges, labels, rec, tr, dt, chunks, dict(params), opts,
                     measure_properties(rec, tr, ctx), notes)


def _assemble(blocks, edges, labels, rec, tr, dt, chunks, params, opts, props, notes):
    import dask
    make = dask.delayed(_make_tile, pure=True)
    nb = len(edges) - 1
    lab = [list(map(str, labels[edges[b]:edges[b + 1]])) for b in range(nb)]
    keys, lazy = [], []
    for i in range(nb):
        for j in range(i, nb):
            keys.append((i, j))
            lazy.append(make(blocks[i], blocks[j] if j != i else None, i == j, rec.name,
                             params, dt.name, int(edges[i]), int(edges[j]), lab[i], lab[j]))
    persisted = persist_spread(lazy)
    tiles = Tiles(int(edges[-1]), edges, dict(zip(keys, persisted)), dt)
    return TiledDissimilarity(tiles, labels, chunks=chunks, measure=rec.name,
                              transform=tr.name, params=opts, properties=props, notes=notes,
                              dtype=dt)


def persist_spread(lazy: list) -> list:
    """Persist the tiles, spread evenly over the workers of the active client.

    Left to itself the scheduler may put every tile on one worker (it does on a busy
    machine), and that worker then holds the whole upper triangle. Here tile k is placed on
    worker k mod W (workers in address order), so each holds about 1/W of the tiles. The
    placement is loose: a tile whose worker has died is recomputed on any other, so the
    result never depends on which workers are alive. Without a client (local threads) the
    tiles are persisted in this process as before.
    """
    import warnings

    import dask
    from .tiled import active_client
    client = active_client()
    workers = sorted(client.scheduler_info()["workers"]) if client is not None else []
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=".*[Ll]arge graph.*")
        warnings.filterwarnings("ignore", message=".*[Ll]arge object.*")
        if len(workers) < 2:
            return list(dask.persist(*lazy))
        out = [None] * len(lazy)
        for w, addr in enumerate(workers):
            idx = list(range(w, len(lazy), len(workers)))
            if idx:
                got = client.persist([lazy[k] for k in idx], workers=[addr],
                                     allow_other_workers=True)
                for k, g in zip(idx, got):
                    out[k] = g
        return out
