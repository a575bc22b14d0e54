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
