"""Per-group ellipses on two ordination axes: confidence, prediction, data and bootstrap.

An ellipse is a centre m, a 2 x 2 shape matrix S and a constant c: the points x with
(x - m)' S^{-1} (x - m) <= c. It is reported as centre, semi-axes (major first) and the
angle of the major axis (radians and degrees, counter-clockwise from the first axis), with
the constant named, so that a plot legend can say what the ellipse means.

- ``confidence``: region for the group's true centre. S = sample covariance (divisor
  n - 1), c = 2 (n - 1) / (n (n - 2)) F_{2, n-2}(level) (Hotelling 1931).
- ``prediction``: region for one new sample of the group: (n + 1) times that constant.
- ``data``: the spread of the samples: S = sample covariance, c = chi-square_2(level)
  (5.991 at 0.95, a radius of 2.45 standard deviations). It is drawn and labelled as a
  spread with no coverage level: with S estimated from few samples it holds far fewer new
  samples than the level says (about 70 % at n = 5 and 82 % at n = 8 for 0.95 on normal
  data); the region that holds a stated share of new samples is ``prediction``.
- ``bootstrap``: S = covariance of bootstrap centroids (resampling the group's samples
  with replacement), c = the ``level`` quantile of their squared Mahalanobis distances to
  the observed centre (Efron & Tibshirani 1993), times the small-sample factor
  2 n F_{2,n-2}(level) / ((n - 2) chi-square_2(level)): the ratio of the exact
  normal-theory constant to the one the plain bootstrap reproduces (the bootstrap
  covariance has divisor n, and its quantile tends to chi-square_2). Without it the region
  covered the true centre of normal data in 71 % of studies at n = 6 and 88 % at n = 10.

Groups with fewer than 3 samples get no ellipse; they are listed in ``notes``.

On the constrained axes of a CCA, RDA or db-RDA whose constraints include the grouping (or
a factor nested in it, or one it is nested in), the axes were chosen to separate exactly
these groups, so regions for the group centres look separated on pure noise (81 of 100
one-composition data sets showed two non-overlapping 95 % confidence ellipses, 3 groups of
8, CCA). Confidence and bootstrap ellipses are then withheld unless asked for
(``constrained='draw'``, with the warning kept for the figure); data and prediction
ellipses are drawn with the same note.
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
           "ellipse_outline", "inside_ellipse", "bootstrap_factor", "describe",
           "groups_choose_axes", "ELLIPSE_KINDS", "CONSTRAINED_OPTIONS"]

ELLIPSE_KINDS = ("confidence", "prediction", "data", "bootstrap")
CONSTRAINED_OPTIONS = ("withhold", "draw")
_CONSTANT_NAMES = {
    "confidence": "Hotelling T^2: 2(n-1)/(n(n-2)) F(2, n-2)",
    "prediction": "Hotelling T^2 for a new sample: 2(n-1)(n+1)/(n(n-2)) F(2, n-2)",
    "data": "sample covariance, radius sqrt(chi-square_2)",
    "bootstrap": ("bootstrap quantile of squared Mahalanobis distances of centroids x "
                  "2n F(2, n-2) / ((n-2) chi-square_2)"),
}
#: what each kind of ellipse covers, for legends and hover text (``{pct}``: the level)
COVERS = {
    "confidence": "{pct} confidence ellipse: region for the group's true centre",
    "prediction": "{pct} prediction ellipse: holds a new sample of the group with "
                  "probability {pct}",
    "data": "data ellipse: spread of the group's samples ({sd:.2f} SD; no coverage level)",
    "bootstrap": "{pct} bootstrap ellipse: region for the group's true centre",
}
#: kinds that are regions for a group's centre (withheld on axes chosen by the groups)
CENTRE_KINDS = ("confidence", "bootstrap")
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


def bootstrap_factor(n: int, level: float) -> float:
    """Small-sample factor of the bootstrap ellipse: 2 n F_{2,n-2}(level) /
    ((n - 2) chi-square_2(level)), which tends to 1 as n grows.

    Examples
    --------
    >>> round(bootstrap_factor(6, 0.95), 2), round(bootstrap_factor(10_000, 0.95), 3)
    (3.48, 1.0)
    """
    if n < _MIN_N:
        return float("nan")
    f = float(stats.f.ppf(level, 2, n - 2))
    return 2.0 * n * f / ((n - 2) * float(stats.chi2.ppf(level, 2)))


def describe(kind: str, level: float) -> str:
    """What an ellipse of this kind covers, in words (the legend of a figure)."""
    pct = f"{100 * level:g} %"
    return COVERS[kind].format(pct=pct, sd=float(np.sqrt(stats.chi2.ppf(level, 2))))


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
    withheld : str
        Why no ellipse was computed although groups were large enough (regions for the
        group centres on axes chosen to separate the same groups); empty otherwise.
    warning : str
        A warning that belongs in the figure itself (such regions drawn on request).
    notes : tuple of str
    """

    kind: str
    level: float
    axes: tuple
    constant_name: str
    table: pd.DataFrame
    no_ellipse: dict = field(default_factory=dict)
    source: str = ""
    withheld: str = ""
    warning: str = ""
    notes: tuple = ()

    @property
    def groups(self) -> list[str]:
        return list(self.table.index)

    @property
    def covers(self) -> str:
        """What each ellipse covers, in words (used by legends and hover text)."""
        return describe(self.kind, self.level)

    @property
    def reading(self) -> str:
        text = self.covers[:1].upper() + self.covers[1:] + "."
        if self.no_ellipse:
            text += (" No ellipse for " + ", ".join(map(str, self.no_ellipse))
                     + " (fewer than 3 samples).")
        return text

    def tables(self) -> dict:
        return {"ellipses": self.to_frame()}

    def to_frame(self) -> pd.DataFrame:
        return self.table.copy()

    def _title(self) -> str:
        level = "" if self.kind == "data" else f", level {self.level:g}"
        return (f"{self.kind} ellipses{level}, on {self.axes[0]} x {self.axes[1]} "
                f"({self.constant_name}): {self.covers}")

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


def aligned_groups(group, labels: pd.Index) -> np.ndarray:
    if isinstance(group, str):
        raise InputError("`group` must be the group labels (e.g. table.samples['treatment']), "
                         f"not a column name ({group!r}).")
    if isinstance(group, pd.Series):
        # plain lists: iterating a pandas index costs a lookup per element
        idx = pd.Index([str(x) for x in group.index.tolist()])
        wanted = labels.tolist() if isinstance(labels, pd.Index) else list(labels)
        if set(idx) == set(wanted) and len(idx) == len(wanted):
            group = group.set_axis(idx).loc[wanted]
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
    return np.array([str(v) for v in values.tolist()], dtype=object)


def groups_choose_axes(fitted_scores, group) -> bool:
    """True when the grouping shares a direction with the constraints of an ordination.

    ``fitted_scores`` (n x k) are the fitted (linear-combination) sample scores of the
    constrained axes, which lie in the span of the intercept and the coded constraints. The
    grouping's centred indicator columns share a direction with their centred span when the
    grouping is a constraint, is nested in one (each group inside one level) or has one
    nested in it (each level inside one group): the smallest principal angle between the
    two spans is then 0 (Bjorck & Golub 1973, via scipy.linalg.subspace_angles).
    """
    import scipy.linalg
    L = np.asarray(fitted_scores, dtype=float)
    g = np.asarray(group, dtype=object)
    levels = list(dict.fromkeys(g))
    if L.size == 0 or len(levels) < 2:
        return False
    G = np.column_stack([(g == lv).astype(float) for lv in levels[1:]])
    Lc, Gc = L - L.mean(axis=0), G - G.mean(axis=0)
    Lc = Lc[:, np.linalg.norm(Lc, axis=0) > 1e-12 * max(np.abs(L).max(), 1e-300)]
    if Lc.shape[1] == 0:
        return False
    angles = scipy.linalg.subspace_angles(Lc, Gc)
    return bool(np.min(angles) < 1e-6)


def _cautions(kind: str, level: float, chosen_by_groups: str, constrained: str):
    """(withheld, warning, notes) for a set of ellipses: regions for the centres on axes
    chosen by the groups, and what a data or bootstrap ellipse is."""
    notes: list[str] = []
    withheld = warning = ""
    if chosen_by_groups:
        if kind in CENTRE_KINDS and constrained == "withhold":
            withheld = (f"{kind} ellipses not drawn: {chosen_by_groups}, so regions for the "
                        "group centres look separated even when the groups do not differ. "
                        "Test the constraints by permutation (tly.constraint_test), or draw "
                        "these ellipses on unconstrained axes (tly.ca, tly.pcoa), where they "
                        "are honest; constrained='draw' draws them anyway, with this warning.")
        elif kind in CENTRE_KINDS:
            warning = (f"not evidence of a difference: {chosen_by_groups}, so these regions "
                       "for the group centres look separated even when the groups do not "
                       "differ (test with tly.constraint_test)")
        else:
            notes.append(f"{chosen_by_groups}: the groups are spread apart by construction "
                         "on these axes, so the ellipses show the samples' spread on axes "
                         "that favour separation, not evidence of a difference.")
    if withheld:
        notes.insert(0, withheld)
    elif warning:
        notes.insert(0, f"drawn on request, {warning}.")
    if kind == "bootstrap":
        notes.append("the bootstrap constant is multiplied by the small-sample factor "
                     "2n F(2, n-2) / ((n-2) chi-square_2) (3.5 at n = 6, 1.9 at n = 10, "
                     "1.2 at n = 30 for 0.95), which brings its coverage of the true centre "
                     "to the level on normal data.")
    if kind == "data":
        notes.append("a data ellipse shows the spread of the samples (sample covariance, "
                     f"radius {np.sqrt(stats.chi2.ppf(level, 2)):.2f} SD); it is not a region "
                     "that holds a stated share of new samples (on normal data one sized at "
                     "0.95 held about 70 % of new samples at n = 5 and 82 % at n = 8); "
                     "kind='prediction' is.")
    return withheld, warning, notes


def group_ellipses(scores, group, *, kind: str = "confidence", level: float = 0.95,
                   n_boot: int = 999, rng=None, source: str = "", chosen_by_groups: str = "",
                   constrained: str = "withhold") -> EllipseSet:
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
    chosen_by_groups : str
        Non-empty when the two axes were chosen to separate these groups (constrained axes
        whose constraints include the grouping): the reason, in words. Set by
        :meth:`Ordination.ellipses`.
    constrained : {'withhold', 'draw'}, default 'withhold'
        With ``chosen_by_groups``: ``'withhold'`` computes no confidence or bootstrap
        ellipse (the result says why), ``'draw'`` computes them and keeps the warning for
        the figure. Data and prediction ellipses are drawn either way, with the note.

    Returns
    -------
    EllipseSet

    Notes
    -----
    Confidence region of a bivariate-normal mean (Hotelling 1931):
    n (m - mu)' S^{-1} (m - mu) <= 2 (n - 1) / (n - 2) F_{2, n-2}; prediction region for a
    new observation: (n + 1)/n times the same bound on (x - m)' S^{-1} (x - m); data ellipse
    (a spread, no coverage): chi-square_2(level); bootstrap: the quantile of the bootstrap
    centroids' squared Mahalanobis distances times :func:`bootstrap_factor`. Groups under 3
    samples have no ellipse.

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
    if constrained not in CONSTRAINED_OPTIONS:
        raise InputError(f"`constrained` must be one of {list(CONSTRAINED_OPTIONS)}; got "
                         f"{constrained!r}.")
    level = float(level)
    if isinstance(scores, pd.DataFrame):
        labels = pd.Index([str(x) for x in scores.index.tolist()])
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
    g = aligned_groups(group, labels)
    levels = list(dict.fromkeys(g))  # order of first appearance
    rows, no_ellipse, notes = {}, {}, []
    withheld, warning, notes = _cautions(kind, level, chosen_by_groups, constrained)
    if withheld:
        levels = []
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
            c = float(np.quantile(q, level)) * bootstrap_factor(n, level)
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
                      table=table, no_ellipse=no_ellipse, source=source, withheld=withheld,
                      warning=warning, notes=tuple(notes))
