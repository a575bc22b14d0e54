"""Tables as read: columns in words, p-values as journals print them, yes/no."""
import numpy as np
import pandas as pd

import tallyform as tly
from tallyform.core.display import column_label, display_frame, format_p, p_words


def test_p_values_and_booleans_are_written_for_reading():
    frame = pd.DataFrame({"pvalue": [9.859e-14, 0.01234, 0.5], "detected": [True, False, True],
                          "departure_ci_low": [0.1, 0.2, 0.3], "mean_a": [1.0, 2.0, 3.0]})
    shown = display_frame(frame)
    assert list(shown["p"]) == ["< 0.001", "0.0123", "0.5"]
    assert list(shown["detected"]) == ["yes", "no", "yes"]
    assert "departure, 95 % low" in shown.columns and "mean in A" in shown.columns
    assert list(shown.index) == [1, 2, 3]                # a bare 0..n-1 index counts from 1
    assert list(frame.columns) == ["pvalue", "detected", "departure_ci_low", "mean_a"]
    assert p_words(9.859e-14) == "p < 0.001" and p_words(0.0456) == "p = 0.0456"
    assert format_p(float("nan")) == "" and column_label("share_unadjusted").startswith("share")


def test_result_display_keeps_programmatic_names_in_to_frame():
    tab = tly.demo("mesocosm")
    k = tly.taxon_contributions(tab, "treatment", "control", "nutrient_high", units="tank",
                                rng=1)
    assert "term" in k.to_frame().columns and "mean_a" in k.size_frame().columns
    html = k._repr_html_()
    assert "part of D\u00b2" in html and "mean in control" in html and ">term<" not in html


def test_scan_csv_has_no_unnamed_column(tmp_path):
    from tallyform.render.tables import write_csv
    frame = pd.DataFrame({"measure": ["a", "b"], "size_only": [0.1, 0.2]})
    text = write_csv(frame, tmp_path / "scan.csv").read_text()
    assert text.splitlines()[0] == "measure,size_only"
    assert np.isclose(pd.read_csv(tmp_path / "scan.csv")["size_only"].sum(), 0.3)
