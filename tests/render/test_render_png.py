"""Every figure rendered to PNG by the static exporter (where one works; always in CI).

Set TALLYFORM_FIGURE_DIR to keep the images for looking at; by default they go to a
temporary folder and are never part of the repository.
"""
from __future__ import annotations

import os
import struct
from pathlib import Path

import pytest

import tallyform as tly
from tallyform.render import plots


def _exporter_or_skip():
    ok, why = plots.static_export_available()
    if not ok:
        if os.environ.get("CI", "").lower() == "true":
            pytest.fail(f"static export must work in CI, but: {why}")
        pytest.skip(f"NO STATIC IMAGE EXPORT ON THIS MACHINE: {why}")


@pytest.fixture(scope="module")
def every_figure(meso, bray, partition, grid, ordination, partition_ci, grid_ci, comparison):
    group = meso.samples["treatment"]
    perm = tly.permanova(bray, meso.samples, terms=["treatment", "week"], n_permutations=99,
                         rng=1)
    spread = tly.dispersion_test(bray, group, n_permutations=99, rng=1)
    audit = tly.audit(meso, "treatment", n_sim=8, n_permutations=19, rng=3)
    taxa = ordination.taxon_scores(meso, method="correlation")
    adjusted = tly.choice_adjusted(meso, "treatment", [
        {"measure": "bray_curtis"}, {"measure": "bray_curtis", "transform": "sqrt"},
        {"measure": "hellinger"}, {"measure": "chi_square"}], n_permutations=99, rng=2)
    return {
        "partition_bars": partition.figure(),
        "partition_bars_scan_present": grid.figure(kind="bars", present=True),
        "dims": partition.figure(kind="dims"),
        "scan_heatmap": grid.figure(),
        "partition_bars_intervals": partition_ci.figure(),
        "scan_bars_intervals": grid_ci.figure(kind="bars"),
        "scan_heatmap_intervals": grid_ci.figure(),
        "choice_difference": comparison.figure(),
        "ordination": ordination.figure(group=group, symbol=meso.samples["week"],
                                        ellipses=ordination.ellipses(group)),
        "ordination_arrows": ordination.figure(group=group, taxa=taxa, top_taxa=6,
                                               arrows=True),
        "scree": ordination.figure(kind="scree"),
        "totals": plots.totals_figure(meso, "treatment"),
        "null_distribution": perm.figure(),
        "dispersion": spread.figure(),
        "audit": audit.figure(),
        "choice_adjusted": adjusted.figure(),
    }


def test_every_figure_renders_to_png(every_figure, tmp_path):
    import plotly.io as pio
    _exporter_or_skip()
    folder = Path(os.environ.get("TALLYFORM_FIGURE_DIR") or tmp_path)
    folder.mkdir(parents=True, exist_ok=True)
    names = list(every_figure)
    files = [folder / f"{n}.png" for n in names]
    figs = [every_figure[n] for n in names]
    for attempt in range(3):      # kaleido 1.x now and then calls into an unloaded page,
        try:                      # or (on a loaded machine) returns before every file is out
            pio.write_images(figs, [str(f) for f in files],    # one browser for all
                             width=[f.layout.width or 1000 for f in figs],
                             height=[f.layout.height or 650 for f in figs])
        except Exception:
            if attempt == 2:
                raise
        missing = [f.name for f in files if not f.exists()]
        if not missing:
            break
        assert attempt < 2, f"the exporter wrote no file for {missing}"
    for f, fig in zip(files, figs):
        data = f.read_bytes()
        assert data[:8] == b"\x89PNG\r\n\x1a\n", f
        w, h = struct.unpack(">II", data[16:24])
        assert (w, h) == (fig.layout.width or 1000, fig.layout.height or 650), f
        assert len(data) > 20_000, f"{f.name} looks empty ({len(data)} bytes)"
