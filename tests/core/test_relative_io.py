"""Relative data through the readers, the spec and the command line (synthetic files)."""
from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
from tallyform.errors import DesignError, InputError

ROOT = Path(__file__).resolve().parents[2]
COUNTS = ("sample,Ta,Tb,Tc,spike\ns1,30,50,0,20\ns2,10,70,20,100\ns3,60,20,20,40\n"
          "s4,5,45,50,10\ns5,40,10,50,25\ns6,22,30,8,40\n")
SAMPLES = ("sample,g,copies,added\ns1,a,1000000,1000\ns2,a,2000000,1000\ns3,a,4000000,2000\n"
           "s4,b,1000000,1000\ns5,b,3000000,500\ns6,b,500000,1000\n")
SPIKE = {"taxon": "spike", "added": "added"}


def write(tmp_path, name, text):
    p = tmp_path / name
    p.write_text(text)
    return p


def in_memory(**kw):
    counts = pd.read_csv(pd.io.common.StringIO(COUNTS), index_col=0).astype(float)
    info = pd.read_csv(pd.io.common.StringIO(SAMPLES), index_col=0)
    return tly.CommunityTable(counts, info, abundance="relative", **kw)


def same(a, b):
    """Equal tables (taxa matched by label: long files list them in order of appearance)."""
    order = list(b.taxon_labels)
    assert sorted(a.taxon_labels) == sorted(order)
    np.testing.assert_allclose(a.counts[order], b.values, rtol=1e-14)
    np.testing.assert_allclose(a.totals, b.totals, rtol=1e-14)
    np.testing.assert_array_equal(a.reads[order], b.reads)
    assert (a.abundance, a.load_name, a.spike_in) == (b.abundance, b.load_name, b.spike_in)


@pytest.mark.parametrize("kw", [{"load": "copies"}, {"spike_in": SPIKE}, {}])
def test_wide_reader_round_trip(tmp_path, unchanged, kw):
    c, s = write(tmp_path, "c.csv", COUNTS), write(tmp_path, "s.csv", SAMPLES)
    unchanged.watch(c, s)
    same(tly.read_counts(c, s, abundance="relative", **kw), in_memory(**kw))
    # taxa as rows, the reader detects it from the sample table
    t = pd.read_csv(c, index_col=0).T
    t.index.name = "taxon"
    t.to_csv(tmp_path / "t.csv")
    same(tly.read_counts(tmp_path / "t.csv", s, abundance="relative", **kw), in_memory(**kw))


def test_long_reader_round_trip(tmp_path):
    wide = pd.read_csv(pd.io.common.StringIO(COUNTS), index_col=0)
    rows = [f"{s},{t},{v}" for s in wide.index for t in wide.columns
            if (v := wide.loc[s, t]) > 0]
    p = write(tmp_path, "l.csv", "sample,taxon,count\n" + "\n".join(rows) + "\n")
    s = write(tmp_path, "s.csv", SAMPLES)
    for kw in ({"load": "copies"}, {"spike_in": SPIKE}):
        same(tly.read_long(p, s, abundance="relative", **kw), in_memory(**kw))


def test_darwin_core_round_trip_and_reads_note(tmp_path):
    wide = pd.read_csv(pd.io.common.StringIO(COUNTS), index_col=0)
    info = pd.read_csv(pd.io.common.StringIO(SAMPLES), index_col=0)
    ev = write(tmp_path, "event.csv", "eventID,g,copies,added\n" + "\n".join(
        f"{s},{r.g},{r.copies},{r.added}" for s, r in info.iterrows()) + "\n")
    occ = ["occurrenceID,eventID,scientificName,organismQuantity,organismQuantityType"]
    k = 0
    for s in wide.index:
        for t in wide.columns:
            if wide.loc[s, t] > 0:
                k += 1
                occ.append(f"o{k},{s},{t},{wide.loc[s, t]},DNA sequence reads")
    oc = write(tmp_path, "occurrence.csv", "\n".join(occ) + "\n")
    plain = tly.read_darwin_core(ev, oc)
    assert any("sequencing reads are relative" in n for n in plain.notes)
    for kw in ({"load": "copies"}, {"spike_in": SPIKE}):
        tab = tly.read_darwin_core(ev, oc, abundance="relative", **kw)
        same(tab, in_memory(**kw))
        assert not any("sequencing reads are relative" in n for n in tab.notes)
    bad = write(tmp_path, "event2.csv", ev.read_text().replace("s3,a,4000000", "s3,a,0"))
    with pytest.raises(InputError, match="sample 's3' has 0") as exc:
        tly.read_darwin_core(bad, oc, abundance="relative", load="copies")
    assert "event2.csv" in str(exc.value) and "line 4" in str(exc.value)


def test_bad_load_in_file_names_file_line_and_column(tmp_path, unchanged):
    c = write(tmp_path, "c.csv", COUNTS)
    s = write(tmp_path, "s.csv", SAMPLES.replace("s2,a,2000000", "s2,a,-3"))
    unchanged.watch(c, s)
    with pytest.raises(InputError, match="absolute load must be a positive number; sample "
                                         "'s2' has -3") as exc:
        tly.read_counts(c, s, abundance="relative", load="copies")
    msg = str(exc.value)
    assert "s.csv" in msg and "line 3" in msg and "column 3 ('copies')" in msg
    blank = write(tmp_path, "s2.csv", SAMPLES.replace("s5,b,3000000", "s5,b,"))
    with pytest.raises(InputError, match="sample 's5' has"):
        tly.read_counts(c, blank, abundance="relative", load="copies")
    with pytest.raises(DesignError, match="load column 'qpcr' is not in the sample table"):
        tly.read_counts(c, s, abundance="relative", load="qpcr")


def test_spike_in_absent_in_file_names_the_cell(tmp_path, unchanged):
    c = write(tmp_path, "c.csv", COUNTS.replace("s4,5,45,50,10", "s4,5,45,50,0"))
    s = write(tmp_path, "s.csv", SAMPLES)
    unchanged.watch(c, s)
    with pytest.raises(InputError, match="spike-in 'spike' has no reads in sample 's4'") as exc:
        tly.read_counts(c, s, abundance="relative", spike_in=SPIKE)
    msg = str(exc.value)
    assert "c.csv" in msg and "line 5" in msg and "column 5 ('spike')" in msg


def test_load_with_absolute_is_refused_by_the_reader(tmp_path):
    c, s = write(tmp_path, "c.csv", COUNTS), write(tmp_path, "s.csv", SAMPLES)
    with pytest.raises(InputError, match="abundance='absolute'"):
        tly.read_counts(c, s, load="copies")


# ---------------------------------------------------------------------------- spec
def test_spec_json_round_trip_and_checks():
    spec = tly.AnalysisSpec(group="g", abundance="relative", spike_in=dict(SPIKE))
    back = tly.AnalysisSpec.from_json(spec.to_json())
    assert back == spec and back.spike_in == SPIKE
    assert json.loads(spec.to_json())["spike_in"] == SPIKE
    assert spec.table_options() == {"abundance": "relative", "spike_in": SPIKE}
    assert "is read with abundance='relative', spike_in=" in spec.code()
    spec.validate(in_memory(spike_in=SPIKE))
    with pytest.raises(InputError, match="the spec says the table was read with"):
        spec.validate(in_memory(load="copies"))
    with pytest.raises(InputError, match="go with abundance 'relative'"):
        tly.AnalysisSpec(load="copies")
    with pytest.raises(InputError, match="both 'load' and 'spike_in'"):
        tly.AnalysisSpec(abundance="relative", load="copies", spike_in=dict(SPIKE))
    with pytest.raises(InputError, match="'abundance' must be"):
        tly.AnalysisSpec.from_dict({"abundance": "reads"})
    with pytest.raises(InputError, match="'spike_in' must be"):
        tly.AnalysisSpec(abundance="relative", spike_in={"taxon": "spike"})
    # a spec that does not record abundance fits any table
    tly.AnalysisSpec(group="g").validate(in_memory())
    assert tly.AnalysisSpec.options_of(in_memory(load="copies")) == {
        "abundance": "relative", "load": "copies", "spike_in": None}


# ---------------------------------------------------------------------------- command line
def cli(*args):
    return subprocess.run([sys.executable, "-m", "tallyform.cli", *args], cwd=ROOT,
                          capture_output=True, text=True)


def test_cli_report_with_abundance_and_load(tmp_path):
    c, s = write(tmp_path, "c.csv", COUNTS), write(tmp_path, "s.csv", SAMPLES)
    light = '{"n_permutations": 19, "audit_n_sim": 2, "scan_measures": ["bray_curtis"]}'
    out = cli("report", "--counts", str(c), "--samples", str(s), "--group", "g",
              "--abundance", "relative", "--load", "copies", "--spec", light,
              "--out", str(tmp_path / "r"))
    assert out.returncode == 0, out.stderr[-3000:]
    assert "Sample sizes by g: absolute loads (copies)" in out.stdout
    spec = json.loads((tmp_path / "r" / "spec.json").read_text())
    assert (spec["abundance"], spec["load"]) == ("relative", "copies")
    out = cli("report", "--counts", str(c), "--samples", str(s), "--group", "g",
              "--abundance", "relative", "--spec", light, "--out", str(tmp_path / "q"))
    assert out.returncode == 0, out.stderr[-3000:]
    assert "Sequencing depths by g (reads per sample: technical" in out.stdout
    assert "Sample totals" not in out.stdout and "(size" not in out.stdout
    assert "Size was not tested: the totals are sequencing depths" in out.stdout
    out = cli("report", "--counts", str(c), "--samples", str(s), "--spike-in", "spike",
              "--out", str(tmp_path / "x"))
    assert out.returncode == 2 and "--spike-added" in out.stderr
    assert "Traceback" not in out.stderr


def test_cli_soil_demo_summary():
    out = cli("demo", "soil", "--summary-only")
    assert out.returncode == 0, out.stderr
    assert "abundance='relative', load='qpcr_copies_per_g'" in out.stdout
    assert "by land_use" in out.stdout
