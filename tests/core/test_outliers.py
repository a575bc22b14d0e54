"""Samples that stand out: modified z-scores (Iglewicz & Hoaglin 1993)."""
import numpy as np
import pytest
from scipy import stats

import tallyform as tly
from tallyform.core.errors import InputError
from tallyform.core.outliers import robust_scores


def test_robust_scores_match_scipy_mad():
    x = np.array([1.0, 2.0, 2.5, 3.0, 40.0])
    # scipy: median_abs_deviation(scale="normal") = 1.4826 MAD (consistent for a normal sd)
    mad = stats.median_abs_deviation(x, scale="normal")
    np.testing.assert_allclose(robust_scores(x), (x - np.median(x)) / mad, rtol=1e-4)


def test_a_sample_with_eight_times_the_total_is_flagged():
    tab = tly.demo("mesocosm")                 # synthetic
    assert tly.outlier_samples(tab, "treatment").flagged == []
    counts = tab.counts.copy()
    counts.iloc[3] *= 8
    big = tly.CommunityTable(counts, tab.samples)
    r = tly.outlier_samples(big, "treatment")
    label = str(counts.index[3])
    assert r.flagged == [label]
    assert "times the median" in r.table.loc[label, "why"]
    assert label in r.summary
    # the same composition: only the total stands out
    assert r.table.loc[label, "profile_score"] < 3.5


def test_a_sample_of_another_composition_is_flagged():
    tab = tly.demo("mesocosm")
    counts = tab.counts.copy()
    row = counts.iloc[5].to_numpy()
    counts.iloc[5] = row[::-1]                 # the same total, taxa reversed
    r = tly.outlier_samples(tly.CommunityTable(counts, tab.samples), "treatment")
    label = str(counts.index[5])
    assert label in r.flagged and "composition" in r.table.loc[label, "why"]


def test_outliers_in_run_tables_and_report(tmp_path):
    tab = tly.demo("mesocosm")
    counts = tab.counts.copy()
    counts.iloc[3] *= 8
    big = tly.CommunityTable(counts, tab.samples)
    spec = tly.AnalysisSpec(group="treatment", units="tank", n_permutations=99, n_boot=0,
                            scan_measures=("bray_curtis",), scan_transforms=("none",))
    res = tly.run(spec, big)
    assert "outlier_samples" in res.tables()
    from tallyform.render.report import report_html
    html = report_html(res)
    assert "Samples that stand out" in html and str(counts.index[3]) in html


def test_bad_threshold_is_an_input_error():
    with pytest.raises(InputError, match="threshold"):
        tly.outlier_samples(tly.demo("mesocosm"), threshold=0)
