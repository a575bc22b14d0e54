"""Tiled dissimilarities on Dask: the n x n matrix kept as square tiles on the workers.

Past what one machine holds (float64 distances need 8 n^2 bytes: 3.2 GB at 20 000 samples,
80 GB at 100 000), :func:`tallyform.dissimilarity` with ``chunks=N`` splits the samples
into blocks of N rows and computes every tile D[I, J] (I <= J) as one task from the two row
blocks, with the measure's own compiled kernel (the kernel runs on the rows of both blocks
and the cross part is kept). The tiles are persisted on the workers of the active
``dask.distributed`` client, spread evenly (tile k on worker k mod W, a loose placement:
a tile whose worker died is recomputed on another), or in this process's memory (local
threads) when no client is active. The full matrix is never gathered. float64 tiles hold
D^2 (what every product needs; squared once), float32 tiles hold D (squared in float64 at
every use, as the in-memory path squares its float32 distances).

Everything the tests and the partial eigensolver need is a product of the tiles with a
few vectors. With A = D^2 (elementwise) and G = -1/2 C A C (Gower 1966), for a block of
centred vectors W (n x c): G W = -1/2 C (A W), and diag(W' G W) = -1/2 diag(W' A W). Each
tile contributes A[I, J] W[J] (and its transpose A[I, J]' W[I]) to the first, and
W[I]' A[I, J] W[J] (twice, off the diagonal) to the second: one task per tile, reduced on
the cluster, so only c numbers per tile (or one n x c block per row of tiles) travel.
The residual matrices of the permutation engine, (I - H) G (I - H), are never formed
either: the projections are applied to the vectors before and after the tile products.

Cost per pass over the tiles: n^2 c multiply-adds (c vectors), spread over the workers; a
PERMANOVA with P permutations and k model columns makes about P k / B passes with B
permutations per batch (see :mod:`tallyform.core.permutation`).
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd

from .dissimilarity import Dissimilarity
from .errors import InputError

__all__ = ["TiledDissimilarity", "TiledGower", "active_client"]

_FAN_IN = 8


def active_client():
    """The active ``dask.distributed`` client, or None (then Dask runs on local threads)."""
    try:
        from distributed import default_client
    except ImportError:
        return None
    try:
        return default_client()
    except ValueError:
        return None


def need_dask():
    try:
        import dask  # noqa: F401
    except ImportError:
        raise InputError("tiled dissimilarities need Dask.",
                         hint='Install it with: pip install "tallyform[dask]"') from None


def put_blocks(blocks: list) -> list:
    """Row blocks as data of the task graph (not scattered futures): a worker that dies
    takes nothing with it that the scheduler cannot send again, so lost tiles and lost
    partial sums are recomputed and the result is the same."""
    import dask
    return [dask.delayed(b, pure=False, traverse=False) for b in blocks]


def _compute(items: list) -> list:
    import warnings

    import dask
    with warnings.catch_warnings():     # the vectors travel in the graph on purpose
        warnings.filterwarnings("ignore", message=".*[Ll]arge graph.*")
        warnings.filterwarnings("ignore", message=".*[Ll]arge object.*")
        return list(dask.compute(*items))


def _tree_sum(parts: list):
    """Sum of delayed arrays by a tree of tasks (fan-in 8), reduced where they lie."""
    import dask
    add = dask.delayed(_add, pure=True)
    while len(parts) > 1:
        parts = [add(*parts[i:i + _FAN_IN]) for i in range(0, len(parts), _FAN_IN)]
    return parts[0]


def _add(*parts):
    out = np.array(parts[0], dtype=np.float64, copy=True)
    for p in parts[1:]:
        out += p
    return out


# ---------------------------------------------------------------------- tile tasks
def _squares(tile) -> np.ndarray:
    """D^2 of a tile: float64 tiles are kept squared, float32 ones are squared here."""
    if tile.dtype == np.float64:
        return tile
    a = np.asarray(tile, dtype=np.float64)
    a *= a
    return a


def _tile_quad(tile, wi, wj, same: bool):
    """Contribution of one tile to diag(W' A W), A = D^2 (both triangles)."""
    a = _squares(tile)
    if same:
        return np.einsum("ij,ij->j", wi, a @ wi)
    return 2.0 * np.einsum("ij,ij->j", wi, a @ wj)


def _tile_matmul(tile, wi, wj, same: bool):
    """Contribution of one tile to A W: (rows of I, rows of J) (None for a diagonal tile)."""
    a = _squares(tile)
    if same:
        return a @ wi, None
    return a @ wj, a.T @ wi


def _first(pair):
    return pair[0]


def _second(pair):
    return pair[1]


def _tile_sum(tile):
    return float(_squares(tile).sum())


# ---------------------------------------------------------------------- tiles
class Tiles:
    """The persisted upper tiles of D and the products reduced over them."""

    def __init__(self, n: int, edges: np.ndarray, tiles: dict, dtype):
        self.n = n
        self.edges = edges
        self.tiles = tiles                      # (bi, bj), bi <= bj -> persisted delayed
        # float64 tiles hold D^2 (what every product needs), float32 tiles hold D
        self.dtype = np.dtype(dtype)
        self.passes = 0                         # passes over the tiles (for benchmarks)

    @property
    def n_blocks(self) -> int:
        return len(self.edges) - 1

    def _blocks(self, W: np.ndarray) -> list:
        e = self.edges
        return put_blocks([np.ascontiguousarray(W[e[b]:e[b + 1]]) for b in range(self.n_blocks)])

    def quad(self, W: np.ndarray) -> np.ndarray:
        """diag(W' A W) for W (n x c), A = D^2."""
        import dask
        blocks = self._blocks(W)
        task = dask.delayed(_tile_quad, pure=True)
        parts = [task(t, blocks[i], blocks[j], i == j) for (i, j), t in self.tiles.items()]
        self.passes += 1
        return np.asarray(_compute([_tree_sum(parts)])[0], dtype=np.float64)

    def matmul(self, W: np.ndarray) -> np.ndarray:
        """A W for W (n x c), A = D^2."""
        import dask
        blocks = self._blocks(W)
        task = dask.delayed(_tile_matmul, pure=True, nout=2)
        rows: list[list] = [[] for _ in range(self.n_blocks)]
        for (i, j), t in self.tiles.items():
            left, right = task(t, blocks[i], blocks[j], i == j)
            rows[i].append(left)
            if i != j:
                rows[j].append(right)
        self.passes += 1
        out = _compute([_tree_sum(r) for r in rows])
        return np.vstack(out)

    def total(self) -> float:
        """Sum of A over the whole matrix (both triangles)."""
        import dask
        task = dask.delayed(_tile_sum, pure=True)
        parts = [dask.delayed(float)(task(t)) * (1.0 if i == j else 2.0)
                 for (i, j), t in self.tiles.items()]
        return float(_compute([_tree_sum(parts)])[0])


class TiledDissimilarity(Dissimilarity):
    """Dissimilarities stored as square tiles on a Dask cluster (or local threads).

    Made by :func:`tallyform.dissimilarity` with ``chunks=``. Accepted by
    :func:`permanova`, :func:`pairwise_permanova`, :func:`dispersion_test` (centroids) and
    :func:`pcoa` (with ``dims=``), which reduce tile products on the workers. Anything that
    needs the whole matrix (``condensed``, ``square()``, ``gower()``, NMDS, corrections)
    raises :class:`InputError` naming these alternatives.

    Attributes
    ----------
    chunks : int
        Samples per block (tiles are chunks x chunks).
    n_tiles : int
        Tiles held (the upper triangle, diagonal included).
    array : dask.array.Array
        The n x n matrix as a lazy Dask array (the lower tiles are transposes).
    """

    def __init__(self, tiles: Tiles, labels, *, chunks: int, measure: str, transform=None,
                 params=None, properties=None, notes=(), dtype=np.float64, index=None,
                 parent=None):
        self._dtype = np.dtype(dtype)
        self._condensed = None
        self._features = None
        self._cache = {}
        self._tiles = tiles
        self._index = index                  # positions among the tiles' samples, or None
        self._parent = parent
        self.chunks = int(chunks)
        self.labels = pd.Index([str(x) for x in labels], dtype=object, name="sample")
        if self.labels.has_duplicates:
            raise InputError(f"sample labels repeat: "
                             f"{sorted(set(self.labels[self.labels.duplicated()]))[:8]}.")
        self.measure = str(measure)
        self.transform = None if transform is None else str(transform)
        self.params = dict(params or {})
        self.properties = dict(properties or {})
        self.notes = tuple(notes)

    # ---------------------------------------------------------------- refusals
    def refuse(self, what: str):
        """Raise the InputError of a call that needs the whole matrix."""
        self._whole(what)

    def _whole(self, what: str):
        raise InputError(
            f"{what} needs the whole {self.n} x {self.n} matrix, which a tiled dissimilarity "
            "never gathers.",
            hint="Tiled dissimilarities work with permanova, pairwise_permanova, "
                 "dispersion_test (centre='mean') and pcoa(d, dims=k); for anything else "
                 "compute the dissimilarity without chunks= on a subset that fits in memory.")

    @property
    def condensed(self):
        self._whole("the condensed vector")

    def square(self, dtype=None):
        self._whole("square()")

    def gower(self):
        self._whole("gower()")

    def spectrum(self, *, compute: bool = True):
        if not compute:
            return None
        self._whole("the full spectrum")

    def to_frame(self):
        self._whole("to_frame()")

    # ---------------------------------------------------------------- views
    @property
    def n_tiles(self) -> int:
        return len(self._tiles.tiles)

    @property
    def array(self):
        """The n x n matrix as a lazy Dask array (computing it all gathers n^2 numbers)."""
        import dask.array as da
        t = self._tiles
        e = t.edges
        nb = t.n_blocks
        rows = []
        for i in range(nb):
            row = []
            for j in range(nb):
                key = (i, j) if i <= j else (j, i)
                shape = (e[i + 1] - e[i], e[j + 1] - e[j])
                blk = da.from_delayed(t.tiles[key], shape=shape[::-1] if i > j else shape,
                                      dtype=t.dtype)
                row.append(blk.T if i > j else blk)
            rows.append(row)
        arr = da.block(rows)
        if t.dtype == np.float64:                # float64 tiles hold D^2
            arr = da.sqrt(arr)
        if self._index is not None:
            arr = arr[self._index][:, self._index]
        return arr

    def operator(self) -> "TiledGower":
        """G = -1/2 C D^2 C as a tile operator."""
        return TiledGower(self, ())

    def total_ss(self) -> float:
        """Sum of squared distances / n = tr(G), reduced over the tiles."""
        if "total" not in self._cache:
            if self._index is None:
                self._cache["total"] = self._tiles.total() / (2.0 * self.n)
            else:
                ones = np.ones((self.n, 1))
                self._cache["total"] = float(self.sq_quad(ones)[0]) / (2.0 * self.n)
        return self._cache["total"]

    def sq_matmul(self, W: np.ndarray) -> np.ndarray:
        """D^2 W (elementwise squares of the distances times W), W (n x c)."""
        return self._embed_call(self._tiles.matmul, W, out_rows=True)

    def sq_quad(self, W: np.ndarray) -> np.ndarray:
        """diag(W' D^2 W), W (n x c)."""
        return self._embed_call(self._tiles.quad, W, out_rows=False)

    def _embed_call(self, fn, W, *, out_rows: bool):
        W = np.asarray(W, dtype=np.float64)
        if self._index is None:
            return fn(W)
        full = np.zeros((self._tiles.n, W.shape[1]))
        full[self._index] = W
        out = fn(full)
        return out[self._index] if out_rows else out

    def subset(self, which) -> "TiledDissimilarity":
        """The same tiles seen through a subset of the samples (no tile is recomputed; each
        product still passes over every tile)."""
        from .dissimilarity import subset_positions
        idx = subset_positions(self.labels, which)
        base = idx if self._index is None else self._index[idx]
        return TiledDissimilarity(self._tiles, self.labels[idx], chunks=self.chunks,
                                  measure=self.measure, transform=self.transform,
                                  params=self.params, properties=self.properties,
                                  notes=self.notes, dtype=self._dtype, index=base)

    def centroid_distances_squared(self, codes: np.ndarray) -> np.ndarray:
        """z_i^2 to the group centroid: (1/n_g) sum_l d_il^2 - (1/(2 n_g^2)) sum_lm d_lm^2
        over i's group, from one pass of D^2 times the group indicators."""
        codes = np.asarray(codes, dtype=np.intp)
        g = int(codes.max()) + 1
        onehot = np.zeros((self.n, g))
        onehot[np.arange(self.n), codes] = 1.0
        m = self.sq_matmul(onehot)
        size = np.bincount(codes, minlength=g).astype(float)
        block = np.array([m[codes == k, k].sum() for k in range(g)])
        return m[np.arange(self.n), codes] / size[codes] - block[codes] / (2.0 * size[codes] ** 2)

    @property
    def provenance(self) -> dict:
        return {**super().provenance, "chunks": self.chunks, "tiled": True}

    def __repr__(self) -> str:
        tr = f", transform={self.transform!r}" if self.transform else ""
        return (f"TiledDissimilarity({self.measure!r}{tr}, {self.n} samples, "
                f"{self.n_tiles} tiles of {self.chunks})")

    def _repr_html_(self) -> str:
        return f"<p><b>{self!r}</b></p>".replace("<T", "&lt;T")


# ---------------------------------------------------------------------- the operator
class TiledGower:
    """P G P for a tiled dissimilarity, with P a product of projections (never formed).

    ``steps`` are applied in order: ("basis", Q) removes the span of the orthonormal Q,
    ("units", codes) removes the mean of every unit. R_k = (I - H_k) R_{k-1} (I - H_k), with
    R_0 = G = -1/2 C A C.
    """

    def __init__(self, d: TiledDissimilarity, steps: tuple):
        self.d = d
        self.steps = steps
        self.n = d.n
        self.shape = (d.n, d.n)
        self.ndim = 2
        self.dtype = np.dtype(np.float64)
        self._trace = None

    def then(self, step) -> "TiledGower":
        return TiledGower(self.d, self.steps + (step,))

    @staticmethod
    def _project(step, W: np.ndarray) -> np.ndarray:
        kind, val = step
        if kind == "basis":
            return W - val @ (val.T @ W)
        codes = val
        m = int(codes.max()) + 1
        sums = np.zeros((m, W.shape[1]))
        np.add.at(sums, codes, W)
        size = np.bincount(codes, minlength=m).astype(float)
        return W - (sums / size[:, None])[codes]

    def _pre(self, W: np.ndarray) -> np.ndarray:
        for step in reversed(self.steps):
            W = self._project(step, W)
        return W - W.mean(axis=0)

    def _post(self, W: np.ndarray) -> np.ndarray:
        W = W - W.mean(axis=0)
        for step in self.steps:
            W = self._project(step, W)
        return W

    def __matmul__(self, W):
        W = np.asarray(W, dtype=np.float64)
        vec = W.ndim == 1
        W = W[:, None] if vec else W
        if W.shape[1] == 0:
            return np.zeros_like(W)
        out = self._post(-0.5 * self.d.sq_matmul(self._pre(W)))
        return out[:, 0] if vec else out

    def __rmatmul__(self, U):
        U = np.asarray(U, dtype=np.float64)
        if U.ndim == 1:
            return self @ U
        return (self @ U.T).T

    def quad_rows(self, U: np.ndarray) -> np.ndarray:
        """u' R u for every row u of U (c x n), reduced on the workers."""
        U = np.asarray(U, dtype=np.float64)
        if U.shape[0] == 0:
            return np.zeros(0)
        return -0.5 * self.d.sq_quad(self._pre(U.T))

    def quad(self, Q: np.ndarray) -> np.ndarray:
        return self.quad_rows(np.asarray(Q).T)

    def trace(self) -> float:
        """tr(R_k) = tr(R_{k-1}) - tr(H_k R_{k-1}), from the quadratic forms of H_k's basis."""
        if self._trace is None:
            if not self.steps:
                self._trace = float(self.d.total_ss())
            else:
                prev = TiledGower(self.d, self.steps[:-1])
                self._trace = prev.trace() - float(prev.quad(_basis(self.steps[-1], self.n))
                                                   .sum())
        return self._trace

    def diagonal(self) -> np.ndarray:
        """diag(R), for projections that commute (nested or orthogonal spans): with
        P = I - B B', R_ii = -1/2 [(B' A B)_(i) - 2 (A B B')_ii] (A_ii = 0)."""
        parts = [np.full((self.n, 1), 1.0 / math.sqrt(self.n))]
        parts += [_basis(s, self.n) for s in self.steps]
        u, s, _ = np.linalg.svd(np.hstack(parts), full_matrices=False)
        B = u[:, s > 1e-10 * s[0]]                  # the combined span (nested spans repeat)
        AB = self.d.sq_matmul(B)
        M = B.T @ AB
        return -0.5 * (np.einsum("ij,ij->i", B @ M, B) - 2.0 * np.einsum("ij,ij->i", AB, B))


def _basis(step, n: int) -> np.ndarray:
    kind, val = step
    if kind == "basis":
        return val
    codes = np.asarray(val, dtype=np.intp)
    m = int(codes.max()) + 1
    size = np.bincount(codes, minlength=m).astype(float)
    E = np.zeros((n, m))
    E[np.arange(n), codes] = 1.0 / np.sqrt(size[codes])
    return E
