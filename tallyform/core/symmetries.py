"""How many relabellings give the same permutation statistic, and the note that says what
the smallest attainable p-value is.

A relabelling that only swaps the labels of equal-sized groups (or mirrors a symmetric
covariate) spans the same model and gives the same statistic, so the distinct values of a
permutation statistic number ``n_distinct / symmetries``; an exact permutation p-value is
never below ``symmetries / n_distinct`` (two groups of 4 samples: 70 relabellings, 2
symmetries, p >= 2/70; 6 units in two groups of 3: p >= 0.1).
"""
from __future__ import annotations

import itertools
import math

import numpy as np

from .errors import InputError

__all__ = ["label_symmetries", "span_symmetries", "floor_note", "FEW_PERMUTATIONS"]

#: Below this many distinct relabellings a result carries a note (p-values are coarse).
FEW_PERMUTATIONS = 100
#: A smallest attainable p-value at or above this also gets a note.
_FLOOR_NOTE = 0.01


def as_codes(values) -> np.ndarray:
    """Integer codes 0..k-1 of arbitrary labels (order of first appearance irrelevant)."""
    _, codes = np.unique(np.asarray(values).astype(str), return_inverse=True)
    return codes.ravel().astype(np.intp)


def row_types(design: np.ndarray | None, n: int) -> np.ndarray:
    """Codes of identical design rows: relabellings that swap equal rows change nothing."""
    if design is None or design.size == 0:
        return np.arange(n, dtype=np.intp)
    d = np.ascontiguousarray(np.asarray(design, dtype=np.float64).reshape(n, -1))
    _, codes = np.unique(d, axis=0, return_inverse=True)
    return codes.ravel().astype(np.intp)


def _block_signature(keys: np.ndarray, blocks: np.ndarray) -> np.ndarray:
    """Sorted (block, key) pairs: equal for two labellings with the same rows per block."""
    order = np.lexsort((keys, blocks))
    return np.column_stack([blocks[order], keys[order]])


def label_symmetries(columns, blocks=None, *, cap: int = 500) -> int:
    """Relabellings of the design that leave every model span, and so the statistic, unchanged.

    Parameters
    ----------
    columns : list of (kind, values)
        One entry per main effect: ``("factor", labels)`` or ``("numeric", values)``, one
        value per row (sample or unit). Interactions need no entry: a relabelling of the
        levels of each factor maps their interaction onto itself.
    blocks : array_like, optional
        Relabellings happen within these blocks.
    cap : int
        Joint maps examined one by one at most; beyond it the count is the product, over
        the main effects, of the maps that work for that main effect alone (a lower bound
        that misses only maps that must move two factors together, as in a Latin square).

    Returns
    -------
    int
        The number of maps (a permutation of the levels of every factor, the identity or
        the reflection x -> min + max - x of every covariate) under which every block holds
        the same multiset of design rows. Each maps an arrangement of the design onto another
        arrangement with the same column spaces, so the number of distinct values of a
        permutation statistic is the number of distinct relabellings divided by this.

    Examples
    --------
    >>> label_symmetries([("factor", list("aaaabbbb"))])        # two groups of 4
    2
    >>> label_symmetries([("factor", list("aaabbbbb"))])        # unequal groups
    1
    >>> label_symmetries([("factor", list("aabbcc")), ("numeric", [1, 2, 1, 2, 1, 2])])
    12
    """
    axes = []
    for kind, values in columns:
        if kind == "factor":
            axes.append(("factor", as_codes(values), None))
        elif kind == "numeric":
            u, codes = np.unique(np.asarray(values, dtype=float), return_inverse=True)
            axes.append(("numeric", codes.ravel().astype(np.intp), u))
        else:
            raise InputError(f"column kind must be 'factor' or 'numeric'; got {kind!r}.")
    if not axes:
        return 1
    n = axes[0][1].size
    b = np.zeros(n, dtype=np.intp) if blocks is None else as_codes(blocks)
    shape = [int(b.max()) + 1 if n else 1] + [int(c.max()) + 1 for _, c, _ in axes]
    if math.prod(shape) > 2_000_000:
        return 1
    T = np.zeros(shape, dtype=np.int64)
    np.add.at(T, (b, *[c for _, c, _ in axes]), 1)
    cands, alone = [], []
    for f, (kind, codes, u) in enumerate(axes):
        ax, k = f + 1, shape[f + 1]
        if kind == "numeric":
            maps = [np.arange(k)]
            if k > 1 and np.allclose(u + u[::-1], u[0] + u[-1], rtol=1e-12,
                                     atol=1e-12 * max(1.0, float(np.abs(u).max()))):
                maps.append(np.arange(k)[::-1].copy())
            cands.append(maps)
            alone.append(sum(np.array_equal(np.take(T, m, axis=ax), T) for m in maps))
            continue
        # levels trade only with levels of equal counts per block (a necessary condition)
        marg = T.sum(axis=tuple(a for a in range(1, T.ndim) if a != ax))   # blocks x k
        classes: dict = {}
        for lv in range(k):
            classes.setdefault(marg[:, lv].tobytes(), []).append(lv)
        cands.append(list(classes.values()))
        # alone: levels whose whole slices are equal can be permuted freely
        same: dict = {}
        for lv in range(k):
            same.setdefault(np.take(T, lv, axis=ax).tobytes(), []).append(lv)
        alone.append(math.prod(math.factorial(len(g)) for g in same.values()))
    joint = 1
    for c in cands:
        joint *= len(c) if isinstance(c[0], np.ndarray) else \
            math.prod(math.factorial(len(g)) for g in c)
        if joint > cap:
            return max(1, math.prod(alone))
    per_axis = []
    for c, (_, _, _) in zip(cands, axes):
        if isinstance(c[0], np.ndarray):
            per_axis.append(c)
            continue
        k = sum(len(g) for g in c)
        maps = []
        for combo in itertools.product(*[itertools.permutations(g) for g in c]):
            m = np.arange(k)
            for g, image in zip(c, combo):
                m[g] = image
            maps.append(m)
        per_axis.append(maps)
    hits = 0
    everything = np.arange(shape[0])
    for combo in itertools.product(*per_axis):
        if np.array_equal(T[np.ix_(everything, *combo)], T):
            hits += 1
    return max(hits, 1)


def span_symmetries(designs, blocks=None, *, max_types: int = 5) -> int:
    """Symmetries of a design given only as matrices (nested spans), by brute force.

    Counts the permutations of the distinct design rows (at most ``max_types`` of them; 1 is
    returned beyond) that keep the rows of every block and the column span of each matrix in
    ``designs`` (an intercept is added to each). Used when the factor structure is unknown.

    Examples
    --------
    >>> span_symmetries([[[0], [0], [0], [1], [1], [1]]])      # two groups of 3
    2
    """
    mats = [np.asarray(X, dtype=float).reshape(np.asarray(X).shape[0], -1)
            for X in designs if X is not None and np.asarray(X).size]
    if not mats:
        return 1
    n = mats[0].shape[0]
    full = np.hstack(mats)
    types = row_types(full, n)
    t = int(types.max()) + 1
    if t > max_types or t < 2:
        return 1
    b = np.zeros(n, dtype=np.intp) if blocks is None else as_codes(blocks)
    rep = np.array([np.flatnonzero(types == k)[0] for k in range(t)])
    base = _block_signature(types, b)
    rows = [np.hstack([np.ones((t, 1)), X[rep]]) for X in mats]
    ranks = [np.linalg.matrix_rank(r) for r in rows]
    hits = 0
    for perm in itertools.permutations(range(t)):
        p = np.asarray(perm)
        if not np.array_equal(_block_signature(p[types], b), base):
            continue
        if all(np.linalg.matrix_rank(np.hstack([r, r[p]])) == k for r, k in zip(rows, ranks)):
            hits += 1
    return max(hits, 1)


def floor_note(n_distinct: int | None, symmetries: int, *, what: str = "the samples",
               where: str = "", term: str | None = None, replication: str | None = None,
               alpha: float = 0.05) -> str | None:
    """A plain note when p-values are coarse: fewer than 100 distinct relabellings, or a
    smallest attainable p-value of 0.01 or more. None otherwise."""
    if n_distinct is None:
        return None
    floor = symmetries / n_distinct
    if n_distinct >= FEW_PERMUTATIONS and floor < _FLOOR_NOTE:
        return None
    values = n_distinct // max(symmetries, 1)
    text = f"Only {n_distinct} distinct relabellings of {what} exist{where}"
    if symmetries > 1:
        text += (f" ({values} distinct values of the statistic: relabellings that only swap "
                 "the labels of equal-sized groups give the same value)")
    subject = f" for {term!r}" if term else ""
    text += f", so the smallest possible p-value{subject} is {floor:.3g}"
    if floor > alpha:
        why = f"with {replication}, " if replication else ""
        text += (f"; {why}this test cannot reach p <= {alpha:g} whatever the data, and a "
                 "non-significant result says nothing about whether there is an effect.")
    else:
        text += "; p-values are coarse and a non-significant result says little."
    return text
