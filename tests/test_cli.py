"""The command line, run as a user runs it."""
from __future__ import annotations

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def run(*args):
    return subprocess.run([sys.executable, "-m", "tallyform.cli", *args], cwd=ROOT,
                          capture_output=True, text=True)


def test_demo_prints_summary_and_totals_by_group():
    out = run("demo")
    assert out.returncode == 0, out.stderr
    assert "60 samples x 36 taxa" in out.stdout
    assert "Sample totals (size) by treatment" in out.stdout
    for level in ("control", "nutrient_low", "nutrient_high"):
        assert level in out.stdout
    assert "synthetic" in out.stdout


def test_demo_moths_shows_effort():
    out = run("demo", "moths")
    assert out.returncode == 0, out.stderr
    assert "per unit of effort (trap_nights)" in out.stdout


def test_error_is_one_readable_line():
    out = run("demo", "mesocosm", "--group", "nope")
    assert out.returncode == 2
    assert "Traceback" not in out.stderr
    assert "column 'nope' is not in the sample table" in out.stderr
