"""Simulated communities with explicit size and shape effects.

The generator behind the demo scenarios and the audit; exposed so that users can plan a
study ("how many tanks do I need to see a 30 % drop in abundance?").

Model (per sample i, taxon j)::

    mu_i   = mean_total * effort_i * prod(size multipliers of i's levels) * LN(0, total_spread)
    pi_ij  ∝ base_j * prod(shape fold changes of i's levels for taxon j)
    p_i    ~ Dirichlet(pi_i * (1 - phi) / phi)      (phi = profile_noise; 0 gives p_i = pi_i)
    x_i    ~ Multinomial(Poisson(mu_i), p_i)

i.e. Poisson-lognormal totals and Dirichlet-multinomial composition (Mosimann 1962), so size
(the total) and shape (the profile) are controlled separately.
"""
from __future__ import annotations

from typing import Mapping

import numpy as np
import pandas as pd

from .random import as_rng
from .errors import DesignError, InputError
from .table import CommunityTable

__all__ = ["simulate_community", "lognormal_profile"]


def lognormal_profile(n_taxa: int, *, sd: float = 1.5, rng=None) -> np.ndarray:
    """A rank-abundance profile (shares summing to 1, largest first) with lognormal shares.

    Preston's (1948) lognormal is the common shape of species-abundance distributions.
    """
    rng = as_rng(rng)
    if n_taxa < 1:
        raise InputError(f"`n_taxa` must be at least 1; got {n_taxa}.")
    w = np.sort(rng.lognormal(0.0, sd, n_taxa))[::-1]
    return w / w.sum()


def _factor_multipliers(design: pd.DataFrame, effects, what: str) -> dict:
    """Validate {column: {level: value}} or {column: value-per-unit} effect maps."""
    effects = dict(effects or {})
    for col, eff in effects.items():
        if col not in design.columns:
            raise DesignError(f"{what} effect names column {col!r}, which is not in the design "
                              f"(columns: {list(design.columns)}).")
        per_unit = (isinstance(eff, Mapping) and what == "shape"
                    and all(not isinstance(v, Mapping) for v in eff.values()))
        if per_unit and not pd.api.types.is_numeric_dtype(design[col]):
            raise DesignError(f"shape effect for column {col!r} gives folds per unit, which "
                              "needs a numeric column; give {level: {taxon: fold}} instead.")
        if isinstance(eff, Mapping) and not per_unit:
            levels = set(design[col].astype(str))
            unknown = [lv for lv in eff if str(lv) not in levels]
            if unknown:
                raise DesignError(f"{what} effect for column {col!r} names unknown level(s) "
                                  f"{unknown}; levels are {sorted(levels)}.")
        elif not pd.api.types.is_numeric_dtype(design[col]):
            raise DesignError(f"{what} effect for column {col!r} is a single number, which "
                              f"needs a numeric column; give a {{level: value}} map instead.")
    return effects


def simulate_community(design, *, n_taxa: int = 40, mean_total: float = 400.0,
                       size_effects: Mapping | None = None,
                       shape_effects: Mapping | None = None,
                       random_effects: Mapping | None = None,
                       effort: str | None = None, total_spread: float = 0.25,
                       profile_noise: float = 0.02, base_profile=None, taxa=None,
                       rng=None) -> CommunityTable:
    """Simulate counts for a sample design with chosen size and shape effects.

    Parameters
    ----------
    design : DataFrame or int
        Sample information indexed by sample label (factors and numeric covariates), or a
        number of samples (one group).
    n_taxa : int
        Number of taxa (ignored when ``base_profile`` is given).
    mean_total : float
        Expected total count of a sample at the reference levels and unit effort.
    size_effects : {column: {level: multiplier}} or {column: multiplier per unit}
        Multiplicative effects on the expected total, e.g.
        ``{"treatment": {"nutrient_low": 0.5}}`` halves abundance under that level; a number
        for a numeric column multiplies by ``value ** x``.
    shape_effects : {column: {level: {taxon: fold}}} or {column: {taxon: fold per unit}}
        Fold changes of taxon shares (the profile is renormalised afterwards), e.g.
        ``{"treatment": {"nutrient_high": {"t01": 3.0, "t07": 0.2}}}``. Taxa are given by
        label or 0-based position.
    random_effects : {column: (size_sd, shape_sd)}
        Random lognormal deviations per level of a grouping column (tanks, sites, blocks):
        ``size_sd`` on the total, ``shape_sd`` on every taxon's share.
    effort : str, optional
        Column of ``design`` with the sampling effort; expected totals are proportional.
    total_spread : float
        Lognormal sd of each sample's own total (extra-Poisson variation in size).
    profile_noise : float in [0, 1)
        Dirichlet-multinomial intra-class correlation of each sample's profile (0: plain
        multinomial sampling around the expected profile).
    base_profile : array_like, optional
        Expected shares at the reference levels; default a lognormal rank-abundance profile.
    taxa : list of str, optional
        Taxon labels (default ``t01``, ``t02``...).
    rng : None, int or numpy.random.Generator

    Returns
    -------
    CommunityTable
        With the design as sample information (plus the effort) and a taxon table holding
        each taxon's ``base_share``. Samples whose draw is empty are kept (``empty='keep'``).
    """
    rng = as_rng(rng)
    design = _as_design(design)
    if not 0.0 <= profile_noise < 1.0:
        raise InputError(f"`profile_noise` must be in [0, 1); got {profile_noise}.")
    if mean_total <= 0:
        raise InputError(f"`mean_total` must be positive; got {mean_total}.")
    base, labels = _base_profile(base_profile, n_taxa, taxa, rng)
    n = len(design)

    size_effects = _factor_multipliers(design, size_effects, "size")
    shape_effects = _factor_multipliers(design, shape_effects, "shape")
    log_mu = np.full(n, np.log(mean_total))
    log_share = np.tile(np.log(np.maximum(base, 1e-300)), (n, 1))
    _add_size_effects(log_mu, design, size_effects)
    _add_shape_effects(log_share, design, shape_effects, labels)
    for col, (size_sd, shape_sd) in dict(random_effects or {}).items():
        if col not in design.columns:
            raise DesignError(f"random effect column {col!r} is not in the design.")
        levels, codes = np.unique(design[col].astype(str).to_numpy(), return_inverse=True)
        log_mu += rng.normal(0.0, size_sd, levels.size)[codes]
        log_share += rng.normal(0.0, shape_sd, (levels.size, base.size))[codes]
    if effort is not None:
        log_mu += _log_effort(design, effort)
    log_mu += rng.normal(0.0, total_spread, n) if total_spread > 0 else 0.0
    counts = _draw_counts(log_mu, log_share, profile_noise, rng)
    counts_df = pd.DataFrame(counts.astype(float), index=design.index, columns=labels)
    taxa_df = pd.DataFrame({"base_share": base}, index=pd.Index(labels, name="taxon"))
    return CommunityTable(counts_df, design, taxa_df, effort=effort, empty="keep")


def _as_design(design) -> pd.DataFrame:
    """A copy of the sample design with text labels (a number gives one group of samples)."""
    if isinstance(design, (int, np.integer)):
        design = pd.DataFrame(index=[f"s{i + 1:03d}" for i in range(int(design))])
    if not isinstance(design, pd.DataFrame):
        raise InputError("`design` must be a DataFrame of sample information or a number of "
                         "samples.")
    design = design.copy()
    design.index = design.index.astype(str)
    return design


def _base_profile(base_profile, n_taxa, taxa, rng) -> tuple[np.ndarray, list]:
    """Expected shares at the reference levels (summing to 1) and the taxon labels."""
    base = (lognormal_profile(n_taxa, rng=rng) if base_profile is None
            else np.asarray(base_profile, dtype=float))
    if base.ndim != 1 or (base < 0).any() or base.sum() <= 0:
        raise InputError("`base_profile` must be a 1-D array of non-negative shares.")
    base = base / base.sum()
    p = base.size
    labels = list(taxa) if taxa is not None else [f"t{j + 1:02d}" for j in range(p)]
    if len(labels) != p:
        raise InputError(f"{len(labels)} taxon labels for {p} taxa.")
    return base, labels


def _add_size_effects(log_mu: np.ndarray, design: pd.DataFrame, size_effects: dict) -> None:
    """Add the log multipliers of the size effects to each sample's log expected total."""
    for col, eff in size_effects.items():
        if isinstance(eff, Mapping):
            lv = design[col].astype(str).to_numpy()
            for level, mult in eff.items():
                log_mu[lv == str(level)] += np.log(float(mult))
        else:
            log_mu += np.log(float(eff)) * design[col].to_numpy(dtype=float)


def _add_shape_effects(log_share: np.ndarray, design: pd.DataFrame, shape_effects: dict,
                       labels: list) -> None:
    """Add the log fold changes of the shape effects to each sample's log shares."""
    p = len(labels)
    pos = {t: j for j, t in enumerate(labels)}

    def taxon_index(t):
        if isinstance(t, (int, np.integer)):
            if not 0 <= t < p:
                raise DesignError(f"taxon position {t} is outside 0..{p - 1}.")
            return int(t)
        if t not in pos:
            raise DesignError(f"shape effect names unknown taxon {t!r}.")
        return pos[t]

    for col, eff in shape_effects.items():
        numeric = all(not isinstance(v, Mapping) for v in eff.values())
        if numeric and pd.api.types.is_numeric_dtype(design[col]):
            x = design[col].to_numpy(dtype=float)
            for t, fold in eff.items():
                log_share[:, taxon_index(t)] += np.log(float(fold)) * x
        else:
            lv = design[col].astype(str).to_numpy()
            for level, folds in eff.items():
                rows = lv == str(level)
                for t, fold in folds.items():
                    log_share[rows, taxon_index(t)] += np.log(float(fold))


def _log_effort(design: pd.DataFrame, effort: str) -> np.ndarray:
    """The log of the effort column (positive numbers only)."""
    if effort not in design.columns:
        raise DesignError(f"effort column {effort!r} is not in the design.")
    e = design[effort].to_numpy(dtype=float)
    if (e <= 0).any() or not np.isfinite(e).all():
        raise InputError(f"effort column {effort!r} must hold positive numbers.")
    return np.log(e)


def _draw_counts(log_mu: np.ndarray, log_share: np.ndarray, profile_noise: float,
                 rng) -> np.ndarray:
    """Poisson totals split by Dirichlet-multinomial draws around the expected shares."""
    share = np.exp(log_share - log_share.max(axis=1, keepdims=True))
    share /= share.sum(axis=1, keepdims=True)
    if profile_noise > 0:
        conc = (1.0 - profile_noise) / profile_noise
        alpha = np.maximum(share * conc, 1e-12)
        g = rng.gamma(alpha)                       # Dirichlet draws via normalised gammas
        s = g.sum(axis=1, keepdims=True)
        share = np.where(s > 0, g / np.where(s > 0, s, 1.0), share)
    totals = rng.poisson(np.exp(log_mu))
    return np.vstack([rng.multinomial(int(t), pr / pr.sum()) for t, pr in zip(totals, share)])
