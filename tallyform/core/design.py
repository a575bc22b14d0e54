"""Model matrices from the sample table: factors, numeric covariates, interactions "a:b".

One builder for every constrained analysis (db-RDA, CCA, RDA, PERMANOVA, the size and shape
partition), so that "treatment" means the same columns everywhere.

Coding: a factor (text, categorical or boolean column) is expanded to treatment contrasts
(indicator columns for every level but the first; levels in categorical order, else sorted);
a numeric column enters as one column; ``"a:b"`` adds the products of the columns of ``a``
and ``b``. Degrees of freedom are ranks, so aliased columns cost nothing.
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import scipy.linalg

from .errors import DesignError, Location

__all__ = ["ModelMatrix", "model_matrix", "orthonormal_basis", "factor_levels", "as_samples"]


def _natural_key(s: str):
    return [int(t) if t.isdigit() else t.lower() for t in re.split(r"(\d+)", str(s))]


def factor_levels(col: pd.Series) -> list:
    """Level order of a factor column: categorical order, else the order of the file
    (first appearance), the order in which tables, figures and results list groups."""
    if isinstance(col.dtype, pd.CategoricalDtype):
        return [c for c in col.cat.categories if (col == c).any()]
    return list(pd.unique(col.astype(str)))


def _is_factor(col: pd.Series) -> bool:
    return not pd.api.types.is_numeric_dtype(col) or pd.api.types.is_bool_dtype(col)


def as_samples(samples) -> pd.DataFrame:
    """The sample table from a CommunityTable, a Dissimilarity's partner table or a frame."""
    from .table import CommunityTable
    if isinstance(samples, CommunityTable):
        return samples.samples
    if isinstance(samples, pd.Series):
        return samples.to_frame()
    if isinstance(samples, pd.DataFrame):
        return samples
    raise DesignError(f"sample information must be a DataFrame (or a CommunityTable); got "
                      f"{type(samples).__name__}.")


@dataclass(frozen=True, eq=False)
class ModelMatrix:
    """A coded design: ``X`` (n x m, first column the intercept when present).

    Attributes
    ----------
    X : ndarray, shape (n, m)
    columns : list of str
        Column names (``"(intercept)"``, ``"treatment[nutrient_low]"``, ``"day"``...).
    terms : list of str
        The terms in the order given.
    term_columns : dict term -> list of column indices into X
    kinds : dict term -> 'factor' | 'numeric' | 'interaction'
    """

    X: np.ndarray
    columns: list
    terms: list
    term_columns: dict
    kinds: dict
    levels: dict = field(default_factory=dict)

    @property
    def n(self) -> int:
        return self.X.shape[0]

    def submatrix(self, terms, *, intercept: bool = True) -> np.ndarray:
        """Columns of the given terms (in the order of ``self.terms``), with the intercept."""
        idx = [0] if intercept and self.columns and self.columns[0] == "(intercept)" else []
        for t in self.terms:
            if t in terms:
                idx.extend(self.term_columns[t])
        return self.X[:, idx] if idx else np.empty((self.n, 0))


def _coded(name: str, col: pd.Series, n: int) -> tuple[np.ndarray, list[str], str, list]:
    if col.isna().any():
        bad = list(col.index[col.isna()])[:8]
        raise DesignError(f"column {name!r} has missing values for sample(s) {bad}"
                          f"{' ...' if col.isna().sum() > 8 else ''}.",
                          location=Location(column=repr(name)),
                          hint="Fill them in, or take a subset without those samples.")
    if _is_factor(col):
        levels = factor_levels(col)
        if len(levels) < 2:
            raise DesignError(f"factor {name!r} has a single level ({levels[0]!r}); it cannot "
                              "explain any difference between samples.",
                              location=Location(column=repr(name)),
                              hint="Drop the term, or use a column with at least 2 levels.")
        if len(levels) == n:
            raise DesignError(f"factor {name!r} gives every sample its own level ({n} levels "
                              f"for {n} samples), so nothing is left to compare against.",
                              location=Location(column=repr(name)),
                              hint="Is this an identifier column? Use a grouping column instead.")
        text = col.astype(str).to_numpy()
        cols = [(text == str(lv)).astype(float) for lv in levels[1:]]
        return np.column_stack(cols), [f"{name}[{lv}]" for lv in levels[1:]], "factor", levels
    x = pd.to_numeric(col, errors="coerce").to_numpy(dtype=float)
    if not np.isfinite(x).all():
        raise DesignError(f"numeric column {name!r} holds non-finite values.",
                          location=Location(column=repr(name)))
    if np.ptp(x) == 0:
        raise DesignError(f"numeric column {name!r} is constant ({x[0]:g}); it cannot explain "
                          "any difference between samples.", location=Location(column=repr(name)))
    return x[:, None], [name], "numeric", []


def model_matrix(samples, terms, *, intercept: bool = True) -> ModelMatrix:
    """Code ``terms`` of the sample table into a model matrix.

    Parameters
    ----------
    samples : DataFrame or CommunityTable
    terms : str or list of str
        Column names, and interactions written ``"a:b"`` (both main effects should usually
        be listed before it).
    intercept : bool, default True

    Raises
    ------
    DesignError
        Unknown column, missing values, a one-level factor, a factor with a level per sample,
        a constant covariate, or no residual degrees of freedom left.
    """
    frame = as_samples(samples)
    if isinstance(terms, str):
        terms = [terms]
    terms = [str(t).strip() for t in terms]
    if not terms:
        raise DesignError("no terms were given; name at least one column of the sample table.")
    if len(set(terms)) != len(terms):
        raise DesignError(f"a term is listed twice: {terms}.")
    n = len(frame)
    cache: dict[str, tuple] = {}

    def main(name):
        if name not in frame.columns:
            raise DesignError(f"column {name!r} is not in the sample table; columns are "
                              f"{list(map(str, frame.columns))}.",
                              location=Location(column=repr(name)),
                              hint="Check the spelling (case counts).")
        if name not in cache:
            cache[name] = _coded(name, frame[name], n)
        return cache[name]

    blocks, names, term_columns, kinds, levels = [], [], {}, {}, {}
    if intercept:
        blocks.append(np.ones((n, 1)))
        names.append("(intercept)")
    pos = len(names)
    for term in terms:
        parts = [p.strip() for p in term.split(":")]
        if len(parts) == 1:
            x, cn, kind, lv = main(parts[0])
            levels[term] = lv
        else:
            x, cn = np.ones((n, 1)), [""]
            for p in parts:
                px, pn, _, _ = main(p)
                x = np.einsum("ij,ik->ijk", x, px).reshape(n, -1)
                cn = [f"{a}:{b}" if a else b for a in cn for b in pn]
            kind = "interaction"
        blocks.append(x)
        names.extend(cn)
        term_columns[term] = list(range(pos, pos + x.shape[1]))
        kinds[term] = kind
        pos += x.shape[1]
    X = np.hstack(blocks)
    rank = np.linalg.matrix_rank(X)
    if rank >= n:
        raise DesignError(f"the terms {terms} use {rank} degrees of freedom with {n} samples, "
                          "leaving none for the residual.",
                          hint="Use fewer terms or levels, or more samples.")
    X.setflags(write=False)
    return ModelMatrix(X, names, terms, term_columns, kinds, levels)


def orthonormal_basis(X: np.ndarray, *, rtol: float = 1e-10) -> np.ndarray:
    """Orthonormal basis Q (n x rank) of the column space of X (pivoted QR).

    The hat matrix is ``Q @ Q.T``; columns aliased with earlier ones are dropped, so
    ``Q.shape[1]`` is the rank (the degrees of freedom).
    """
    X = np.asarray(X, dtype=float)
    if X.shape[1] == 0:
        return np.empty((X.shape[0], 0))
    q, r, _ = scipy.linalg.qr(X, mode="economic", pivoting=True)
    d = np.abs(np.diag(r))
    k = int(np.sum(d > rtol * d.max())) if d.size and d.max() > 0 else 0
    return q[:, :k]
