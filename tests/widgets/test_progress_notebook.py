"""Progress by default in a notebook (an ipywidgets bar in the cell's output, collapsed to
"done" at the end), nothing for quick calls, and nothing at all where no one watches (a
script whose stderr is a pipe). The data are the synthetic demo."""
from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import nbformat
import pytest

ROOT = str(Path(__file__).resolve().parents[2])
WIDGET = "application/vnd.jupyter.widget-view+json"
SETUP = ("import tallyform as tly\n"
         "tab = tly.demo()\n"
         "d = tly.dissimilarity(tab, 'bray_curtis')\n")
QUICK = "tly.permanova(d, tab.samples, 'treatment', units=False, n_permutations=999, rng=1)\n"
LONG = ("res = tly.permanova(d, tab.samples, 'treatment', units=False,\n"
        "                    n_permutations=500_000, rng=1)\n"
        "print(res.to_frame()['pvalue'].iloc[0])\n")


@pytest.mark.slow
def test_notebook_shows_a_bar_for_a_long_call_only(tmp_path):
    pytest.importorskip("nbclient")
    pytest.importorskip("ipykernel")
    from nbclient import NotebookClient
    nb = nbformat.v4.new_notebook()
    nb.cells = [nbformat.v4.new_code_cell(c) for c in (SETUP, QUICK, LONG)]
    env = dict(os.environ, OMP_NUM_THREADS="1", TALLYFORM_PROGRESS="",
               PYTHONPATH=os.pathsep.join(p for p in (ROOT, os.environ.get("PYTHONPATH"))
                                          if p))
    client = NotebookClient(nb, timeout=300, kernel_name="python3",
                            resources={"metadata": {"path": str(tmp_path)}})
    with client.setup_kernel(env=env):
        for i, cell in enumerate(nb.cells):
            client.execute_cell(cell, i)
        client.set_widgets_metadata()                       # the widgets' last state
    setup, quick, long = (c.outputs for c in nb.cells)
    assert not any(WIDGET in o.get("data", {}) for o in setup + quick)    # quick: no bar
    bars = [o for o in long if WIDGET in o.get("data", {})]
    assert len(bars) == 1                                   # one bar, not one per batch
    assert not [o for o in long if o.get("name") == "stderr"]     # no terminal line too
    # the bar's last words (saved widget state): collapsed to a "done" line
    state = nb.metadata.get("widgets", {}).get(
        "application/vnd.jupyter.widget-state+json", {}).get("state", {})
    texts = [m["state"].get("value", "") for m in state.values()
             if m.get("model_name") == "HTMLModel"]
    assert any(t.startswith("PERMANOVA: 500000 of 500000 done in") for t in texts), texts
    # the same call where no one watches (stderr a pipe): not a character on stderr
    out = subprocess.run([sys.executable, "-c", SETUP + LONG], capture_output=True,
                         text=True, env=env, timeout=300, check=True)
    assert out.stderr == ""
    printed = [o["text"] for o in long if o.get("name") == "stdout"]
    assert printed == [out.stdout]                          # same seed, same answer
