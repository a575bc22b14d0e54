"""Size tests with sampling units: unit totals for a factor applied to whole units, the
mixed model for a factor that varies within units (all data synthetic)."""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from tallyform.core.errors import DesignError
from tallyform.core.size_tests import size_test
from tallyform.core.table import CommunityTable


def _tanks(seed=0, tanks=10, visits=4, drop=(), groups=("ctl", "warm")):
    """Tanks with a random tank effect, visited weekly; ``drop``: sample positions removed
    (missing visits)."""
    rng = np.random.default_rng(seed)
    n = tanks * visits
    tank = np.repeat([f"T{i:02d}" for i in range(tanks)], visits)
    week = np.tile([f"w{j + 1}" for j in range(visits)], tanks)
    treat = np.repeat(np.resize(groups, tanks), visits)
    logt = 6 + np.repeat(rng.normal(0, 0.6, tanks), visits) + rng.normal(0, 0.3, n)
    t = np.round(np.exp(logt))
    labels = [f"{a}_{b}" for a, b in zip(tank, week)]
    counts = pd.DataFrame({"ta": np.floor(t / 2), "tb": t - np.floor(t / 2)}, index=labels)
    info = pd.DataFrame({"treatment": treat, "tank": tank, "week": week,
                         "bench": np.repeat([f"b{i // 2}" for i in range(tanks)], visits)},
                        index=labels)
    keep = np.setdiff1d(np.arange(n), drop)
    return CommunityTable(counts.iloc[keep], info.iloc[keep])


def _unit_sizes(tab, unit="tank", group="treatment"):
    frame = tab.samples.assign(total=tab.totals.to_numpy())
    agg = frame.groupby(unit).agg(total=("total", "sum"), n=("total", "size"),
                                  g=(group, "first"))
    return np.log(agg["total"] / agg["n"]).to_numpy(), agg["g"].to_numpy()


def test_between_unit_factor_uses_unit_totals_with_missing_visits():
    # reference: scipy.stats.ttest_ind(equal_var=False) on log(unit total / visits)
    tab = _tanks(drop=(1, 6, 7, 13))
    res = size_test(tab, "treatment", units="tank")
    y, g = _unit_sizes(tab)
    t = stats.ttest_ind(y[g == "warm"], y[g == "ctl"], equal_var=False)
    assert res.statistic == pytest.approx(t.statistic ** 2, rel=1e-10)
    assert res.pvalue == pytest.approx(t.pvalue, rel=1e-10)
    assert res.summary["n"].tolist() == [5, 5]
    assert res.summary["n_samples"].sum() == tab.n_samples
    assert res.units.startswith("10 units of 'tank'") and res.measure == "log total per sample"
    assert any("unit totals, not samples" in n for n in res.notes)


def test_units_detected_and_opted_out():
    tab = _tanks(seed=1)
    found = size_test(tab, "treatment")
    given = size_test(tab, "treatment", units="tank")
    assert found.statistic == pytest.approx(given.statistic)
    assert any("detected" in n for n in found.notes)
    alone = size_test(tab, "treatment", units=False)
    assert alone.units is None and alone.summary["n"].sum() == tab.n_samples
    assert any("independent replicates" in n for n in alone.notes)


@pytest.mark.parametrize("method", ["anova", "kruskal", "permutation", "negbin"])
def test_every_method_counts_units(method):
    tab = _tanks(seed=2, drop=(3,))
    res = size_test(tab, "treatment", units="tank", method=method, n_permutations=99,
                    n_boot=99, rng=1)
    assert res.summary["n"].sum() == 10 and res.units is not None
    if method == "anova":
        # reference: scipy.stats.f_oneway on the log unit sizes
        y, g = _unit_sizes(tab)
        assert res.statistic == pytest.approx(stats.f_oneway(y[g == "ctl"],
                                                             y[g == "warm"]).statistic)


def test_negbin_on_units_sums_counts_and_uses_visits_as_effort():
    # the unit-level model is the model of a table of unit totals with the number of
    # samples of each unit as its effort
    tab = _tanks(seed=3, drop=(2, 5))
    res = size_test(tab, "treatment", units="tank", method="negbin", nb_reference="F")
    frame = tab.samples.assign(total=tab.totals.to_numpy())
    agg = frame.groupby("tank").agg(total=("total", "sum"), n=("total", "size"),
                                    g=("treatment", "first"))
    t = agg["total"].to_numpy()
    counts = pd.DataFrame({"ta": t}, index=agg.index)
    unit_tab = CommunityTable(counts, pd.DataFrame({"g": agg["g"], "visits": agg["n"]}),
                              effort="visits")
    ref = size_test(unit_tab, "g", method="negbin", nb_reference="F")
    assert res.statistic == pytest.approx(ref.statistic, rel=1e-10)
    assert res.summary["ratio"].to_numpy() == pytest.approx(ref.summary["ratio"].to_numpy())


def test_within_unit_factor_equals_statsmodels_mixedlm():
    # reference: statsmodels MixedLM called directly (REML, random tank intercept)
    import statsmodels.formula.api as smf
    tab = _tanks(seed=4, drop=(0, 9, 10, 27))
    res = size_test(tab, "week", units="tank")
    frame = tab.samples.assign(y=np.log(tab.totals.to_numpy()))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        levels = list(pd.unique(frame["week"].astype(str)))    # reference: the first in the file
        fit = smf.mixedlm(f"y ~ C(week, Treatment(reference={levels[0]!r}))", frame,
                          groups=frame["tank"]).fit(reml=True)
    names = [f"C(week, Treatment(reference={levels[0]!r}))[T.{lv}]" for lv in levels[1:]]
    b = fit.fe_params[names].to_numpy()
    V = fit.cov_params().loc[names, names].to_numpy()
    F = float(b @ np.linalg.solve(V, b)) / 3
    assert res.method == "mixed"
    assert res.statistic == pytest.approx(F, rel=1e-4)
    # between-within df: samples - tanks - (weeks - 1)
    assert res.df == (3, tab.n_samples - 10 - 3)
    assert res.summary["ratio"].to_numpy()[1:] == pytest.approx(np.exp(b), rel=1e-4)
    q = stats.t.ppf(0.975, res.df[1])
    se = np.sqrt(np.diag(V))
    assert res.summary["ci_low"].to_numpy()[1:] == pytest.approx(np.exp(b - q * se), rel=1e-3)
    assert any("random intercept" in n for n in res.notes)


def test_within_unit_permutation_equals_the_fixed_unit_f():
    # reference: statsmodels OLS y ~ C(tank) + C(week), anova_lm type II F of week
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm
    tab = _tanks(seed=5)
    res = size_test(tab, "week", units="tank", method="permutation", n_permutations=99,
                    rng=2)
    frame = tab.samples.assign(y=np.log(tab.totals.to_numpy()))
    ref = anova_lm(smf.ols("y ~ C(tank) + C(week)", frame).fit(), typ=2)
    assert res.statistic == pytest.approx(ref.loc["C(week)", "F"], rel=1e-10)
    # balanced: the mixed model's F is the same F (random intercept, REML)
    mixed = size_test(tab, "week", units="tank")
    assert mixed.statistic == pytest.approx(res.statistic, rel=1e-4)


def test_within_unit_factor_refuses_methods_without_units():
    tab = _tanks(seed=6)
    for method in ("negbin", "kruskal"):
        with pytest.raises(DesignError, match="varies within sampling units"):
            size_test(tab, "week", units="tank", method=method)


def test_blocks_of_units():
    tab = _tanks(seed=7, tanks=12, groups=("ctl", "warm"))
    res = size_test(tab, "treatment", units="tank", blocks="bench", method="anova")
    # reference: statsmodels OLS on unit sizes, y ~ C(bench) + C(g), type II F
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm
    frame = tab.samples.assign(total=tab.totals.to_numpy())
    agg = frame.groupby("tank").agg(total=("total", "sum"), n=("total", "size"),
                                    g=("treatment", "first"), bench=("bench", "first"))
    agg["y"] = np.log(agg["total"] / agg["n"])
    ref = anova_lm(smf.ols("y ~ C(bench) + C(g)", agg).fit(), typ=2)
    assert res.statistic == pytest.approx(ref.loc["C(g)", "F"], rel=1e-10)


def test_nested_units_give_the_mixed_model_on_plot_totals():
    # treatment applied to plots within sites: plot totals (2 visits summed), a random
    # site intercept, between-within df = plots - sites - 1; reference: statsmodels MixedLM
    # called directly on the plot sizes
    import statsmodels.formula.api as smf
    rng = np.random.default_rng(1)
    site = np.repeat([f"S{i}" for i in range(6)], 8)
    plot = np.tile(np.repeat(["p1", "p2", "p3", "p4"], 2), 6)
    treat = np.tile(np.repeat(["a", "b", "a", "b"], 2), 6)
    y = np.round(np.exp(6 + np.repeat(rng.normal(0, .5, 6), 8)
                        + np.repeat(rng.normal(0, .3, 24), 2) + rng.normal(0, .2, 48)))
    lab = [f"s{i}" for i in range(48)]
    info = pd.DataFrame({"site": site, "plot": plot, "treat": treat}, index=lab)
    tab = CommunityTable(pd.DataFrame({"t": y}, index=lab), info)            # synthetic
    res = size_test(tab, "treat", units=["site", "plot"])
    assert res.method == "mixed" and res.df == (1, 17) and res.summary["n"].sum() == 24
    frame = info.assign(t=y).groupby(["site", "plot"], as_index=False).agg(
        t=("t", "sum"), treat=("treat", "first"))
    frame["y"] = np.log(frame["t"] / 2)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fit = smf.mixedlm("y ~ treat", frame, groups=frame["site"]).fit(reml=True)
    z = fit.fe_params["treat[T.b]"] / fit.bse_fe["treat[T.b]"]
    assert res.statistic == pytest.approx(z ** 2, rel=1e-3)
