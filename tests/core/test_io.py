"""Readers: every format, both orientations, and every bad input of the foundation issue.

Each bad input must give InputError/DesignError naming file, line/cell and column, and the
file's bytes must be unchanged afterwards (the ``unchanged`` fixture checks the hash).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
from tallyform.errors import DesignError, InputError

WIDE = "sample,Ta,Tb,Tc\ns1,3,0,1\ns2,1,1,0\ns3,0,4,2\n"
SAMPLES = "sample,treatment,nights\ns1,a,1\ns2,a,2\ns3,b,1\n"


def write(tmp_path, name, text, encoding="utf-8"):
    p = tmp_path / name
    p.write_bytes(text.encode(encoding))
    return p


def read_bad(unchanged, path, *args, match, error=InputError, **kw):
    """Read a bad file: the error must match and name the file; the file is untouched."""
    unchanged.watch(path)
    reader = kw.pop("reader", tly.read_counts)
    with pytest.raises(error, match=match) as exc:
        reader(path, *args, **kw)
    assert str(path) in str(exc.value) or path.name in str(exc.value)
    return str(exc.value)


# ---------------------------------------------------------------------------- good inputs
def test_csv_samples_as_rows(tmp_path, unchanged):
    p, s = write(tmp_path, "c.csv", WIDE), write(tmp_path, "s.csv", SAMPLES)
    unchanged.watch(p, s)
    tab = tly.read_counts(p, s, effort="nights")
    assert tab.shape == (3, 3)
    assert tab.values[2].tolist() == [0, 4, 2]
    assert tab.samples["treatment"].tolist() == ["a", "a", "b"]
    assert tab.effort.tolist() == [1, 2, 1]
    assert "row labels match the sample table" in tab.notes[0]


def test_csv_taxa_as_rows_detected_from_sample_table(tmp_path):
    t = "taxon,s1,s2,s3\nTa,3,1,0\nTb,0,1,4\nTc,1,0,2\n"
    p, s = write(tmp_path, "c.csv", t), write(tmp_path, "s.csv", SAMPLES)
    tab = tly.read_counts(p, s)
    assert list(tab.sample_labels) == ["s1", "s2", "s3"]
    assert tab.values[2].tolist() == [0, 4, 2]


def test_orientation_from_header_and_explicit(tmp_path):
    p = write(tmp_path, "c.csv", "species,s1,s2\nTa,3,1\nTb,0,1\n")
    assert list(tly.read_counts(p).sample_labels) == ["s1", "s2"]
    q = write(tmp_path, "d.csv", ",A,B\nx,3,1\ny,0,1\n")
    msg = read_bad_any(q)
    assert "rows='samples'" in msg
    assert tly.read_counts(q, rows="taxa").shape == (2, 2)
    assert tly.read_counts(q, rows="samples").shape == (2, 2)


def read_bad_any(p):
    with pytest.raises(InputError) as exc:
        tly.read_counts(p)
    return str(exc.value)


def test_tsv_and_semicolon(tmp_path):
    p = write(tmp_path, "c.tsv", WIDE.replace(",", "\t"))
    assert tly.read_counts(p, rows="samples").shape == (3, 3)
    q = write(tmp_path, "c2.csv", WIDE.replace(",", ";"))
    assert tly.read_counts(q, rows="samples").values.sum() == 12


def test_decimal_comma_and_thousands(tmp_path):
    p = write(tmp_path, "c.csv", "sample;Ta;Tb\ns1;1.200,5;0\ns2;3,25;1\n")
    tab = tly.read_counts(p, decimal=",", thousands=".")
    assert tab.values[:, 0].tolist() == [1200.5, 3.25]


def test_named_id_column(tmp_path):
    p = write(tmp_path, "c.csv", "Ta,code,Tb\n1,s1,2\n3,s2,0\n")
    tab = tly.read_counts(p, id_column="code", rows="samples")
    assert list(tab.sample_labels) == ["s1", "s2"] and list(tab.taxon_labels) == ["Ta", "Tb"]


def test_xlsx_second_sheet(tmp_path, unchanged):
    p = tmp_path / "book.xlsx"
    with pd.ExcelWriter(p) as xw:
        pd.DataFrame().to_excel(xw, sheet_name="notes", index=False)
        pd.read_csv(pd.io.common.StringIO(WIDE)).to_excel(xw, sheet_name="counts", index=False)
    msg = read_bad(unchanged, p, match="sheet 'notes' is empty", rows="samples")
    assert "sheet='counts'" in msg
    tab = tly.read_counts(p, sheet="counts", rows="samples")
    assert tab.values.sum() == 12
    assert tly.read_counts(p, sheet=1, rows="samples").shape == (3, 3)


def test_xlsx_bad_cell_named_by_reference(tmp_path, unchanged):
    p = tmp_path / "book.xlsx"
    df = pd.read_csv(pd.io.common.StringIO(WIDE))
    df.loc[1, "Tc"] = -4
    df.to_excel(p, index=False)
    msg = read_bad(unchanged, p, match="negative", rows="samples")
    assert "cell D3" in msg


def test_latin1_with_encoding_argument(tmp_path, unchanged):
    text = "sample,Aëshna_x,Çarabus_y\ns1,1,2\ns2,0,5\n"
    p = write(tmp_path, "c.csv", text, encoding="latin-1")
    msg = read_bad(unchanged, p, match="not valid utf-8", rows="samples")
    assert "encoding='latin-1'" in msg and "line 1" in msg
    tab = tly.read_counts(p, rows="samples", encoding="latin-1")
    assert list(tab.taxon_labels) == ["Aëshna_x", "Çarabus_y"]


def test_bom_and_crlf(tmp_path):
    p = tmp_path / "c.csv"
    p.write_bytes(b"\xef\xbb\xbf" + WIDE.replace("\n", "\r\n").encode())
    tab = tly.read_counts(p, rows="samples")
    assert list(tab.taxon_labels) == ["Ta", "Tb", "Tc"] and tab.sample_labels[0] == "s1"


def test_trailing_empty_columns_and_blank_lines(tmp_path):
    p = write(tmp_path, "c.csv", "sample,Ta,Tb,,\ns1,3,0,,\n\ns2,1,1,,\n")
    tab = tly.read_counts(p, rows="samples")
    assert tab.shape == (2, 2)


def test_long_table(tmp_path, unchanged):
    p = write(tmp_path, "l.csv", "sample,taxon,count\ns1,Ta,3\ns1,Tc,1\ns2,Ta,1\ns2,Tb,1\n")
    unchanged.watch(p)
    tab = tly.read_long(p)
    assert tab.counts.loc["s1"].tolist() == [3, 1, 0]
    q = write(tmp_path, "l2.csv", "site,sp,n\ns1,Ta,3\ns1,Ta,2\ns2,Tb,1\n")
    msg = read_bad(unchanged, q, match="appear more than once", reader=tly.read_long,
                   sample="site", taxon="sp", count="n")
    assert "('s1', 'Ta') on lines [2, 3]" in msg
    summed = tly.read_long(q, sample="site", taxon="sp", count="n", sum_duplicates=True)
    assert summed.counts.loc["s1", "Ta"] == 5
    assert "summed" in summed.notes[0]


def test_long_table_bad_count_and_missing_column(tmp_path, unchanged):
    p = write(tmp_path, "l.csv", "sample,taxon,count\ns1,Ta,3\ns2,Tb,-1\n")
    msg = read_bad(unchanged, p, match="not a finite number >= 0", reader=tly.read_long)
    assert "line 3" in msg and "column 3 ('count')" in msg
    read_bad(unchanged, p, match="count column 'n' is not in the header",
             reader=tly.read_long, count="n")


EVENTS = ("eventID,eventDate,habitat,sampleSizeValue,sampleSizeUnit\n"
          "e1,2026-05-01,wood,2,trap nights\ne2,2026-05-02,field,4,trap nights\n"
          "e3,2026-05-03,field,1,trap nights\n")
OCC = ("occurrenceID,eventID,scientificName,organismQuantity,organismQuantityType,"
       "occurrenceStatus\n"
       "o1,e1,Alpha,3,individuals,present\no2,e1,Beta,1,individuals,present\n"
       "o3,e2,Alpha,5,individuals,present\no4,e2,Alpha,2,individuals,present\n"
       "o5,e3,Beta,4,individuals,present\no6,e3,Alpha,,individuals,absent\n")


def test_darwin_core(tmp_path, unchanged):
    ev, oc = write(tmp_path, "event.txt", EVENTS.replace(",", "\t")), \
        write(tmp_path, "occurrence.txt", OCC.replace(",", "\t"))
    unchanged.watch(ev, oc)
    tab = tly.read_darwin_core(ev, oc)
    assert tab.counts.loc["e2", "Alpha"] == 7          # two records summed
    assert tab.counts.loc["e3", "Alpha"] == 0          # absent
    assert tab.effort.tolist() == [2, 4, 1]
    assert tab.samples["habitat"].tolist() == ["wood", "field", "field"]
    assert any("summed" in n for n in tab.notes)
    # the same from a folder and from a zip archive
    assert tly.read_darwin_core(tmp_path).counts.equals(tab.counts)
    import zipfile
    z = tmp_path / "dwca.zip"
    with zipfile.ZipFile(z, "w") as zf:
        zf.write(ev, "event.txt")
        zf.write(oc, "occurrence.txt")
    assert tly.read_darwin_core(z).counts.equals(tab.counts)


def test_darwin_core_individual_count_and_errors(tmp_path, unchanged):
    ev = write(tmp_path, "ev.csv", EVENTS)
    oc = write(tmp_path, "oc.csv", "eventID,scientificName,individualCount\ne1,Alpha,2\n"
                                    "e2,Beta,3\ne3,Alpha,1\n")
    tab = tly.read_darwin_core(ev, oc, effort=None)
    assert tab.effort is None and tab.values.sum() == 6
    orphan = write(tmp_path, "oc2.csv", "eventID,scientificName,individualCount\ne1,Alpha,2\n"
                                        "e9,Beta,3\n")
    unchanged.watch(orphan)
    with pytest.raises(InputError, match="not in the event table: 'e9'") as exc:
        tly.read_darwin_core(ev, orphan)
    assert "line 3" in str(exc.value)
    mixed = write(tmp_path, "oc3.csv", "eventID,scientificName,organismQuantity,"
                                       "organismQuantityType\ne1,Alpha,2,individuals\n"
                                       "e2,Beta,30,percentage\ne3,Beta,3,individuals\n")
    with pytest.raises(InputError, match="mix quantity types"):
        tly.read_darwin_core(ev, mixed)


def test_demo_scenarios_load():
    tab = tly.demo("mesocosm")
    assert tab.shape == (60, 36)
    assert set(tab.samples["treatment"]) == {"control", "nutrient_low", "nutrient_high"}
    moths = tly.demo("moths")
    assert moths.effort_name == "trap_nights" and moths.n_samples == 48
    soil = tly.demo("soil")
    assert soil.shape == (24, 200) and soil.abundance == "relative"
    assert soil.load_name == "qpcr_copies_per_g" and "spike_in" not in soil.taxon_labels
    with pytest.raises(InputError, match="unknown demo"):
        tly.demo("coral")


def test_demo_files_match_their_generator(tmp_path):
    from tallyform.core.scenarios import demo_dir, write_demo_data
    for p in write_demo_data(tmp_path):
        assert p.read_bytes() == (demo_dir() / p.name).read_bytes(), p.name


def test_demo_effects_are_as_designed():
    # the mesocosm's nutrient_low lowers totals; nutrient_high keeps them (synthetic truth)
    tab = tly.demo("mesocosm")
    gm = tab.totals_by("treatment")["geometric_mean"]
    assert gm["nutrient_low"] < 0.6 * gm["control"]
    assert 0.7 * gm["control"] < gm["nutrient_high"] < 1.3 * gm["control"]
    # soil: pasture holds fewer bacteria (loads) but was sequenced deeper (reads)
    soil = tly.demo("soil")
    loads = soil.totals_by("land_use")["geometric_mean"]
    assert loads["pasture"] < 0.6 * loads["forest"]
    depth = soil.depth.groupby(soil.samples["land_use"]).median()
    assert depth["pasture"] > 1.8 * depth["forest"]


# ---------------------------------------------------------------------------- bad inputs
@pytest.mark.parametrize("body, match, where", [
    ("sample,Ta,Tb\ns1,3,-1\ns2,1,1\n", "negative", "line 2"),
    ("sample,Ta,Tb\ns1,3,\ns2,1,1\n", "blank or missing", "line 2"),
    ("sample,Ta,Tb\ns1,3,NA\ns2,1,1\n", "text 'NA'", "line 2"),
    ("sample,Ta,Tb\ns1,3,1\ns2,lots,1\n", "text 'lots'", "line 3"),
    ("sample,Ta,Tb\ns1,3,inf\ns2,1,1\n", "infinite", "line 2"),
    ("sample,Ta,Tb\ns1,3,1\ns1,1,1\n", "appears twice", "line 3"),
    ("sample,Ta,Ta\ns1,3,1\ns2,1,1\n", "appears twice in the header", "column 3"),
    ("sample,Ta,Tb\ns1,0,0\ns2,1,1\n", "total of 0: 's1'", "line 2"),
    ("sample,Ta,Tb\ns1,3,0\ns2,1,0\n", "never observed.*'Tb'", "column 3"),
    ("sample,Ta,Tb\ns1,3,1\n", "1 sample", ""),
    ("sample,Ta,Tb\n", "header line but no data rows", "line 1"),
    ("", "the file is empty", ""),
    ("sample,Ta,,Tb\ns1,3,7,1\ns2,1,1,1\n", "values but has no header", "column 3"),
])
def test_bad_wide_csv(tmp_path, unchanged, body, match, where):
    p = write(tmp_path, "bad.csv", body)
    msg = read_bad(unchanged, p, match=match, rows="samples")
    assert where in msg
    if match in ("negative", "blank or missing", "text 'NA'", "infinite"):
        assert "column 3 ('Tb')" in msg       # a cell error names the column too


def test_bad_cell_position_in_taxa_rows_file(tmp_path, unchanged):
    p = write(tmp_path, "bad.csv", "taxon,s1,s2\nTa,3,1\nTb,2,-5\n")
    msg = read_bad(unchanged, p, match="negative", rows="taxa")
    assert "line 3" in msg and "column 3 ('s2')" in msg and "sample 's2', taxon 'Tb'" in msg


def test_sample_ids_in_one_table_only(tmp_path, unchanged):
    p = write(tmp_path, "c.csv", WIDE)
    s = write(tmp_path, "s.csv", "sample,treatment\ns1,a\ns2,a\ns4,b\n")
    unchanged.watch(s)
    msg = read_bad(unchanged, p, s, match="missing from `samples`: 's3'", rows="samples")
    assert "not in the counts: 's4'" in msg


def test_neither_axis_matches_sample_table(tmp_path, unchanged):
    p = write(tmp_path, "c.csv", WIDE)
    s = write(tmp_path, "s.csv", "sample,treatment\nS1,a\nS2,a\nS3,b\n")
    read_bad(unchanged, p, s, match="neither the row labels nor the column labels")


def test_unknown_effort_column(tmp_path):
    p, s = write(tmp_path, "c.csv", WIDE), write(tmp_path, "s.csv", SAMPLES)
    with pytest.raises(DesignError, match="effort column 'hours'"):
        tly.read_counts(p, s, effort="hours")


def test_truncated_xlsx(tmp_path, unchanged):
    good = tmp_path / "g.xlsx"
    pd.read_csv(pd.io.common.StringIO(WIDE)).to_excel(good, index=False)
    bad = tmp_path / "t.xlsx"
    bad.write_bytes(good.read_bytes()[:300])
    read_bad(unchanged, bad, match="cannot be read as an XLSX workbook", rows="samples")


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match="file not found"):
        tly.read_counts(tmp_path / "nope.csv")


def test_sample_table_duplicate_ids(tmp_path, unchanged):
    s = write(tmp_path, "s.csv", "sample,treatment\ns1,a\ns1,b\n")
    read_bad(unchanged, s, match="sample label 's1' appears twice", reader=tly.read_samples)


def test_read_samples_types(tmp_path):
    s = write(tmp_path, "s.csv", "id,week,depth,site\nx1,w1,1.5,A\nx2,w2,,B\n")
    info = tly.read_samples(s)
    assert info.index.tolist() == ["x1", "x2"]
    assert info["week"].tolist() == ["w1", "w2"]
    assert info["depth"].iloc[0] == 1.5 and np.isnan(info["depth"].iloc[1])
