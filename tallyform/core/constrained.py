"""Correspondence analysis and constrained ordination: CA, CCA, RDA (and PCA), db-RDA.

All of them are one computation in different metrics. A centred response Y (n x p) is
split by an orthonormal basis Q of the constraints into fitted (Q Q' Y) and residual parts,
each decomposed by SVD; with only a dissimilarity, the same split works on the Gower matrix
G (fitted part Q Q' G Q Q', eigen-decomposed through the small m x m matrix Q' G Q). The
two small engines :func:`~tallyform.core.eigen.split_features` and
:func:`~tallyform.core.eigen.split_gower` live in :mod:`tallyform.core.eigen` so that the
permutation tests and the size/shape partition can reuse them.

- CA: Y = D_r^{-1/2} (P - r c') D_c^{-1/2}, no constraints.
- CCA (ter Braak 1986): the same Y, constraints weighted by the row masses r.
- RDA (Rao 1964; Legendre & Legendre 2012, 11.1): Y = centred (optionally transformed or
  standardised) abundances. Without terms it is PCA.
- db-RDA (Legendre & Anderson 1999; McArdle & Anderson 2001): G of any dissimilarity.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .constraint_engine import ConstraintData
from .constraint_shares import reading_note, share_parts
from .design import model_matrix
from .eigen import (CORRECTIONS, EigenSplit, constraint_bases, corrected_gower, flip_signs,
                    residualized_gower, split_features, split_gower)
from .errors import DesignError, InputError
from .ordination import (Ordination, labels_index, require_design, as_dissimilarity,
                         axis_names, check_option)

__all__ = ["ca", "cca", "rda", "db_rda", "SCALINGS",
           # the engines, re-exported from .eigen for convenience
           "EigenSplit", "split_features", "split_gower", "constraint_bases",
           "residualized_gower"]

#: scaling option -> (exponent alpha on the sample side, description)
SCALINGS = {
    "samples": (1.0, "samples principal, taxa standard (distances between samples "
                     "approximate their dissimilarities)"),
    "taxa": (0.0, "taxa principal, samples standard (angles between taxa reflect their "
                  "correlations)"),
    "symmetric": (0.5, "symmetric (samples and taxa each scaled by the square root of the "
                       "singular value)"),
}


# ---------------------------------------------------------------------------- shared build
@dataclass(frozen=True, eq=False)
class _Design:
    """Coded terms (no intercept), coded conditions or None, and what the tests need."""

    Xt: np.ndarray
    xnames: list
    terms: list
    Xc: np.ndarray | None
    conditions: list
    frame: pd.DataFrame
    term_columns: dict

    def data(self, method, labels, *, features=None, gower=None, weights=None,
             prefix="", totals=None, transform=None) -> ConstraintData:
        return ConstraintData(method, labels_index(labels), self.frame, tuple(self.terms),
                              tuple(self.conditions), self.Xt, self.term_columns, Z=self.Xc,
                              features=features, gower=gower, weights=weights,
                              axis_prefix=prefix, totals=totals, transform=transform)


def _design(samples, labels, terms, conditions) -> _Design:
    frame = require_design(samples, len(labels), labels)
    if terms is None or (not isinstance(terms, str) and len(terms) == 0):
        raise DesignError("no terms were given; name at least one column of the sample table, "
                          "e.g. terms=['treatment'].")
    mm = model_matrix(frame, terms)
    Xt = np.asarray(mm.X[:, 1:], dtype=float)
    Xc = None
    cond_list = []
    if conditions is not None and not (not isinstance(conditions, str) and len(conditions) == 0):
        cm = model_matrix(frame, conditions)
        Xc = np.asarray(cm.X[:, 1:], dtype=float)
        cond_list = list(cm.terms)
    cols = {t: [c - 1 for c in idx] for t, idx in mm.term_columns.items()}
    return _Design(Xt, mm.columns[1:], list(mm.terms), Xc, cond_list, frame, cols)


def _weighted_corr(X: np.ndarray, S: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Weighted Pearson correlations between the columns of X and of S (weights sum to 1)."""
    w = w / w.sum()
    Xc = X - w @ X
    Sc = S - w @ S
    num = (Xc * w[:, None]).T @ Sc
    den = np.sqrt(w @ (Xc * Xc))[:, None] * np.sqrt(w @ (Sc * Sc))[None, :]
    with np.errstate(invalid="ignore", divide="ignore"):
        out = num / den
    out[~np.isfinite(out)] = np.nan
    return out


def _assemble(method, split: EigenSplit, Yz, labels, taxa, *, row_scale, col_scale,
              scaling, con_prefix, res_prefix, total, conditioned, Xt, xnames, weights,
              provenance, notes, shares=None):
    """Scores and result for the feature path (RDA, CCA, CA, db-RDA from features)."""
    alpha, description = SCALINGS[scaling]
    n = len(labels)
    # constrained axes: only positive eigenvalues get scores
    fpos = split.fitted_values > 0
    fv = split.fitted_values[fpos]
    fz, fu = split.fitted_vectors[:, fpos], split.fitted_loadings[:, fpos]
    fz, fu = flip_signs(fz, fu)  # same flip for both sides of each axis
    fs = np.sqrt(fv)
    wa = (Yz @ fu) * row_scale[:, None]            # principal, response space
    lc = (fz * fs) * row_scale[:, None]            # principal, fitted values
    tx_c = fu * col_scale[:, None]                 # standard
    rpos = split.residual_values > 0
    rv = split.residual_values[rpos]
    rz, ru = split.residual_vectors[:, rpos], split.residual_loadings[:, rpos]
    rz, ru = flip_signs(rz, ru)
    rs = np.sqrt(rv)
    res_scores = (rz * rs) * row_scale[:, None]
    tx_r = ru * col_scale[:, None]
    s_all = np.concatenate([fs, rs])
    scores = np.column_stack([wa, res_scores]) * s_all ** (alpha - 1.0)
    tx = np.column_stack([tx_c, tx_r]) * s_all ** (1.0 - alpha)
    con_names = axis_names(con_prefix, len(fv)) if con_prefix else []
    res_names = axis_names(res_prefix, len(rv))
    names = con_names + res_names
    idx = labels_index(labels)
    fitted = corr = None
    if con_prefix:
        fitted = pd.DataFrame(lc * fs ** (alpha - 1.0), index=idx, columns=con_names)
        corr = pd.DataFrame(_weighted_corr(Xt, lc, weights), index=pd.Index(xnames, name="constraint"),
                            columns=con_names)
    return _result(method, pd.DataFrame(scores, index=idx, columns=names),
                   np.concatenate([split.fitted_values, split.residual_values]),
                   con_names + [], res_names, split, total=total, conditioned=conditioned,
                   scaling=description,
                   taxa=None if taxa is None else pd.DataFrame(
                       tx, index=pd.Index(taxa, name="taxon"), columns=names),
                   fitted=fitted, corr=corr, has_constraints=bool(con_prefix),
                   provenance=dict(provenance, scaling=scaling), notes=notes,
                   shares=shares, n=n, con_prefix=con_prefix, res_prefix=res_prefix)


def _result(method, scores, values, con_names, res_names, split, *, total, conditioned,
            scaling, taxa, fitted, corr, has_constraints, provenance, notes, shares, n,
            con_prefix, res_prefix):
    """The Ordination; ``shares`` = (m, k, ezekiel, ConstraintData) for constrained ones."""
    nf = len(split.fitted_values)
    names = (axis_names(con_prefix, nf) if con_prefix else []) + \
        axis_names(res_prefix, len(split.residual_values))
    eig = pd.Series(values, index=names, name="eigenvalue")
    explained = pd.Series(values / total if total > 0 else np.nan, index=names, name="explained")
    notes = list(notes)
    neg = values[values < 0]
    negative_share = float(-neg.sum() / total) if neg.size and total > 0 else 0.0
    if negative_share > 0:
        notes.append(f"negative eigenvalues hold {100 * negative_share:.1f} % of the total: the "
                     "measure is not Euclidean here; consider correction='lingoes' or "
                     "'cailliez', or a Euclidean measure.")
    r2 = adj = chance = m = kz = data = None
    con = unc = None
    if has_constraints:
        con, unc = split.fitted_trace, split.residual_trace
        m, kz, ezekiel, data = shares
        r2, adj, chance = share_parts(total, conditioned, con, n, m, kz, ezekiel)
        notes.append(reading_note(method, r2, chance, adj, m, n))
    return Ordination(method=method, scores=scores, eigenvalues=eig, explained=explained,
                      scaling=scaling, taxa=taxa, fitted_scores=fitted,
                      constraint_correlations=corr, total_inertia=float(total),
                      constrained_inertia=con, unconstrained_inertia=unc,
                      conditioned_inertia=conditioned, r_squared=r2, adjusted_r_squared=adj,
                      n_constrained=nf if has_constraints else 0,
                      negative_share=negative_share, provenance=provenance,
                      notes=tuple(notes), constraint_df=m, condition_df=kz,
                      chance_share=chance, constraint_data=data)


def _table_and_samples(table, samples, name="table"):
    from .table import as_table
    tab = as_table(table, name=name)
    info = tab.samples if samples is None else samples
    return tab, info


def _ca_matrix(values: np.ndarray, labels, taxa):
    """D_r^{-1/2}(P - r c')D_c^{-1/2}, row and column masses; errors for empty margins."""
    N = values.sum()
    if N <= 0:
        raise InputError("the table is empty (its grand total is 0).")
    r = values.sum(axis=1) / N
    c = values.sum(axis=0) / N
    if np.any(r <= 0):
        bad = [str(labels[i]) for i in np.flatnonzero(r <= 0)]
        raise InputError(f"sample(s) {bad[:8]} have a total of 0; correspondence analysis "
                         "needs every sample to hold something.",
                         hint="Drop empty samples (CommunityTable(..., empty='drop')).")
    if np.any(c <= 0):
        bad = [str(taxa[j]) for j in np.flatnonzero(c <= 0)]
        raise InputError(f"taxon/taxa {bad[:8]} are absent from every sample; correspondence "
                         "analysis needs every column to hold something.",
                         hint="Drop empty taxa (CommunityTable(..., empty='drop')).")
    P = values / N
    S = (P - np.outer(r, c)) / np.sqrt(np.outer(r, c))
    return S, r, c, N


# ---------------------------------------------------------------------------- CA / CCA
def ca(table, *, scaling: str = "samples") -> Ordination:
    """Correspondence analysis (CA) of a table of counts.

    Parameters
    ----------
    table : CommunityTable, DataFrame or array (samples x taxa, or any contingency table)
    scaling : {'samples', 'taxa', 'symmetric'}, default 'samples'
        'samples': sample principal coordinates (chi-square distances between samples are
        preserved), taxa in standard coordinates; 'taxa': the reverse; 'symmetric': both
        scaled by the square root of the singular values.

    Returns
    -------
    Ordination
        ``eigenvalues`` (squared singular values, the principal inertias), ``explained``
        (shares of the total inertia), ``scores`` and ``taxa`` under ``scaling``.

    Notes
    -----
    S = D_r^{-1/2} (P - r c') D_c^{-1/2} = U Sigma V' with P = X / N, r and c the row and
    column masses. Total inertia = sum of sigma^2 = Pearson chi-square / N. Sample principal
    coordinates D_r^{-1/2} U Sigma, taxon standard coordinates D_c^{-1/2} V. The singular
    values are the canonical correlations between the row and column categories
    (Fisher 1940).

    References
    ----------
    Fisher (1940) Annals of Eugenics 10: 422-429. Greenacre (1984) Theory and Applications
    of Correspondence Analysis. Legendre & Legendre (2012), section 9.2.

    Examples
    --------
    >>> import pandas as pd
    >>> t = pd.DataFrame([[10, 2], [3, 9]], index=["s1", "s2"], columns=["a", "b"])
    >>> round(ca(t).total_inertia, 4)  # Pearson chi-square / N
    0.3427
    """
    check_option("scaling", scaling, tuple(SCALINGS))
    from .table import as_table
    tab = as_table(table)
    labels, taxa = tab.sample_labels, tab.taxon_labels
    S, r, c, N = _ca_matrix(tab.values, labels, taxa)
    n = len(labels)
    split = split_features(S, np.empty((n, 0)))
    total = split.total
    prov = {"method": "CA", "n_samples": n, "n_taxa": len(taxa), "grand_total": float(N)}
    return _assemble("CA", split, S, labels, list(taxa), row_scale=1 / np.sqrt(r),
                     col_scale=1 / np.sqrt(c), scaling=scaling, con_prefix=None,
                     res_prefix="CA", total=total, conditioned=None, Xt=None, xnames=None,
                     weights=r, provenance=prov, notes=[])


def cca(table, samples=None, *, terms, conditions=None, scaling: str = "samples") -> Ordination:
    """Canonical correspondence analysis (CCA) of counts constrained by sample information.

    Parameters
    ----------
    table : CommunityTable, DataFrame or array (samples x taxa)
    samples : DataFrame, optional
        Sample information (default: the table's own). Factors become treatment-coded
        indicator columns (:func:`tallyform.core.design.model_matrix`).
    terms : list of str
        Columns (and ``"a:b"`` interactions) that constrain the axes.
    conditions : list of str, optional
        Columns whose effect is removed first (partial CCA).
    scaling : {'samples', 'taxa', 'symmetric'}, default 'samples'

    Returns
    -------
    Ordination
        Constrained axes ``CCA1...`` then unconstrained ``CA1...``; ``scores`` are the
        weighted averages of the taxon scores (samples principal), ``fitted_scores`` the
        linear combinations of the constraints, ``constraint_correlations`` the weighted
        correlations of each coded column with them; inertia parts and ``r_squared``
        (constrained / total inertia, not adjusted).

    Notes
    -----
    With S as in :func:`ca`, the constraint matrix X is weighted by the row masses
    (rows times sqrt(r_i)), S is projected on it, and the fitted and residual parts are
    decomposed by SVD (ter Braak 1986; Legendre & Legendre 2012, 11.2). With U the right
    singular vectors, sample scores D_r^{-1/2} S U (weighted averages of the taxon scores
    D_c^{-1/2} U) and fitted scores D_r^{-1/2} Z Sigma.

    References
    ----------
    ter Braak (1986) Ecology 67: 1167-1179.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> rng = np.random.default_rng(0)
    >>> x = pd.DataFrame(rng.poisson(5, (8, 5)), index=[f"s{i}" for i in range(8)],
    ...                  columns=list("abcde"))
    >>> info = pd.DataFrame({"trt": list("aabbaabb")}, index=x.index)
    >>> o = cca(x, info, terms=["trt"])
    >>> o.n_constrained
    1
    """
    check_option("scaling", scaling, tuple(SCALINGS))
    tab, info = _table_and_samples(table, samples)
    labels, taxa = tab.sample_labels, tab.taxon_labels
    S, r, c, N = _ca_matrix(tab.values, labels, taxa)
    des = _design(info, labels, terms, conditions)
    Xt, xnames, Xc = des.Xt, des.xnames, des.Xc
    Qz, Qx = constraint_bases(Xt, Xc, weights=r)
    Sz = S - Qz @ (Qz.T @ S)
    split = split_features(Sz, Qx)
    total = float(np.sum(S * S))
    conditioned = total - split.total if Xc is not None else None
    prov = {"method": "CCA", "n_samples": len(labels), "n_taxa": len(taxa),
            "terms": des.terms, "conditions": des.conditions, "grand_total": float(N)}
    data = des.data("CCA", labels, features=S, weights=r, prefix="CCA", totals=r * N)
    return _assemble("CCA", split, Sz, labels, list(taxa), row_scale=1 / np.sqrt(r),
                     col_scale=1 / np.sqrt(c), scaling=scaling, con_prefix="CCA",
                     res_prefix="CA", total=total, conditioned=conditioned, Xt=Xt,
                     xnames=xnames, weights=r, provenance=prov, notes=[],
                     shares=(Qx.shape[1], Qz.shape[1] - 1, False, data))


# ---------------------------------------------------------------------------- RDA
def rda(table, samples=None, *, terms=None, conditions=None, transform=None,
        standardize: bool = False, scaling: str = "samples") -> Ordination:
    """Redundancy analysis (RDA) of abundances on sample information; PCA without terms.

    Parameters
    ----------
    table : CommunityTable, DataFrame or array (samples x taxa)
    samples : DataFrame, optional
        Sample information (default: the table's own).
    terms : list of str, optional
        Constraining columns; None gives an unconstrained PCA.
    conditions : list of str, optional
        Columns partialled out first (partial RDA).
    transform : str or Transform, optional
        Transformation of the abundances first (e.g. ``'hellinger'``), from
        :mod:`tallyform.core.transforms`.
    standardize : bool, default False
        Scale every taxon to unit variance (RDA on correlations).
    scaling : {'samples', 'taxa', 'symmetric'}, default 'samples'

    Returns
    -------
    Ordination
        Axes ``RDA1...`` (constrained) then ``PC1...``; eigenvalues are sums of squares
        (variance times n - 1), so they match PCoA of the Euclidean distances and db-RDA.
        ``r_squared`` and ``adjusted_r_squared`` (Ezekiel 1930) without conditions.

    Notes
    -----
    Y centred (n x p), Q an orthonormal basis of the centred constraints; Y_hat = Q Q' Y =
    Z Sigma U'. Sample scores Y U Sigma^(alpha - 1), fitted scores Z Sigma^alpha, taxon scores
    U Sigma^(1 - alpha), alpha = 1, 0, 1/2 for 'samples', 'taxa', 'symmetric'.

    References
    ----------
    Rao (1964) Sankhya A 26: 329-358. Legendre & Legendre (2012), section 11.1.
    Ezekiel (1930) Methods of Correlation Analysis.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> rng = np.random.default_rng(0)
    >>> x = pd.DataFrame(rng.poisson(5, (8, 4)), index=[f"s{i}" for i in range(8)],
    ...                  columns=list("abcd"))
    >>> info = pd.DataFrame({"trt": list("aabbaabb")}, index=x.index)
    >>> o = rda(x, info, terms=["trt"])
    >>> o.axes[:2]
    ['RDA1', 'PC1']
    """
    check_option("scaling", scaling, tuple(SCALINGS))
    tab, info = _table_and_samples(table, samples)
    labels, taxa = tab.sample_labels, list(tab.taxon_labels)
    Y = np.array(tab.values, dtype=float, copy=True)
    tname = None
    if transform is not None:
        from .transforms import get_transform  # lazy: the module may be absent
        t = get_transform(transform)
        Y = np.asarray(t.apply(Y), dtype=float)
        tname = t.name
    Y = Y - Y.mean(axis=0)
    if standardize:
        sd = np.sqrt(np.sum(Y * Y, axis=0))
        if np.any(sd == 0):
            bad = [taxa[j] for j in np.flatnonzero(sd == 0)]
            raise InputError(f"taxon/taxa {bad[:8]} are constant across samples and cannot be "
                             "standardised.", hint="Drop them, or use standardize=False.")
        Y = Y / (sd / np.sqrt(len(Y) - 1))
    n = len(labels)
    prov = {"method": "RDA" if terms is not None else "PCA", "n_samples": n,
            "n_taxa": len(taxa), "transform": tname, "standardize": bool(standardize)}
    if terms is None:
        if conditions is not None:
            raise DesignError("`conditions` need `terms`: name the constraining columns too.")
        split = split_features(Y, np.empty((n, 0)))
        return _assemble("PCA", split, Y, labels, taxa, row_scale=np.ones(n),
                         col_scale=np.ones(len(taxa)), scaling=scaling, con_prefix=None,
                         res_prefix="PC", total=split.total, conditioned=None, Xt=None,
                         xnames=None, weights=np.ones(n), provenance=prov, notes=[])
    des = _design(info, labels, terms, conditions)
    Xt, xnames, Xc = des.Xt, des.xnames, des.Xc
    Qz, Qx = constraint_bases(Xt, Xc)
    Yz = Y - Qz @ (Qz.T @ Y)
    split = split_features(Yz, Qx)
    total = float(np.sum(Y * Y))
    prov.update(terms=des.terms, conditions=des.conditions)
    data = des.data("RDA", labels, features=Y, prefix="RDA",
                    totals=np.asarray(tab.values, dtype=float).sum(axis=1), transform=tname)
    return _assemble("RDA", split, Yz, labels, taxa, row_scale=np.ones(n),
                     col_scale=np.ones(len(taxa)), scaling=scaling, con_prefix="RDA",
                     res_prefix="PC", total=total,
                     conditioned=(total - split.total) if Xc is not None else None, Xt=Xt,
                     xnames=xnames, weights=np.ones(n), provenance=prov, notes=[],
                     shares=(Qx.shape[1], Qz.shape[1] - 1, True, data))


# ---------------------------------------------------------------------------- db-RDA
def db_rda(d, samples, terms=None, *, conditions=None, correction: str | None = None,
           residual_dims: int | None = None) -> Ordination:
    """Distance-based redundancy analysis (db-RDA) of a dissimilarity on sample information.

    Parameters
    ----------
    d : Dissimilarity
    samples : DataFrame or CommunityTable
        Sample information, rows matched to ``d.labels`` by label. Pass the table the
        dissimilarities were computed from to let :func:`constraint_test` say when sample
        totals differ with the constraints.
    terms : list of str
        Constraining columns (factors expand to indicator columns).
    conditions : list of str, optional
        Columns partialled out first (partial db-RDA).
    correction : {None, 'lingoes', 'cailliez'}, default None
        Make the dissimilarity Euclidean first (see :func:`tallyform.core.ordination.pcoa`).
    residual_dims : int, optional
        Gower path only: compute just this many unconstrained axes (0: none) by ARPACK
        instead of the full n x n eigen-decomposition; default all. (On the feature path all
        axes come from a thin SVD and cost little.)

    Returns
    -------
    Ordination
        Axes ``db-RDA1...`` (constrained) then ``PCoA1...`` (residual). ``scores`` on the
        constrained axes are G z_k / sqrt(l_k) (the response-space scores, which keep the
        spread within groups), ``fitted_scores`` are z_k sqrt(l_k); taxon scores come from
        :meth:`Ordination.taxon_scores`. ``r_squared`` = tr(H G) / tr(G) and its adjusted
        value (Ezekiel 1930) without conditions.

    Notes
    -----
    G = -1/2 C D^2 C; H the hat matrix of the centred constraints (given the conditions,
    after G is replaced by (I - H_z) G (I - H_z)). Constrained eigen-structure of H G H,
    residual of (I - H) G (I - H). With non-Euclidean D some eigenvalues are negative; the
    trace identities still hold (McArdle & Anderson 2001). For measures with a feature
    matrix the same is computed from the features without any n x n matrix.

    References
    ----------
    Legendre & Anderson (1999) Ecological Monographs 69: 1-24. McArdle & Anderson (2001)
    Ecology 82: 290-297. Ezekiel (1930).

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> from scipy.spatial.distance import pdist
    >>> from tallyform.core.dissimilarity import Dissimilarity
    >>> y = np.array([[1.0], [2.0], [4.0], [7.0]])
    >>> d = Dissimilarity(pdist(y), ["a", "b", "c", "d"], measure="euclidean")
    >>> info = pd.DataFrame({"x": [0.0, 1.0, 2.0, 3.0]}, index=["a", "b", "c", "d"])
    >>> round(db_rda(d, info, ["x"]).r_squared, 4)  # the squared correlation of x and y
    0.9524
    """
    d = as_dissimilarity(d)
    check_option("correction", correction, CORRECTIONS)
    if residual_dims is not None and (isinstance(residual_dims, bool) or
                                      not isinstance(residual_dims, (int, np.integer)) or
                                      not 0 <= residual_dims <= d.n - 1):
        raise InputError(f"`residual_dims` must be None or a whole number from 0 to {d.n - 1}; "
                         f"got {residual_dims!r}.")
    des = _design(samples, d.labels, terms, conditions)
    Qz, Qx = constraint_bases(des.Xt, des.Xc)
    prov = {"method": "db-RDA", **d.provenance, "terms": des.terms,
            "conditions": des.conditions, "correction": correction, "correction_constant": 0.0}
    shares = (Qx.shape[1], Qz.shape[1] - 1, True)
    totals = _table_totals(samples, d.labels)
    if d.has_features:
        return _restate_db(_db_rda_features(d, des, Qz, Qx, prov, shares, totals, correction),
                           None)
    res = _db_rda_gower(d, des, Qz, Qx, prov, shares, totals, correction, residual_dims)
    return _restate_db(res, residual_dims)


def _db_rda_features(d, des, Qz, Qx, prov, shares, totals, correction) -> Ordination:
    """db-RDA of a Euclidean measure through its feature matrix (an SVD)."""
    labels, n = d.labels, d.n
    notes: list[str] = []
    if correction is not None:
        notes.append(f"the {d.measure} measure is Euclidean (it has a feature matrix): no "
                     f"{correction} correction was needed.")
    Y = d.features - d.features.mean(axis=0)
    Yz = Y - Qz @ (Qz.T @ Y)
    split = split_features(Yz, Qx)
    total = float(np.sum(Y * Y))
    prov["path"] = "features (SVD)"
    return _assemble("db-RDA", split, Yz, labels, None, row_scale=np.ones(n),
                     col_scale=np.ones(Y.shape[1]), scaling="samples", con_prefix="db-RDA",
                     res_prefix="PCoA", total=total,
                     conditioned=(total - split.total) if des.Xc is not None else None,
                     Xt=des.Xt, xnames=des.xnames, weights=np.ones(n), provenance=prov,
                     notes=notes,
                     shares=shares + (des.data("db-RDA", labels, features=Y,
                                               prefix="db-RDA", totals=totals,
                                               transform=d.transform),))


def _db_rda_gower(d, des, Qz, Qx, prov, shares, totals, correction,
                  residual_dims) -> Ordination:
    """db-RDA through the (corrected) Gower matrix: fitted and residual eigenvectors."""
    labels, n, Xt, Xc = d.labels, d.n, des.Xt, des.Xc
    notes: list[str] = []
    G, c = corrected_gower(d, correction)
    prov["correction_constant"] = c
    if correction is not None and c == 0.0:
        notes.append(f"the dissimilarities are already Euclidean: no {correction} correction "
                     "was needed.")
    total = float(np.trace(G))
    Gz = residualized_gower(G, Qz) if Xc is not None else G
    split = split_gower(Gz, Qx, residual_dims=residual_dims)
    prov["path"] = "Gower matrix"
    fpos = split.fitted_values > 0
    fv = split.fitted_values[fpos]
    (fz,) = flip_signs(split.fitted_vectors[:, fpos])
    fs = np.sqrt(fv)
    wa = (Gz @ fz) / fs
    lc = fz * fs
    rpos = split.residual_values > 0
    (rz,) = flip_signs(split.residual_vectors[:, rpos])
    res_scores = rz * np.sqrt(split.residual_values[rpos])
    con_names = axis_names("db-RDA", len(fv))
    res_names = axis_names("PCoA", int(rpos.sum()))
    idx = labels_index(labels)
    scores = pd.DataFrame(np.column_stack([wa, res_scores]), index=idx,
                          columns=con_names + res_names)
    fitted = pd.DataFrame(lc, index=idx, columns=con_names)
    corr = pd.DataFrame(_weighted_corr(Xt, lc, np.ones(n)),
                        index=pd.Index(des.xnames, name="constraint"), columns=con_names)
    values = np.concatenate([split.fitted_values, split.residual_values])
    return _result("db-RDA", scores, values, con_names, res_names, split, total=total,
                   conditioned=(total - float(np.trace(Gz))) if Xc is not None else None,
                   scaling=SCALINGS["samples"][1], taxa=None, fitted=fitted, corr=corr,
                   has_constraints=True, provenance=dict(prov, scaling="samples"), notes=notes,
                   shares=shares + (des.data("db-RDA", labels, gower=G, prefix="db-RDA",
                                             totals=totals, transform=d.transform),),
                   n=n, con_prefix="db-RDA", res_prefix="PCoA")


def _table_totals(samples, labels) -> np.ndarray | None:
    """Sample totals (row sums of the counts) when ``samples`` is a CommunityTable holding
    every sample of the dissimilarity; None otherwise (a dissimilarity keeps no totals)."""
    from .table import CommunityTable
    if not isinstance(samples, CommunityTable):
        return None
    sums = pd.Series(np.asarray(samples.values, dtype=float).sum(axis=1),
                     index=[str(x) for x in samples.sample_labels])
    if not set(labels) <= set(sums.index):
        return None
    return sums.loc[list(labels)].to_numpy()


def _restate_db(res: Ordination, residual_dims) -> Ordination:
    """db-RDA results have no taxa of their own; note partial residual decompositions."""
    from dataclasses import replace
    notes = list(res.notes)
    complete = True
    if residual_dims is not None:
        complete = False
        notes.append(f"only {'no' if residual_dims == 0 else residual_dims} unconstrained "
                     "axes were computed (residual_dims).")
    return replace(res, taxa=None, eigenvalues_complete=complete, notes=tuple(notes),
                   scaling="samples principal (distances between samples approximate their "
                           "dissimilarities); taxa by weighted averages or correlations")
