"""The walkthrough notebooks: each runs top to bottom, and the executed copies shipped in
the repository show what the code produces (key numbers compared, not bytes) and keep
static figures that show without a kernel."""
from __future__ import annotations

import json
from pathlib import Path

import nbformat
import pytest

from tallyform.render.notebooks import execute_notebook

NOTEBOOKS = sorted((Path(__file__).resolve().parents[1] / "notebooks").glob("0*.ipynb"))


def key_numbers(nb) -> dict:
    for cell in nb.cells:
        if "key-numbers" in cell.metadata.get("tags", []):
            text = "".join(o.get("text", "") for o in cell.get("outputs", [])
                           if o.get("output_type") == "stream")
            return json.loads(text)
    raise AssertionError("no cell tagged 'key-numbers'")


def test_five_notebooks_are_shipped():
    assert [p.name[:2] for p in NOTEBOOKS] == ["01", "02", "03", "04", "05"]


@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.stem)
def test_shipped_copy_is_executed_with_static_figures(path):
    nb = nbformat.read(str(path), as_version=4)
    code = [c for c in nb.cells if c.cell_type == "code"]
    assert all(c.get("execution_count") for c in code), "not executed top to bottom"
    assert not any(o.get("output_type") == "error" for c in code for o in c.outputs)
    figures = [o for c in code for o in c.outputs
               if "application/vnd.plotly.v1+json" in o.get("data", {})]
    if path.name != "04_your_data.ipynb":
        assert figures and all("image/png" in o["data"] for o in figures), \
            "figures need a PNG copy for viewers without a kernel"
    key_numbers(nb)


@pytest.mark.slow
@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.stem)
def test_notebook_runs_and_matches_shipped_numbers(path, tmp_path, monkeypatch):
    monkeypatch.setenv("TALLYFORM_STATIC_FIGURES", "0")        # no PNG export: faster
    out = execute_notebook(path, tmp_path / path.name, cwd=tmp_path)
    fresh = key_numbers(nbformat.read(str(out), as_version=4))
    shipped = key_numbers(nbformat.read(str(path), as_version=4))
    assert fresh.keys() == shipped.keys()
    for k, v in shipped.items():
        assert fresh[k] == pytest.approx(v, rel=1e-4, abs=1e-5), k


def test_nbconvert_html_shows_figures_offline():
    # the executed quick start, rendered without a kernel: figures are embedded PNGs
    from nbconvert import HTMLExporter
    body, _ = HTMLExporter().from_filename(str(NOTEBOOKS[0]))
    assert body.count("data:image/png;base64") >= 3
