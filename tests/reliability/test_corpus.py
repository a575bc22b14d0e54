"""The corpus of bad and awkward inputs (tests/data/bad, tests/data/ok; synthetic files).

Every bad file must give InputError or DesignError (never a library's exception), whose
message is ours and names the file, the line or cell and the column as listed in
bad/MANIFEST.csv, with a hint; the file's bytes must be the same afterwards. Every ok file
must give exactly the table in its expected file. Regenerate the files with
``python tests/data/make_corpus.py``.
"""
from __future__ import annotations

import csv
import hashlib
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
from tallyform.errors import DesignError, InputError

DATA = Path(__file__).resolve().parents[1] / "data"
BAD, OK = DATA / "bad", DATA / "ok"
ERRORS = {"InputError": InputError, "DesignError": DesignError}
# words that only appear in messages we did not write
FOREIGN = ("Traceback", "Error:", "pandas", "numpy", "openpyxl", "statsmodels", "scipy",
           "object of type", "could not convert", "invalid literal")


def _manifest(folder: Path) -> list[dict]:
    with open(folder / "MANIFEST.csv", newline="") as fh:
        return list(csv.DictReader(fh))


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _resolve(folder: Path, opts: dict) -> dict:
    """Option values naming a corpus file become paths to it."""
    return {k: (folder / v if isinstance(v, str) and (folder / v).is_file() else v)
            for k, v in opts.items()}


def _run(reader: str, path: Path, opts: dict):
    """Call the reader (or public function) a manifest line names."""
    if reader in ("read_counts", "read_long", "read_samples"):
        return getattr(tly, reader)(path, **opts)
    if reader == "read_darwin_core":
        return tly.read_darwin_core(opts.pop("events"), path, **opts)
    group = opts.pop("group")
    tab = tly.read_counts(path, opts.pop("samples"), rows="samples")
    if reader == "permanova":
        d = tly.dissimilarity(tab, "hellinger")
        return tly.permanova(d, tab, [group], n_permutations=9, rng=1)
    if reader == "size_test":
        return tly.size_test(tab, group, **opts)
    if reader == "compare_groups":
        return tly.compare_groups(tab, group, n_permutations=9, rng=1, **opts)
    raise AssertionError(f"unknown reader {reader!r} in the manifest")


BAD_CASES = _manifest(BAD)


def test_corpus_is_large_enough():
    # the issue asks for at least 40 bad or hostile inputs across the formats
    assert len(BAD_CASES) >= 40
    kinds = {Path(c["file"]).suffix for c in BAD_CASES} | {c["reader"] for c in BAD_CASES}
    assert {".csv", ".tsv", ".xlsx", "read_long", "read_darwin_core"} <= kinds


@pytest.mark.parametrize("case", BAD_CASES, ids=[c["file"] for c in BAD_CASES])
def test_bad_input_gives_our_error(case):
    path = BAD / case["file"]
    opts = _resolve(BAD, json.loads(case["options"]))
    files = [path] + [v for v in opts.values() if isinstance(v, Path)]
    before = {p: _digest(p) for p in files}
    with pytest.raises(Exception) as exc:
        _run(case["reader"], path, dict(opts))
    err = exc.value
    assert type(err) is ERRORS[case["error"]], f"{type(err).__name__}: {err}"
    msg = str(err)
    for word in case["contains"].split("|"):
        assert word in msg, f"{word!r} not in: {msg}"
    assert err.hint, f"no hint in: {msg}"
    assert not any(f in msg for f in FOREIGN), msg
    for p, h in before.items():
        assert _digest(p) == h, f"{p.name} was modified"


def test_header_only_file_with_5000_columns(tmp_path):
    # generated here rather than committed: one header line of 5000 taxon names
    p = tmp_path / "wide_header_only.csv"
    p.write_text("sample," + ",".join(f"taxon_{j}" for j in range(5000)) + "\n")
    before = _digest(p)
    with pytest.raises(InputError) as exc:
        tly.read_counts(p)
    msg = str(exc.value)
    assert "wide_header_only.csv" in msg and "line 1" in msg and "no data rows" in msg
    assert "5001 column(s)" in msg and exc.value.hint
    assert _digest(p) == before


def _expected(name: str) -> pd.DataFrame:
    return pd.read_csv(OK / name, index_col=0).astype(float)


OK_CASES = _manifest(OK)


@pytest.mark.parametrize("case", OK_CASES, ids=[c["file"] for c in OK_CASES])
def test_awkward_but_valid_input_reads_exactly(case):
    path = OK / case["file"]
    before = _digest(path)
    tab = _run(case["reader"], path, _resolve(OK, json.loads(case["options"])))
    want = _expected(case["expected"])
    got = tab.counts
    assert list(got.index) == list(want.index)
    assert list(got.columns) == list(want.columns)
    np.testing.assert_array_equal(got.to_numpy(), want.to_numpy())   # exact, not close
    assert _digest(path) == before


def test_merged_header_rows_read_with_header_row(tmp_path):
    # the option the merged-header error points to: read the header from the second line
    tab = tly.read_counts(BAD / "merged_header.csv", header_row=2)
    assert list(tab.taxon_labels) == ["Carabus", "Pterostichus", "Stenus"]
    assert tab.values[2].tolist() == [0, 4, 2]
    assert any("line 2" in n for n in tab.notes)
    x = tly.read_counts(BAD / "xlsx_merged_header.xlsx", header_row=2)
    assert x.shape == (3, 3)
    with pytest.raises(InputError, match="header_row"):
        tly.read_counts(BAD / "merged_header.csv", header_row=0)
    with pytest.raises(InputError, match="no line 9"):
        tly.read_counts(BAD / "merged_header.csv", header_row=9)


def test_decimal_and_thousands_options_are_checked():
    p = OK / "decimal_comma.csv"
    with pytest.raises(InputError, match="both ','"):
        tly.read_counts(p, decimal=",", thousands=",")
    with pytest.raises(InputError, match="`decimal` must be"):
        tly.read_counts(p, decimal=";")
    with pytest.raises(InputError, match="`thousands` must be"):
        tly.read_counts(p, decimal=",", thousands="ab")


def test_a_cell_is_never_guessed():
    # the same digits read three ways: only the declared reading is accepted
    from tallyform.core.cells import BadCell, parse_number
    assert parse_number("1.250", decimal=",", thousands=".") == 1250.0
    assert parse_number("1.250") == 1.25
    assert isinstance(parse_number("1.250", decimal=","), BadCell)     # mixed marks
    assert isinstance(parse_number("1,25", thousands=","), BadCell)    # not a thousands group
    assert isinstance(parse_number("1_000"), BadCell)                  # Python-only syntax
    assert isinstance(parse_number(True), BadCell)
    assert parse_number("-3") == -3.0                                  # refused later, by value


def test_sample_table_numbers_follow_the_declared_decimal_mark(tmp_path):
    # a covariate written with decimal commas is numeric only when decimal=',' says so;
    # otherwise it stays text (a factor), never a guess
    p = tmp_path / "info.csv"
    p.write_text("sample;depth;site\ns1;1,5;a\ns2;2,25;b\ns3;10;a\n")
    assert tly.read_samples(p, decimal=",")["depth"].tolist() == [1.5, 2.25, 10.0]
    assert tly.read_samples(p)["depth"].tolist() == ["1,5", "2,25", "10"]
    c = tmp_path / "c.csv"
    c.write_text("sample;Ta;Tb\ns1;1,5;2\ns2;3;0,5\ns3;1;1\n")
    tab = tly.read_counts(c, p, decimal=",")
    assert tab.samples["depth"].dtype == float and tab.values[0, 0] == 1.5


def test_label_shared_by_a_row_and_a_column_is_accepted_once_rows_is_given():
    # numbered samples and numbered taxa share labels legitimately; rows= settles it
    tab = tly.read_counts(BAD / "taxon_named_like_sample.csv", rows="samples")
    assert list(tab.taxon_labels) == ["Ta", "s2", "Tc"]
    assert any("also row labels" in n and "'s2'" in n for n in tab.notes)
