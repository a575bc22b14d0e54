"""The shared checks of option and number arguments, and that public calls use them."""
from __future__ import annotations

import math

import numpy as np
import pytest

import tallyform as tly
from tallyform.core import inference, ordination, partition_math
from tallyform.core.validation import (check_fraction, check_n_permutations, check_option,
                                       check_whole)
from tallyform.errors import InputError


def test_check_option_lists_the_allowed_values():
    assert check_option("ss", "marginal", ("sequential", "marginal")) == "marginal"
    with pytest.raises(InputError, match=r"`ss` must be one of \['sequential', 'marginal'\]"):
        check_option("ss", "typeIII", ("sequential", "marginal"))
    with pytest.raises(InputError, match="must be one of"):      # unhashable, set of options
        check_option("ss", ["marginal"], {"sequential", "marginal"})


@pytest.mark.parametrize("bad", [True, 2.0, "3", -1, None, np.float64(4.0)])
def test_check_whole_refuses_what_is_not_a_whole_number(bad):
    with pytest.raises(InputError, match="`n_boot` must be a whole number of at least 0"):
        check_whole("n_boot", bad)


def test_check_whole_returns_python_ints():
    for v in (0, 7, np.int64(7), np.uint8(3)):
        out = check_whole("n", v)
        assert type(out) is int and out == int(v)
    with pytest.raises(InputError, match="at least 19"):
        check_whole("n_boot", 18, 19)


@pytest.mark.parametrize("bad", [0, 1, 0.0, 1.0, -0.1, 1.5, True, False, "0.05",
                                 float("nan"), float("inf"), None])
def test_check_fraction_refuses_what_is_not_strictly_between_0_and_1(bad):
    with pytest.raises(InputError, match=r"`alpha` must be a number between 0 and 1"):
        check_fraction("alpha", bad)


def test_check_fraction_accepts_numpy_and_python_reals():
    assert check_fraction("level", np.float32(0.5)) == 0.5
    assert type(check_fraction("level", 0.95)) is float
    assert math.isclose(check_fraction("alpha", np.float64(0.01)), 0.01)


def test_check_n_permutations():
    assert check_n_permutations(np.int32(0)) == 0
    with pytest.raises(InputError, match="`n_permutations` must be a whole number >= 0"):
        check_n_permutations(99.0)


def test_every_module_uses_the_one_check():
    # the modules that once had their own copies now hold the shared function
    assert inference.check_option is check_option
    assert ordination.check_option is check_option
    assert partition_math.check_option is check_option
    assert inference.check_n_permutations is check_n_permutations


@pytest.fixture(scope="module")
def meso():
    return tly.demo("mesocosm")


@pytest.mark.parametrize("bad", [1.5, "0.05", float("nan"), True])
def test_public_calls_give_the_same_message_for_a_bad_alpha(meso, bad):
    calls = [lambda: tly.compare_groups(meso, "treatment", alpha=bad, n_permutations=19),
             lambda: tly.shape_test(meso, "treatment", alpha=bad, n_permutations=19),
             lambda: tly.audit(meso, "treatment", alpha=bad, n_sim=1, n_permutations=19)]
    for call in calls:
        with pytest.raises(InputError, match=r"`alpha` must be a number between 0 and 1"):
            call()


@pytest.mark.parametrize("bad", [0.0, 95, "0.95", float("nan")])
def test_public_calls_give_the_same_message_for_a_bad_level(meso, bad):
    calls = [lambda: tly.size_test(meso, "treatment", level=bad),
             lambda: tly.taxon_contributions(meso, "treatment", "control", "nutrient_low",
                                             level=bad)]
    for call in calls:
        with pytest.raises(InputError, match=r"`level` must be a number between 0 and 1"):
            call()
