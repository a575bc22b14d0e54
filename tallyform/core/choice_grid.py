"""Choices of transform and measure: checked, named canonically, deduplicated.

A *choice* is what a user picks before a test: a dissimilarity measure, the transformation
applied before it, and the measure's own options (``{"measure": "bray_curtis",
"transform": "fourth_root"}``). :func:`choice_adjusted` tests a family of them; this module
turns what the user gave into :class:`Choice` records with one canonical name each, so that
the same choice written twice (``"sqrt"`` and ``Power(0.5)``, ``"Bray-Curtis"`` and
``"bray_curtis"``, an option given at its default) is tested, and counted, once.

Two choices written differently can also be the same distances: the chord distance after
a square root is the Hellinger distance, Aitchison after a power is Aitchison rescaled.
Choices whose distances on a small fixed table agree up to a positive factor (every test
here is invariant to the scale of the dissimilarity) are also tested once, under the first
name given.

Presence/absence. A measure computed from presences only (Jaccard, Sorensen) gives the same
distances after any transformation that keeps zeros at zero and positive values positive
(powers, log1p, profiles), so such choices are one choice; and a quantitative measure applied
to presence/absence data is the presence-based measure it then equals (Bray-Curtis on
presences is Sorensen; quantitative Jaccard on presences is Jaccard). Both facts are found by
computing the measures on a small fixed table, not from a hand-kept list, so a measure added
to the registry is treated correctly.

The default family is the scan's grid (:data:`tallyform.core.spec.DEFAULT_SCAN_MEASURES` x
:data:`~tallyform.core.spec.DEFAULT_SCAN_TRANSFORMS`) with presence/absence represented once,
by the grid's presence-based measure: the grid's other measures on presence data only count
mismatches in other units.
"""
from __future__ import annotations

import functools
from dataclasses import dataclass, field
from typing import Mapping

import numpy as np

from .errors import InputError

__all__ = ["Choice", "as_choices", "default_choices", "presence_based"]

# a small fixed table with zeros in every row and column (no empty row or column)
_PROBE = np.array([[3, 0, 1, 7, 0, 2, 1], [0, 4, 2, 0, 1, 5, 3], [6, 1, 0, 2, 2, 0, 4],
                   [1, 1, 5, 0, 3, 2, 0], [0, 2, 2, 9, 0, 1, 1], [2, 0, 3, 1, 4, 0, 6]],
                  dtype=np.float64)


@dataclass(frozen=True)
class Choice:
    """One choice of measure, transformation and measure options, in canonical form.

    Attributes
    ----------
    measure : str
        Canonical measure name (a key of :data:`tallyform.MEASURES`).
    transform : str
        Canonical transformation name (``'none'`` for presence-based measures whenever the
        transformation keeps the zeros).
    options : tuple of (name, value)
        Measure options that differ from their defaults, sorted by name.
    """

    measure: str
    transform: str
    options: tuple = ()
    transform_object: object = field(default=None, compare=False, repr=False, hash=False)

    @property
    def name(self) -> str:
        """``'bray_curtis on fourth_root'``, ``'jaccard'``,
        ``'aitchison [zeros=pseudocount, pseudocount=0.5]'``."""
        out = self.measure if self.transform == "none" else \
            f"{self.measure} on {self.transform}"
        if self.options:
            out += " [" + ", ".join(f"{k}={_short(v)}" for k, v in self.options) + "]"
        return out

    def as_dict(self) -> dict:
        """The choice as the dict :func:`choice_adjusted` takes (and an analysis records)."""
        out = {"measure": self.measure, "transform": self.transform}
        out.update({k: (list(v) if isinstance(v, tuple) else v) for k, v in self.options})
        return out

    def transform_spec(self):
        """The Transform object to apply."""
        from .transforms import get_transform
        if self.transform_object is not None:
            return self.transform_object
        return get_transform(self.transform)

    def dissimilarity(self, table):
        """This choice's :class:`~tallyform.core.dissimilarity.Dissimilarity` of ``table``."""
        from .dissimilarity import dissimilarity
        opts = {k: (np.asarray(v) if isinstance(v, tuple) else v) for k, v in self.options}
        return dissimilarity(table, self.measure, transform=self.transform_spec(), **opts)


def _short(v) -> str:
    if isinstance(v, tuple):
        return f"<{len(v)} values>"
    return str(v)


def _freeze(v):
    if isinstance(v, (list, tuple, np.ndarray)) or hasattr(v, "to_numpy"):
        try:
            return tuple(float(x) for x in np.asarray(v, dtype=np.float64).ravel())
        except (TypeError, ValueError):
            raise InputError(f"a choice option must be a number, a name or a list of "
                             f"numbers; got {v!r}.") from None
    return v


def _as_transform(t):
    from .transforms import Power, get_transform
    if isinstance(t, (int, float, np.integer, np.floating)) and not isinstance(t, bool):
        return Power(float(t))
    return get_transform(t)


# ---------------------------------------------------------------------------- probes
def _probe(measure: str, x: np.ndarray) -> np.ndarray | None:
    from .dissimilarity import dissimilarity
    try:
        return np.asarray(dissimilarity(x, measure).condensed, dtype=np.float64)
    except InputError:
        return None


def _same(a, b) -> bool:
    return a is not None and b is not None and a.shape == b.shape and \
        bool(np.allclose(a, b, rtol=1e-10, atol=1e-12))


@functools.lru_cache(maxsize=None)
def presence_based(measure: str) -> bool:
    """True when the measure reads presences only: its distances on a table equal those on
    the table's presence/absence version (checked on a fixed synthetic table)."""
    return _same(_probe(measure, _PROBE), _probe(measure, (_PROBE > 0).astype(float)))


@functools.lru_cache(maxsize=None)
def _presence_equivalent(measure: str) -> str:
    """The presence-based measure that ``measure`` equals on presence/absence data, or
    ``measure`` itself."""
    from .measures import MEASURES
    if presence_based(measure):
        return measure
    on_presence = _probe(measure, (_PROBE > 0).astype(float))
    for other in MEASURES:
        if other != measure and presence_based(other) and \
                _same(on_presence, _probe(other, _PROBE)):
            return other
    return measure


def _keeps_zeros(tr) -> bool:
    """The transformation maps zeros to zero and positive values to positive ones."""
    try:
        y = tr.apply(_PROBE)
    except InputError:
        return False
    return bool(np.all((y > 0) == (_PROBE > 0)) and np.all(y >= 0))


# ---------------------------------------------------------------------------- parsing
def _canonical(item, position: int) -> Choice:
    from .measures import get_measure
    if isinstance(item, str):
        item = {"measure": item}
    if not isinstance(item, Mapping):
        raise InputError(f"choice {position + 1} must be a dict such as "
                         "{'measure': 'bray_curtis', 'transform': 'fourth_root'} or a measure "
                         f"name; got {type(item).__name__}.")
    if "measure" not in item:
        raise InputError(f"choice {position + 1} ({dict(item)!r}) names no measure.",
                         hint="Give {'measure': ..., 'transform': ...}.")
    rec = get_measure(item["measure"])
    allowed = ["measure", "transform"] + list(rec.options)
    unknown = [k for k in item if k not in allowed]
    if unknown:
        raise InputError(f"choice {position + 1} ({rec.name}) has unknown key(s) {unknown}; "
                         f"a choice of {rec.name!r} takes {allowed}.")
    tr = _as_transform(item.get("transform"))
    options = []
    for k in sorted(rec.options):
        if k in item:
            v = _freeze(item[k])
            if v != _freeze(rec.options[k]):
                options.append((k, v))
    measure, tname, obj = rec.name, tr.name, tr
    if not options:
        if tname == "presence":
            measure = _presence_equivalent(measure)
        if presence_based(measure) and _keeps_zeros(tr):
            from .transforms import Identity
            tname, obj = "none", Identity()
    return Choice(measure, tname, tuple(options), obj)


def as_choices(choices) -> tuple[list, list]:
    """Canonical, distinct choices in the order first given, and the names of duplicates.

    ``choices``: None (the default family, :func:`default_choices`), one measure name, or a
    sequence of dicts / measure names.
    """
    if choices is None:
        choices = default_choices()
    elif isinstance(choices, (str, Mapping)):
        choices = [choices]
    try:
        items = list(choices)
    except TypeError:
        raise InputError("`choices` must be a list of dicts such as {'measure': 'bray_curtis', "
                         f"'transform': 'sqrt'}}; got {type(choices).__name__}.") from None
    if not items:
        raise InputError("`choices` is empty; give at least one choice (or None for the "
                         "default family).")
    out, seen, prints, dups = [], set(), [], []
    for i, item in enumerate(items):
        c = _canonical(item, i)
        if c in seen:
            dups.append(c.name)
            continue
        f = _fingerprint(c)
        twin = next((o for o, g in zip(out, prints) if _same_shape(f, g)), None)
        if twin is not None:
            dups.append(f"{c.name} (the same distances as {twin.name}, up to scale)")
            seen.add(c)
            continue
        seen.add(c)
        out.append(c)
        prints.append(f)
    return out, dups


@functools.lru_cache(maxsize=512)
def _fingerprint(choice: Choice) -> np.ndarray | None:
    """The choice's distances on the fixed probe table, scaled to a largest of 1 (None when
    undefined there, e.g. an option sized for another table)."""
    try:
        d = np.asarray(choice.dissimilarity(_PROBE).condensed, dtype=np.float64)
    except InputError:
        return None
    top = float(np.abs(d).max())
    return d / top if top > 0 else d


def _same_shape(a, b) -> bool:
    """Two fingerprints equal: the same distances up to a positive factor, so every test of
    a dissimilarity (invariant to its scale) gives the same answer."""
    return a is not None and b is not None and a.shape == b.shape and \
        float(np.max(np.abs(a - b))) <= 1e-9


def default_choices() -> list[dict]:
    """The scan's grid with presence/absence once: every measure of
    ``DEFAULT_SCAN_MEASURES`` that is not presence-based under every transformation of
    ``DEFAULT_SCAN_TRANSFORMS`` but presence, and each presence-based measure once.

    >>> len(default_choices())
    29
    """
    from .spec import DEFAULT_SCAN_MEASURES, DEFAULT_SCAN_TRANSFORMS
    out = []
    for m in DEFAULT_SCAN_MEASURES:
        if presence_based(m):
            out.append({"measure": m})
            continue
        for t in DEFAULT_SCAN_TRANSFORMS:
            if _as_transform(t).name != "presence":
                out.append({"measure": m, "transform": t})
    return out
