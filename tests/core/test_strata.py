"""Design-aware PERMANOVA: error strata against published and statsmodels tables, term order,
smallest attainable p-values, random crossed factors, units in pairwise and dispersion tests,
and the errors a user can cause. All data are synthetic except the oats trial (Yates 1935)."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from scipy.spatial.distance import pdist

from tallyform.core.dissimilarity import Dissimilarity
from tallyform.core.dispersion import dispersion_test
from tallyform.core.errors import Cancelled, DesignError
from tallyform.core.inference import pairwise_permanova, permanova


def ols(formula, data):
    """(residual sum of squares, residual df) of a statsmodels OLS fit (rank-based df)."""
    import warnings

    import statsmodels.formula.api as smf
    with warnings.catch_warnings():                 # dummies of nested units are aliased
        warnings.simplefilter("ignore")
        fit = smf.ols(formula, data).fit()
    return fit.ssr, fit.df_resid


def seq(data, *formulas):
    """Sequential sums of squares and df between nested statsmodels OLS fits."""
    fits = [ols(f, data) for f in formulas]
    return [(a[0] - b[0], a[1] - b[1]) for a, b in zip(fits, fits[1:])]


def wls_f(data, formula0, formula1, weights):
    """F of the terms formula1 adds to formula0, from statsmodels WLS fits."""
    import statsmodels.formula.api as smf
    f0 = smf.wls(formula0, data, weights=weights).fit()
    f1 = smf.wls(formula1, data, weights=weights).fit()
    return ((f0.ssr - f1.ssr) / (f0.df_resid - f1.df_resid)) / (f1.ssr / f1.df_resid)


def precision(info, unit, parent=None):
    """Unit means of y and their precision weights 1 / (s2_u + s2_e / n_u), with the
    method-of-moments variance components of the unbalanced one-way layout (Searle, Casella
    & McCulloch 1992, ch. 3), written out with pandas; scaled to sum to n."""
    df = pd.DataFrame({"y": info["y"], "u": info[unit],
                       "p": info[parent] if parent else "all"})
    g = df.groupby("u")
    size, n = g.size(), len(df)
    s2e = ((df["y"] - g["y"].transform("mean")) ** 2).sum() / (n - size.size)
    means, par = g["y"].mean(), g["p"].first()
    pmean = (means * size).groupby(par).sum() / size.groupby(par).sum()
    ssb = (size * (means - par.map(pmean)) ** 2).sum()
    n0 = n - ((size ** 2).groupby(par).sum() / size.groupby(par).sum()).sum()
    s2u = max((ssb - (size.size - par.nunique()) * s2e) / n0, 0.0)
    w = 1 / (s2u + s2e / size)
    return means, w * n / w.sum()


def one_variable(y, labels, *, features=False):
    y = np.asarray(y, dtype=float)
    if features:
        return Dissimilarity.from_features(y[:, None], labels, measure="euclidean")
    return Dissimilarity(pdist(y[:, None]), labels, measure="euclidean")


# Yates (1935) oats split-plot trial: 6 blocks, 3 varieties on whole plots, 4 nitrogen
# levels on subplots; yields in 1/4 lb per sub-plot (the data as given in Yates 1935 and
# reproduced in Venables & Ripley 2002, Modern Applied Statistics with S, sec. 6.7)
OATS = [111, 130, 157, 174, 117, 114, 161, 141, 105, 140, 118, 156, 61, 91, 97, 100, 70, 108,
        126, 149, 96, 124, 121, 144, 68, 64, 112, 86, 60, 102, 89, 96, 89, 129, 132, 124, 74,
        89, 81, 122, 64, 103, 132, 133, 70, 89, 104, 117, 62, 90, 100, 116, 80, 82, 94, 126,
        63, 70, 109, 99, 53, 74, 118, 113, 89, 82, 86, 104, 97, 99, 119, 121]


@pytest.fixture
def oats():
    block = np.repeat(["I", "II", "III", "IV", "V", "VI"], 12)
    variety = np.tile(np.repeat(["Victory", "Golden.rain", "Marvellous"], 4), 6)
    nitrogen = np.tile(["0.0cwt", "0.2cwt", "0.4cwt", "0.6cwt"], 18)
    labels = [f"o{i:02d}" for i in range(72)]
    info = pd.DataFrame({"B": block, "V": variety, "N": nitrogen, "Y": OATS,
                         "plot": [f"{b}-{v}" for b, v in zip(block, variety)]}, index=labels)
    return info, labels


@pytest.mark.parametrize("features", [False, True])
def test_oats_split_plot_equals_published_table_and_statsmodels(oats, features):
    # published split-plot table of the oats trial (Yates 1935; as printed in Venables &
    # Ripley 2002, sec. 6.7; values typed from memory): whole-plot stratum V: SS 1786.4 on
    # 2 df, residual 6013.3 on 10 df, F = 1.485; sub-plot stratum N: SS 20020.5 on 3 df,
    # V:N 321.7 on 6 df, residual 7968.8 on 45 df, F(N) = 37.69, F(V:N) = 0.303
    info, labels = oats
    d = one_variable(info["Y"], labels, features=features)
    res = permanova(d, info, ["B", "V", "N", "V:N"], units="plot", n_permutations=99, rng=1)
    t = res.table
    assert t.loc["V", "ss"] == pytest.approx(1786.4, abs=0.05)
    assert t.loc["Residual (between 'plot')", ["df", "ss"]].tolist() == pytest.approx(
        [10, 6013.3], abs=0.05)
    assert t.loc["V", "pseudo_f"] == pytest.approx(1.485, abs=5e-4)
    assert t.loc["N", "pseudo_f"] == pytest.approx(37.69, abs=5e-3)
    assert t.loc["V:N", "pseudo_f"] == pytest.approx(0.303, abs=5e-4)
    assert t.loc["Residual (within 'plot')", ["df", "ss"]].tolist() == pytest.approx(
        [45, 7968.8], abs=0.051)
    # reference: statsmodels OLS sums of squares of nested fits, whole-plot dummies after
    # B and V giving the whole-plot error; F = (SS_t / df_t) / (SS_err / df_err) of each
    # stratum
    (b, v, wp) = seq(info, "Y ~ 1", "Y ~ C(B)", "Y ~ C(B) + C(V)", "Y ~ C(B) + C(V) + C(plot)")
    (n, vn) = seq(info, "Y ~ C(plot)", "Y ~ C(plot) + C(N)", "Y ~ C(plot) + C(N) + C(V):C(N)")
    err = ols("Y ~ C(plot) + C(N) + C(V):C(N)", info)
    assert wp[1] == 10 and err[1] == 45
    for term, (ss, df) in [("B", b), ("V", v)]:
        assert t.loc[term, "ss"] == pytest.approx(ss, rel=1e-10)
        assert t.loc[term, "pseudo_f"] == pytest.approx((ss / df) / (wp[0] / wp[1]),
                                                        rel=1e-10)
    for term, (ss, df) in [("N", n), ("V:N", vn)]:
        assert t.loc[term, "pseudo_f"] == pytest.approx((ss / df) / (err[0] / err[1]),
                                                        rel=1e-10)
    assert t.loc["Residual (within 'plot')", "ss"] == pytest.approx(err[0], rel=1e-10)
    # layout: every term names its stratum, denominator row and its df; strata add up
    assert t.loc["V", "stratum"] == "between 'plot'"
    assert t.loc["V", "tested_against"] == "Residual (between 'plot')"
    assert t.loc["V", "df_denominator"] == 10 and t.loc["N", "df_denominator"] == 45
    assert t.drop(index="Total")["ss"].sum() == pytest.approx(t.loc["Total", "ss"])
    assert list(t.index) == ["B", "V", "Residual (between 'plot')", "N", "V:N",
                             "Residual (within 'plot')", "Total"]


def _missing_visits(seed=2):
    """Tanks with missing visits, unequal tanks per treatment (synthetic)."""
    rng = np.random.default_rng(seed)
    rows = []
    for k, (trt, visits) in enumerate([("a", 4), ("a", 3), ("a", 2), ("a", 4), ("b", 4),
                                       ("b", 2), ("b", 3), ("c", 4), ("c", 3), ("c", 4),
                                       ("c", 2)]):
        for v in rng.choice(4, visits, replace=False):
            rows.append(dict(trt=trt, tank=f"T{k}", week=f"w{v}", day=7.0 * v + k % 3))
    info = pd.DataFrame(rows, index=[f"s{i:02d}" for i in range(len(rows))])
    tank_eff = rng.normal(size=11)
    info["y"] = (tank_eff[info["tank"].str[1:].astype(int)] + rng.normal(size=len(info))
                 + 0.2 * info["day"] / 7)
    return info


def test_unbalanced_repeated_measures_equals_statsmodels():
    # references. Between tanks: statsmodels WLS of the tank means on treatment, weighted by
    # their precision (variance components written out in `precision`). Within tanks:
    # statsmodels OLS sums of squares of nested fits, tank dummies first, then the
    # within-unit terms in order (the within-unit analysis of missing visits)
    info = _missing_visits()
    d = one_variable(info["y"], list(info.index))
    res = permanova(d, info, ["trt", "week", "trt:week"], units="tank", n_permutations=99,
                    rng=1)
    t = res.table
    means, w = precision(info, "tank")
    tanks = pd.DataFrame({"y": means, "trt": info.groupby("tank")["trt"].first()})
    assert t.loc["trt", "pseudo_f"] == pytest.approx(
        wls_f(tanks, "y ~ 1", "y ~ C(trt)", w.loc[tanks.index]), rel=1e-10)
    assert t.loc["Residual (between 'tank')", "df"] == 8
    # with no unit effects the weights would be the sample counts: the classical F of the
    # split-plot table with missing visits, from OLS sums of squares
    (trt, tk) = seq(info, "y ~ 1", "y ~ C(trt)", "y ~ C(trt) + C(tank)")
    classical = (trt[0] / trt[1]) / (tk[0] / tk[1])
    assert wls_f(tanks, "y ~ 1", "y ~ C(trt)",
                 info.groupby("tank").size().loc[tanks.index]) == pytest.approx(classical)
    (week, tw) = seq(info, "y ~ C(tank)", "y ~ C(tank) + C(week)",
                     "y ~ C(tank) + C(week) + C(trt):C(week)")
    err = ols("y ~ C(tank) + C(week) + C(trt):C(week)", info)
    assert t.loc["week", "ss"] == pytest.approx(week[0], rel=1e-10)
    assert t.loc["week", "pseudo_f"] == pytest.approx(
        (week[0] / week[1]) / (err[0] / err[1]), rel=1e-10)
    assert t.loc["trt:week", "pseudo_f"] == pytest.approx(
        (tw[0] / tw[1]) / (err[0] / err[1]), rel=1e-10)
    assert t.loc["Residual (within 'tank')", "df"] == err[1]
    assert any("unbalanced" in n for n in res.notes)


def test_balanced_repeated_measures_equals_statsmodels_anovarm():
    # reference: statsmodels AnovaRM (one within-subject factor, subjects = tanks)
    from statsmodels.stats.anova import AnovaRM
    rng = np.random.default_rng(9)
    info = pd.DataFrame({"tank": np.repeat([f"T{i}" for i in range(7)], 5),
                         "week": np.tile([f"w{j}" for j in range(5)], 7)},
                        index=[f"s{i:02d}" for i in range(35)])
    info["y"] = np.repeat(rng.normal(size=7), 5) + rng.normal(size=35)
    res = permanova(one_variable(info["y"], list(info.index)), info, ["week"], units="tank",
                    n_permutations=99, rng=1)
    ref = AnovaRM(info, "y", "tank", within=["week"]).fit().anova_table
    assert res.table.loc["week", "pseudo_f"] == pytest.approx(ref.loc["week", "F Value"],
                                                              rel=1e-10)
    assert res.table.loc["week", "df_denominator"] == ref.loc["week", "Den DF"]


def test_nested_levels_equal_statsmodels():
    # sites nested in habitats, plots (treatment x / y) nested in sites, unequal visits;
    # reference: statsmodels OLS sums of squares of nested fits with site and plot dummies
    rng = np.random.default_rng(6)
    rows = []
    for s in range(6):
        for p, trt in enumerate(["x", "y"]):
            for v in range(int(rng.integers(2, 5))):
                rows.append(dict(habitat="wood" if s < 3 else "field", site=f"S{s}",
                                 plot=f"p{p}", trt=trt, visit=v))
    info = pd.DataFrame(rows, index=[f"s{i:02d}" for i in range(len(rows))])
    info["plot_id"] = info["site"] + info["plot"]
    info["y"] = (rng.normal(size=len(info)) + 2 * rng.normal(size=6)[info["site"].str[1:]
                                                                  .astype(int)])
    res = permanova(one_variable(info["y"], list(info.index)), info, ["habitat", "trt"],
                    units=["site", "plot"], n_permutations=99, rng=1)
    t = res.table
    assert t.loc["habitat", "stratum"] == "between 'site'"
    assert t.loc["trt", "stratum"] == "between 'plot'"
    # references: statsmodels WLS of site means (habitat) and of plot means after their
    # site (treatment), with precision weights; the within-plot residual from OLS
    means, w = precision(info, "site")
    sites = pd.DataFrame({"y": means, "habitat": info.groupby("site")["habitat"].first()})
    assert t.loc["habitat", "pseudo_f"] == pytest.approx(
        wls_f(sites, "y ~ 1", "y ~ C(habitat)", w.loc[sites.index]), rel=1e-10)
    means, w = precision(info, "plot_id", parent="site")
    plots = pd.DataFrame({"y": means, "site": info.groupby("plot_id")["site"].first(),
                          "trt": info.groupby("plot_id")["trt"].first()})
    assert t.loc["trt", "pseudo_f"] == pytest.approx(
        wls_f(plots, "y ~ C(site)", "y ~ C(site) + C(trt)", w.loc[plots.index]), rel=1e-10)
    assert t.loc["Residual (within 'plot')", "ss"] == pytest.approx(
        ols("y ~ C(plot_id)", info)[0], rel=1e-10)
    assert "within blocks of 'site'" in res.schemes.loc["trt", "permutations"]


# ---------------------------------------------------------------------------- term order
def _crossed(seed, n_per_cell, effect_a=3.0):
    rng = np.random.default_rng(seed)
    a = np.repeat(["a0", "a1", "a2"], 2 * n_per_cell)
    b = np.tile(np.repeat(["b0", "b1"], n_per_cell), 3)
    y = rng.normal(size=(a.size, 3)) + effect_a * (a == "a1")[:, None]
    labels = [f"s{i:02d}" for i in range(a.size)]
    return (Dissimilarity.from_features(y, labels, measure="euclidean"),
            pd.DataFrame({"a": a, "b": b}, index=labels))


def test_balanced_term_order_does_not_change_pvalues():
    d, info = _crossed(1, 4)
    one = permanova(d, info, ["a", "b", "a:b"], n_permutations=199, rng=5)
    two = permanova(d, info, ["b", "a", "a:b"], n_permutations=199, rng=5)
    for t in ("a", "b", "a:b"):
        assert one.pvalue[t] == two.pvalue[t]
        assert one.null_distribution[t] == pytest.approx(two.null_distribution[t], rel=1e-9)
    assert one.schemes.loc["a", "reduced_model"] == "intercept + b"


def test_first_term_permutes_residuals_with_the_fitted_part_added_back():
    # the procedure written out (Freedman & Lane 1983; Anderson & ter Braak 2003): for the
    # first of two unbalanced terms, permute the residuals of the model without it, project
    # them back onto that model's residual space, rescale them by sqrt(d / (d - k_Z)), add
    # its fitted part back, and refit the same sequential models by least squares
    # (numpy.linalg.lstsq)
    rng = np.random.default_rng(2)
    a = np.array(list("ppppqqqqqrrrrrrr"))
    b = np.array(list("xyxyxxyyxyxyyxyy"))
    y = rng.normal(size=(16, 2)) + (b == "y")[:, None] * 2.0
    labels = [f"s{i:02d}" for i in range(16)]
    info = pd.DataFrame({"a": a, "b": b}, index=labels)
    d = Dissimilarity.from_features(y, labels, measure="euclidean")
    res = permanova(d, info, ["a", "b"], n_permutations=40, rng=3)

    def dummies(v):
        return np.column_stack([(v == k).astype(float) for k in np.unique(v)[1:]])

    one = np.ones((16, 1))
    Xa, Xb = dummies(a), dummies(b)

    def rss(X, yy):
        beta = np.linalg.lstsq(X, yy, rcond=None)[0]
        return float(((yy - X @ beta) ** 2).sum())

    Z = np.hstack([one, Xb])
    fitted = Z @ np.linalg.lstsq(Z, y, rcond=None)[0]
    e = y - fitted
    from tallyform.core.schemes import Permutations
    perms = Permutations(16, 40, np.random.default_rng(3), design=np.hstack([one, Xa, Xb]))
    full = np.hstack([one, Xa, Xb])
    expected = []
    c = np.sqrt(15 / (15 - 1))          # residuals rescaled: d = n - 1, rank(Z) - 1 = 1
    for idx in np.vstack(list(perms.batches(40))):
        pe = e[np.argsort(idx)]
        ys = fitted + c * (pe - Z @ np.linalg.lstsq(Z, pe, rcond=None)[0])
        expected.append(((rss(one, ys) - rss(np.hstack([one, Xa]), ys)) / 2)
                        / (rss(full, ys) / 12))
    assert res.null_distribution["a"] == pytest.approx(np.array(expected), rel=1e-9)


# ---------------------------------------------------------------------------- units
def _tanks(n_tanks=6, visits=4, seed=0):
    rng = np.random.default_rng(seed)
    info = pd.DataFrame({"treatment": np.repeat(["c", "n"], [n_tanks // 2 * visits,
                                                             (n_tanks - n_tanks // 2) * visits]),
                         "tank": np.repeat([f"T{i}" for i in range(n_tanks)], visits),
                         "week": np.tile([f"w{j}" for j in range(visits)], n_tanks),
                         "bench": np.repeat([f"b{i // 2}" for i in range(n_tanks)], visits)},
                        index=[f"s{i:02d}" for i in range(n_tanks * visits)])
    y = rng.normal(size=(len(info), 3)) + np.repeat(rng.normal(size=(n_tanks, 3)), visits, 0)
    return Dissimilarity.from_features(y, list(info.index), measure="euclidean"), info


def test_units_detected_and_smallest_pvalue_said_plainly():
    d, info = _tanks()
    res = permanova(d, info, ["treatment", "week"], n_permutations=999, rng=1)
    assert res.units["units"] == ["tank"] and res.units["detected"]
    assert any(n.startswith("Sampling units detected: 6 units of 'tank'") for n in res.notes)
    assert res.schemes.loc["treatment", "exact"]
    assert res.schemes.loc["treatment", "n_distinct"] == 20
    assert res.min_pvalue["treatment"] == pytest.approx(0.1)
    assert res.pvalue["treatment"] >= 0.1
    assert any("with 3 units of 'tank' per level of 'treatment'" in n
               and "smallest possible p-value for 'treatment' is 0.1" in n for n in res.notes)
    assert "smallest possible p-value for 'treatment' is 0.1" in res.reading
    # units=False: samples as replicates, with a note that they repeat units
    flat = permanova(d, info, ["treatment", "week"], units=False, n_permutations=99, rng=1)
    assert list(flat.table.index) == ["treatment", "week", "Residual", "Total"]
    assert any("repeat units" in n for n in flat.notes)


def test_two_groups_of_four_samples_floor_is_two_in_seventy():
    labels = [f"s{i}" for i in range(8)]
    info = pd.DataFrame({"g": list("aaaabbbb")}, index=labels)
    res = permanova(one_variable(np.arange(8.0) ** 1.5, labels), info, ["g"], rng=1)
    assert res.exact and res.n_permutations == 70
    assert res.min_pvalue["g"] == pytest.approx(2 / 70)
    assert res.pvalue["g"] == pytest.approx(2 / 70)        # the most extreme split
    assert any("35 distinct values of the statistic" in n for n in res.notes)


def test_blocks_group_whole_units_and_cannot_split_one():
    d, info = _tanks()
    res = permanova(d, info, ["treatment"], units="tank", blocks="bench", rng=1)
    assert "within blocks of 'bench'" in res.schemes.loc["treatment", "permutations"]
    info.loc["s01", "bench"] = "b9"
    with pytest.raises(DesignError, match="unit 'T0' of 'tank' has samples in more than one "
                                          "block of 'bench'"):
        permanova(d, info, ["treatment"], units="tank", blocks="bench", rng=1)


@pytest.mark.parametrize("change,units,match", [
    (lambda f: f.assign(treatment=np.where(f.index == "s00", "n", f.treatment)), "tank",
     r"'treatment' is constant within some units of 'tank' \(e.g. 'T\d'\) but varies "
     r"within others \(e.g. 'T0'\)"),
    (lambda f: f.assign(tank=np.where(f.index == "s05", None, f.tank)), "tank",
     r"units column 'tank' has no unit for sample\(s\) \['s05'\]"),
    (lambda f: f.assign(treatment=np.repeat(["c", "n", "m"], [4, 12, 8])), "tank",
     r"level\(s\) \['c'\] of 'treatment' hold a single unit of 'tank' \(\['T0'\]\)"),
    (lambda f: f, "tanks", r"units column 'tanks' is not in the sample table"),
])
def test_bad_units_raise_design_errors_naming_column_and_unit(change, units, match):
    d, info = _tanks()
    with pytest.raises(DesignError, match=match):
        permanova(d, change(info), ["treatment"], units=units, rng=1)


def test_cyclic_shifts_and_progress_and_cancel():
    d, info = _tanks(visits=5)
    info["day"] = np.tile([3, 10, 17, 24, 31], 6)
    seen = []
    res = permanova(d, info, ["treatment", "week"], units="tank", cyclic="day",
                    n_permutations=99, rng=2, progress=lambda a, b: seen.append((a, b)))
    assert "cyclic shifts of the visits (in 'day' order)" in res.schemes.loc["week",
                                                                             "permutations"]
    assert seen[-1] == (20 + 99, 20 + 99)           # 20 exact unit relabellings + 99 shifts
    with pytest.raises(Cancelled):
        permanova(d, info, ["treatment", "week"], units="tank", cancel=lambda: True)


# ---------------------------------------------------------------------------- random
def test_random_crossed_factor_uses_expected_mean_squares():
    # reference: statsmodels anova_lm mean squares (balanced: sequential = any order); with
    # site random, treatment is tested against treatment:site (Cornfield & Tukey 1956), site
    # and the interaction against the residual
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm
    from tallyform.core.ems import denominators
    rng = np.random.default_rng(1)
    info = pd.DataFrame({"t": np.repeat(np.tile(["t0", "t1", "t2"], 5), 2),
                         "site": np.repeat([f"S{j}" for j in range(5)], 6)},
                        index=[f"x{i:02d}" for i in range(30)])
    info["y"] = rng.normal(size=30) + np.repeat(rng.normal(size=15), 2)
    res = permanova(one_variable(info["y"], list(info.index)), info, ["t", "site", "t:site"],
                    random="site", n_permutations=99, rng=1)
    ref = anova_lm(smf.ols("y ~ C(t) * C(site)", info).fit())
    assert res.table.loc["t", "pseudo_f"] == pytest.approx(
        ref.loc["C(t)", "mean_sq"] / ref.loc["C(t):C(site)", "mean_sq"], rel=1e-10)
    assert res.table.loc["site", "pseudo_f"] == pytest.approx(ref.loc["C(site)", "F"],
                                                              rel=1e-10)
    assert res.table.loc["t", ["tested_against", "df_denominator"]].tolist() == ["t:site", 8]
    assert "within blocks of 'site'" in res.schemes.loc["t", "permutations"]
    # textbook rules (Cornfield & Tukey 1956): A fixed, B random in A x B x C fixed: A
    # against A:B, C against B:C, A:C against A:B:C, B and its interactions against the
    # residual; two random factors crossed with a fixed one: the fixed main effect would
    # need a quasi-F ratio, which is refused
    full = ["a", "b", "c", "a:b", "a:c", "b:c", "a:b:c"]
    assert denominators(full, ["b"]) == {"a": "a:b", "b": None, "c": "b:c", "a:b": None,
                                         "a:c": "a:b:c", "b:c": None, "a:b:c": None}
    with pytest.raises(DesignError, match="quasi-F"):
        denominators(full, ["b", "c"])


@pytest.mark.parametrize("change,kw,match", [
    (lambda f: f.iloc[1:], {}, "unbalanced"),
    (lambda f: f, {"units": "site"}, "cannot be combined"),
    (lambda f: f.assign(x=np.arange(30.0)), {"terms": ["t", "site", "x"]}, "numeric"),
    (lambda f: f, {"terms": ["site", "t:site"]}, "sub-term 't' is not"),
])
def test_random_factor_refusals(change, kw, match):
    info = pd.DataFrame({"t": np.repeat(np.tile(["t0", "t1", "t2"], 5), 2),
                         "site": np.repeat([f"S{j}" for j in range(5)], 6)},
                        index=[f"x{i:02d}" for i in range(30)])
    info = change(info)
    terms = kw.pop("terms", ["t", "site", "t:site"])
    d = one_variable(np.arange(len(info), dtype=float), list(info.index))
    with pytest.raises(DesignError, match=match):
        permanova(d, info, terms, random="site", **kw)


# ---------------------------------------------------------------------------- pairwise
def test_pairwise_with_units_says_once_that_no_pair_can_reach_alpha():
    d, info = _tanks(n_tanks=9, visits=3)
    info["treatment"] = np.repeat(["a", "b", "c"], 9)
    res = pairwise_permanova(d, info, "treatment", units="tank", rng=1)
    assert (res.table["stratum"] == "between 'tank'").all()
    assert res.table["min_pvalue"].tolist() == pytest.approx([0.1] * 3)
    assert res.table["n_units"].tolist() == [6, 6, 6]
    floor = [n for n in res.notes if n.startswith("No pair can reach")]
    assert len(floor) == 1 and "Holm adjustment over 3 pairs" in floor[0]
    # the note about 3 tanks per level holds for every pair: written once, not per pair
    assert sum("smallest possible p-value for 'treatment' is 0.1" in n for n in res.notes) == 1
    assert not any(n.startswith("a vs b:") for n in res.notes)


# ---------------------------------------------------------------------------- dispersion
def test_dispersion_with_units_uses_unit_centroids_and_whole_units():
    # reference: scipy.stats.f_oneway of the distances of the tank means to their
    # treatment's mean of tank means, each multiplied by sqrt(m_g / (m_g - 1))
    rng = np.random.default_rng(7)
    info = pd.DataFrame({"treatment": np.repeat(["a", "b"], 20),
                         "tank": np.repeat([f"T{i}" for i in range(10)], 4)},
                        index=[f"s{i:02d}" for i in range(40)])
    f = rng.normal(size=(40, 3)) * np.repeat([1.0, 2.0], 20)[:, None]
    d = Dissimilarity.from_features(f, list(info.index), measure="euclidean")
    res = dispersion_test(d, "treatment", samples=info, units="tank", n_permutations=999,
                          rng=1)
    means = pd.DataFrame(f).groupby(info["tank"].to_numpy()).mean()
    trt = info.groupby("tank")["treatment"].first().loc[means.index].to_numpy()
    z = np.zeros(10)
    for g in ("a", "b"):
        k = trt == g
        z[k] = np.sqrt(((means[k] - means[k].mean()) ** 2).sum(axis=1)) * np.sqrt(5 / 4)
    assert res.statistic == pytest.approx(stats.f_oneway(z[trt == "a"], z[trt == "b"])
                                          .statistic, rel=1e-10)
    assert res.level == "units of 'tank'" and res.df == (1, 8)
    assert res.exact and res.n_permutations == 252
    assert list(res.distances.index) == list(means.index)
    # groups given as a Series still work, and without samples nothing is detected
    plain = dispersion_test(d, info["treatment"], rng=1)
    assert plain.level == "samples" and plain.df == (1, 38)
