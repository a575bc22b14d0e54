"""Audit of false alarms for 'composition differs' under size-only differences."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.stats import binom

import tallyform as tly
from tallyform.core.audit import estimate_overdispersion, null_shape_tables
from tallyform.errors import DesignError, InputError


def _dm_counts(rng, rho, n=80, p=30, total=600):
    pi = rng.dirichlet(np.full(p, 1.0))
    groups = np.repeat(["a", "b"], n // 2)
    if rho > 0:
        shares = rng.dirichlet(pi * (1 - rho) / rho, size=n)
    else:
        shares = np.tile(pi, (n, 1))
    return np.vstack([rng.multinomial(total, s) for s in shares]), groups


@pytest.mark.parametrize("rho", [0.0, 0.02, 0.08])
def test_overdispersion_estimate_recovers_known_rho(rng, rho):
    # simulation check of the method-of-moments estimator (Dirichlet-multinomial,
    # Mosimann 1962): known rho in, estimate out
    x, g = _dm_counts(rng, rho)
    est = estimate_overdispersion(x, g)
    assert est == pytest.approx(rho, abs=max(0.25 * rho, 0.004))


def test_null_tables_keep_totals_and_share_one_profile(rng):
    tab = tly.demo("mesocosm")
    sims = list(null_shape_tables(tab, 50, model="multinomial", rng=rng))
    for s in sims:
        np.testing.assert_array_equal(s.sum(axis=1), tab.totals.to_numpy())
    pooled = tab.values.sum(axis=0) / tab.values.sum()
    mean_profile = np.mean([s.sum(axis=0) / s.sum() for s in sims], axis=0)
    np.testing.assert_allclose(mean_profile, pooled, atol=0.01)


def test_size_free_reference_keeps_its_level_and_bray_curtis_does_not():
    # size-only simulation: groups differ 4-fold in expected total, same composition
    design = pd.DataFrame({"grp": np.repeat(["low", "high"], 12)},
                          index=[f"s{i:02d}" for i in range(24)])
    tab = tly.simulate_community(design, n_taxa=25, mean_total=300,
                                 size_effects={"grp": {"high": 4.0}}, profile_noise=0.01,
                                 rng=11)
    n_sim = 100
    a = tly.audit(tab, "grp", "bray_curtis", n_sim=n_sim, n_permutations=99, rng=5,
                  spread=False, rarefied=False)
    # binomial band (two-sided 99 %) around the nominal 5 % for 100 simulations
    upper = binom.ppf(0.995, n_sim, 0.05) / n_sim
    assert a.reference_rate <= upper
    assert a.rate > upper                    # Bray-Curtis mistakes size for composition
    assert "size alone" in a.reading
    assert a.ci[0] <= a.rate <= a.ci[1]
    f = a.to_frame()
    assert list(f.columns[:3]) == ["false_alarm_rate", "ci_low", "ci_high"]
    assert len(f) == 2 and a.spread_rate is None and a.rarefied_rates == {}
    # the extra rows draw from their own stream: the PERMANOVA rows do not change with them
    b = tly.audit(tab, "grp", "bray_curtis", n_sim=10, n_permutations=99, rng=5)
    c = tly.audit(tab, "grp", "bray_curtis", n_sim=10, n_permutations=99, rng=5,
                  spread=False, rarefied=False)
    np.testing.assert_array_equal(b.pvalues, c.pvalues)
    np.testing.assert_array_equal(b.reference_pvalues, c.reference_pvalues)


def test_spread_rows_fire_on_size_alone_and_rarefied_rows_do_not():
    # size-only simulation (4-fold totals): the dispersion test reads the extra counting noise
    # of the small samples as spread, even with the size-free chi-square distance; the tests
    # after one rarefaction keep their level (binomial band, two-sided 99 %, around 5 %)
    design = pd.DataFrame({"grp": np.repeat(["low", "high"], 12)},
                          index=[f"s{i:02d}" for i in range(24)])
    tab = tly.simulate_community(design, n_taxa=25, mean_total=300,
                                 size_effects={"grp": {"high": 4.0}}, profile_noise=0.01,
                                 rng=11)
    n_sim = 60
    a = tly.audit(tab, "grp", "bray_curtis", n_sim=n_sim, n_permutations=99, rng=5)
    upper = binom.ppf(0.995, n_sim, 0.05) / n_sim
    f = a.to_frame()
    assert list(f["aspect"]) == ["shape", "shape", "spread", "spread", "shape", "spread"]
    spread_ref = f.loc["chi_square: spread (size-free reference)", "false_alarm_rate"]
    assert spread_ref > upper
    assert a.spread_rate == f.iloc[2]["false_alarm_rate"]
    assert set(a.rarefied_rates) == {"shape", "spread"}
    assert max(a.rarefied_rates.values()) <= upper
    for label, p in a.extra_pvalues.items():
        k = int(np.sum(p <= a.alpha))
        assert f.loc[label, "rejections"] == k and p.size == n_sim
    assert "dispersion test (spread) fired" in a.reading
    assert "After one rarefaction" in a.reading
    assert a.figure() is not None                        # the figure still draws


def test_mesocosm_bray_curtis_is_reported():
    # no tuning of the demo to a number: the audit reports whatever the rate is
    a = tly.audit(tly.demo("mesocosm"), "treatment", "bray_curtis", n_sim=20,
                  n_permutations=49, rng=1)
    assert 0 <= a.rate <= 1 and 0 <= a.reference_rate <= 1
    assert a.n_sim == 20 and a.reading
    assert any("wide" in n for n in a.notes)
    b = tly.audit(tly.demo("mesocosm"), "treatment", "bray_curtis", n_sim=20,
                  n_permutations=49, rng=1)
    np.testing.assert_array_equal(a.pvalues, b.pvalues)          # same seed, same answer


def test_audit_input_errors():
    tab = tly.demo("mesocosm")
    frac = tly.CommunityTable(tab.counts * 0.5, tab.samples)
    with pytest.raises(InputError, match="whole-number counts"):
        tly.audit(frac, "treatment")
    g = tab.samples["treatment"]
    one = tab.subset(list(g.index[g != "nutrient_high"]) + [g.index[g == "nutrient_high"][0]])
    with pytest.raises(DesignError, match="single sample"):
        tly.audit(one, "treatment")
    with pytest.raises(InputError, match="`model` must be one of"):
        tly.audit(tab, "treatment", model="poisson")


def test_audit_relabels_whole_units_when_the_design_has_them():
    # the mesocosm's treatment was applied to tanks: the audited PERMANOVA must be the one a
    # user runs on this design (whole tanks relabelled), as the note says
    import tallyform as tly
    tab = tly.demo("mesocosm")
    a = tly.audit(tab, "treatment", "bray_curtis", n_sim=3, n_permutations=19,
                  spread=False, rarefied=False, rng=2)
    assert a.provenance["units"] == ["tank"]
    assert any("relabel whole units" in n for n in a.notes)
    b = tly.audit(tab, "treatment", "bray_curtis", n_sim=3, n_permutations=19,
                  spread=False, rarefied=False, units=False, rng=2)
    assert b.provenance["units"] is None
    assert any("treated as independent" in n for n in b.notes)
