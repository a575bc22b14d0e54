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


def test_units_options():
    out = run("demo", "--summary-only", "--no-units")
    assert out.returncode == 0, out.stderr
    assert "60 samples from" not in out.stdout
    assert "treated as independent replicates (--no-units)" in out.stdout
    out = run("demo", "moths", "--summary-only", "--units", "site")
    assert out.returncode == 0, out.stderr
    assert "48 samples from 12 sites (4 samples each)" in out.stdout
    assert "found from the design" not in out.stdout           # given, not detected
    out = run("demo", "--summary-only", "--units", "tank", "--no-units")
    assert out.returncode == 2 and "contradict" in out.stderr


def test_units_parsing_and_cli_words():
    from tallyform.cli import _units_option, build_parser, cli_words
    parse = build_parser().parse_args
    assert _units_option(parse(["demo", "--units", "site,plot"])) == ("site", "plot")
    assert _units_option(parse(["demo", "--units", "site", "--units", "plot"])) == \
        ("site", "plot")
    assert _units_option(parse(["demo", "--units", "tank"])) == "tank"
    assert _units_option(parse(["demo", "--no-units"])) is False
    assert _units_option(parse(["demo"])) is None
    # Python keywords in core messages become this command line's options or --spec keys
    assert cli_words("pass units=False to treat") == "pass --no-units to treat"
    assert cli_words("read it with abundance='relative'") == "read it with --abundance relative"
    assert cli_words("use ss='marginal' instead") == 'use "ss": "marginal" in --spec instead'
    assert cli_words("fix shape_dims=3 here") == 'fix "shape_dims": 3 in --spec here'
    assert cli_words("keep constrained='draw'") == "keep constrained='draw'"   # not ours


def test_every_option_named_in_a_hint_exists():
    # the options cli_words writes must be options of `tallyform report`
    import re

    from tallyform.cli import _CLI_WORDS, build_parser
    parser = build_parser()
    sub = parser._subparsers._group_actions[0].choices["report"]
    have = {s for a in sub._actions for s in a.option_strings}
    have |= {s for a in parser._subparsers._group_actions[0].choices["demo"]._actions
             for s in a.option_strings}
    named = {m for _, repl in _CLI_WORDS for m in re.findall(r"--[a-z][a-z-]*", repl)}
    assert named <= have, named - have


def test_report_records_its_source_and_the_code_reads_it(tmp_path):
    from tallyform.core.scenarios import demo_dir
    out = run("report", "--counts", str(demo_dir() / "moths_counts.csv"),
              "--samples", str(demo_dir() / "moths_samples.csv"), "--effort", "trap_nights",
              "--group", "habitat", "--units", "site",
              "--spec", '{"n_permutations": 49, "audit_n_sim": 5, "n_boot": 49, '
                        '"scan_measures": ["bray_curtis"], "scan_transforms": ["none"]}',
              "--out", str(tmp_path / "r"))
    assert out.returncode == 0, out.stderr[-3000:]
    spec = json.loads((tmp_path / "r" / "spec.json").read_text())
    assert spec["source"] == {"counts": str(demo_dir() / "moths_counts.csv"),
                              "samples": str(demo_dir() / "moths_samples.csv"),
                              "effort": "trap_nights"}
    assert spec["units"] == "site"
    html = (tmp_path / "r" / "report.html").read_text()
    assert "tab = tly.read_counts(" in html and "units = &#x27;site&#x27;" in html
    assert "48 samples from 12 sites" in (tmp_path / "r" / "methods.txt").read_text()
