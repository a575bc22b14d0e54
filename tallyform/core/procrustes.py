"""Keep an ordination's orientation from one view to the next (orthogonal Procrustes).

An ordination's axes are defined up to sign (and, for near-equal eigenvalues, up to a
rotation within their plane), so a small change of transform or measure can flip the
picture although the samples barely moved. :func:`align_ordination` rotates/reflects the
new scores onto the previous ones by the orthogonal matrix R minimising
||new R - previous|| over the samples both share (orthogonal Procrustes, Gower 1975;
solved by ``scipy.linalg.orthogonal_procrustes``). Distances between samples are unchanged.

When R is a pure reflection of axes (a sign flip) the axes stay the ordination's own; when it
also rotates them by more than half a degree, the axes mix the leading axes and say so in
their labels and in a note.

Reference
---------
Gower, J. C. (1975). Generalized Procrustes analysis. Psychometrika 40, 33-51.
"""
from __future__ import annotations

import dataclasses
import math

import numpy as np
import pandas as pd
import scipy.linalg

from .errors import InputError

__all__ = ["align_ordination", "procrustes_rotation", "MIN_ANGLE"]

MIN_ANGLE = 0.5          # degrees: smaller rotations are dropped, keeping only sign flips


def procrustes_rotation(new, previous) -> np.ndarray:
    """The orthogonal R (k x k) minimising ||new R - previous||_F (rows: the same samples)."""
    a = np.asarray(new, dtype=np.float64)
    b = np.asarray(previous, dtype=np.float64)
    if a.shape != b.shape or a.ndim != 2:
        raise InputError(f"the two score tables must have the same shape; got {a.shape} and "
                         f"{b.shape}.")
    r, _ = scipy.linalg.orthogonal_procrustes(a, b)
    return r


def _angle(r: np.ndarray) -> float:
    """Rotation angle (degrees) of a 2 x 2 orthogonal matrix, a reflection factored out."""
    if r.shape != (2, 2):
        return 0.0 if np.allclose(np.abs(r), np.eye(r.shape[0]), atol=1e-9) else 90.0
    if np.linalg.det(r) < 0:
        r = r @ np.diag([1.0, -1.0])
    return math.degrees(math.atan2(r[1, 0], r[0, 0]))


def align_ordination(ordination, previous, *, dims: int = 2):
    """``ordination`` with its first ``dims`` axes rotated/reflected onto ``previous``.

    Parameters
    ----------
    ordination : Ordination
    previous : Ordination, DataFrame of scores, or None
        The view to follow (scores indexed by sample label). None, or fewer than 3 shared
        samples, returns ``ordination`` unchanged.
    dims : int, default 2
        The axes aligned (the plane on screen).

    Returns
    -------
    Ordination
        The same ordination (eigenvalues, shares, notes) with rotated scores;
        ``provenance["rotation"]`` holds the matrix, the angle in degrees and whether the
        axes now mix (``mixed``).
    """
    if previous is None:
        return ordination
    prev = getattr(previous, "scores", previous)
    if not isinstance(prev, pd.DataFrame):
        raise InputError("`previous` must be an Ordination or a DataFrame of scores.")
    scores = ordination.scores
    k = min(dims, scores.shape[1], prev.shape[1])
    common = scores.index.intersection(prev.index)
    if k < 1 or len(common) < 3:
        return ordination
    a = scores.loc[common].iloc[:, :k].to_numpy(dtype=float)
    b = prev.loc[common].iloc[:, :k].to_numpy(dtype=float)
    r = procrustes_rotation(a, b)
    angle = _angle(r)
    mixed = abs(angle) > MIN_ANGLE
    if not mixed:                       # keep the axes pure: only the sign of each axis
        r = np.diag(np.where(np.diag(r) < 0, -1.0, 1.0))
    if np.allclose(r, np.eye(k)):
        return ordination
    new = scores.copy()
    new.iloc[:, :k] = scores.iloc[:, :k].to_numpy(dtype=float) @ r
    rotation = {"matrix": r.tolist(), "angle": float(angle), "mixed": bool(mixed),
                "dims": int(k)}
    notes = tuple(ordination.notes)
    if mixed:
        notes += (f"the axes were rotated by {abs(angle):.0f} degrees onto the previous view "
                  "(orthogonal Procrustes, Gower 1975) so that points move smoothly; "
                  "distances between samples are unchanged, and each axis now mixes the "
                  "leading axes, whose shares hold for the plane together.",)
    return dataclasses.replace(ordination, scores=new, notes=notes,
                               provenance={**ordination.provenance, "rotation": rotation})
