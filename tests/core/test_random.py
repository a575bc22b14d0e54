"""One `rng` keyword everywhere: seeds reproduce, bad values get our error."""
from __future__ import annotations

import numpy as np
import pytest

import tallyform as tly
from tallyform.core.random import as_rng
from tallyform.errors import InputError


@pytest.mark.parametrize("bad", ["abc", 1.5, True, -3, [1.2]])
def test_bad_rng_values_are_refused_readably(bad):
    with pytest.raises(InputError, match="`rng` must be None, a whole-number seed"):
        as_rng(bad)


def test_public_calls_refuse_bad_rng():
    tab = tly.demo("mesocosm")
    d = tly.dissimilarity(tab, "hellinger")
    with pytest.raises(InputError, match="`rng`"):
        tly.permanova(d, tab, ["treatment"], rng="abc", n_permutations=9)
    with pytest.raises(InputError, match="`rng`"):
        tly.dispersion_test(d, tab.samples["treatment"], rng=0.5, n_permutations=9)


def test_generator_is_used_as_given():
    g = np.random.default_rng(4)
    assert as_rng(g) is g
    assert as_rng(7).integers(1000) == np.random.default_rng(7).integers(1000)
