"""Ordination results and principal coordinates analysis (PCoA).

One result class, :class:`Ordination`, serves every method (PCoA, CA, CCA, RDA, db-RDA,
NMDS): eigenvalues (all of them, negative ones included), the share of the total per axis,
sample scores labelled by sample, optional taxon scores, the scaling used, inertia parts for
constrained methods, provenance and plain-language notes.

PCoA (Gower 1966) works from the Gower-centred matrix ``G = -1/2 C D^2 C``; for measures that
carry a feature matrix F (Euclidean embeddings), the same answer comes from the thin SVD of
the centred F without any n x n matrix. ``dims=k`` asks for the k leading axes only (ARPACK),
which makes thousands of samples feasible.

Constrained methods live in :mod:`tallyform.core.constrained`, NMDS in
:mod:`tallyform.core.nmds`, ellipses in :mod:`tallyform.core.ellipses`.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import scipy.linalg

from .dissimilarity import Dissimilarity
from .eigen import (CORRECTIONS, ZERO_RTOL, corrected_gower, eigh_desc, flip_signs,
                    gower_operator, leading_eigen, smallest_eigenvalue)
from .errors import DesignError, InputError
from .measures import setting_name
from .memory import check_memory
from .descriptor_scores import aligned_values, correlation_scores, weighted_average_scores
from .results import ResultMixin

__all__ = ["Ordination", "pcoa", "weighted_average_scores", "correlation_scores"]


# ---------------------------------------------------------------------------- helpers
from .validation import check_option  # noqa: E402  (re-exported)


def as_dissimilarity(d, *, name: str = "d") -> Dissimilarity:
    """A Dissimilarity from a Dissimilarity, or from a square DataFrame / array."""
    if isinstance(d, Dissimilarity):
        return d
    if isinstance(d, (pd.DataFrame, np.ndarray, list)):
        return Dissimilarity.from_square(d)
    raise InputError(f"`{name}` must be a Dissimilarity (or a square matrix of dissimilarities); "
                     f"got {type(d).__name__}.")


def axis_names(prefix: str, k: int, start: int = 1) -> list[str]:
    return [f"{prefix}{i}" for i in range(start, start + k)]


def labels_index(labels) -> pd.Index:
    return pd.Index([str(x) for x in labels], dtype=object, name="sample")


# ---------------------------------------------------------------------------- result
@dataclass(frozen=True, eq=False)
class Ordination(ResultMixin):
    """The result of an ordination (PCoA, CA, CCA, RDA, db-RDA or NMDS).

    Attributes
    ----------
    method : str
        ``'PCoA'``, ``'CA'``, ``'CCA'``, ``'RDA'``, ``'db-RDA'`` or ``'NMDS'``.
    scores : DataFrame, shape (n_samples, n_axes)
        Sample scores under ``scaling``, one column per axis with a positive eigenvalue
        (constrained axes first, then unconstrained ones). For constrained methods these are
        the scores in the space of the response (weighted averages for CCA), so samples of a
        group keep their spread; the fitted (linear-combination) scores are in
        ``fitted_scores``.
    eigenvalues : Series
        Every eigenvalue computed, in decreasing order within each part, negative ones
        included, labelled by axis name. Sums of squares for PCoA, RDA and db-RDA; inertia
        (mean-square contingency) for CA and CCA. Empty for NMDS.
    explained : Series
        Each eigenvalue divided by the total (trace of G, or the total inertia), so that all
        shares, negative ones included, add up to 1.
    scaling : str
        How sample and taxon scores are scaled, stated in words.
    taxa : DataFrame or None
        Taxon scores under ``scaling`` (CA, CCA, RDA); see :meth:`taxon_scores` for the others.
    fitted_scores : DataFrame or None
        Constrained methods: sample scores on the constrained axes computed from the fitted
        values (linear combinations of the constraints).
    constraint_correlations : DataFrame or None
        Constrained methods: correlation of each coded constraint column with the fitted
        sample scores of each constrained axis (arrows in a biplot).
    total_inertia, constrained_inertia, unconstrained_inertia, conditioned_inertia : float
        Total variation and its parts (constrained methods; None where not applicable).
        ``conditioned_inertia`` is the part removed by ``conditions`` (partial analyses).
    r_squared, adjusted_r_squared : float or None
        Constrained share of the total (after conditioning, of the whole total) and its
        adjustment: Ezekiel (1930) for RDA and db-RDA (partial analyses: the adjusted share
        of terms and conditions together minus that of the conditions, Peres-Neto et al.
        2006); CCA's needs permutations and stays None until :meth:`with_test` (or see
        :meth:`adjusted_share`).
    n_constrained : int
        Number of constrained eigenvalues at the start of ``eigenvalues``.
    negative_share : float
        Sum of the magnitudes of negative eigenvalues divided by the total (0 when none):
        the positive axes together then hold ``1 + negative_share`` of the total. NaN when
        it was not measured: leading axes only (``dims``) past 300 samples with a negative
        smallest eigenvalue, or ``spectrum=False``; a note says which.
    eigenvalues_complete : bool
        False when only the leading eigenvalues were computed (``dims=``).
    stress, stress_reading, shepard, starts
        NMDS only: Kruskal's stress-1 of the best start, its reading in plain words, the
        Shepard-plot data (dissimilarity, ordination distance, monotone fit per pair) and one
        row per start.
    provenance : dict
        Every choice that produced the result (method, measure, transform, correction...).
    notes : tuple of str
        Plain-language warnings that belong with the numbers.
    constraint_df, condition_df : int or None
        Constrained methods: number of constraint columns (after the conditions) and of
        condition columns (the ranks, i.e. degrees of freedom).
    chance_share : float or None
        Constrained methods: the share of the total that as many random constraint columns
        fit on average, m / (n - 1 - k) times the share left by the k condition columns
        (m / (n - 1) without conditions; for CCA an approximation until a permutation
        estimate replaces it, see :meth:`with_test`).
    constraint_test : ConstraintTest or None
        The permutation test attached by :meth:`with_test`.
    constraint_data : ConstraintData or None
        What :func:`tallyform.constraint_test` needs (response, design, weights).
    """

    method: str
    scores: pd.DataFrame
    eigenvalues: pd.Series
    explained: pd.Series
    scaling: str
    taxa: pd.DataFrame | None = None
    fitted_scores: pd.DataFrame | None = None
    constraint_correlations: pd.DataFrame | None = None
    total_inertia: float = float("nan")
    constrained_inertia: float | None = None
    unconstrained_inertia: float | None = None
    conditioned_inertia: float | None = None
    r_squared: float | None = None
    adjusted_r_squared: float | None = None
    n_constrained: int = 0
    negative_share: float = 0.0
    eigenvalues_complete: bool = True
    stress: float | None = None
    stress_reading: str | None = None
    shepard: pd.DataFrame | None = field(default=None, repr=False)
    starts: pd.DataFrame | None = field(default=None, repr=False)
    provenance: dict = field(default_factory=dict)
    notes: tuple = ()
    constraint_df: int | None = None
    condition_df: int | None = None
    chance_share: float | None = None
    constraint_test: object | None = field(default=None, repr=False)
    constraint_data: object | None = field(default=None, repr=False)
    _share_cache: dict = field(default_factory=dict, repr=False, init=False)

    # ------------------------------------------------------------------ views
    @property
    def axes(self) -> list[str]:
        """Names of the axes that have sample scores."""
        return list(self.scores.columns)

    @property
    def constrained_axes(self) -> list[str]:
        """Names of the scored constrained axes (empty for unconstrained methods)."""
        return [] if self.fitted_scores is None else list(self.fitted_scores.columns)

    @property
    def n_samples(self) -> int:
        return self.scores.shape[0]

    def axis_label(self, axis) -> str:
        """``'PCoA1 (31.2 %)'``: an axis name with its share of the total, for plot titles."""
        name = self.scores.columns[axis] if isinstance(axis, (int, np.integer)) else str(axis)
        rot = self.provenance.get("rotation") or {}
        if rot.get("mixed") and name in list(self.scores.columns[: rot.get("dims", 2)]):
            plane = self.explained.reindex(self.scores.columns[: rot.get("dims", 2)]).sum()
            return (f"{name}, rotated {abs(rot['angle']):.0f}\u00b0 (the plane holds "
                    f"{100 * float(plane):.1f} %)")
        if name in self.explained.index:
            return f"{name} ({100 * float(self.explained[name]):.1f} %)"
        return name

    def tables(self) -> dict:
        return {"ordination_axes": self.to_frame(), "ordination_scores": self.scores}

    def to_frame(self) -> pd.DataFrame:
        """One row per axis: eigenvalue, share of the total, cumulative share, part.

        For NMDS (no eigenvalues): one row per start (stress, whether it is the one kept).
        """
        if self.method == "NMDS":
            return self.starts.copy() if self.starts is not None else pd.DataFrame()
        frame = pd.DataFrame({"eigenvalue": self.eigenvalues.to_numpy(),
                              "explained": self.explained.to_numpy(),
                              "cumulative": np.cumsum(self.explained.to_numpy())},
                             index=self.eigenvalues.index.copy())
        if self.constrained_inertia is not None:
            frame["part"] = (["constrained"] * self.n_constrained +
                             ["unconstrained"] * (len(frame) - self.n_constrained))
        frame.index.name = "axis"
        return frame

    @property
    def reading(self) -> str:
        """What the first two axes show, and how to judge the picture."""
        if self.stress is not None:
            return (f"{self.method} of {self.n_samples} samples: stress {self.stress:.3f} "
                    f"({self.stress_reading}); distances in the plot follow the ranks of the "
                    "dissimilarities, not their values.")
        ex = self.explained.head(2)
        axes = " and ".join(f"{k} {100 * float(v):.1f} %" for k, v in ex.items()
                            if np.isfinite(v))
        text = f"{self.method} of {self.n_samples} samples: {axes or 'no axis'} of the variation."
        summary = self.constrained_summary()
        if summary:
            text += f" {summary[0].upper()}{summary[1:]}."
        if self.negative_share and self.negative_share > 0.01:
            text += (f" Negative eigenvalues hold {100 * self.negative_share:.1f} % of the "
                     "variation: shares of axes are of the positive part.")
        return text

    def _title(self) -> str:
        bits = [f"{self.method}: {self.n_samples} samples", f"scaling: {self.scaling}"]
        if self.stress is not None:
            bits.append(f"stress {self.stress:.3f} ({self.stress_reading})")
        summary = self.constrained_summary()
        if summary:
            bits.append(summary)
        return "; ".join(bits)

    def __repr__(self) -> str:
        return f"<Ordination {self._title()}>"

    def _repr_html_(self) -> str:
        frame = self.to_frame()
        more = ""
        if len(frame) > 12:
            more = f"<p>first 12 of {len(frame)} rows (all in <code>to_frame()</code>)</p>"
            frame = frame.head(12)
        body = frame.to_html(float_format="{:.4g}".format) + more
        import html as _html
        return (f"<div><p><b>{_html.escape(self._title())}</b></p>{body}"
                f"{self._notes_html()}</div>")

    # ------------------------------------------------------------------ constrained share
    def constrained_summary(self) -> str | None:
        """One line on the constrained share, for titles: the share, its chance level, the
        adjusted share and the permutation p-value when known (None when unconstrained).

        E.g. ``'constrained share 19.0 % (chance level 18.2 %; adjusted 1.0 %; overall
        p = 0.41, 999 permutations)'``.
        """
        from .constraint_shares import share_summary
        return share_summary(self)

    def adjusted_share(self, *, n_permutations: int = 999, rng=None) -> float:
        """The constrained share minus what chance fits (0 on average under the null).

        RDA and db-RDA: Ezekiel's (1930) adjusted R^2 (no permutations needed). CCA: the
        permutation estimate of Peres-Neto et al. (2006), 1 - (1 - R^2) / (1 - mean R^2*),
        R^2* the share after permuting the constraints' rows (each sample keeping its
        weight); computed once per (n_permutations, seed) and kept. Partial analyses: the
        adjusted share of terms and conditions together minus that of the conditions.

        Parameters
        ----------
        n_permutations : int, default 999
            CCA only.
        rng : None, int or numpy.random.Generator
            CCA only. With None or a Generator the value is random (a Monte Carlo estimate);
            with None it is kept after the first call.
        """
        from .constraint_shares import ordination_adjusted_share
        return ordination_adjusted_share(self, self._share_cache, n_permutations, rng)

    def with_test(self, test) -> "Ordination":
        """A copy of this ordination that shows a constraint test (overall p-value beside
        the constrained share; CCA's adjusted share and chance level from its permutations).

        Parameters
        ----------
        test : ConstraintTest
            From :func:`tallyform.constraint_test` of this ordination.
        """
        from .constraint_shares import attach_test
        return attach_test(self, test)

    # ------------------------------------------------------------------ derived results
    def ellipses(self, group, *, kind: str = "confidence", level: float = 0.95,
                 axes=(0, 1), n_boot: int = 999, rng=None, constrained: str = "withhold"):
        """Per-group ellipses on two axes of the sample scores.

        See :func:`tallyform.core.ellipses.group_ellipses` for the kinds and constants.

        Parameters
        ----------
        group : Series or sequence, length n_samples
            Group of each sample (a Series is aligned by sample label).
        kind : {'confidence', 'prediction', 'data', 'bootstrap'}, default 'confidence'
            'confidence' and 'bootstrap': regions for each group's true centre;
            'prediction': holds a new sample of the group with probability ``level``;
            'data': the spread of the samples (no coverage level).
        level : float, default 0.95
        axes : pair of int or str, default (0, 1)
        n_boot : int, default 999
            Bootstrap resamples (``kind='bootstrap'`` only).
        rng : None, int or numpy.random.Generator
            Seed for the bootstrap.
        constrained : {'withhold', 'draw'}, default 'withhold'
            When a plotted axis is a constrained axis and the grouping is a constraint (or
            nested in one, or has one nested in it), the axes were chosen to separate these
            groups: confidence and bootstrap ellipses are then withheld (``withheld`` says
            why) unless ``'draw'``, which draws them with the warning in the figure.

        Returns
        -------
        EllipseSet
        """
        from .ellipses import aligned_groups, group_ellipses, groups_choose_axes
        cols = [self._axis(a) for a in axes]
        if len(cols) != 2 or cols[0] == cols[1]:
            raise InputError(f"`axes` must name two different axes; got {axes!r}.")
        chosen, extra = "", ""
        constrained_cols = [c for c in cols if c in self.constrained_axes]
        if self.fitted_scores is not None and len(self.fitted_scores.columns):
            labels = pd.Index([str(x) for x in self.scores.index])
            g = aligned_groups(group, labels)
            if groups_choose_axes(self.fitted_scores.to_numpy(dtype=float), g):
                name = getattr(group, "name", None)
                what = f"{name!r}" if name is not None else "the groups"
                if constrained_cols:
                    chosen = (f"the constrained axes of this {self.method} "
                              f"({', '.join(constrained_cols)}) were chosen to separate the "
                              f"levels of its constraints, and {what} is one of them or is "
                              "nested with one")
                else:
                    extra = (f"{cols[0]} and {cols[1]} are unconstrained axes: the variation "
                             f"explained by the constraints, which include {what}, was "
                             "removed from them, so the groups' centres nearly coincide here "
                             "by construction.")
        out = group_ellipses(self.scores[cols], group, kind=kind, level=level,
                             n_boot=n_boot, rng=rng, source=f"{self.method} ({self.scaling})",
                             chosen_by_groups=chosen, constrained=constrained)
        if extra:
            import dataclasses
            out = dataclasses.replace(out, notes=out.notes + (extra,))
        return out

    def _axis(self, a) -> str:
        if isinstance(a, (int, np.integer)):
            if not -len(self.axes) <= a < len(self.axes):
                raise InputError(f"axis {a} does not exist; this ordination has "
                                 f"{len(self.axes)} scored axes ({self.axes[:6]}...).")
            return self.axes[a]
        if str(a) not in self.axes:
            raise InputError(f"axis {a!r} does not exist; axes are {self.axes[:10]}.")
        return str(a)

    def taxon_scores(self, table=None, *, method: str = "weighted_average",
                     axes=None) -> pd.DataFrame:
        """Taxon positions in the ordination, from a table of abundances.

        Parameters
        ----------
        table : CommunityTable, DataFrame or array, optional
            Abundances of the same samples (matched by label when labelled). Omit it to get
            the taxon scores the method produced itself (CA, CCA, RDA).
        method : {'weighted_average', 'correlation'}, default 'weighted_average'
            ``weighted_average``: sum_i x_ij s_ik / sum_i x_ij, the abundance-weighted mean
            of the sample scores (a taxon sits among the samples where it is abundant).
            ``correlation``: Pearson correlation of the taxon's abundances with the scores
            (an arrow; its length says how well the axis tracks the taxon).
        axes : list of int or str, optional
            Axes to compute (default: all scored axes).

        Returns
        -------
        DataFrame, taxa x axes
            Taxa absent from every sample (weighted averages) or constant across samples
            (correlations) get NaN.
        """
        if table is None:
            if self.taxa is None:
                raise InputError(f"{self.method} has no taxon scores of its own; pass the "
                                 "table of abundances: taxon_scores(table).")
            return self.taxa.copy()
        check_option("method", method, ("weighted_average", "correlation"))
        values, taxa = aligned_values(table, self.scores.index)
        cols = self.axes if axes is None else [self._axis(a) for a in axes]
        s = self.scores[cols].to_numpy(dtype=float)
        out = (weighted_average_scores(values, s) if method == "weighted_average"
               else correlation_scores(values, s))
        return pd.DataFrame(out, index=pd.Index(taxa, name="taxon"), columns=cols)


# ---------------------------------------------------------------------------- eigen tools
_SPECTRUM_FOR_NOTE = 300   # samples up to which the leading-axes path also takes all
                           # eigenvalues (values only, milliseconds) for its note


def pcoa(d, *, correction: str | None = None, dims: int | None = None,
         spectrum: bool = True) -> Ordination:
    """Principal coordinates analysis (PCoA, classical scaling) of a dissimilarity.

    Parameters
    ----------
    d : Dissimilarity (or a square matrix)
    correction : {None, 'lingoes', 'cailliez'}, default None
        Make a non-Euclidean dissimilarity Euclidean before the analysis (off-diagonal
        values only). Skipped (constant 0) when it is already Euclidean.
    dims : int, optional
        Compute only the ``dims`` leading axes (ARPACK), for thousands of samples. Without
        it every eigenvalue is computed and reported.
    spectrum : bool, default True
        With ``dims``: check a non-Euclidean measure for negative eigenvalues (the whole
        spectrum up to 300 samples or when already known, else the smallest eigenvalue).
        ``False`` skips that check unless the spectrum is already known:
        ``negative_share`` is then NaN and a note says so (the dashboard's slider does this
        while it moves). Ignored without ``dims``.

    Returns
    -------
    Ordination
        ``scores`` on every axis with a positive eigenvalue (or the first ``dims``),
        ``eigenvalues`` (all n, negatives included; on the feature path the min(n, q)
        squared singular values, the others being 0; with ``dims`` only the leading ones),
        ``explained`` (shares of tr(G)), ``negative_share`` and notes.

    Raises
    ------
    InputError
        Bad ``correction`` or ``dims``.
    TooLargeError
        When an n x n matrix would exceed the memory limit.

    Notes
    -----
    G = -1/2 C D^2 C with C = I - 11'/n; G = U L U'; scores u_k sqrt(l_k) for l_k > 0
    (Gower 1966). The trace of G is the total sum of squares (sum of squared distances / n),
    so shares add up to 1 over all axes, negative ones counted negative. When ``d`` carries
    a feature matrix F (a Euclidean-embeddable measure), the centred F = U S V' gives the same
    scores U S and eigenvalues S^2 in O(n p) memory. Lingoes (1971): d' = sqrt(d^2 + 2c),
    c = |most negative eigenvalue|; Cailliez (1983): d' = d + c, c the largest real eigenvalue
    of [[0, 2G], [-I, -4 B2]], B2 = -1/2 C D C. Axis signs are fixed so that each axis's
    largest-magnitude score is positive.

    References
    ----------
    Gower (1966) Biometrika 53: 325-338. Lingoes (1971) Psychometrika 36: 195-203.
    Cailliez (1983) Psychometrika 48: 305-308. Legendre & Legendre (2012) Numerical
    Ecology, 3rd ed., section 9.3.

    Examples
    --------
    >>> import numpy as np
    >>> from tallyform.core.dissimilarity import Dissimilarity
    >>> d = Dissimilarity([3.0, 4.0, 5.0], ["a", "b", "c"], measure="euclidean")
    >>> o = pcoa(d)
    >>> [round(float(v), 6) for v in o.eigenvalues]
    [12.964148, 3.702519, 0.0]
    >>> round(float(o.eigenvalues.sum()), 6)  # total: (3^2 + 4^2 + 5^2) / 3
    16.666667
    """
    from .tiled import TiledDissimilarity
    if isinstance(d, TiledDissimilarity):                  # tiles on Dask: leading axes
        from .tiled_tests import tiled_pcoa
        return tiled_pcoa(d, correction=correction, dims=dims)
    d = as_dissimilarity(d)
    check_option("correction", correction, CORRECTIONS)
    n = d.n
    if dims is not None:
        if isinstance(dims, bool) or not isinstance(dims, (int, np.integer)) or \
                not 1 <= dims <= n - 1:
            raise InputError(f"`dims` must be a whole number from 1 to {n - 1} (samples - 1); "
                             f"got {dims!r}.")
        dims = int(dims)
    notes: list[str] = []
    prov = {"method": "PCoA", **d.provenance, "correction": correction,
            "correction_constant": 0.0, "dims": dims, "path": None}
    if not d.has_features:              # refuse before any O(n^2) work
        check_memory((5 if dims is None else 2) * n * n * 8,
                     f"PCoA of {n} samples (the Gower matrix and its eigenvectors)",
                     alternatives="Ask for the leading axes only with dims=..., or use a "
                                  "measure with a feature matrix (no n x n matrix needed).")
    total = d.total_ss()
    known = None                        # every eigenvalue, when known (for the notes)
    if d.has_features:
        if correction is not None:
            notes.append(f"the {d.measure} measure is Euclidean (it has a feature matrix): "
                         f"no {correction} correction was needed.")
        values, vectors = _feature_path(d.features, dims)
        prov["path"] = "features (SVD)"
        complete = True
    else:
        values, vectors, total, known = _gower_path(d, correction, dims, total, notes,
                                                    prov, check=spectrum)
        complete = dims is None
    return pcoa_result(d, values, vectors, total, complete=complete, dims=dims,
                        correction=correction, notes=notes, provenance=prov,
                        spectrum=known)


def _gower_path(d, correction, dims, total, notes: list, prov: dict, *, check=True):
    """Eigenvalues, eigenvectors, total and known spectrum from the (corrected) Gower matrix."""
    n = d.n
    spectrum = None
    if (dims is not None and correction is None and 300 < n and dims < n - 1
            and not d.has_gower):
        G, c = gower_operator(d), 0.0  # D^2 only: no centred n x n copy
    else:
        G, c = corrected_gower(d, correction)
    if correction is not None:
        prov["correction_constant"] = c
        if c == 0.0:
            notes.append(f"the dissimilarities are already Euclidean: no {correction} "
                         "correction was needed.")
        else:
            total = float(np.trace(G))
    if dims is None:
        values, vectors = eigh_desc(G, "PCoA")
        prov["path"] = "Gower matrix (full eigen-decomposition)"
        return values, vectors, total, spectrum
    values, vectors = leading_eigen(G, dims)
    prov["path"] = "Gower matrix (leading axes, ARPACK)"
    if not isinstance(G, np.ndarray):
        prov["path"] = "squared distances as an operator (leading axes, ARPACK)"
    if correction is None and not d.properties.get("euclidean", False):
        # the full spectrum when known or cheap (values only), so that the note
        # says the same share as every other note on this measure
        known = d.spectrum(compute=check and n <= _SPECTRUM_FOR_NOTE)
        if known is not None:
            spectrum = np.asarray(known, float)
        elif check:
            lmin = smallest_eigenvalue(G, tol=1e-3)     # for a note: 3 digits
            if lmin < -ZERO_RTOL * max(values[0], 1e-300):
                notes.append(
                    f"{setting_name(d.measure, d.provenance.get('transform'))!r} is "
                    f"not Euclidean (smallest eigenvalue {lmin:.4g}, "
                    f"{100 * -lmin / values[0]:.2g} % of the largest); with only "
                    f"the {dims} leading axes computed, the share of the variation "
                    "held by negative eigenvalues was not measured.")
                prov["negative_share_measured"] = False      # NaN, not 0: it is not known
        else:
            notes.append(
                f"{setting_name(d.measure, d.provenance.get('transform'))!r} is not "
                "Euclidean in general; whether negative eigenvalues hold part of the "
                "variation was not checked (spectrum=False).")
            prov["negative_share_measured"] = False
    return values, vectors, total, spectrum


def _feature_path(F: np.ndarray, dims: int | None) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues (S^2) and left singular vectors of the centred feature matrix."""
    Fc = F - F.mean(axis=0)
    n, q = Fc.shape
    if dims is not None and dims < q <= n // 2:
        # leading axes only, from the q x q cross-product: every eigenvalue (S^2) and the
        # dims leading vectors U = Fc V / S, without the n x q U of a thin SVD
        w, v = scipy.linalg.eigh(Fc.T @ Fc, check_finite=False)
        w, v = np.maximum(w[::-1], 0.0), v[:, ::-1]
        scale = max(float(w[0]), 1e-300)
        k = min(dims, int(np.sum(w > 1e-12 * scale)))
        u = (Fc @ v[:, :k]) / np.sqrt(w[:k])
        return w, u
    check_memory(3 * n * min(n, q) * 8, f"the SVD of a {n} x {q} feature matrix")
    u, s, _ = scipy.linalg.svd(Fc, full_matrices=False, check_finite=False,
                               lapack_driver="gesdd")
    values = s ** 2
    if dims is not None:
        u = u[:, :dims]
    return values, u


def pcoa_result(d, values, vectors, total, *, complete, dims, correction, notes,
                 provenance, spectrum=None) -> Ordination:
    n = d.n
    labels = labels_index(d.labels)
    scale = max(float(np.max(np.abs(values))) if values.size else 0.0, 1e-300)
    tol = ZERO_RTOL * scale
    k = int(np.sum(values[: vectors.shape[1]] > tol))
    vecs = vectors[:, :k]
    (vecs,) = flip_signs(vecs)
    scores = vecs * np.sqrt(values[:k])
    names = axis_names("PCoA", len(values))
    eig = pd.Series(values, index=names, name="eigenvalue")
    explained = pd.Series(values / total if total > 0 else np.full(len(values), np.nan),
                          index=names, name="explained")
    every = values if spectrum is None else spectrum
    neg = every[every < -tol]
    negative_share = float(-neg.sum() / total) if (neg.size and total > 0) else 0.0
    if provenance.get("negative_share_measured") is False:
        negative_share = float("nan")          # not measured: the notes say why
    if negative_share > 0:
        name = setting_name(d.measure, d.provenance.get("transform"))
        notes = list(notes) + [
            f"negative eigenvalues hold {100 * negative_share:.1f} % of the variation of "
            f"{name!r} (it is not Euclidean; the positive axes together hold "
            f"{100 * (1 + negative_share):.1f} %), so no ordination shows all of it; "
            "correction='lingoes' or 'cailliez', or a Euclidean measure, avoids it."]
    if n > 1 and k == 0:
        notes = list(notes) + ["no axis has a positive eigenvalue: all samples coincide."]
    provenance = dict(provenance, n_axes=k)
    return Ordination(
        method="PCoA", scores=pd.DataFrame(scores, index=labels, columns=names[:k]),
        eigenvalues=eig, explained=explained,
        scaling="principal coordinates (distances between scores approximate the "
                "dissimilarities)",
        total_inertia=float(total), negative_share=negative_share,
        eigenvalues_complete=complete, provenance=provenance, notes=tuple(notes))


def require_design(samples, n_expected: int, labels: pd.Index) -> pd.DataFrame:
    """The sample table aligned to ``labels`` (by label when they match, else by position)."""
    from .design import as_samples
    frame = as_samples(samples)
    idx = pd.Index([str(x) for x in frame.index])
    if len(frame) != n_expected:
        raise DesignError(f"the sample table has {len(frame)} rows but there are {n_expected} "
                          "samples.")
    if set(idx) == set(labels):
        return frame.set_axis(idx).loc[list(labels)]
    raise DesignError("the sample table's labels do not match the samples; e.g. "
                      f"{[x for x in labels if x not in set(idx)][:5]} are missing from it.")
