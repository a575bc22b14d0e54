"""Transformations of abundances applied before a dissimilarity measure.

Every transformation is a small frozen object with a canonical ``name`` (the string a user can
type, e.g. ``"sqrt"`` or ``"power(0.3)"``), a flag ``removes_size`` (True when scaling a whole
sample by a constant leaves its transformed row unchanged, so that total abundance can no longer
enter the analysis) and a method ``apply(values)`` that returns a new float64 array.

>>> import numpy as np
>>> get_transform("sqrt").apply(np.array([[4.0, 9.0, 0.0]]))
array([[2., 3., 0.]])
>>> Power(0.3).name, Power(0.5).name, Power(0).name, Power(1).name
('power(0.3)', 'sqrt', 'presence', 'none')
>>> get_transform("power(0.3)") == Power(0.3)
True
"""
from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from .errors import InputError

__all__ = [
    "Transform", "Identity", "Power", "Log1p", "Presence", "Profile", "Hellinger", "Chord",
    "Wisconsin", "Clr", "TRANSFORMS", "get_transform", "transform_names",
]

_MAX_LISTED = 8


def listing(items, limit: int = _MAX_LISTED) -> str:
    items = [str(x) for x in items]
    shown = ", ".join(repr(x) for x in items[:limit])
    return shown + (f" and {len(items) - limit} more" if len(items) > limit else "")


def _row_names(rows: np.ndarray, labels: Sequence | None) -> list[str]:
    if labels is None:
        return [f"row {i + 1}" for i in rows]
    return [str(labels[i]) for i in rows]


def check_values(values, *, labels: Sequence | None = None, what: str = "values") -> np.ndarray:
    """A float64 2-D copy of ``values``; InputError for a wrong shape, NaN, inf or a negative."""
    try:
        x = np.array(values, dtype=np.float64, copy=True)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{what} could not be read as numbers: {exc}.") from None
    if x.ndim != 2:
        raise InputError(f"{what} must be 2-dimensional (samples x taxa); got shape {x.shape}.")
    bad = ~np.isfinite(x) | (x < 0)
    if bad.any():
        i, j = np.argwhere(bad)[0]
        raise InputError(f"{what} must be finite and >= 0; sample {_row_names([i], labels)[0]!r}"
                         f" has {float(x[i, j])!r} in column {j + 1}.")
    return x


def _empty_rows(x: np.ndarray, labels, why: str) -> None:
    empty = np.flatnonzero(~(x > 0).any(axis=1))
    if empty.size:
        names = _row_names(empty, labels)
        raise InputError(
            f"{len(names)} sample(s) have a total of 0, so {why}: {listing(names)}.",
            hint="Remove empty samples (CommunityTable(..., empty='drop')) or choose a "
                 "transformation and measure defined for them (none, power, log1p, with "
                 "Euclidean, Manhattan, Canberra or Gower).")


@dataclass(frozen=True, eq=False)
class Transform:
    """Base class: a named, parameter-free-or-frozen map from abundances to new values.

    Subclasses define :attr:`name`, :attr:`removes_size` and :meth:`_apply`. Two transforms are
    equal when their canonical names are equal (``Power(0.5) == get_transform("sqrt")``).
    """

    @property
    def name(self) -> str:  # pragma: no cover - overridden
        raise NotImplementedError

    @property
    def removes_size(self) -> bool:
        """True when scaling a sample by a constant leaves its transformed row unchanged."""
        return False

    @property
    def exact(self) -> bool:
        """True when size removal is exact (no dependence on other samples or on a fixed
        pseudocount); meaningful only when :attr:`removes_size` is True."""
        return self.removes_size

    @property
    def label(self) -> str:
        """A short text for displays."""
        return self.name

    def apply(self, values, *, labels: Sequence | None = None) -> np.ndarray:
        """Transform an n x p array of non-negative values; returns a new float64 array.

        Parameters
        ----------
        values : array_like, shape (n, p)
            Abundances (finite, >= 0). Never modified.
        labels : sequence of str, optional
            Sample names used in error messages (otherwise rows are numbered from 1).

        Raises
        ------
        InputError
            Bad values, or a sample for which the transformation is undefined (a total of 0
            for the size-removing ones, zeros for ``Clr(zeros="error")``).
        """
        x = check_values(values, labels=labels)
        return self._apply(x, labels)

    def _apply(self, x: np.ndarray, labels) -> np.ndarray:  # pragma: no cover - overridden
        raise NotImplementedError

    def __eq__(self, other) -> bool:
        return isinstance(other, Transform) and self.name == other.name

    def __hash__(self) -> int:
        return hash(("Transform", self.name))

    def __repr__(self) -> str:
        return f"<transform {self.name}>"


@dataclass(frozen=True, eq=False)
class Identity(Transform):
    """No transformation (name ``"none"``)."""

    @property
    def name(self) -> str:
        return "none"

    def _apply(self, x, labels):
        return x


#: the named transforms that are powers x ** a, by exponent (presence: the limit a -> 0)
_NAMED_POWERS = {1.0: "none", 0.5: "sqrt", 0.25: "fourth_root", 0.0: "presence"}
#: their exponents by name (the slider of the dashboard reaches every one of them)
POWER_EXPONENTS = {name: a for a, name in _NAMED_POWERS.items()}


@dataclass(frozen=True, eq=False)
class Power(Transform):
    """x ** a for 0 <= a <= 1: the continuous exponent of a slider.

    a = 1 is the identity (``"none"``), 0.5 the square root (``"sqrt"``), 0.25 the fourth
    root (``"fourth_root"``); other exponents are named ``"power(a)"``. As a -> 0, x ** a
    tends to 1 for every x > 0 and stays 0 at 0, so ``Power(0)`` is defined as presence /
    absence, and a slider can reach it.

    Parameters
    ----------
    a : float in [0, 1]
        The exponent. Smaller exponents shrink the weight of abundant taxa and of large
        samples; none of them with a > 0 removes size (see :class:`Profile` for that).

    Examples
    --------
    >>> Power(0.25).apply([[16.0, 1.0, 0.0]])
    array([[2., 1., 0.]])
    """

    a: float = 1.0

    def __post_init__(self):
        try:
            a = float(self.a)
        except (TypeError, ValueError):
            raise InputError(f"the power exponent must be a number; got {self.a!r}.") from None
        if not (0.0 <= a <= 1.0):
            raise InputError(f"the power exponent must lie in [0, 1]; got {a!r}.",
                             hint="Exponents below 1 down-weight abundant taxa; 0 means "
                                  "presence/absence.")
        object.__setattr__(self, "a", a)

    @property
    def name(self) -> str:
        return _NAMED_POWERS.get(self.a, f"power({self.a!r})")

    @property
    def removes_size(self) -> bool:
        return self.a == 0.0

    def _apply(self, x, labels):
        if self.a == 1.0:
            return x
        if self.a == 0.0:
            return (x > 0).astype(np.float64)
        if self.a == 0.5:
            return np.sqrt(x, out=x)
        return np.power(x, self.a, out=x)


@dataclass(frozen=True, eq=False)
class Log1p(Transform):
    """log(1 + x) (natural log). Compresses large counts; does not remove size."""

    @property
    def name(self) -> str:
        return "log1p"

    def _apply(self, x, labels):
        return np.log1p(x, out=x)


@dataclass(frozen=True, eq=False)
class Presence(Transform):
    """1 where x > 0, else 0 (the a -> 0 limit of :class:`Power`).

    Scaling a sample leaves its presences unchanged, so this removes size in the algebraic
    sense; note that richness still grows with sampling depth, so deeper samples can differ
    by the taxa they detect.
    """

    @property
    def name(self) -> str:
        return "presence"

    @property
    def removes_size(self) -> bool:
        return True

    def _apply(self, x, labels):
        return (x > 0).astype(np.float64)


@dataclass(frozen=True, eq=False)
class Profile(Transform):
    """Relative abundances x / r (each sample divided by its total).

    Raises InputError for a sample whose total is 0.
    """

    @property
    def name(self) -> str:
        return "profile"

    @property
    def removes_size(self) -> bool:
        return True

    def _apply(self, x, labels):
        _empty_rows(x, labels, "their profile (x / total) is undefined")
        x /= x.sum(axis=1, keepdims=True)
        return x


@dataclass(frozen=True, eq=False)
class Hellinger(Transform):
    """sqrt(x / r) (Legendre & Gallagher 2001): Euclidean distance on it is the Hellinger
    distance."""

    @property
    def name(self) -> str:
        return "hellinger"

    @property
    def removes_size(self) -> bool:
        return True

    def _apply(self, x, labels):
        x = Profile()._apply(x, labels)
        return np.sqrt(x, out=x)


@dataclass(frozen=True, eq=False)
class Chord(Transform):
    """x / ||x||_2 (Orloci 1967): each sample scaled to unit Euclidean length."""

    @property
    def name(self) -> str:
        return "chord"

    @property
    def removes_size(self) -> bool:
        return True

    def _apply(self, x, labels):
        _empty_rows(x, labels, "they cannot be scaled to unit length")
        # scale by the row maximum first so that squaring cannot overflow or underflow
        x /= x.max(axis=1, keepdims=True)
        x /= np.sqrt(np.einsum("ij,ij->i", x, x))[:, None]
        return x


@dataclass(frozen=True, eq=False)
class Wisconsin(Transform):
    """Wisconsin double standardisation: each taxon divided by its maximum over the samples,
    then each sample divided by its total (Bray & Curtis 1957).

    Rows sum to 1, so size is removed; it is not exactly scale-free, because a sample that
    holds a taxon's maximum changes that taxon's divisor for every sample. Taxa absent
    everywhere stay 0.
    """

    @property
    def name(self) -> str:
        return "wisconsin"

    @property
    def removes_size(self) -> bool:
        return True

    @property
    def exact(self) -> bool:
        return False

    def _apply(self, x, labels):
        _empty_rows(x, labels, "the Wisconsin standardisation is undefined for them")
        cmax = x.max(axis=0)
        x /= np.where(cmax > 0, cmax, 1.0)
        x /= x.sum(axis=1, keepdims=True)
        return x


_ZEROS = ("multiplicative", "pseudocount", "error")


def _as_float(value, name: str) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        raise InputError(f"`{name}` must be a number; got {value!r}.") from None


@dataclass(frozen=True, eq=False)
class Clr(Transform):
    """Centred log-ratio: log(x) - mean_j log(x) per sample, after replacing zeros.

    Parameters
    ----------
    zeros : {'multiplicative', 'pseudocount', 'error'}, default 'multiplicative'
        How zeros are handled. ``'multiplicative'``: multiplicative replacement
        (Martin-Fernandez et al. 2003) on the profile: each zero becomes ``delta`` and the
        non-zero parts are shrunk by (1 - delta * number of zeros), which keeps the ratios
        among observed taxa and makes the result exactly scale-free. ``'pseudocount'``:
        log(x + pseudocount) on the values as given (not scale-free: the same pseudocount
        means different proportions in samples of different size). ``'error'``: any zero
        raises InputError naming the samples.
    pseudocount : float > 0, default 1.0
        Added to every value under ``zeros='pseudocount'``.
    delta : float, optional
        Replacement proportion under ``zeros='multiplicative'``; default 1 / p**2
        (p = number of taxa), always small enough that the replacements sum to less than 1.

    Notes
    -----
    clr(x)_j = log(z_j) - (1/p) sum_k log(z_k), z the zero-replaced values (Aitchison 1986).
    Euclidean distance between clr rows is the Aitchison distance.

    References
    ----------
    Aitchison, J. (1986). The Statistical Analysis of Compositional Data. Chapman & Hall.
    Martin-Fernandez, J. A., Barcelo-Vidal, C. & Pawlowsky-Glahn, V. (2003). Dealing with
    zeros and missing values in compositional data sets using nonparametric imputation.
    Mathematical Geology 35, 253-278.

    Examples
    --------
    >>> Clr(zeros="error").apply([[1.0, 1.0, 4.0]]).round(4)
    array([[-0.4621, -0.4621,  0.9242]])
    """

    zeros: str = "multiplicative"
    pseudocount: float = 1.0
    delta: float | None = None

    def __post_init__(self):
        if self.zeros not in _ZEROS:
            raise InputError(f"`zeros` must be one of {list(_ZEROS)}; got {self.zeros!r}.")
        pc = _as_float(self.pseudocount, "pseudocount")
        if not (np.isfinite(pc) and pc > 0):
            raise InputError(f"`pseudocount` must be a positive number; got {self.pseudocount!r}.")
        object.__setattr__(self, "pseudocount", pc)
        if self.delta is not None:
            d = _as_float(self.delta, "delta")
            if not (np.isfinite(d) and 0 < d < 1):
                raise InputError(f"`delta` must lie in (0, 1); got {self.delta!r}.")
            object.__setattr__(self, "delta", d)

    @property
    def name(self) -> str:
        if self.zeros == "multiplicative":
            return "clr" if self.delta is None else f"clr(multiplicative, delta={self.delta!r})"
        if self.zeros == "pseudocount":
            return f"clr(pseudocount={self.pseudocount!r})"
        return "clr(error)"

    @property
    def removes_size(self) -> bool:
        return True

    @property
    def exact(self) -> bool:
        return self.zeros != "pseudocount"

    def _apply(self, x, labels):
        z = self.replace_zeros(x, labels=labels, _checked=True)
        np.log(z, out=z)
        z -= z.mean(axis=1, keepdims=True)
        return z

    def replace_zeros(self, values, *, labels=None, _checked: bool = False) -> np.ndarray:
        """The strictly positive values clr takes the log of (a new array)."""
        x = values if _checked else check_values(values, labels=labels)
        if self.zeros == "pseudocount":
            return x + self.pseudocount
        _empty_rows(x, labels, "they have no composition to take log-ratios of")
        has_zero = ~(x > 0).all(axis=1)
        if self.zeros == "error":
            if has_zero.any():
                names = _row_names(np.flatnonzero(has_zero), labels)
                raise InputError(
                    f"the centred log-ratio is undefined for zeros; {len(names)} sample(s) "
                    f"contain zeros: {listing(names)}.",
                    hint="Use Clr(zeros='multiplicative') or Clr(zeros='pseudocount', "
                         "pseudocount=...), or remove the zeros.")
            return x / x.sum(axis=1, keepdims=True)
        p = x.shape[1]
        delta = self.delta if self.delta is not None else 1.0 / p ** 2
        prof = x / x.sum(axis=1, keepdims=True)
        zero = prof == 0
        nz = zero.sum(axis=1, keepdims=True)
        if np.any(nz * delta >= 1):
            bad = _row_names(np.flatnonzero((nz * delta >= 1).ravel()), labels)
            raise InputError(f"delta = {delta!r} times the number of zeros reaches 1 in "
                             f"sample(s) {listing(bad)}; choose a smaller delta.")
        prof *= 1.0 - nz * delta
        prof[zero] = delta
        return prof


TRANSFORMS: dict[str, Transform] = {
    t.name: t for t in (Identity(), Power(0.5), Power(0.25), Log1p(), Presence(), Profile(),
                        Hellinger(), Chord(), Wisconsin(), Clr())
}
"""Canonical transformations by name; ``"power(a)"`` and ``"clr(...)"`` are parsed too."""

_CALL = re.compile(r"^\s*([a-z_0-9]+)\s*(?:\((.*)\))?\s*$")
_ALIASES = {"identity": "none", "root": "sqrt", "square_root": "sqrt",
            "relative": "profile"}
# spellings that mean something else elsewhere: an error that names our option
_MISLEADING = {
    "log": "'log' is ambiguous (log(x) is undefined at zero counts; we compute log(1 + x)): "
           "write transform='log1p' for log(1 + x), or 'clr' for log-ratios.",
    "pa": "write transform='presence' for presence/absence (1 where a taxon was counted).",
    "total": "write transform='profile' to divide every sample by its total (relative "
             "abundances).",
}


def transform_names() -> list[str]:
    """Canonical names accepted by :func:`get_transform` (plus ``"power(a)"``)."""
    return list(TRANSFORMS) + ["power(a)"]


def get_transform(spec=None) -> Transform:
    """A Transform from None (identity), a name, or a Transform.

    Parameters
    ----------
    spec : None, str or Transform
        ``None`` or ``"none"``; one of :data:`TRANSFORMS`; ``"power(a)"`` with 0 <= a <= 1;
        ``"clr(pseudocount=0.5)"``, ``"clr(multiplicative, delta=1e-4)"``, ``"clr(error)"``.
        Names are what :attr:`Transform.name` gives, so ``get_transform(t.name) == t``.

    Raises
    ------
    InputError
        An unknown name or bad parameters.

    Examples
    --------
    >>> get_transform(None).name, get_transform("fourth_root").removes_size
    ('none', False)
    >>> get_transform("clr(pseudocount=0.5)").name
    'clr(pseudocount=0.5)'
    """
    if spec is None:
        return Identity()
    if isinstance(spec, Transform):
        return spec
    if not isinstance(spec, str):
        raise InputError(f"`transform` must be None, a name or a Transform; got "
                         f"{type(spec).__name__}.")
    m = _CALL.match(spec.strip().lower().replace("-", "_"))
    if not m:
        raise _unknown(spec)
    if m.group(1) in _MISLEADING and m.group(2) is None:
        raise InputError(f"transform {spec!r} is not one of ours: "
                         f"{_MISLEADING[m.group(1)]}",
                         hint=f"choose one of {transform_names()}.")
    base, args = _ALIASES.get(m.group(1), m.group(1)), m.group(2)
    if args is None:
        if base in TRANSFORMS:
            return TRANSFORMS[base]
        raise _unknown(spec)
    parts = [a.strip() for a in args.split(",") if a.strip()]
    if base == "power":
        if len(parts) != 1:
            raise InputError(f"write the exponent as 'power(0.3)'; got {spec!r}.")
        try:
            a = float(parts[0].split("=")[-1])
        except ValueError:
            raise InputError(f"cannot read the exponent in {spec!r}.") from None
        return Power(a)
    if base == "clr":
        kw: dict = {}
        for part in parts:
            if "=" in part:
                k, v = (s.strip() for s in part.split("=", 1))
                if k not in ("pseudocount", "delta", "zeros"):
                    raise InputError(f"unknown clr option {k!r} in {spec!r}; options are "
                                     "zeros, pseudocount, delta.")
                if k == "zeros":
                    kw[k] = v
                else:
                    try:
                        kw[k] = float(v)
                    except ValueError:
                        raise InputError(f"cannot read {k} = {v!r} in {spec!r}.") from None
            else:
                kw["zeros"] = part
        if "pseudocount" in kw and "zeros" not in kw:
            kw["zeros"] = "pseudocount"
        return Clr(**kw)
    raise _unknown(spec)


def _unknown(spec) -> InputError:
    return InputError(f"unknown transform {spec!r}; choose one of {transform_names()}.")
