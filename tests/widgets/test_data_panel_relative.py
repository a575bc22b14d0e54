"""The Data panel and the dashboard on relative data (synthetic soil demo): what the totals
mean is shown, size results are refused in their panels without a traceback, and the spec
records how the table was read."""
from __future__ import annotations

import pandas as pd
import pytest

import tallyform as tly
from tallyform.core.scenarios import demo_dir
from tallyform.widgets import DataPanel


@pytest.fixture(scope="module")
def soil():
    return tly.demo("soil")              # relative, qPCR loads


@pytest.fixture(scope="module")
def soil_reads():
    d = demo_dir()
    return tly.read_counts(d / "soil_counts.csv", d / "soil_samples.csv",
                           abundance="relative")


def test_panel_says_the_totals_are_loads(soil):
    panel = DataPanel(soil, group="land_use")
    assert panel.error is None
    assert "absolute loads &#x27;qpcr_copies_per_g&#x27;" in panel.meaning.value
    assert "Absolute loads by land_use" in panel.totals.value
    pd.testing.assert_frame_equal(panel.result, soil.totals_by("land_use"))
    assert panel.summary["totals are"] == "absolute loads 'qpcr_copies_per_g'"
    assert panel.spec_values() == {"group": "land_use", "abundance": "relative",
                                   "load": "qpcr_copies_per_g", "spike_in": None}


def test_panel_warns_that_depths_are_not_sizes(soil_reads, clean):
    panel = DataPanel(soil_reads, group="land_use")
    assert "Totals are not sizes" in panel.meaning.value
    assert "load=" in panel.meaning.value and "spike_in=" in panel.meaning.value
    assert "Sequencing depths by land_use" in panel.totals.value
    assert clean(panel.meaning.value)


def test_panel_on_absolute_data(mesocosm):
    panel = DataPanel(mesocosm, group="treatment")
    assert "absolute abundances" in panel.meaning.value
    assert panel.spec_values() == {"group": "treatment"}


def test_dashboard_refuses_size_in_its_panels_and_records_the_reading(soil_reads, clean):
    dash = tly.explore(soil_reads)
    msg = dash.shape.messages.value
    assert "relative abundances" in msg and clean(msg)
    spec = dash.spec
    assert spec.abundance == "relative" and spec.load is None
    assert spec.validate(soil_reads) is spec
