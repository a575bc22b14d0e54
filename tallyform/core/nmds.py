"""Non-metric multidimensional scaling (NMDS) from several starts, with Shepard-plot data.

The fit is scikit-learn's non-metric SMACOF (imported lazily, only when NMDS is asked for);
one start is the PCoA configuration, the others are random (seeded through ``rng``). The
best start is kept, centred and rotated to its principal axes; its stress is recomputed
here as Kruskal's stress-1 from the final configuration, together with the monotone fit.
"""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from scipy.spatial.distance import pdist

from .random import as_rng
from .errors import Cancelled, InputError
from .ordination import Ordination, labels_index, as_dissimilarity, axis_names, flip_signs
from .progress import reports_progress

__all__ = ["nmds", "stress_reading", "kruskal_stress"]

#: upper bounds of Kruskal's (1964) verbal scale for stress-1
_STRESS_SCALE = ((0.025, "excellent"), (0.05, "good"), (0.10, "fair"), (0.20, "poor"))


def stress_reading(stress: float) -> str:
    """Kruskal's (1964) verbal reading of stress-1, with what it means for the plot.

    Examples
    --------
    >>> stress_reading(0.04)
    'good (Kruskal 1964): the plot keeps the rank order of the dissimilarities well'
    """
    if not np.isfinite(stress):
        return "not available"
    if stress <= _STRESS_SCALE[0][0]:
        return ("excellent (Kruskal 1964): the plot keeps the rank order of the "
                "dissimilarities almost perfectly")
    if stress <= _STRESS_SCALE[1][0]:
        return "good (Kruskal 1964): the plot keeps the rank order of the dissimilarities well"
    if stress <= _STRESS_SCALE[2][0]:
        return ("fair (Kruskal 1964): the broad pattern is reliable; do not read much into "
                "small distances")
    if stress <= _STRESS_SCALE[3][0]:
        return ("poor (Kruskal 1964): only the broadest pattern is trustworthy; try more "
                "axes")
    return ("very poor (Kruskal 1964): distances in the plot say little about the "
            "dissimilarities; use more axes or another ordination")


def _monotone_fit(dissim: np.ndarray, dist: np.ndarray) -> np.ndarray:
    """Least-squares non-decreasing fit of ``dist`` on ``dissim`` (tied dissimilarities share
    one fitted value, as in the fit)."""
    from sklearn.isotonic import IsotonicRegression
    return IsotonicRegression(out_of_bounds="clip").fit_transform(dissim, dist)


def kruskal_stress(dissim: np.ndarray, dist: np.ndarray) -> tuple[float, np.ndarray]:
    """Stress-1 = sqrt(sum (d - d_hat)^2 / sum d^2) and the monotone fit d_hat (Kruskal 1964).

    ``dissim`` and ``dist`` are condensed vectors (pairs with dissimilarity 0 are skipped,
    as in the fit; their fitted value is NaN).
    """
    used = dissim > 0
    fitted = np.full(dist.shape, np.nan)
    if not used.any():
        return float("nan"), fitted
    fitted[used] = _monotone_fit(dissim[used], dist[used])
    den = float(np.sum(dist[used] ** 2))
    num = float(np.sum((dist[used] - fitted[used]) ** 2))
    return (float(np.sqrt(num / den)) if den > 0 else float("nan")), fitted


@reports_progress("NMDS", knob="n_starts")
def nmds(d, *, n_axes: int = 2, n_starts: int = 20, rng=None, max_iter: int = 300,
         tol: float = 1e-6, progress=None, cancel=None) -> Ordination:
    """Non-metric multidimensional scaling of a dissimilarity.

    Parameters
    ----------
    d : Dissimilarity (or a square matrix)
    n_axes : int, default 2
    n_starts : int, default 20
        Number of starts: the PCoA configuration and ``n_starts - 1`` random ones.
    rng : None, int or numpy.random.Generator
        Seeds the random starts; the same seed gives the same result.
    max_iter : int, default 300
        SMACOF iterations per start.
    tol : float, default 1e-6
        Convergence tolerance of each start (scikit-learn's ``eps``).
    progress : callable(done, total), optional
        Called after every start.
    cancel : callable() -> bool, optional
        Polled before every start; True stops the run with :class:`Cancelled`.

    Returns
    -------
    Ordination
        ``scores`` (``NMDS1``... rotated to principal axes, centred), ``stress`` (Kruskal's
        stress-1 of the kept start), ``stress_reading``, ``shepard`` (one row per pair:
        ``dissimilarity``, ``distance`` in the plot, ``fitted`` monotone value) and
        ``starts`` (stress of every start). No eigenvalues.

    Raises
    ------
    InputError
        Bad options, or too few samples for the number of axes.
    Cancelled
        When ``cancel()`` returned True.

    Notes
    -----
    Stress-1 = sqrt(sum (d_ij - d_hat_ij)^2 / sum d_ij^2) over pairs, with d the distances in
    the configuration and d_hat their least-squares monotone regression on the
    dissimilarities (Kruskal 1964). Pairs with dissimilarity 0 are treated as missing by the
    fit (scikit-learn's convention) and skipped in the stress.

    References
    ----------
    Kruskal (1964) Psychometrika 29: 1-27 and 115-129. de Leeuw (1977) SMACOF, in
    Recent Developments in Statistics. Borg & Groenen (2005) Modern Multidimensional
    Scaling, 2nd ed.

    Examples
    --------
    >>> import numpy as np
    >>> from scipy.spatial.distance import pdist
    >>> from tallyform.core.dissimilarity import Dissimilarity
    >>> x = np.random.default_rng(0).random((10, 3))
    >>> o = nmds(Dissimilarity(pdist(x), measure="euclidean"), n_starts=3, rng=1)
    >>> o.axes, o.stress < 0.2
    (['NMDS1', 'NMDS2'], True)
    """
    d = as_dissimilarity(d)
    n = d.n
    _check_options(n, n_axes, n_starts, max_iter, tol)
    seed_given = int(rng) if isinstance(rng, (int, np.integer)) else None
    rng = as_rng(rng)
    seeds = rng.integers(0, 2 ** 31 - 1, size=int(n_starts))
    dis = np.asarray(d.condensed, dtype=np.float64)
    start = _pcoa_start(d, n_axes, int(seeds[0]))
    best, rows = _run_starts(d.square(dtype=np.float64), dis, start, seeds, n_axes=n_axes,
                             max_iter=max_iter, tol=tol, progress=progress, cancel=cancel)
    stress, X, kept = best
    X = _principal_axes(X)
    dist = pdist(X)
    stress, fitted = kruskal_stress(dis, dist)
    starts = pd.DataFrame(rows).set_index("start")
    starts["kept"] = starts.index == kept + 1
    near = int(np.sum(starts["stress"] <= stress * 1.01 + 1e-12))
    notes = _fit_notes(dis, stress, near, n_starts, n_axes)
    labels = labels_index(d.labels)
    shepard = _shepard(labels, dis, dist, fitted)
    names = axis_names("NMDS", int(n_axes))
    reading = stress_reading(stress)
    prov = {"method": "NMDS", **d.provenance, "n_axes": int(n_axes), "n_starts": int(n_starts),
            "rng": seed_given, "max_iter": int(max_iter), "tol": float(tol),
            "best_start": kept + 1, "starts_reaching_best": near,
            "engine": "scikit-learn non-metric SMACOF"}
    return Ordination(
        method="NMDS", scores=pd.DataFrame(X, index=labels, columns=names),
        eigenvalues=pd.Series(dtype=float, name="eigenvalue"),
        explained=pd.Series(dtype=float, name="explained"),
        scaling="non-metric (only the rank order of the dissimilarities is kept; axes rotated "
                "to principal axes)",
        stress=stress, stress_reading=reading, shepard=shepard, starts=starts,
        provenance=prov, notes=tuple(notes))


def _check_options(n: int, n_axes, n_starts, max_iter, tol) -> None:
    """Refuse bad options and too few samples for the number of axes."""
    for name, val, lo in (("n_axes", n_axes, 1), ("n_starts", n_starts, 1),
                          ("max_iter", max_iter, 1)):
        if isinstance(val, bool) or not isinstance(val, (int, np.integer)) or val < lo:
            raise InputError(f"`{name}` must be a whole number of at least {lo}; got {val!r}.")
    if n < n_axes + 2:
        raise InputError(f"NMDS in {n_axes} axes needs at least {n_axes + 2} samples; "
                         f"got {n}.")
    if not (isinstance(tol, (int, float)) and tol > 0):
        raise InputError(f"`tol` must be a positive number; got {tol!r}.")


def _pcoa_start(d, n_axes: int, seed: int) -> np.ndarray:
    """The PCoA configuration of the first start, padded with small noise when short."""
    from .ordination import pcoa
    n = d.n
    start = pcoa(d, dims=min(n_axes, n - 1)).scores.to_numpy()
    if start.shape[1] < n_axes:  # fewer positive axes than asked: pad with small noise
        pad = np.random.default_rng(seed).normal(
            scale=1e-3 * (np.std(start) if start.size else 1.0), size=(n, n_axes - start.shape[1]))
        start = np.column_stack([start, pad])
    return start


def _run_starts(D, dis, start, seeds, *, n_axes, max_iter, tol, progress, cancel):
    """Fit every start; the best (stress, configuration, index) and one row per start."""
    from sklearn.manifold import MDS  # lazy: scikit-learn is heavy
    n_starts = len(seeds)
    best, rows = None, []
    for i, seed in enumerate(seeds):
        if cancel is not None and cancel():
            raise Cancelled(f"NMDS stopped after {i} of {n_starts} starts.")
        model = MDS(n_components=int(n_axes), metric_mds=False, n_init=1, init="random",
                    metric="precomputed", random_state=int(seed), max_iter=int(max_iter),
                    eps=float(tol), normalized_stress=True)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            X = model.fit_transform(D, init=start.copy() if i == 0 else None)
        stress, _ = kruskal_stress(dis, pdist(X))
        rows.append({"start": i + 1, "init": "PCoA" if i == 0 else "random",
                     "stress": stress, "iterations": int(model.n_iter_)})
        if best is None or stress < best[0]:
            best = (stress, X, i)
        if progress is not None:
            progress(i + 1, int(n_starts))
    return best, rows


def _principal_axes(X: np.ndarray) -> np.ndarray:
    """The configuration centred, rotated to its principal axes, signs fixed."""
    X = X - X.mean(axis=0)
    u, s, vt = np.linalg.svd(X, full_matrices=False)
    X = X @ vt.T
    (X,) = flip_signs(X)
    return X


def _shepard(labels: pd.Index, dis, dist, fitted) -> pd.DataFrame:
    """Shepard-plot data: one row per pair, sorted by dissimilarity then distance."""
    ii, jj = np.triu_indices(len(labels), 1)
    shepard = pd.DataFrame({"sample_a": labels[ii], "sample_b": labels[jj],
                            "dissimilarity": dis, "distance": dist, "fitted": fitted})
    return shepard.sort_values(["dissimilarity", "distance"], kind="stable") \
        .reset_index(drop=True)


def _fit_notes(dis, stress, near, n_starts, n_axes) -> list[str]:
    """Notes on zero dissimilarities, a lone best start and high stress."""
    notes = []
    n_zero = int(np.sum(dis == 0))
    if n_zero:
        notes.append(f"{n_zero} pair(s) of samples have dissimilarity 0; the non-metric fit "
                     "treats them as missing, so they do not hold those samples together.")
    if n_starts > 1 and near == 1:
        notes.append(f"only 1 of {n_starts} starts reached the lowest stress (within 1 %): "
                     "the solution may be a local minimum; try more starts.")
    if stress > _STRESS_SCALE[3][0]:
        notes.append(f"stress {stress:.3f} is high: try n_axes={n_axes + 1} or a PCoA.")
    return notes
