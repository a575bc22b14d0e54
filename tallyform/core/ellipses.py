"""Per-group ellipses on two ordination axes: confidence, prediction, data and bootstrap.

An ellipse is a centre m, a 2 x 2 shape matrix S and a constant c: the points x with
(x - m)' S^{-1} (x - m) <= c. It is reported as centre, semi-axes (major first) and the
angle of the major axis (radians and degrees, counter-clockwise from the first axis), with
the constant named, so that a plot legend can say what the ellipse means.

- ``confidence``: region for the group's true centre. S = sample covariance (divisor
  n - 1), c = 2 (n - 1) / (n (n - 2)) F_{2, n-2}(level) (Hotelling 1931).
- ``prediction``: region for one new sample of the group: (n + 1) times that constant.
- ``data``: normal-theory region holding ``level`` of the samples: c = chi-square_2(level)
  (5.991 at 95 %).
- ``bootstrap``: S = covariance of bootstrap centroids (resampling the group's samples
  with replacement), c = the ``level`` quantile of their squared Mahalanobis distances to
  the observed centre (Efron & Tibshirani 1993).

Groups with fewer than 3 samples get no ellipse; they are listed in ``notes``.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats

from .random import as_rng
from .errors import DesignError, InputError
from .results import ResultMixin

__all__ = ["EllipseSet", "group_ellipses", "ellipse_constant", "ellipse_from_shape",
           "ellipse_outline", "inside_ellipse", "ELLIPSE_KINDS"]

ELLIPSE_KINDS = ("confidence", "prediction", "data", "bootstrap")
_CONSTANT_NAMES = {
    "confidence": "Hotelling T^2: 2(n-1)/(n(n-2)) F(2, n-2)",
    "prediction": "Hotelling T^2 for a new sample: 2(n-1)(n+1)/(n(n-2)) F(2, n-2)",
    "data": "chi-square, 2 df",
    "bootstrap": "bootstrap quantile of squared Mahalanobis distances of centroids",
}
_MIN_N = 3


def ellipse_constant(kind: str, n: int, level: float) -> float:
    """The constant c of a confidence, prediction or data ellipse for a group of n samples.

    Examples
    --------
    >>> round(ellipse_constant("data", 10, 0.95), 3)
    5.991
    """
    if kind == "data":
        return float(stats.chi2.ppf(level, 2))
    if n < _MIN_N:
        return float("nan")
    f = float(stats.f.ppf(level, 2, n - 2))
    c = 2.0 * (n - 1) / (n * (n - 2)) * f
    if kind == "confidence":
        return c
    if kind == "prediction":
        return c * (n + 1)
    raise InputError(f"no closed-form constant for kind {kind!r}.")


def ellipse_from_shape(centre, shape, constant) -> tuple[np.ndarray, np.ndarray, float]:
    """Centre, semi-axes (major, minor) and angle (radians) of {x: (x-m)' S^-1 (x-m) <= c}."""
    shape = (np.asarray(shape, dtype=float) + np.asarray(shape, dtype=float).T) / 2
    w, v = np.linalg.eigh(shape)
    w = np.clip(w[::-1], 0.0, None)
    v = v[:, ::-1]
    semi = np.sqrt(constant * w)
    angle = float(np.arctan2(v[1, 0], v[0, 0]))
    # the major axis has no direction: keep the angle in (-pi/2, pi/2]
    if angle <= -np.pi / 2:
        angle += np.pi
    elif angle > np.pi / 2:
        angle -= np.pi
    return np.asarray(centre, dtype=float), semi, angle


def ellipse_outline(centre, semi_axes, angle: float, k: int = 100) -> tuple[np.ndarray, np.ndarray]:
    """``k`` points (x, y) around an ellipse, the last equal to the first (a closed path).

    Examples
    --------
    >>> x, y = ellipse_outline((0, 0), (2, 1), 0.0, k=5)
    >>> [abs(round(float(v), 6)) for v in y]
    [0.0, 1.0, 0.0, 1.0, 0.0]
    """
    if int(k) < 3:
        raise InputError(f"an outline needs at least 3 points; got k={k!r}.")
    t = np.linspace(0.0, 2.0 * np.pi, int(k))
    a, b = float(semi_axes[0]), float(semi_axes[1])
    ca, sa = np.cos(angle), np.sin(angle)
    x = centre[0] + a * np.cos(t) * ca - b * np.sin(t) * sa
    y = centre[1] + a * np.cos(t) * sa + b * np.sin(t) * ca
    return x, y


def inside_ellipse(points, centre, semi_axes, angle: float) -> np.ndarray:
    """Boolean array: which rows of ``points`` (m x 2) lie inside or on the ellipse."""
    p = np.atleast_2d(np.asarray(points, dtype=float)) - np.asarray(centre, dtype=float)
    ca, sa = np.cos(angle), np.sin(angle)
    u = p[:, 0] * ca + p[:, 1] * sa
    v = -p[:, 0] * sa + p[:, 1] * ca
    a, b = float(semi_axes[0]), float(semi_axes[1])
    with np.errstate(divide="ignore", invalid="ignore"):
        q = (u / a) ** 2 + (v / b) ** 2
    return np.nan_to_num(q, nan=np.inf) <= 1.0


@dataclass(frozen=True, eq=False)
class EllipseSet(ResultMixin):
    """Ellipses of several groups on two axes.

    Attributes
    ----------
    kind : str
        ``'confidence'``, ``'prediction'``, ``'data'`` or ``'bootstrap'``.
    level : float
    axes : tuple of str
        The two axes (x first).
    constant_name : str
        What the constant is (for a legend).
    table : DataFrame
        One row per group with an ellipse: ``n``, ``centre_x``, ``centre_y``,
        ``semi_major``, ``semi_minor``, ``angle_rad``, ``angle_deg``, ``constant``.
    no_ellipse : dict
        Groups without an ellipse and their sizes.
    source : str
        The ordination and scaling the scores came from.
    notes : tuple of str
    """

    kind: str
    level: float
    axes: tuple
    constant_name: str
    table: pd.DataFrame
    no_ellipse: dict = field(default_factory=dict)
    source: str = ""
    notes: tuple = ()

    @property
    def groups(self) -> list[str]:
        return list(self.table.index)

    def to_frame(self) -> pd.DataFrame:
        return self.table.copy()

    def _title(self) -> str:
        return (f"{self.kind} ellipses, level {self.level:g}, on {self.axes[0]} x "
                f"{self.axes[1]} ({self.constant_name})")

    def outline(self, group, k: int = 100) -> tuple[np.ndarray, np.ndarray]:
        """(x, y) outline of one group's ellipse (see :func:`ellipse_outline`)."""
        if str(group) not in self.table.index:
            why = (" (fewer than 3 samples: no ellipse)" if str(group) in self.no_ellipse
                   else "")
            raise InputError(f"no ellipse for group {group!r}{why}; groups with one are "
                             f"{self.groups}.")
        row = self.table.loc[str(group)]
        return ellipse_outline((row["centre_x"], row["centre_y"]),
                               (row["semi_major"], row["semi_minor"]), row["angle_rad"], k)


def _aligned_groups(group, labels: pd.Index) -> np.ndarray:
    if isinstance(group, str):
        raise InputError("`group` must be the group labels (e.g. table.samples['treatment']), "
                         f"not a column name ({group!r}).")
    if isinstance(group, pd.Series):
        idx = pd.Index([str(x) for x in group.index])
        if set(idx) == set(labels) and len(idx) == len(labels):
            group = group.set_axis(idx).loc[list(labels)]
        elif len(group) != len(labels):
            raise DesignError(f"`group` has {len(group)} entries for {len(labels)} samples and "
                              "its index does not match the sample labels.")
        values = group.to_numpy(dtype=object)
    else:
        values = np.asarray(group, dtype=object)
        if values.ndim != 1 or len(values) != len(labels):
            raise DesignError(f"`group` must give one label per sample ({len(labels)}); got "
                              f"{values.shape}.")
    missing = pd.isna(values)
    if missing.any():
        bad = [str(labels[i]) for i in np.flatnonzero(missing)]
        raise DesignError(f"`group` has missing values for sample(s) {bad[:8]}.",
                          hint="Fill them in, or take a subset without those samples.")
    return np.array([str(v) for v in values], dtype=object)


def group_ellipses(scores, group, *, kind: str = "confidence", level: float = 0.95,
                   n_boot: int = 999, rng=None, source: str = "") -> EllipseSet:
    """Ellipses per group for two columns of sample scores.

    Parameters
    ----------
    scores : DataFrame or array, shape (n, 2)
        Two score columns (x, y), rows labelled by sample when a DataFrame.
    group : Series or sequence, length n
        Group labels (a Series is aligned by sample label).
    kind : {'confidence', 'prediction', 'data', 'bootstrap'}, default 'confidence'
    level : float in (0, 1), default 0.95
    n_boot : int, default 999
        Bootstrap resamples per group (``kind='bootstrap'``).
    rng : None, int or numpy.random.Generator
        Seed for the bootstrap.
    source : str
        What the scores are (kept for the legend).

    Returns
    -------
    EllipseSet

    Notes
    -----
    Confidence region of a bivariate-normal mean (Hotelling 1931):
    n (m - mu)' S^{-1} (m - mu) <= 2 (n - 1) / (n - 2) F_{2, n-2}; prediction region for a
    new observation: (n + 1)/n times the same bound on (x - m)' S^{-1} (x - m); data ellipse:
    chi-square_2(level). Groups under 3 samples have no ellipse.

    References
    ----------
    Hotelling (1931) Annals of Mathematical Statistics 2: 360-378. Efron & Tibshirani (1993)
    An Introduction to the Bootstrap.

    Examples
    --------
    >>> import numpy as np
    >>> pts = np.array([[0, 0], [2, 0], [0, 2], [2, 2], [5, 5]], float)
    >>> e = group_ellipses(pts, ["a", "a", "a", "a", "b"], kind="data")
    >>> e.groups, list(e.no_ellipse)
    (['a'], ['b'])
    """
    if kind not in ELLIPSE_KINDS:
        raise InputError(f"`kind` must be one of {list(ELLIPSE_KINDS)}; got {kind!r}.")
    if not (isinstance(level, (float, int)) and 0 < float(level) < 1):
        raise InputError(f"`level` must be a number between 0 and 1 (e.g. 0.95); got {level!r}.")
    level = float(level)
    if isinstance(scores, pd.DataFrame):
        labels = pd.Index([str(x) for x in scores.index])
        axes = tuple(str(c) for c in scores.columns)
        pts = scores.to_numpy(dtype=float)
    else:
        pts = np.asarray(scores, dtype=float)
        labels = pd.Index([f"s{i + 1}" for i in range(len(pts))])
        axes = ("axis1", "axis2")
    if pts.ndim != 2 or pts.shape[1] != 2:
        raise InputError(f"ellipses need exactly two score columns; got shape {pts.shape}.")
    if not np.isfinite(pts).all():
        raise InputError("the scores contain non-finite values.")
    if kind == "bootstrap":
        if isinstance(n_boot, bool) or not isinstance(n_boot, (int, np.integer)) or n_boot < 20:
            raise InputError(f"`n_boot` must be a whole number of at least 20; got {n_boot!r}.")
        rng = as_rng(rng)
    g = _aligned_groups(group, labels)
    levels = list(dict.fromkeys(g))  # order of first appearance
    rows, no_ellipse, notes = {}, {}, []
    for lv in levels:
        x = pts[g == lv]
        n = len(x)
        if n < _MIN_N:
            no_ellipse[lv] = n
            continue
        m = x.mean(axis=0)
        S = np.cov(x, rowvar=False, ddof=1)
        if kind == "bootstrap":
            idx = rng.integers(0, n, size=(int(n_boot), n))
            cents = x[idx].mean(axis=1)
            S = np.cov(cents, rowvar=False, ddof=1)
            dev = cents - m
            q = np.einsum("ij,jk,ik->i", dev, np.linalg.pinv(S), dev)
            c = float(np.quantile(q, level))
        else:
            c = ellipse_constant(kind, n, level)
        centre, semi, angle = ellipse_from_shape(m, S, c)
        if semi[1] <= 1e-12 * max(semi[0], 1e-300):
            notes.append(f"group {lv!r}: its samples lie on a line on these axes, so its "
                         "ellipse is flat.")
        rows[lv] = {"n": n, "centre_x": centre[0], "centre_y": centre[1],
                    "semi_major": semi[0], "semi_minor": semi[1], "angle_rad": angle,
                    "angle_deg": np.degrees(angle), "constant": c}
    if no_ellipse:
        listing = ", ".join(f"{k!r} (n = {v})" for k, v in no_ellipse.items())
        notes.insert(0, f"no ellipse for group(s) with fewer than 3 samples: {listing}.")
    cols = ["n", "centre_x", "centre_y", "semi_major", "semi_minor", "angle_rad", "angle_deg",
            "constant"]
    table = pd.DataFrame.from_dict(rows, orient="index", columns=cols)
    table.index = pd.Index(list(rows), dtype=object, name="group")
    table["n"] = table["n"].astype(int)
    return EllipseSet(kind=kind, level=level, axes=axes, constant_name=_CONSTANT_NAMES[kind],
                      table=table, no_ellipse=no_ellipse, source=source, notes=tuple(notes))
