"""Permutation schemes: which relabellings a permutation test draws.

Every scheme yields batches of index arrays ``idx`` (one row per permutation): row ``i`` of
the permuted design is row ``idx[i]`` of the original design, held against fixed data (or,
equivalently, the data are permuted by the inverse). Schemes:

- :class:`Permutations`: free permutation of the samples, or permutation within blocks
  (strata), never moving a sample across blocks;
- :class:`UnitPermutations`: whole units (a tank with all its weekly samples) are permuted
  among themselves, optionally within blocks that group whole units and within their parent
  units (plots within their site); each unit keeps its samples together;
- within units: :func:`within_units` gives a :class:`Permutations` whose blocks are the
  units (samples move only within their unit);
- :class:`CyclicShifts`: ordered visits of each unit are rotated by a random number of
  steps, which keeps the order of the visits (and so their serial correlation) intact.

Restricted permutation schemes of this kind (and the rule that the unit permuted must be the
unit to which the treatment was applied) follow Besag & Clifford (1989) and Anderson &
ter Braak (2003). Each scheme enumerates every distinct relabelling when their number is at
most the number of permutations asked for (an exact test), counting relabellings that give
the same permuted design once.

Smallest attainable p-value: see :mod:`tallyform.core.symmetries` (relabellings that only
swap the labels of equal-sized groups give the same statistic).

References
----------
Anderson, M. J. & ter Braak, C. J. F. (2003). Permutation tests for multi-factorial analysis
of variance. J. Stat. Comput. Simul. 73, 85-113.
Besag, J. & Clifford, P. (1989). Generalized Monte Carlo significance tests. Biometrika 76,
633-642.
Knuth, D. E. (2011). The Art of Computer Programming 4A, section 7.2.1.2 (algorithm L).
"""
from __future__ import annotations

import itertools
import math
from typing import Iterator

import numpy as np

from .errors import DesignError, InputError, Location
from .symmetries import (FEW_PERMUTATIONS, as_codes, row_types, floor_note,  # noqa: F401
                         label_symmetries, span_symmetries)

__all__ = ["Permutations", "UnitPermutations", "CyclicShifts", "within_units",
           "count_relabellings", "label_symmetries", "span_symmetries", "floor_note",
           "FEW_PERMUTATIONS"]

# ---------------------------------------------------------------------------- helpers
def combine_codes(*codes) -> np.ndarray | None:
    """Codes of the combinations of several labellings (None entries are ignored)."""
    parts = [np.asarray(c) for c in codes if c is not None]
    if not parts:
        return None
    if len(parts) == 1:
        return as_codes(parts[0])
    keys = np.column_stack([as_codes(p) for p in parts])
    _, out = np.unique(keys, axis=0, return_inverse=True)
    return out.ravel().astype(np.intp)


def count_relabellings(types: np.ndarray, blocks: np.ndarray | None = None, *,
                       cap: int | None = None) -> int | None:
    """Number of distinct arrangements of row ``types`` within ``blocks``.

    The product over blocks of the multinomial coefficients n_b! / prod_t m_bt!. With ``cap``,
    returns None as soon as the count is known to exceed it (avoids huge integers).
    """
    types = np.asarray(types)
    blocks = np.zeros(types.size, dtype=np.intp) if blocks is None else np.asarray(blocks)
    log_total = 0.0
    per_block = []
    for b in np.unique(blocks):
        m = np.unique(types[blocks == b], return_counts=True)[1]
        log_total += math.lgamma(m.sum() + 1) - sum(math.lgamma(c + 1) for c in m)
        per_block.append(m)
    if cap is not None and log_total > math.log(cap) + 1.0:
        return None
    total = 1
    for m in per_block:
        rest = int(m.sum())
        for c in m:
            total *= math.comb(rest, int(c))
            rest -= int(c)
    if cap is not None and total > cap:
        return None
    return total


def _multiset_arrangements(seq) -> Iterator[tuple]:
    """Every distinct ordering of a multiset, in lexicographic order (Knuth's algorithm L)."""
    a = sorted(seq)
    m = len(a)
    while True:
        yield tuple(a)
        j = m - 2
        while j >= 0 and a[j] >= a[j + 1]:
            j -= 1
        if j < 0:
            return
        k = m - 1
        while a[j] >= a[k]:
            k -= 1
        a[j], a[k] = a[k], a[j]
        a[j + 1:] = reversed(a[j + 1:])


# ---------------------------------------------------------------------------- samples
class Permutations:
    """The relabellings a test uses: random (free or within blocks) or all distinct ones.

    Each permutation is an index array ``idx`` of length n: the permuted design is
    ``X[idx]`` (row i of the permuted design is row ``idx[i]`` of the original), held
    against the fixed residuals; ``blocks[idx] == blocks`` always holds.

    Parameters
    ----------
    n : int
    n_permutations : int
        Permutations asked for. When the number of distinct relabellings is at most this,
        all of them are enumerated instead (``exact``).
    rng : None, int or numpy.random.Generator
        One draw from it seeds the permutations; :meth:`batches` replays the same
        permutations on every call.
    blocks : array_like, optional
        Block (stratum) label of every sample; samples are only permuted within blocks.
    block_name : str, optional
        Name of the blocking column, for the description and error messages.
    design : ndarray, optional
        Design rows (n x m); rows that are equal are interchangeable, which defines which
        relabellings are distinct. Default: every sample distinct.
    exact : {'auto', True, False}
        'auto' enumerates when it is possible within ``n_permutations``; False never does.
    symmetries : int, optional
        Relabellings giving the same statistic as any given one (see
        :func:`label_symmetries`); default: found by brute force from ``design`` when it
        has at most 5 distinct rows (:func:`span_symmetries`), else 1.
    what : str
        What is permuted, for notes ("the samples", "the 6 units of 'tank'").
    where : str, optional
        How the blocks are described (default "blocks of '<block_name>'").

    Raises
    ------
    DesignError
        The blocks allow no relabelling other than the identity.
    """

    def __init__(self, n: int, n_permutations: int, rng: np.random.Generator, *,
                 blocks=None, block_name: str | None = None, design=None, exact="auto",
                 symmetries: int | None = None, what: str = "the samples",
                 where: str | None = None):
        self.n = int(n)
        self._where_text = where
        self.requested = int(n_permutations)
        if self.requested < 0:
            raise InputError(f"`n_permutations` must be >= 0; got {n_permutations}.")
        self.block_name = block_name
        self.what = what
        # a snapshot of the stream: every call of batches() replays the same permutations,
        # so several tests (the terms of one table) can share them
        # (the caller's generator is advanced once, so a second test drawn from it differs)
        child = np.random.default_rng(np.random.default_rng(rng).integers(2**63, size=4))
        self._bit_generator = type(child.bit_generator)
        self._state = child.bit_generator.state
        self.blocks = None if blocks is None else as_codes(blocks)
        if self.blocks is not None and self.blocks.size != self.n:
            raise DesignError(f"{self.blocks.size} block labels for {self.n} samples.")
        self.types = row_types(design, self.n)
        cap = max(self.requested, FEW_PERMUTATIONS)
        self.n_distinct = count_relabellings(self.types, self.blocks, cap=cap)
        if self.n_distinct == 1:
            where = (f"within the blocks of {block_name!r}" if block_name
                     else "among the samples")
            raise DesignError(
                f"no relabelling {where} changes the design, so there is nothing to permute.",
                location=Location(column=repr(block_name)) if block_name else None,
                hint="The tested term may be constant within every block; test it at the "
                     "block level, or drop the blocks.")
        if symmetries is None:
            symmetries = (span_symmetries([design], self.blocks)
                          if design is not None and np.asarray(design).size else 1)
        self.symmetries = max(int(symmetries), 1)
        if exact == "auto":
            self.exact = self.n_distinct is not None and self.n_distinct <= self.requested
        else:
            self.exact = bool(exact) and self.n_distinct is not None
        self.total = self.n_distinct if self.exact else self.requested
        if self.blocks is not None:
            order = np.argsort(self.blocks, kind="stable")
            self._block_sorted = order

    # ----------------------------------------------------------------- description
    @property
    def few(self) -> bool:
        """True when fewer than 100 distinct relabellings exist."""
        return self.n_distinct is not None and self.n_distinct < FEW_PERMUTATIONS

    @property
    def min_pvalue(self) -> float | None:
        """Smallest p-value the exact test can give (symmetries / distinct relabellings);
        None when the relabellings are too many to matter."""
        if self.n_distinct is None:
            return None
        return self.symmetries / self.n_distinct

    def _where(self) -> str:
        if self.blocks is not None and self._where_text:
            return f" within {self._where_text}"
        if self.blocks is not None and self.block_name:
            return f" within blocks of {self.block_name!r}"
        return " within blocks" if self.blocks is not None else ""

    def describe(self) -> str:
        where = self._where().strip() or "free"
        of = "" if self.what == "the samples" else f" of {self.what}"
        if self.exact:
            return f"exact: all {self.n_distinct} distinct relabellings{of} ({where})"
        return f"{self.requested} random permutations{of} ({where})"

    def note(self, *, term: str | None = None, replication: str | None = None,
             alpha: float = 0.05) -> str | None:
        """A note when p-values are coarse (see :func:`floor_note`), else None."""
        return floor_note(self.n_distinct, self.symmetries, what=self.what,
                          where=self._where(), term=term, replication=replication,
                          alpha=alpha)

    # ----------------------------------------------------------------- generation
    def batches(self, size: int) -> Iterator[np.ndarray]:
        """Yield (B, n) index arrays, B <= size, ``total`` rows in all.

        The random stream is consumed row by row, so the permutations do not depend on
        ``size``.
        """
        size = max(1, int(size))
        rng = self._generator()
        if self.exact:
            it = self._enumerate()
            while True:
                chunk = list(itertools.islice(it, size))
                if not chunk:
                    return
                yield np.array(chunk, dtype=np.intp)
        done = 0
        while done < self.total:
            b = min(size, self.total - done)
            yield self._random(rng, b)
            done += b

    def _generator(self) -> np.random.Generator:
        bg = self._bit_generator()
        bg.state = self._state
        return np.random.Generator(bg)

    def _random(self, rng: np.random.Generator, b: int) -> np.ndarray:
        """``b`` random relabellings: one seed each from ``rng``, then a Fisher-Yates
        shuffle of every block (:mod:`tallyform.core.shuffle`; the same on every machine)."""
        from .shuffle import draw_seeds, shuffled_rows
        if self.blocks is None:
            order = np.arange(self.n, dtype=np.intp)
            bounds = np.array([0, self.n], dtype=np.intp)
        else:
            order = self._block_sorted
            bounds = np.r_[0, np.cumsum(np.bincount(self.blocks))].astype(np.intp)
        return shuffled_rows(draw_seeds(rng, b), order, bounds, self.n)

    def _enumerate(self) -> Iterator[np.ndarray]:
        """Every distinct relabelling once (the identity among them)."""
        n = self.n
        blocks = np.zeros(n, dtype=np.intp) if self.blocks is None else self.blocks
        per_block = []
        for b in np.unique(blocks):
            pos = np.flatnonzero(blocks == b)
            t = self.types[pos]
            arrangements = np.array(list(_multiset_arrangements(t.tolist())), dtype=np.intp)
            local = np.empty_like(arrangements)
            for ty in np.unique(t):
                rows = pos[t == ty]                 # samples of this type, in order
                mask = arrangements == ty
                rank = np.cumsum(mask, axis=1) - 1
                local[mask] = rows[rank[mask]]
            per_block.append((pos, local))
        for combo in itertools.product(*[range(len(loc)) for _, loc in per_block]):
            idx = np.empty(n, dtype=np.intp)
            for (pos, local), c in zip(per_block, combo):
                idx[pos] = local[c]
            yield idx


def within_units(codes, n_permutations: int, rng, *, unit_name: str | None = None,
                 blocks=None, block_name: str | None = None, design=None, exact="auto",
                 symmetries: int | None = None) -> Permutations:
    """Samples permuted only within their unit (and block): units as strata.

    ``codes`` gives the unit of every sample; with ``blocks`` too, samples move within
    the combinations of unit and block.
    """
    strata = combine_codes(codes, blocks)
    name = unit_name if block_name is None else f"{unit_name} x {block_name}"
    where = f"units of {unit_name!r}" + (f" and blocks of {block_name!r}" if block_name
                                         else "")
    return Permutations(len(strata), n_permutations, rng, blocks=strata, block_name=name,
                        design=design, exact=exact, symmetries=symmetries, where=where)


# ---------------------------------------------------------------------------- units
class UnitPermutations:
    """Whole units permuted among themselves, each keeping all of its samples together.

    The relabelling acts on the m units: permutation ``idx`` (length m) gives unit ``u`` the
    design row (factor levels) of unit ``idx[u]``, while every sample stays with its unit.
    Units are only exchanged within their unit blocks (the parent unit of a nested level,
    and the user's blocks, which must group whole units). When the factor was assigned to the
    units at random, this is an exact randomisation test whatever the numbers of samples per
    unit (Anderson & ter Braak 2003).

    Parameters
    ----------
    codes : array_like of int, shape (n,)
        Unit of every sample (0..m-1).
    n_permutations : int
    rng : None, int or Generator
    unit_name : str
        Name of the units column, for notes ("'tank'").
    blocks : array_like, shape (m,), optional
        Block of every unit (parents and user blocks combined).
    block_name : str, optional
    design : ndarray, shape (m, k), optional
        Unit-level design rows: units with equal rows are interchangeable.
    exact, symmetries : as in :class:`Permutations` (at the unit level).

    Attributes
    ----------
    units : Permutations
        The scheme over the m units (its ``batches`` yield (B, m) arrays).
    sizes : ndarray
        Samples per unit.
    balanced : bool
        Every unit holds the same number of samples.
    """

    def __init__(self, codes, n_permutations: int, rng, *, unit_name: str = "units",
                 blocks=None, block_name: str | None = None, design=None, exact="auto",
                 symmetries: int | None = None):
        self.codes = np.asarray(codes, dtype=np.intp)
        self.m = int(self.codes.max()) + 1
        self.sizes = np.bincount(self.codes, minlength=self.m)
        self.unit_name = unit_name
        what = f"the {self.m} units of {unit_name!r}"
        try:
            self.units = Permutations(self.m, n_permutations, rng, blocks=blocks,
                                      block_name=block_name, design=design, exact=exact,
                                      symmetries=symmetries, what=what)
        except DesignError:
            where = f" within blocks of {block_name!r}" if block_name else ""
            raise DesignError(
                f"no relabelling of the units of {unit_name!r}{where} changes the design, so "
                "there are no whole units to permute.",
                location=Location(column=repr(unit_name)),
                hint="Each block (or parent unit) needs units with different levels of the "
                     "tested term.") from None
        order = np.argsort(self.codes, kind="stable")
        self.balanced = bool(self.sizes.min() == self.sizes.max())
        if self.balanced:
            self._positions = order.reshape(self.m, -1)     # samples of each unit, in order

    # delegated description
    total = property(lambda self: self.units.total)
    exact = property(lambda self: self.units.exact)
    n_distinct = property(lambda self: self.units.n_distinct)
    symmetries = property(lambda self: self.units.symmetries)
    min_pvalue = property(lambda self: self.units.min_pvalue)
    few = property(lambda self: self.units.few)
    requested = property(lambda self: self.units.requested)

    def describe(self) -> str:
        where = self.units._where()
        if self.exact:
            return (f"exact: all {self.n_distinct} distinct relabellings of whole units of "
                    f"{self.unit_name!r}{where}")
        return (f"{self.requested} random permutations of whole units of "
                f"{self.unit_name!r}{where}")

    def note(self, **kw) -> str | None:
        return self.units.note(**kw)

    def batches(self, size: int) -> Iterator[np.ndarray]:
        """(B, m) unit index arrays."""
        return self.units.batches(size)

    def sample_batches(self, size: int) -> Iterator[np.ndarray]:
        """(B, n) sample index arrays (balanced units only): the sample at position j of
        unit u takes the design row of the sample at position j of unit ``idx[u]``."""
        if not self.balanced:
            raise DesignError(f"the units of {self.unit_name!r} hold different numbers of "
                              "samples, so a permutation of units is not a permutation of "
                              "samples; use the unit-level computation.")
        pos = self._positions
        for idx in self.batches(size):
            out = np.empty((idx.shape[0], self.codes.size), dtype=np.intp)
            out[:, pos] = pos[idx]
            yield out


class CyclicShifts:
    """The ordered visits of every unit rotated by a random number of steps.

    Unit u with visits v_0 < v_1 < ... < v_{s-1} (in the order of ``order``) and shift k
    gives visit j the design row of visit (j + k) mod s; every unit gets its own shift.
    Rotations keep the sequence of the visits, so a series with serial correlation keeps
    it under the null (Besag & Clifford 1989 for restricted Monte Carlo schemes). Exact
    enumeration of all prod(s_u) shift combinations when they are few enough.
    """

    def __init__(self, codes, order, n_permutations: int, rng, *, unit_name: str = "units",
                 order_name: str = "order", exact="auto"):
        self.codes = np.asarray(codes, dtype=np.intp)
        self.n = self.codes.size
        self.requested = int(n_permutations)
        self.unit_name, self.order_name = unit_name, order_name
        self.m = int(self.codes.max()) + 1
        key = np.asarray(order)
        self._units = []
        for u in range(self.m):
            pos = np.flatnonzero(self.codes == u)
            pos = pos[np.argsort(key[pos], kind="stable")]
            self._units.append(pos)
        sizes = [p.size for p in self._units]
        log_total = sum(math.log(s) for s in sizes)
        cap = max(self.requested, FEW_PERMUTATIONS)
        self.n_distinct = math.prod(sizes) if log_total <= math.log(cap) + 1e-9 else None
        if self.n_distinct == 1:
            raise DesignError(f"every unit of {unit_name!r} holds a single visit, so there is "
                              "nothing to rotate.", location=Location(column=repr(unit_name)))
        self.symmetries = 1
        if exact == "auto":
            self.exact = self.n_distinct is not None and self.n_distinct <= self.requested
        else:
            self.exact = bool(exact) and self.n_distinct is not None
        self.total = self.n_distinct if self.exact else self.requested
        child = np.random.default_rng(np.random.default_rng(rng).integers(2**63, size=4))
        self._state = child.bit_generator.state
        self._bit_generator = type(child.bit_generator)
        self._sizes = np.array(sizes)

    few = property(lambda self: self.n_distinct is not None
                   and self.n_distinct < FEW_PERMUTATIONS)
    min_pvalue = property(lambda self: None if self.n_distinct is None
                          else 1 / self.n_distinct)

    def describe(self) -> str:
        what = f"cyclic shifts of the visits (in {self.order_name!r} order) within each " \
               f"unit of {self.unit_name!r}"
        if self.exact:
            return f"exact: all {self.n_distinct} {what}"
        return f"{self.requested} random {what}"

    def note(self, **kw) -> str | None:
        return floor_note(self.n_distinct, 1, what="the visits by cyclic shifts", **kw)

    def _build(self, shifts: np.ndarray) -> np.ndarray:
        b = shifts.shape[0]
        idx = np.empty((b, self.n), dtype=np.intp)
        for u, pos in enumerate(self._units):
            s = pos.size
            j = (np.arange(s)[None, :] + shifts[:, u:u + 1]) % s
            idx[:, pos] = pos[j]
        return idx

    def batches(self, size: int) -> Iterator[np.ndarray]:
        size = max(1, int(size))
        if self.exact:
            it = itertools.product(*[range(s) for s in self._sizes])
            while True:
                chunk = list(itertools.islice(it, size))
                if not chunk:
                    return
                yield self._build(np.array(chunk, dtype=np.intp))
        bg = self._bit_generator()
        bg.state = self._state
        rng = np.random.Generator(bg)
        done = 0
        while done < self.total:
            b = min(size, self.total - done)
            shifts = (rng.random((b, self.m)) * self._sizes[None, :]).astype(np.intp)
            yield self._build(shifts)
            done += b
