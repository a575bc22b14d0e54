"""The permutation engine, the dispersion test and PCoA on a tiled dissimilarity.

:class:`TiledResponse` gives the permutation engine (:mod:`tallyform.core.permutation`) and
the error strata (:mod:`tallyform.core.strata`) what they ask of a response, with the Gower
matrix replaced by a :class:`tallyform.core.tiled.TiledGower` operator: tr(R), q' R q for a
few columns, the residual of a model and the unit means, each from tile products reduced
on the workers. The permutations themselves come from the same schemes and seeded shuffles
as in memory, so the same ``rng`` gives the same relabellings and the same p-values.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .permutation import Response
from .tiled import TiledDissimilarity, TiledGower

__all__ = ["TiledResponse", "tiled_response", "tiled_pcoa"]


@dataclass(frozen=True, eq=False)
class TiledResponse(Response):
    """A :class:`Response` whose ``gower`` is a tile operator (distance path)."""

    def total(self) -> float:
        return float(self.gower.trace())

    def quad(self, Q: np.ndarray) -> np.ndarray:
        if Q.shape[1] == 0:
            return np.zeros(0)
        return self.gower.quad(Q)

    def residual(self, Q: np.ndarray) -> "TiledResponse":
        if Q.shape[1] == 0:
            return self
        return TiledResponse(self.n, gower=self.gower.then(("basis", np.array(Q))))

    def centred_within(self, codes: np.ndarray) -> "TiledResponse":
        codes = np.asarray(codes, dtype=np.intp)
        return TiledResponse(self.n, gower=self.gower.then(("units", codes)))

    def unit_means(self, codes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """As :meth:`Response.unit_means`, the Gower matrix of the unit centroids E' G E
        from one pass of tile products (E: unit indicators / unit sizes)."""
        codes = np.asarray(codes, dtype=np.intp)
        m = int(codes.max()) + 1
        size = np.bincount(codes, minlength=m).astype(float)
        E = np.zeros((self.n, m))
        E[np.arange(self.n), codes] = 1.0 / size[codes]
        gram = E.T @ (self.gower @ E)
        gram = (gram + gram.T) / 2
        vals, vecs = np.linalg.eigh(gram)
        tol = 1e-12 * max(float(np.abs(vals).max()), 1e-300)
        keep = np.abs(vals) > tol
        return vecs[:, keep] * np.sqrt(np.abs(vals[keep])), np.sign(vals[keep])


def tiled_response(d: TiledDissimilarity, path: str = "auto") -> TiledResponse:
    if path == "features":
        raise InputError(f"the tiled {d.measure!r} dissimilarity carries no feature matrix; "
                         "use path='distances'.")
    return TiledResponse(d.n, gower=TiledGower(d, ()))


def tiled_pcoa(d: TiledDissimilarity, *, correction=None, dims=None):
    """Leading PCoA axes of a tiled dissimilarity: ARPACK (Lehoucq et al. 1998) on the tile
    operator, every product a pass of tile tasks; same start vector and Krylov width as
    the in-memory operator path, so the axes agree with it."""
    from scipy.sparse.linalg import LinearOperator
    from .eigen import leading_eigen
    from .ordination import pcoa_result
    n = d.n
    if dims is None:
        raise InputError("a tiled dissimilarity gives the leading axes only.",
                         hint="Pass dims=k (e.g. pcoa(d, dims=3)).")
    if isinstance(dims, bool) or not isinstance(dims, (int, np.integer)) or \
            not 1 <= dims < n - 1:
        raise InputError(f"`dims` must be a whole number from 1 to {n - 2}; got {dims!r}.")
    if correction is not None:
        raise InputError(f"the {correction} correction needs the whole matrix, which a tiled "
                         "dissimilarity never gathers.",
                         hint="Use correction=None (the note reports the smallest "
                              "eigenvalue), or a Euclidean measure.")
    op = TiledGower(d, ())
    lin = LinearOperator((n, n), matvec=op.__matmul__, matmat=op.__matmul__, dtype=np.float64)
    values, vectors = leading_eigen(lin, int(dims))
    notes = []
    if not d.properties.get("euclidean", False):
        # the in-memory path finds the smallest eigenvalue by a second ARPACK run; on tiles
        # that costs as many passes again, so it is left out and said so
        notes.append(f"the {d.measure} measure is not Euclidean, so some eigenvalues may be "
                     f"negative; only the {dims} leading axes were computed from the tiles, "
                     "so the share held by negative eigenvalues is not known.")
    prov = {"method": "PCoA", **d.provenance, "correction": None, "correction_constant": 0.0,
            "dims": int(dims), "path": "tiles on Dask (leading axes, ARPACK)"}
    return pcoa_result(d, values, vectors, d.total_ss(), complete=False, dims=int(dims),
                        correction=None, notes=notes, provenance=prov)
