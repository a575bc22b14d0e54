"""Methods paragraph (every choice named) and table exports (safe, atomic)."""
from __future__ import annotations

import dataclasses

import openpyxl
import pandas as pd
import pytest

from tallyform.core.spec import AnalysisSpec
from tallyform.render.methods import methods_references, methods_text
from tallyform.render.tables import neutralise, write_csv, write_tables, write_xlsx

BASE = AnalysisSpec(group="treatment", terms=("treatment", "week"), blocks="tank_block")
OTHER = {  # a different valid value for every choice of the spec
    "group": "habitat", "terms": ("treatment",), "blocks": None, "transform": "sqrt",
    "measure": "hellinger", "size": "total", "shape": "hellinger", "shape_dims": 4,
    "shape_measure": "aitchison", "size_method": "kruskal", "n_permutations": 4999,
    "seed": 42, "ss": "marginal", "pairwise_adjust": "bh", "dispersion_centre": "median",
    "ordination": "nmds", "correction": "lingoes", "ellipse": "data", "ellipse_level": 0.9,
    "scan_measures": ("bray_curtis", "hellinger"), "scan_transforms": ("none", "log1p"),
    "contrast": ("control", "nutrient_low"), "contribution_measure": "chi_square",
    "audit_n_sim": 500, "audit_n_permutations": 99, "audit_model": "multinomial",
    "audit_reference": "hellinger", "alpha": 0.01, "abundance": "relative",
    "load": "qpcr_copies", "spike_in": {"taxon": "spike", "added": "spike_copies"},
    "units": "tank", "n_boot": 0, "scan_n_boot": 199, "pairwise_statistic": "welch",
    "compare_with": {"transform": "fourth_root"},
    "choices_tried": ({"measure": "hellinger"}, {"measure": "chord", "origin": "scan"}),
}
# where the data are read from is not a method: the paragraph never names files
NOT_METHODS = {"source", "version"}


def test_every_choice_changes_the_text():
    names = {f.name for f in dataclasses.fields(AnalysisSpec)} - NOT_METHODS
    assert names == set(OTHER), names ^ set(OTHER)
    base = methods_text(BASE)
    for key, value in OTHER.items():
        if key in ("load", "spike_in"):         # loads go with relative data
            changed = BASE.replace(abundance="relative", **{key: value})
            assert methods_text(changed) != methods_text(BASE.replace(abundance="relative"))
        else:
            changed = BASE.replace(**{key: value})
        if key == "correction":                 # the correction only shows with PCoA
            changed = changed.replace(ordination="pcoa")
        assert methods_text(changed) != base, key
    with_source = BASE.replace(source={"counts": "/home/me/secret/counts.csv"})
    assert "secret" not in methods_text(with_source)


def test_references_are_listed_for_what_is_cited():
    text = methods_text(BASE)
    refs = methods_references(text)
    assert any(r.startswith("Anderson MJ (2001)") for r in refs)
    assert any(r.startswith("Peres-Neto") for r in refs)
    assert not any(r.startswith("Kruskal JB") for r in refs)      # NMDS not used


def test_neutralise_formulas_keep_numbers():
    assert neutralise("=HYPERLINK(\"x\")") == "'=HYPERLINK(\"x\")"
    assert neutralise("+1") == "'+1" and neutralise("@SUM(A1)") == "'@SUM(A1)"
    assert neutralise("-2") == "'-2" and neutralise("ok") == "ok"
    assert neutralise(-2.5) == -2.5


def test_csv_and_xlsx_are_inert(tmp_path):
    frame = pd.DataFrame({"taxon": ["=1+1", "plain"], "share": [0.5, -0.25]},
                         index=pd.Index(["@SUM(A1)", "s2"], name="sample"))
    write_csv(frame, tmp_path / "t.csv")
    text = (tmp_path / "t.csv").read_text()
    assert "'=1+1" in text and "'@SUM(A1)" in text and "-0.25" in text
    write_xlsx({"t": frame}, tmp_path / "t.xlsx")
    ws = openpyxl.load_workbook(tmp_path / "t.xlsx").active
    values = [c.value for row in ws.iter_rows() for c in row]
    assert "'=1+1" in values and -0.25 in values
    assert not any(isinstance(v, str) and v.startswith("=") for v in values)


def test_failed_export_leaves_old_file_and_no_partial(tmp_path, monkeypatch):
    target = tmp_path / "tables.xlsx"
    target.write_bytes(b"old")

    def boom(*a, **k):
        raise RuntimeError("disk full (simulated)")
    monkeypatch.setattr(pd.DataFrame, "to_excel", boom)
    with pytest.raises(RuntimeError):
        write_tables({"t": pd.DataFrame({"a": [1]})}, tmp_path)
    assert target.read_bytes() == b"old"
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []


@pytest.mark.parametrize("measure", ["chi_square", "hellinger", "bray_curtis", "jaccard",
                                     "quantitative_jaccard", "aitchison"])
def test_no_doubled_nouns(measure):
    # "Chi-square distance distances" and the like (a label that ends in a noun)
    text = methods_text(BASE.replace(measure=measure, shape_measure="chi_square",
                                     contribution_measure="hellinger",
                                     audit_reference="chi_square"))
    for doubled in ("distance distance", "distances distances", "distance dissimilarit",
                    "dissimilarity dissimilarit"):
        assert doubled not in text


def test_every_cited_work_is_listed_and_nothing_else():
    from tallyform.render.methods import _CITED_AS, REFERENCES
    text = methods_text(BASE.replace(size_method="negbin", ellipse="bootstrap"))
    refs = methods_references(text)
    for key, (authors, year) in _CITED_AS.items():
        cited = REFERENCES[key] in refs
        assert cited == (f"{authors} {year}" in text or f"{authors} ({year}" in text
                         or f"{authors}'s ({year}" in text), key
    assert any(r.startswith("Dunn PK, Smyth GK (1996)") for r in refs)
    assert any(r.startswith("Efron B, Tibshirani RJ (1993)") for r in refs)
    assert CALIBRATION in text


CALIBRATION = ("Every test used here was checked by simulation; see the calibration table "
               "(docs/calibration.md in the tallyform repository).")
