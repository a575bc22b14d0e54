"""Audit: would the chosen measure call a pure size difference a compositional one?

Simulated tables keep every sample's observed total (so the groups differ in size exactly as
in the data) and draw every sample's counts around one pooled profile (so composition is the
same in every group by construction). The chosen test (PERMANOVA of the group with the chosen
transform and measure) is run on each; the share of rejections at ``alpha`` is the false-alarm
rate for "composition differs". The same is done with a size-free reference measure.

Spread rows: on the same tables, the dispersion test (Anderson 2006) with the chosen measure
and with the reference ("how often would the spread test fire on a pure size difference?"),
and the tests that rarefaction protects (:func:`tallyform.core.counting.shape_test` and
:func:`tallyform.core.counting.spread_test`, one rarefaction to the smallest total).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .abundance import counting_basis, require_absolute
from .cluster_map import cluster_map
from .errors import DesignError, InputError
from .random import as_rng
from .results import ResultMixin, readonly
from .table import CommunityTable, as_table
from .progress import reports_progress
from .validation import check_fraction

__all__ = ["audit", "AuditResult", "null_shape_tables", "estimate_overdispersion"]

MODELS = ("dirichlet_multinomial", "multinomial")


def estimate_overdispersion(counts: np.ndarray, groups: np.ndarray) -> float:
    """Method-of-moments intra-class correlation rho of a Dirichlet-multinomial, within groups.

    Under the Dirichlet-multinomial (Mosimann 1962) with shares pi and intra-class correlation
    rho, Var(x_ij) = r_i pi_j (1 - pi_j) (1 + (r_i - 1) rho), so the Pearson statistic of
    sample i against its group's pooled profile has expectation about
    (p - 1)(1 - w_i)(1 + (r_i - 1) rho), w_i = r_i / R_g the sample's weight in that profile.
    Summing over samples and solving for rho gives the estimate (clipped to [0, 0.99]).
    Estimating within groups keeps real group differences in composition out of rho.
    """
    x = np.asarray(counts, dtype=float)
    r = x.sum(axis=1)
    num, den, base = 0.0, 0.0, 0.0
    for g in np.unique(groups):
        rows = groups == g
        xg, rg = x[rows], r[rows]
        pooled = xg.sum(axis=0)
        Rg = pooled.sum()
        present = pooled > 0
        p_g = int(present.sum())
        if p_g < 2 or rows.sum() < 2:
            continue
        pi = pooled[present] / Rg
        expected = rg[:, None] * pi[None, :]
        chi2 = np.sum((xg[:, present] - expected) ** 2 / expected, axis=1)
        w = rg / Rg
        num += chi2.sum() / (p_g - 1)
        base += np.sum(1 - w)
        den += np.sum((1 - w) * (rg - 1))
    if den <= 0:
        return 0.0
    return float(np.clip((num - base) / den, 0.0, 0.99))


def null_shape_tables(table: CommunityTable, n_sim: int, *, model: str = "dirichlet_multinomial",
                      rho: float = 0.0, rng=None):
    """Yield ``n_sim`` count arrays with the observed totals and one shared profile (for a
    relative table with loads: reads drawn at the observed depths, scaled to the loads)."""
    rng = as_rng(rng)
    basis = _null_basis(table)
    for _ in range(n_sim):
        yield _null_table(basis, model, rho, rng)


def _null_basis(table: CommunityTable) -> tuple:
    """(shape, scale, totals, pooled profile, present taxa) the null tables are drawn from."""
    x, scale = counting_basis(table)        # reads of relative tables, drawn then scaled
    totals = np.rint(x.sum(axis=1)).astype(np.int64)
    pooled = x.sum(axis=0)
    present = pooled > 0
    pi = pooled[present] / pooled[present].sum()
    return x.shape, scale, totals, pi, present


def _null_table(basis: tuple, model: str, rho: float, rng) -> np.ndarray:
    """One simulated table: the observed totals around the pooled profile."""
    shape, scale, totals, pi, present = basis
    if model == "dirichlet_multinomial" and rho > 0:
        alpha = pi * (1.0 - rho) / rho
        g = rng.gamma(np.broadcast_to(alpha, (shape[0], pi.size)))
        s = g.sum(axis=1, keepdims=True)
        p = np.where(s > 0, g / np.where(s > 0, s, 1.0), pi)
    else:
        p = np.broadcast_to(pi, (shape[0], pi.size))
    draw = rng.multinomial(totals, p)
    out = np.zeros(shape)
    out[:, present] = draw
    return out * scale[:, None]


@dataclass(frozen=True, eq=False)
class AuditResult(ResultMixin):
    """False-alarm rate of "composition differs" on size-only simulations.

    Attributes
    ----------
    rate, ci : float, (float, float)
        Rejection rate of the chosen measure and its 95 % Clopper-Pearson interval.
    reference_rate, reference_ci
        The same for the size-free reference measure.
    pvalues, reference_pvalues : ndarray
        p-value of every simulated data set.
    extra : DataFrame
        Further rows on the same simulated tables (columns as :meth:`to_frame`): the
        dispersion test with the measure and with the reference, and ``shape_test`` /
        ``spread_test`` after one rarefaction (see :func:`audit`'s ``spread`` and
        ``rarefied``).
    extra_pvalues : dict
        Row label -> p-value of every simulated data set, for the rows of ``extra``.
    reading : str
        The outcome in plain words.
    """

    measure: str
    transform: str | None
    reference: str
    group: str
    alpha: float
    n_sim: int
    n_permutations: int
    model: str
    rho: float
    rate: float
    ci: tuple
    rejections: int
    reference_rate: float
    reference_ci: tuple
    reference_rejections: int
    pvalues: np.ndarray = field(repr=False)
    reference_pvalues: np.ndarray = field(repr=False)
    reading: str = ""
    notes: tuple = ()
    provenance: dict = field(default_factory=dict)
    extra: pd.DataFrame | None = field(default=None, repr=False)
    extra_pvalues: dict = field(default_factory=dict, repr=False)

    def to_frame(self) -> pd.DataFrame:
        """One row per audited test: the PERMANOVA rows first (measure, reference), then the
        rows of ``extra``; columns ``false_alarm_rate``, ``ci_low``, ``ci_high``,
        ``rejections``, ``n_sim``, ``aspect`` ('shape' or 'spread') and ``test``."""
        label = self.measure if not self.transform else f"{self.transform} + {self.measure}"
        out = pd.DataFrame(
            {"false_alarm_rate": [self.rate, self.reference_rate],
             "ci_low": [self.ci[0], self.reference_ci[0]],
             "ci_high": [self.ci[1], self.reference_ci[1]],
             "rejections": [self.rejections, self.reference_rejections],
             "n_sim": [self.n_sim, self.n_sim],
             "aspect": ["shape", "shape"], "test": ["PERMANOVA", "PERMANOVA"]},
            index=pd.Index([label, f"{self.reference} (size-free reference)"],
                           name="measure"))
        if self.extra is not None and len(self.extra):
            out = pd.concat([out, self.extra])
            out.index.name = "measure"
        return out

    def _row(self, aspect: str, test: str):
        f = self.to_frame()
        hit = f[(f["aspect"] == aspect) & (f["test"] == test)]
        return None if hit.empty else hit.iloc[0]

    @property
    def spread_rate(self) -> float | None:
        """False-alarm rate of the dispersion test with the audited measure (None if not run)."""
        r = self._row("spread", "dispersion test")
        return None if r is None else float(r["false_alarm_rate"])

    @property
    def rarefied_rates(self) -> dict:
        """{'shape': rate, 'spread': rate} of shape_test / spread_test after one rarefaction
        (empty if not run)."""
        f = self.to_frame()
        hit = f[f["test"].str.startswith("one rarefaction")]
        return {a: float(r) for a, r in zip(hit["aspect"], hit["false_alarm_rate"])}

    def _title(self) -> str:
        return (f"Audit: false alarms for 'composition differs' when only size differs "
                f"({self.group}, alpha = {self.alpha:g})")

    _html_format = "{:.3g}"

    def __str__(self) -> str:
        return super().__str__() + "\n" + self.reading


def _clopper_pearson(k: int, n: int, level: float = 0.95) -> tuple[float, float]:
    from scipy.stats import binomtest
    ci = binomtest(int(k), int(n)).proportion_ci(confidence_level=level, method="exact")
    return float(ci.low), float(ci.high)


def _group_test_pvalue(values, labels, taxa, groups_X, measure, transform, n_permutations,
                       rng, *, groups=None, spread_rng=None, design=None) -> tuple[float, float]:
    """PERMANOVA p-value of the groups, and (when ``groups`` is given) the dispersion test's
    p-value on the same dissimilarity (NaN otherwise), drawn from ``spread_rng``. With
    ``design`` (sample table, group column, unit columns) the tests relabel whole units."""
    from .dispersion import dispersion_test
    from .dissimilarity import dissimilarity
    from .inference import permanova
    from .permutation import permutation_f_test
    keep = values.sum(axis=0) > 0
    frame = pd.DataFrame(values[:, keep], index=labels, columns=taxa[keep])
    d = dissimilarity(frame, measure, transform=transform)
    if design is not None:
        info, gname, units = design
        res = permanova(d, info, [gname], units=units, n_permutations=n_permutations,
                        rng=rng)
        shape = float(res.pvalue[gname])
    else:
        shape = float(permutation_f_test(d, groups_X, np.ones((len(labels), 1)),
                                         n_permutations=n_permutations, rng=rng).pvalue)
    spread = float("nan")
    if groups is not None:
        if design is not None:
            info, gname, units = design
            spread = float(dispersion_test(d, gname, samples=info, units=units,
                                           n_permutations=n_permutations,
                                           rng=spread_rng).pvalue)
        else:
            spread = float(dispersion_test(d, list(groups), n_permutations=n_permutations,
                                           rng=spread_rng).pvalue)
    return shape, spread


def _rarefied_pvalues(values, groups, measure, transform, n_permutations,
                      rng, *, labels=None, taxa=None, design=None) -> tuple[float, float]:
    """shape_test and spread_test p-values (one rarefaction; whole units with ``design``)."""
    from .counting import rarefied_pvalues
    keep = values.sum(axis=0) > 0
    if design is None:
        return rarefied_pvalues(values[:, keep], groups, measure=measure,
                                transform=transform, n_permutations=n_permutations, rng=rng)
    from .counting import shape_test, spread_test
    from .table import CommunityTable
    info, gname, units = design
    tab = CommunityTable(pd.DataFrame(values[:, keep], index=labels, columns=taxa[keep]),
                         info)
    seed = int(rng.integers(2**63))           # one rarefied draw for both tests
    kw = dict(measure=measure, transform=transform, units=units,
              n_permutations=n_permutations, rng=seed)
    return (float(shape_test(tab, gname, **kw).pvalue),
            float(spread_test(tab, gname, **kw).pvalue))


def _rate_row(p: np.ndarray, alpha: float, aspect: str, test: str) -> dict:
    k = int(np.sum(p <= alpha))
    lo, hi = _clopper_pearson(k, p.size)
    return {"false_alarm_rate": k / p.size, "ci_low": lo, "ci_high": hi, "rejections": k,
            "n_sim": p.size, "aspect": aspect, "test": test}


def _checked(table, group, *, model, alpha, n_sim, n_permutations, spread, rarefied):
    """The table and its group column, or the error that names what is wrong."""
    if model not in MODELS:
        raise InputError(f"`model` must be one of {list(MODELS)}; got {model!r}.")
    check_fraction("alpha", alpha)
    if n_sim < 1 or n_permutations < 19:
        raise InputError("`n_sim` must be at least 1 and `n_permutations` at least 19 "
                         f"(got {n_sim} and {n_permutations}).")
    for name, flag in (("spread", spread), ("rarefied", rarefied)):
        if not isinstance(flag, (bool, np.bool_)):
            raise InputError(f"`{name}` must be True or False; got {flag!r}.")
    table = as_table(table)
    require_absolute(table, "the audit (it keeps every sample's total)")
    if not np.all(counting_basis(table)[0] % 1 == 0):
        raise InputError("the audit simulates counts, so it needs whole-number counts; these "
                         "data hold fractions (biomass, cover or rarefied values?).",
                         hint="Run it on the raw counts.")
    g = table.group(group, min_levels=2)
    levels = sorted(g.unique())
    small = [lv for lv in levels if (g == lv).sum() < 2]
    if small:
        raise DesignError(f"group(s) {small} of {group!r} have a single sample; the audit "
                          "needs at least 2 per group.")
    return table, g


def _one_simulation(item, shared: dict, cancel=None) -> dict:
    """The p-values of one simulated table (a task of
    :func:`tallyform.core.cluster_map.cluster_map`, here or on a worker)."""
    rng, extra_rng = item
    sh = shared
    values = _null_table(sh["basis"], sh["model"], sh["rho"], rng)
    by = sh["groups"] if sh["spread"] else None
    common = (sh["labels"], sh["taxa"], sh["X"])
    out = {}
    out["main"], out["spread_main"] = _group_test_pvalue(
        values, *common, sh["measure"], sh["transform"], sh["n_permutations"], rng, groups=by,
        spread_rng=extra_rng, design=sh["design"])
    out["ref"], out["spread_ref"] = _group_test_pvalue(
        values, *common, sh["reference"], None, sh["n_permutations"], rng, groups=by,
        spread_rng=extra_rng, design=sh["design"])
    out["rare_shape"] = out["rare_spread"] = float("nan")
    if sh["rarefied"]:
        # rarefaction draws individuals: the simulated reads (loads scaled back out)
        reads = np.rint(values / sh["read_scale"][:, None])
        out["rare_shape"], out["rare_spread"] = _rarefied_pvalues(
            reads, sh["groups"], sh["measure"], sh["transform"], sh["n_permutations"],
            extra_rng, labels=sh["labels"], taxa=sh["taxa"], design=sh["design"])
    return out


def _extra_rows(p: dict, name: str, reference: str, alpha: float, *, spread: bool,
                rarefied: bool) -> tuple:
    """(DataFrame of the spread and rarefied rows or None, row label -> p-values)."""
    rows, extra_p = {}, {}
    if spread:
        for key, lab in (("spread_main", f"{name}: spread"),
                         ("spread_ref", f"{reference}: spread (size-free reference)")):
            rows[lab] = _rate_row(p[key], alpha, "spread", "dispersion test")
            extra_p[lab] = readonly(p[key])
    if rarefied:
        for key, aspect in (("rare_shape", "shape"), ("rare_spread", "spread")):
            lab = f"{name}: {aspect}_test, one rarefaction"
            rows[lab] = _rate_row(p[key], alpha, aspect, f"one rarefaction, {aspect}_test")
            extra_p[lab] = readonly(p[key])
    return (pd.DataFrame.from_dict(rows, orient="index") if rows else None), extra_p


@reports_progress("Audit", knob="n_sim")
def audit(table, group: str, measure: str = "bray_curtis", *, transform=None,
          reference: str = "chi_square", n_sim: int = 200, n_permutations: int = 199,
          model: str = "dirichlet_multinomial", alpha: float = 0.05, spread: bool = True,
          rarefied: bool = True, units=None, rng=None, progress=None,
          cancel=None) -> AuditResult:
    """How often would PERMANOVA with ``measure`` call a pure size difference compositional?

    Parameters
    ----------
    table : CommunityTable
        Whole-number counts with sample information.
    group : str
        Sample column whose groups are compared.
    measure : str
        The measure under audit; ``transform`` is applied before it.
    reference : str, default 'chi_square'
        A size-free measure audited on the same simulated tables. Chi-square distance is
        linear in the profiles, so sampling depth does not bias group centroids; Hellinger's
        square root does slightly (Jensen's inequality), which the audit will show.
    n_sim : int, default 200
        Simulated tables.
    n_permutations : int, default 199
        Permutations per test.
    model : {'dirichlet_multinomial', 'multinomial'}
        Sampling model around the pooled profile; the Dirichlet-multinomial's intra-class
        correlation is estimated from the data within groups (:func:`estimate_overdispersion`).
    alpha : float, default 0.05
    spread : bool, default True
        Also audit the dispersion test (Anderson 2006) with ``measure`` and with
        ``reference``: how often would the spread test fire on a pure size difference?
    rarefied : bool, default True
        Also audit :func:`tallyform.core.counting.shape_test` and
        :func:`tallyform.core.counting.spread_test` with ``measure`` (their defaults: one
        rarefaction to the smallest total), which a size difference cannot fool.
    units : None, False, str or list of str
        The sampling units of the design (:func:`tallyform.core.units.resolve_units`; None
        detects them): the audited tests relabel whole units, as the tests a user runs on
        such a design do. The simulated tables keep every sample's observed total (so
        unit-to-unit differences in size stay) and draw compositions independently.
    rng : None, int or numpy.random.Generator
    progress, cancel : callables, optional

    Returns
    -------
    AuditResult
        Rates with 95 % Clopper-Pearson (1934) intervals and a plain-language reading; the
        spread and rarefied rows are in ``extra`` (and in :meth:`AuditResult.to_frame`).

    Notes
    -----
    Every simulation draws its table and its tests from its own random stream, spawned from
    ``rng`` before any runs; with an active Dask client the simulations are tasks on its
    workers (:func:`tallyform.core.cluster_map.cluster_map`) and give the same p-values.
    Compositions are simulated independently for every sample (no unit-level composition
    effects: the null is "composition the same everywhere"), while the totals keep the
    design's unit structure; with units, the audited tests relabel whole units.
    """
    table, g = _checked(table, group, model=model, alpha=alpha, n_sim=n_sim,
                        n_permutations=n_permutations, spread=spread, rarefied=rarefied)
    from .design import model_matrix
    from .units import resolve_units
    X = model_matrix(pd.DataFrame({group: g}), [group]).X
    info = table.samples.copy()
    info[group] = g.to_numpy()
    plan = resolve_units(info, [group], units)
    design = None if plan.independent else (info, group, [lv.name for lv in plan.levels])
    rng = as_rng(rng)
    # the spread and rarefied rows draw from their own stream, so the PERMANOVA rows are the
    # same with and without them (spawning does not advance the parent stream)
    extra_rng = rng.spawn(1)[0]
    groups = g.to_numpy()
    reads_basis, read_scale = counting_basis(table)
    rho = (estimate_overdispersion(reads_basis, groups) if model != "multinomial" else 0.0)
    labels = np.asarray(table.sample_labels, dtype=object)
    taxa = np.asarray(table.taxon_labels, dtype=object)
    shared = dict(basis=_null_basis(table), model=model, rho=rho, labels=labels, taxa=taxa,
                  X=X, measure=measure, transform=transform, reference=reference,
                  n_permutations=n_permutations, groups=groups, spread=spread,
                  rarefied=rarefied, design=design, read_scale=read_scale)
    # every simulation draws its table and its tests from its own streams, fixed here, so
    # the result is the same in a loop and as tasks on a Dask cluster
    items = list(zip(rng.spawn(n_sim), extra_rng.spawn(n_sim)))
    out = cluster_map(_one_simulation, items, shared=shared, progress=progress,
                      cancel=cancel, what="the audit")
    p = {k: np.array([o[k] for o in out], dtype=float) for k in out[0]}
    p_main, p_ref = p["main"], p["ref"]
    # a p-value exactly at alpha is a rejection (p <= alpha), the usual convention
    k_main, k_ref = int(np.sum(p_main <= alpha)), int(np.sum(p_ref <= alpha))
    ci_main, ci_ref = _clopper_pearson(k_main, n_sim), _clopper_pearson(k_ref, n_sim)
    from .transforms import get_transform
    tr = get_transform(transform).name
    tr = None if tr == "none" else tr
    name = measure if tr is None else f"{tr} + {measure}"
    extra, extra_p = _extra_rows(p, name, reference, alpha, spread=spread, rarefied=rarefied)
    reading = _reading(name, reference, group, k_main / n_sim, ci_main, k_ref / n_sim, ci_ref,
                       alpha, n_sim)
    reading += _extra_reading(name, reference, extra, alpha)
    notes = list(plan.notes)
    if design is not None:
        notes.append(f"The audited tests relabel whole units ({plan.describe(group)}), as "
                     "the tests of this design do.")
    if model == "dirichlet_multinomial":
        notes.append(f"Simulated counts are Dirichlet-multinomial around the pooled profile "
                     f"with intra-class correlation {rho:.4f}, estimated within groups.")
    if n_sim < 100:
        notes.append(f"Only {n_sim} simulations: the interval is wide.")
    return AuditResult(
        measure=measure, transform=tr, reference=reference, group=group, alpha=alpha,
        n_sim=n_sim, n_permutations=n_permutations, model=model, rho=rho,
        rate=k_main / n_sim, ci=ci_main, rejections=k_main, reference_rate=k_ref / n_sim,
        reference_ci=ci_ref, reference_rejections=k_ref, pvalues=readonly(p_main),
        reference_pvalues=readonly(p_ref), reading=reading, notes=tuple(notes),
        provenance={"measure": measure, "transform": tr, "reference": reference,
                    "group": group, "n_sim": n_sim, "n_permutations": n_permutations,
                    "model": model, "alpha": alpha, "spread": spread, "rarefied": rarefied,
                    "units": [lv.name for lv in plan.levels] or None,
                    "table": table.fingerprint},
        extra=extra, extra_pvalues=extra_p)


def _extra_reading(name, reference, extra, alpha) -> str:
    """Sentences for the spread and rarefied rows."""
    if extra is None or not len(extra):
        return ""
    pct = lambda v: f"{100 * v:.0f} %"                                       # noqa: E731
    out = []
    disp = extra[extra["test"] == "dispersion test"]
    if len(disp):
        parts = [f"{lab.split(':')[0]} {pct(r.false_alarm_rate)} ({pct(r.ci_low)}-"
                 f"{pct(r.ci_high)})" for lab, r in disp.iterrows()]
        text = ("The dispersion test (spread) fired on these size-only data sets with "
                + " and with ".join(parts) + ".")
        if any(_verdict(r.false_alarm_rate, (r.ci_low, r.ci_high), alpha) == "inflated"
               for _, r in disp.iterrows()):
            text += (" Samples with smaller totals carry more counting noise, so a spread "
                     "difference found on these data may be a size difference.")
        out.append(text)
    rare = extra[extra["test"].str.startswith("one rarefaction")]
    if len(rare):
        parts = [f"{r.aspect} {pct(r.false_alarm_rate)} ({pct(r.ci_low)}-{pct(r.ci_high)})"
                 for _, r in rare.iterrows()]
        out.append(f"After one rarefaction of every sample to the smallest total "
                   f"(shape_test / spread_test with {name}): " + ", ".join(parts) + ".")
    return " " + " ".join(out)


def _verdict(rate, ci, alpha) -> str:
    if ci[0] > alpha:
        return "inflated"
    if ci[1] < alpha:
        return "conservative"
    return "nominal"


def _inflated_words(name, reference, rate, alpha) -> str:
    """The verdict on an inflated rate, as strong as the evidence (the rate's size)."""
    times = rate / alpha
    if rate >= 0.5:
        return (f"So on these data most significant {name} results would come from size "
                f"alone ({times:.0f} times the nominal rate): a {name} result says nothing "
                f"about composition here; test composition with {reference} (or another "
                "size-free measure) instead.")
    if rate >= 4 * alpha:
        return (f"So on these data a significant {name} result often comes from size alone "
                f"({times:.1f} times the nominal rate) and must not be read as a difference "
                f"in composition; test composition with {reference} (or another size-free "
                "measure) instead.")
    return (f"The rate is somewhat above the nominal {100 * alpha:.0f} % ({times:.1f} times): "
            f"size alone sometimes makes {name} significant here, so read a p-value near "
            f"{alpha:g} with caution and confirm a difference in composition with {reference}.")


def _reading(name, reference, group, rate, ci, ref_rate, ref_ci, alpha, n_sim) -> str:
    pct = lambda v: f"{100 * v:.0f} %"                                       # noqa: E731
    text = (f"In {n_sim} simulated data sets where the {group} groups differ only in size "
            f"(observed totals kept, one composition for all), PERMANOVA with {name} reported "
            f"a difference at alpha = {alpha:g} in {pct(rate)} of them (95 % interval "
            f"{pct(ci[0])}-{pct(ci[1])}); with the size-free {reference}: {pct(ref_rate)} "
            f"({pct(ref_ci[0])}-{pct(ref_ci[1])}). ")
    v = _verdict(rate, ci, alpha)
    if v == "inflated":
        text += _inflated_words(name, reference, rate, alpha)
    elif v == "nominal":
        text += (f"The rate is consistent with the nominal {pct(alpha)}: {name} does not mistake "
                 "these size differences for composition.")
    else:
        text += f"The rate is below the nominal {pct(alpha)}: the test is conservative here."
    if _verdict(ref_rate, ref_ci, alpha) == "inflated":
        text += (f" Note that even {reference} exceeds the nominal rate here (unequal sampling "
                 "depth also changes how noisy the profiles are).")
    return text
