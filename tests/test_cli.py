"""The command line, run as a user runs it."""
from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def run(*args, cwd=ROOT):
    return subprocess.run([sys.executable, "-m", "tallyform.cli", *args], cwd=cwd,
                          capture_output=True, text=True)


def test_demo_summary_only_prints_totals_by_group():
    out = run("demo", "--summary-only")
    assert out.returncode == 0, out.stderr
    assert "60 samples x 36 taxa" in out.stdout
    assert "60 samples from 15 tanks (4 samples each)" in out.stdout      # units counted
    assert "Sample totals (size: total abundance) by treatment" in out.stdout
    assert "'treatment' between tanks, 'week' within tanks" in out.stdout
    assert "--no-units treats samples as independent" in out.stdout
    assert "units=False" not in out.stdout
    for level in ("control", "nutrient_low", "nutrient_high"):
        assert level in out.stdout
    assert "synthetic" in out.stdout


def test_demo_moths_shows_effort():
    out = run("demo", "moths", "--summary-only")
    assert out.returncode == 0, out.stderr
    assert "per unit of effort (trap_nights)" in out.stdout


def test_error_is_one_readable_line():
    out = run("demo", "mesocosm", "--group", "nope", "--summary-only")
    assert out.returncode == 2
    assert "Traceback" not in out.stderr
    assert "column 'nope' is not in the sample table" in out.stderr


@pytest.mark.slow
def test_demo_writes_report_tables_spec_and_notebook(tmp_path):
    # the README's main-job command, end to end (here into a temporary folder)
    out = run("demo", "--out", str(tmp_path / "demo"))
    assert out.returncode == 0, out.stderr[-3000:]
    d = tmp_path / "demo"
    for name in ("report.html", "spec.json", "methods.txt", "walkthrough.ipynb",
                 "tables/tables.xlsx", "tables/size_shape.csv", "tables/permanova.csv"):
        assert (d / name).is_file(), name
    assert "Size and shape of bray_curtis" in out.stdout
    assert "analysis [" in out.stderr                      # the progress display
    assert json.loads((d / "spec.json").read_text())["group"] == "treatment"
    html = (d / "report.html").read_text()
    # nothing is loaded from anywhere (plotly.js is embedded; its default map address
    # appears in its code but no figure here uses maps)
    assert "<script src" not in html and "src=\"http" not in html and "src='http" not in html
    assert not (d / ".notebook-work").exists()


def test_report_command_on_user_files(tmp_path):
    from tallyform.core.scenarios import demo_dir
    out = run("report", "--counts", str(demo_dir() / "moths_counts.csv"),
              "--samples", str(demo_dir() / "moths_samples.csv"), "--effort", "trap_nights",
              "--group", "habitat", "--spec", '{"n_permutations": 99, "audit_n_sim": 10}',
              "--out", str(tmp_path / "r"))
    assert out.returncode == 0, out.stderr[-3000:]
    assert (tmp_path / "r" / "report.html").is_file()
    bad = tmp_path / "bad.csv"
    bad.write_text("sample,a,b\ns1,1,-2\ns2,3,4\n")
    out = run("report", "--counts", str(bad), "--rows", "samples", "--out", str(tmp_path / "x"))
    assert out.returncode == 2 and "Traceback" not in out.stderr
    assert "line 2" in out.stderr and "negative" in out.stderr
    assert not (tmp_path / "x").exists()
