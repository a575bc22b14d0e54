"""What a user reads: misleading option names refused, notes that agree with each other."""
import numpy as np
import pytest

import tallyform as tly
from tallyform.core.errors import InputError
from tallyform.core.measures import get_measure
from tallyform.core.transforms import get_transform


@pytest.mark.parametrize("name, ours", [("log", "log1p"), ("pa", "presence"),
                                        ("total", "profile")])
def test_misleading_transform_names_are_refused_naming_ours(name, ours):
    with pytest.raises(InputError, match=ours):
        get_transform(name)
    assert get_transform(ours).name == ours          # ours still work


def test_morisita_is_refused_naming_morisita_horn():
    with pytest.raises(InputError, match="morisita_horn"):
        get_measure("morisita")
    assert get_measure("morisita_horn").name == "morisita_horn"


def test_leading_axes_note_agrees_with_the_partition_note():
    """Both say the same negative share, and name the transform with the measure."""
    tab = tly.demo("mesocosm")
    s = tly.size_shape(tab, "bray_curtis", transform="sqrt")
    d = tly.dissimilarity(tab, "bray_curtis", transform="sqrt")
    leading = tly.pcoa(d, dims=2)
    full = tly.pcoa(tly.dissimilarity(tab, "bray_curtis", transform="sqrt"))
    # identity: the full PCoA's negative share is |sum of negative eigenvalues| / trace(G)
    ev = np.linalg.eigvalsh(d.gower())
    expected = -ev[ev < -1e-9 * ev.max()].sum() / np.trace(d.gower())
    assert leading.negative_share == pytest.approx(expected, rel=1e-9)
    assert full.negative_share == pytest.approx(expected, rel=1e-9)
    words = f"{100 * expected:.1f} %"
    for notes in (s.notes, leading.notes, full.notes):
        text = " ".join(notes)
        assert words in text and "sqrt + bray_curtis" in text
    assert not any("not known" in n or "not measured" in n for n in leading.notes)


def test_audit_verdict_scales_with_the_rate():
    """The same sentence must not describe 100 % and 10 % false alarms (alpha = 0.05)."""
    from tallyform.core.audit import _reading
    args = ("bray_curtis", "chi_square", "treatment")
    ref = (0.05, (0.03, 0.08))
    high = _reading(*args, 1.0, (0.98, 1.0), *ref, 0.05, 200)
    often = _reading(*args, 0.3, (0.24, 0.37), *ref, 0.05, 200)
    mild = _reading(*args, 0.10, (0.07, 0.16), *ref, 0.05, 200)
    nominal = _reading(*args, 0.05, (0.03, 0.08), *ref, 0.05, 200)
    assert "most significant" in high and "says nothing" in high
    assert "often comes from size alone" in often
    assert "somewhat above" in mild and "2.0 times" in mild and "must not" not in mild
    assert "consistent with the nominal" in nominal
    assert len({high.split(". ")[-1], often.split(". ")[-1], mild.split(". ")[-1]}) == 3


def test_an_all_zero_taxon_is_left_out_of_chi_square_with_a_note():
    """A taxon absent from every sample adds 0 to every chi-square distance (identity:
    its profile differences are all 0), so the distances equal those without it."""
    tab = tly.demo("mesocosm")
    counts = tab.counts.copy()
    counts["ghost"] = 0
    ghost = tly.CommunityTable(counts, tab.samples, empty="keep")
    before = counts.copy()
    d0 = tly.dissimilarity(tab, "chi_square")
    d1 = tly.dissimilarity(ghost, "chi_square")
    np.testing.assert_allclose(d1.condensed, d0.condensed, rtol=1e-12, atol=1e-14)
    assert any("'ghost'" in n and "left out" in n for n in d1.notes)
    s = tly.size_shape(ghost, "bray_curtis")            # the chi-square shape basis
    np.testing.assert_allclose(s.fractions, tly.size_shape(tab, "bray_curtis").fractions,
                               atol=1e-10)
    c = tly.compare_groups(ghost, "treatment", units="tank", n_permutations=99, rng=1)
    assert c.shape.pvalue == tly.compare_groups(tab, "treatment", units="tank",
                                                n_permutations=99, rng=1).shape.pvalue
    assert any("'ghost'" in n for n in c.notes)
    assert counts.equals(before)                         # the user's input is untouched
