"""Ordination figure and scree plot."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
from tallyform.core.errors import DesignError, InputError
from tallyform.render import plots
from tallyform.render.style import EIGEN_COLOURS, OKABE_ITO, SYMBOLS


def _role(fig, role):
    return [t for t in fig.data if (t.meta or {}).get("role") == role]


def test_groups_coloured_okabe_ito_with_hover_labels(meso, ordination):
    group = meso.samples["treatment"]
    fig = plots.ordination_figure(ordination, group=group)
    names = [t.name for t in fig.data]
    assert names == ["control", "nutrient_low", "nutrient_high"]     # the order of the file (as the tables)
    assert [t.marker.color for t in fig.data] == OKABE_ITO[:3]
    assert fig.layout.legend.title.text == "treatment"
    assert sum(len(t.x) for t in fig.data) == meso.n_samples
    for t in fig.data:
        for label, hover, x, y in zip([h.split("</b>")[0][3:] for h in t.hovertext],
                                      t.hovertext, t.x, t.y):
            assert group[label] == t.name                 # each point in its own group
            assert ordination.scores.loc[label, "PCoA1"] == pytest.approx(x)
            assert ordination.scores.loc[label, "PCoA2"] == pytest.approx(y)
            assert "treatment: " + t.name in hover


def test_axis_titles_share_and_scaling(meso, ordination):
    fig = ordination.figure(group=meso.samples["treatment"], axes=(0, 2))
    share = 100 * ordination.explained["PCoA3"]
    assert fig.layout.xaxis.title.text == f"PCoA1 ({100 * ordination.explained['PCoA1']:.1f} %)"
    assert fig.layout.yaxis.title.text == f"PCoA3 ({share:.1f} %)"
    assert "scaling: principal coordinates" in fig.layout.title.text
    assert f"{100 * ordination.negative_share:.1f} %" in fig.layout.title.text
    assert fig.layout.yaxis.scaleanchor == "x"                   # distances stay true
    assert fig.layout.font.size >= 14


def test_symbol_for_second_factor(meso, ordination):
    fig = plots.ordination_figure(ordination, group=meso.samples["treatment"],
                                  symbol=meso.samples["week"])
    legend = _role(fig, "symbol legend")
    assert [t.name for t in legend] == ["w1", "w2", "w3", "w4"]
    assert [t.marker.symbol for t in legend] == SYMBOLS[:4]
    assert legend[0].legendgrouptitle.text == "week"
    pts = _role(fig, "samples")[0]
    weeks = meso.samples["week"]
    for hover, sym in zip(pts.hovertext, pts.marker.symbol):
        label = hover.split("</b>")[0][3:]
        assert sym == SYMBOLS[int(weeks[label][1]) - 1]


def test_group_as_sequence_and_bad_group(meso, ordination):
    seq = list(meso.samples["treatment"].loc[ordination.scores.index])
    a = plots.ordination_figure(ordination, group=seq)
    assert [t.name for t in a.data] == ["control", "nutrient_low", "nutrient_high"]
    with pytest.raises(InputError, match="not a column name"):
        plots.ordination_figure(ordination, group="treatment")
    with pytest.raises(DesignError, match="values for 60 samples"):
        plots.ordination_figure(ordination, group=["a", "b"])


def test_ellipses_in_group_colours_and_small_group_said(meso, ordination):
    group = meso.samples["treatment"].astype(str).copy()
    group.iloc[:2] = "pilot"                                     # 2 samples: no ellipse
    e = ordination.ellipses(group, kind="data")
    fig = plots.ordination_figure(ordination, group=group, ellipses=e)
    colours = {t.name: t.marker.color for t in _role(fig, "samples")}
    outlines = _role(fig, "ellipse")
    assert sorted(t.meta["group"] for t in outlines) == sorted(e.groups)
    for t in outlines:
        assert t.line.color == colours[t.meta["group"]]
        x, y = e.outline(t.meta["group"], k=120)
        np.testing.assert_allclose(t.x, x)
        np.testing.assert_allclose(t.y, y)
    missing = _role(fig, "no ellipse")
    assert len(missing) == 1 and "pilot (n = 2" in missing[0].name
    # a data ellipse is labelled as the spread of the samples, with no coverage level
    legend = _role(fig, "ellipse legend")[0].name.replace("<br>", " ")
    assert "spread of the group's samples" in legend and "%" not in legend
    assert "no coverage level" in legend
    assert "%" not in fig.layout.title.text.split("ellipses:")[1]
    # groups with fewer than 3 samples get no ellipse, and the figure says so
    assert "pilot" not in e.groups and e.no_ellipse == {"pilot": 2}


@pytest.mark.parametrize("kind, words", [
    ("confidence", "95 % confidence ellipse: region for the group's true centre"),
    ("bootstrap", "95 % bootstrap ellipse: region for the group's true centre"),
    ("prediction", "95 % prediction ellipse: holds a new sample of the group with "
                   "probability 95 %"),
    ("data", "data ellipse: spread of the group's samples (2.45 SD; no coverage level)"),
])
def test_legend_and_hover_name_what_each_ellipse_covers(meso, ordination, kind, words):
    group = meso.samples["treatment"]
    e = ordination.ellipses(group, kind=kind, n_boot=199, rng=1)
    fig = plots.ordination_figure(ordination, group=group, ellipses=e)
    spec = fig.to_plotly_json()            # what is written to the HTML / notebook
    legend = [t for t in spec["data"] if (t.get("meta") or {}).get("role") == "ellipse legend"]
    assert legend[0]["name"].replace("<br>", " ") == words
    outlines = [t for t in spec["data"] if (t.get("meta") or {}).get("role") == "ellipse"]
    assert len(outlines) == 3
    assert all(words in t["hovertext"][0] for t in outlines)
    assert words in fig.layout.title.text


def _one_composition(seed, n=8, groups=3, p=25):
    # synthetic: every sample drawn from one composition (log-normal variation, counting)
    rng = np.random.default_rng(seed)
    base = rng.lognormal(0, 1.2, p)
    share = base * np.exp(0.5 * rng.standard_normal((n * groups, p)))
    share /= share.sum(axis=1, keepdims=True)
    x = rng.multinomial(rng.integers(300, 2000, n * groups), share).astype(float)
    labels = [f"s{i}" for i in range(n * groups)]
    info = pd.DataFrame({"g": np.repeat([f"g{k}" for k in range(groups)], n)}, index=labels)
    return tly.CommunityTable(pd.DataFrame(x, index=labels), info, empty="keep")


def test_constrained_by_the_groups_withholds_confidence_ellipses():
    tab = _one_composition(1)
    o = tly.cca(tab, terms=["g"])
    e = o.ellipses(tab.samples["g"])
    assert e.table.empty and "tly.constraint_test" in e.withheld and "tly.ca" in e.withheld
    assert e.notes[0] == e.withheld
    fig = o.figure(group=tab.samples["g"], ellipses=e)
    assert not _role(fig, "ellipse")
    assert _role(fig, "ellipse withheld")
    notes = [a.text for a in fig.layout.annotations if a.name == "ellipse warning"]
    assert notes and "constraint_test" in notes[0].replace("<br>", " ")
    # asked for explicitly: drawn, with the warning in the figure itself
    drawn = o.ellipses(tab.samples["g"], constrained="draw")
    assert len(drawn.table) == 3 and drawn.warning
    fig = o.figure(group=tab.samples["g"], ellipses=drawn)
    assert len(_role(fig, "ellipse")) == 3
    assert any(a.name == "ellipse warning" and "not evidence" in a.text.lower()
               for a in fig.layout.annotations)
    assert "not evidence" in _role(fig, "ellipse legend")[0].name
    # spread of samples: drawn, with the note; unconstrained axes of the same CCA: drawn
    pred = o.ellipses(tab.samples["g"], kind="prediction")
    assert len(pred.table) == 3 and any("not evidence" in n for n in pred.notes)
    residual = o.ellipses(tab.samples["g"], axes=("CA1", "CA2"))
    assert not residual.withheld and any("unconstrained axes" in n for n in residual.notes)
    # a grouping nested in the constraint (halves of each group) is caught too
    halves = pd.Series(np.repeat([f"h{k}" for k in range(6)], 4), index=tab.sample_labels)
    assert o.ellipses(halves).withheld
    # an unrelated grouping is not
    other = pd.Series(np.tile(["p", "q"], 12), index=tab.sample_labels)
    assert not o.ellipses(other).withheld
    with pytest.raises(InputError, match="constrained"):
        o.ellipses(tab.samples["g"], constrained="yes")


def test_ellipses_on_other_axes_are_refused(meso, ordination):
    e = ordination.ellipses(meso.samples["treatment"], axes=(0, 2))
    with pytest.raises(InputError, match="PCoA1 x PCoA3"):
        plots.ordination_figure(ordination, group=meso.samples["treatment"], ellipses=e)


def test_top_taxa_labels_and_arrows(meso, ordination):
    scores = ordination.taxon_scores(meso, method="correlation")
    fig = plots.ordination_figure(ordination, taxa=scores, top_taxa=5, arrows=True)
    taxa = _role(fig, "taxa")[0]
    length = np.hypot(scores["PCoA1"], scores["PCoA2"])
    assert set(taxa.text) == set(length.nlargest(5).index)
    factor = taxa.meta["factor"]
    arrows = [a for a in fig.layout.annotations if a.name == "taxon arrow"]
    assert len(arrows) == 5
    heads = {(round(a.x, 9), round(a.y, 9)) for a in arrows}
    for name in taxa.text:
        assert (round(scores.loc[name, "PCoA1"] * factor, 9),
                round(scores.loc[name, "PCoA2"] * factor, 9)) in heads
    assert f"x {factor:.3g}" in taxa.name
    assert all(h.startswith(f"<b>{n}</b>") for h, n in zip(taxa.hovertext, taxa.text))


def test_own_taxon_scores_and_missing_ones(meso, ordination):
    ca = tly.ca(meso)
    fig = plots.ordination_figure(ca, top_taxa=3)
    assert len(_role(fig, "taxa")[0].text) == 3
    with pytest.raises(InputError, match="taxon_scores"):
        plots.ordination_figure(ordination, top_taxa=3)
    with pytest.raises(InputError, match="no column"):
        plots.ordination_figure(ordination, taxa=pd.DataFrame({"A": [1.0]}))


def test_scree_shows_negative_eigenvalues(ordination):
    fig = ordination.figure(kind="scree")
    pos, neg = fig.data
    assert pos.name == "positive eigenvalues" and neg.name == "negative eigenvalues"
    assert neg.marker.color == EIGEN_COLOURS["negative"] and neg.marker.pattern.shape == "/"
    ev = ordination.eigenvalues
    assert len(pos.x) + len(neg.x) == len(ev)
    assert all(v < 0 for v in neg.y)
    np.testing.assert_allclose(neg.y, ordination.explained[list(neg.x)])
    assert "negative eigenvalues: " in fig.layout.title.text
    assert fig.layout.yaxis.title.text.startswith("share of the total")


def test_scree_constrained_and_nmds(meso, bray):
    r = tly.rda(meso, meso.samples, terms=["treatment"])
    fig = plots.scree_figure(r)
    assert [t.name for t in fig.data] == ["constrained axes", "unconstrained axes"]
    assert list(fig.data[0].x) == r.constrained_axes
    n = tly.nmds(bray, n_starts=2, rng=1)
    with pytest.raises(InputError, match="no eigenvalues"):
        plots.scree_figure(n)
    fig = plots.ordination_figure(n, group=meso.samples["treatment"])
    assert "stress" in fig.layout.title.text and fig.layout.xaxis.title.text == "NMDS1"
