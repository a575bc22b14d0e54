"""The methods behind :func:`tallyform.core.size_tests.size_test`: which replicates are
tested (samples, or unit totals when the factor is applied to whole sampling units), and one
function per method returning the statistic, p-value, reference and ratio rows.

References
----------
Welch, B. L. (1951). Biometrika 38, 330-336. Box, G. E. P. (1954). Ann. Math. Statist. 25,
290-302. Kruskal, W. H. & Wallis, W. A. (1952). J. Am. Stat. Assoc. 47, 583-621.
Hurlbert, S. H. (1984). Ecol. Monogr. 54, 187-211.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from .errors import DesignError, InputError, Location
from .inference import check_n_permutations
from .permutation import permutation_f_test
from .size_models import (block_hotelling, mixed_model_test, one_per_block, pooled_f,
                          pooled_f_level, welch_james)
from .units import aggregate_by_unit, resolve_units, unit_blocks

__all__ = ["KRUSKAL_NOTE", "collect_replicates", "run_method", "variance_ratio", "anova_note"]


# ---------------------------------------------------------------------------- notes
KRUSKAL_NOTE = ("Kruskal-Wallis compares whole distributions of the totals (their ranks), "
                "not their size: when the spread of the totals differs between groups it "
                "rejects with equal geometric means, so it is not a valid test of a size "
                "difference then; use method='welch' for size.")


def _ratio_rows(contrasts, level):
    rows = [(1.0, np.nan, np.nan)]
    for est, se, df in contrasts:
        q = float(stats.t.ppf(0.5 + level / 2, df))
        rows.append((float(np.exp(est)), float(np.exp(est - q * se)),
                     float(np.exp(est + q * se))))
    return rows


def variance_ratio(y, codes, k) -> tuple[float, np.ndarray, np.ndarray]:
    n_g = np.array([np.sum(codes == j) for j in range(k)])
    v = np.array([np.var(y[codes == j], ddof=1) if n_g[j] > 1 else np.nan
                  for j in range(k)])
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = float(np.nanmax(v) / np.nanmin(v)) if np.isfinite(v).any() else np.nan
    return ratio, n_g, v


def anova_note(y, codes, k, levels, ratio, n_g, v, alpha=0.05) -> str | None:
    """Say when the group variances differ enough for the pooled F test to miss its level
    (its level for normal data with these variances and group sizes, by simulation)."""
    if not np.isfinite(ratio) or ratio <= 1.0 or (v <= 0).any():
        return None
    true_level = pooled_f_level(n_g, v, alpha=alpha)
    if 0.6 * alpha <= true_level <= 1.4 * alpha:
        return None
    sizes = ", ".join(f"{lv!r}: n = {n}, variance {x:.3g}" for lv, n, x in zip(levels, n_g, v))
    way = "rejects a true null" if true_level > alpha else "rejects a true null only"
    return (f"The groups' variances of log size differ (largest / smallest = {ratio:.3g}; "
            f"{sizes}). With variances and group sizes like these, plain ANOVA {way} about "
            f"{true_level:.0%} of the time at alpha = {alpha:g} instead of {alpha:.0%} "
            "(normal data, Box 1954): use method='welch', which allows a variance per group.")


# ---------------------------------------------------------------------------- the data tested
@dataclass(frozen=True)
class _Data:
    """What is tested: one row per replicate (sample, or unit when aggregated)."""

    totals: np.ndarray
    effort: np.ndarray | None            # None: no effort (per sample, 1)
    codes: np.ndarray
    blocks: np.ndarray | None
    unit_codes: np.ndarray | None        # within-unit analysis: the unit of every sample
    outer_codes: np.ndarray | None       # coarser units enclosing the tested replicates
    units: str | None
    per: str | None                      # "nights", "sample" or None
    labels: tuple = ()                   # of the replicates (samples or units)

    @property
    def size(self) -> np.ndarray:
        return self.totals if self.effort is None else self.totals / self.effort


def collect_replicates(tab, g, e, e_name, block_codes, block_name, units, notes) -> _Data:
    """Resolve the sampling units and aggregate when the factor is applied to whole units."""
    gname = str(g.name)
    codes = g.cat.codes.to_numpy()
    totals = tab.totals.to_numpy(dtype=float)
    frame = tab.samples.copy()
    frame[gname] = g.astype(str).to_numpy()
    plan = resolve_units(frame, [gname], units, blocks=block_name)
    notes.extend(plan.notes)
    if plan.independent:
        return _Data(totals, e, codes, block_codes, None, None, None, e_name,
                     tuple(tab.sample_labels))
    lv = plan.level_of(gname)
    if lv is None:                                   # varies within the finest units
        finest = plan.levels[-1]
        outer = None if finest.parent is None else finest.parent[finest.codes]
        notes.append(f"{gname!r} varies within units ({finest.describe()}), so it is "
                     f"tested within units: samples of one {finest.name!r} are not "
                     "independent replicates"
                     + ("" if outer is None else
                        f", nor are the units of one {plan.levels[-2].name!r}") + ".")
        return _Data(totals, e, codes, block_codes, finest.codes, outer,
                     finest.describe(), e_name, tuple(tab.sample_labels))
    # constant within the units of lv: one replicate per unit
    eff = np.ones_like(totals) if e is None else e
    u_tot = aggregate_by_unit(totals, lv)
    u_eff = aggregate_by_unit(eff, lv)
    u_codes = np.empty(lv.m, dtype=int)
    u_codes[lv.codes] = codes
    u_blocks = unit_blocks(lv, block_codes, block_name)
    outer = lv.parent
    per = e_name or "sample"
    notes.append(f"Tested on unit totals, not samples: {lv.describe()}; counts and "
                 f"{'effort' if e is not None else 'the number of samples'} summed per unit, "
                 f"so the size of a unit is its total per {per}.")
    return _Data(u_tot, u_eff, u_codes, u_blocks, None, outer, lv.describe(), per,
                 tuple(lv.labels))


# ---------------------------------------------------------------------------- methods
@dataclass
class _Out:
    statistic: float
    pvalue: float
    df: tuple
    rows: list
    effect: str
    reference: str
    method: str
    n_permutations: int | None = None
    too_skewed: bool | None = None
    n_boot: int | None = None


def _log_size(d: _Data, method: str) -> np.ndarray:
    s = d.size
    if (s <= 0).any():
        who = [d.labels[i] for i in np.flatnonzero(s <= 0)[:8]]
        kind = "unit" if d.units and d.unit_codes is None else "sample"
        raise InputError(f"{kind}(s) {who} have a total of 0, whose log is undefined.",
                         hint=f"method={method!r} works on log totals; use method='negbin' "
                              "(counts), or drop those samples.")
    return np.log(s)


def _linear(d: _Data, k, levels, method, level, notes) -> _Out:
    y = _log_size(d, method)
    if d.unit_codes is not None or d.outer_codes is not None:
        units = d.unit_codes if d.unit_codes is not None else d.outer_codes
        outer = d.outer_codes if d.unit_codes is not None else None
        t = mixed_model_test(y, d.codes, k, units, block_codes=d.blocks, outer_codes=outer)
        what = ("per unit" + (" and per enclosing unit" if outer is not None else "")
                if d.unit_codes is not None else "per enclosing unit (the replicates are "
                                                 "unit totals)")
        notes.append(f"Linear mixed model of log size with a random intercept {what} (REML, "
                     "statsmodels MixedLM).")
        notes.append("The mixed model has one residual variance for all groups (statsmodels "
                     "MixedLM allows no variance per group), so unequal variability between "
                     "groups is not allowed for; its Wald F uses the between-within "
                     f"denominator degrees of freedom ({t.df[1]}).")
        return _Out(t.statistic, t.pvalue, t.df, _ratio_rows(t.contrasts, level),
                    f"ratio of geometric means to {levels[0]!r}, with {level:.0%} t "
                    "intervals from the mixed model", f"F{t.df} (between-within df)",
                    "mixed")
    paired = False
    if method == "welch" and d.blocks is not None and one_per_block(d.codes, k, d.blocks):
        t = block_hotelling(y, d.codes, k, d.blocks)
        paired = True
        ref = (f"F({t.df[0]}, {t.df[1]}), Hotelling's T^2 on within-block differences"
               + (" (the paired t test)" if k == 2 else ""))
        effect = (f"ratio of geometric means to {levels[0]!r} within blocks, with "
                  f"{level:.0%} paired t intervals")
    elif method == "welch":
        t = welch_james(y, d.codes, k, d.blocks)
        ref = (f"F({t.df[0]}, {t.df[1]:.4g}), Welch degrees of freedom" if d.blocks is None
               else f"F({t.df[0]}, {t.df[1]:.4g}), Welch-James (Johansen 1980) degrees of "
                    "freedom")
        effect = (f"ratio of geometric means to {levels[0]!r}, with {level:.0%} Welch t "
                  "intervals")
    else:
        t = pooled_f(y, d.codes, k, d.blocks)
        ref = f"F({t.df[0]}, {t.df[1]})"
        effect = (f"ratio of geometric means to {levels[0]!r}, with {level:.0%} pooled t "
                  "intervals")
    if paired:
        notes.append("Every block holds one sample of every group: groups were compared "
                     "through their differences within blocks (block effects cancel), with "
                     "no assumption on the groups' variances.")
    elif d.blocks is not None:
        notes.append("Blocks entered the model as a nuisance factor (additive block effects "
                     "on log size): groups are compared within blocks"
                     + (", each group with its own variance (Welch-James)." if method == "welch"
                        else "."))
    return _Out(t.statistic, t.pvalue, t.df, _ratio_rows(t.contrasts, level), effect, ref,
                method)


def _permutation(d: _Data, k, levels, n_permutations, rng, block_name, progress, cancel,
                 notes) -> _Out:
    y = _log_size(d, "permutation")
    n = y.size
    G = np.column_stack([(d.codes == j).astype(float) for j in range(1, k)])
    nuisance, strata, sname = [], d.blocks, block_name
    if d.blocks is not None:
        b = pd.factorize(np.asarray(d.blocks))[0]
        nuisance += [(b == j).astype(float) for j in range(1, int(b.max()) + 1)]
    if d.unit_codes is not None:
        u = d.unit_codes
        nuisance += [(u == j).astype(float) for j in range(1, int(u.max()) + 1)]
        strata, sname = u.astype(str), "units"
        if d.blocks is not None:
            strata = np.char.add(np.char.add(u.astype(str), "|"), np.asarray(d.blocks, str))
    Z = np.column_stack([np.ones(n)] + nuisance)
    test = permutation_f_test(y, np.column_stack([Z, G]), Z, blocks=strata, block_name=sname,
                              n_permutations=check_n_permutations(n_permutations), rng=rng,
                              progress=progress, cancel=cancel)
    notes.extend(test.notes)
    notes.append(f"Permutation scheme: {test.scheme}.")
    if d.unit_codes is not None:
        notes.append("The factor varies within units: samples were permuted within their "
                     "unit, with unit effects removed first.")
    elif d.blocks is not None:
        notes.append("Blocks entered the F statistic as a nuisance factor and restrict the "
                     "permutations.")
    rows = [(r, np.nan, np.nan) for r in _geo_ratios(y, d.codes, k)]
    return _Out(test.statistic, test.pvalue, test.df, rows,
                f"ratio of geometric means to {levels[0]!r} (no interval)",
                f"permutation distribution ({test.n_permutations} permutations)",
                "permutation", n_permutations=test.n_permutations)


def _geo_ratios(y, codes, k):
    m = np.array([y[codes == j].mean() for j in range(k)])
    return list(np.exp(m - m[0]))


def _kruskal(d: _Data, k, levels, notes) -> _Out:
    s = d.size
    res = stats.kruskal(*[s[d.codes == j] for j in range(k)])
    with np.errstate(divide="ignore"):
        rows = [(r, np.nan, np.nan) for r in _geo_ratios(np.log(s), d.codes, k)] \
            if (s > 0).all() else [(np.nan, np.nan, np.nan)] * k
    notes.append(KRUSKAL_NOTE)
    if d.blocks is not None:
        notes.append("Kruskal-Wallis does not use blocks: they were ignored.")
    return _Out(float(res.statistic), float(res.pvalue), (k - 1,), rows,
                f"ratio of geometric means to {levels[0]!r} (descriptive; no interval)",
                f"chi-square({k - 1}) for H", "kruskal")


def _negbin(d: _Data, k, levels, level, reference, n_boot, rng, progress, cancel,
            notes, gname) -> _Out:
    from .negbin import nb2_group_test
    empty = [lv for j, lv in enumerate(levels) if d.totals[d.codes == j].sum() == 0]
    if empty:
        raise DesignError(f"level(s) {empty} of {gname!r} have a total of 0 in every "
                          "sample, so their expected total is 0 and no ratio exists.",
                          location=Location(column=repr(gname)),
                          hint="Use method='kruskal', or drop those samples.")
    t = nb2_group_test(d.totals, d.codes, k, d.effort, level=level, reference=reference,
                       n_boot=n_boot, rng=rng, progress=progress, cancel=cancel)
    alphas = ", ".join(f"{lv!r} {a:.3g}" for lv, a in zip(levels, t.full.alphas))
    notes.append(f"Negative-binomial dispersion (NB2 alpha) estimated per group: {alphas}.")
    if t.full.at_bound.any():
        poisson = [lv for lv, b in zip(levels, t.full.at_bound) if b]
        notes.append(f"The totals of {poisson} show no over-dispersion: their model reduces "
                     "to a Poisson model (alpha near 0).")
    if t.skewed:
        notes.append("Fit check: the totals are more skewed than the negative-binomial model "
                     f"allows (quantile residuals, one-sided skewness test p = "
                     f"{t.skew_pvalue:.2g}). Tests of arithmetic mean totals do not hold "
                     "their level on such data: use method='welch', the test of geometric "
                     "means (log totals).")
    sizes = np.bincount(d.codes, minlength=k)
    if sizes.min() <= 5 and sizes.max() >= 4 * sizes.min():
        notes.append(f"A group of {int(sizes.min())} samples beside one of {int(sizes.max())}: "
                     "its dispersion is poorly estimated, and in simulations of such designs "
                     "this test rejected a true null in 7-8 % of studies at alpha = 0.05 "
                     "(docs/calibration.md); read p-values near 0.05 with care, or use "
                     "method='welch'.")
    if d.blocks is not None:
        notes.append("The negative-binomial model has no block term: blocks were ignored.")
    per = f" per {d.per}" if d.per else ""
    return _Out(t.statistic, t.pvalue, t.df, t.rows,
                f"ratio of expected totals{per} to {levels[0]!r}, with {level:.0%} "
                "intervals (Wald, t quantiles with Welch degrees of freedom)", t.reference,
                "negbin",
                too_skewed=t.skewed, n_boot=t.n_boot)


def run_method(d: _Data, method, k, levels, *, level, n_permutations, nb_reference, n_boot,
               rng, block_name, progress, cancel, notes, gname) -> _Out:
    """Dispatch to the method; refuse the combinations with units that have no model."""
    if d.unit_codes is not None and method in ("kruskal", "negbin"):
        raise DesignError(f"{gname!r} varies within sampling units, and method={method!r} "
                          "has no model of units.", location=Location(column=repr(gname)),
                          hint="Use method='welch' (a mixed model of log size) or "
                               "'permutation' (within units), or units=False to treat the "
                               "samples as independent.")
    if d.outer_codes is not None and d.unit_codes is None and method not in ("welch", "anova"):
        raise DesignError(f"{gname!r} is applied to units nested in coarser units, which "
                          f"only the mixed model handles; method={method!r} does not.",
                          hint="Use method='welch' or 'anova'.")
    if method in ("welch", "anova"):
        return _linear(d, k, levels, method, level, notes)
    if method == "permutation":
        return _permutation(d, k, levels, n_permutations, rng, block_name, progress, cancel,
                            notes)
    if method == "kruskal":
        return _kruskal(d, k, levels, notes)
    return _negbin(d, k, levels, level, nb_reference, n_boot, rng, progress, cancel, notes,
                   gname)
