"""Model matrices: coding, degrees of freedom, design errors."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from tallyform.core.design import model_matrix, orthonormal_basis
from tallyform.errors import DesignError


@pytest.fixture
def info():
    return pd.DataFrame({"trt": list("aabbcc"), "day": [1., 2, 3, 4, 5, 7],
                         "blk": list("xyxyxy"), "one": ["k"] * 6,
                         "id": list("uvwxyz")}, index=[f"s{i}" for i in range(6)])


def test_factor_and_numeric_coding(info):
    mm = model_matrix(info, ["trt", "day"])
    assert mm.columns == ["(intercept)", "trt[b]", "trt[c]", "day"]
    np.testing.assert_array_equal(mm.X[:, 1], [0, 0, 1, 1, 0, 0])
    assert mm.term_columns == {"trt": [1, 2], "day": [3]}


def test_interaction_columns_are_products(info):
    twice = pd.concat([info, info.set_axis([f"r{i}" for i in range(6)])])
    mm = model_matrix(twice, ["trt", "blk", "trt:blk"])
    cols = mm.term_columns["trt:blk"]
    assert [mm.columns[c] for c in cols] == ["trt[b]:blk[y]", "trt[c]:blk[y]"]
    np.testing.assert_array_equal(mm.X[:, cols[0]], mm.X[:, 1] * mm.X[:, 3])


def test_rank_equals_df():
    # identity: the rank of an orthonormal basis equals the column rank of X
    X = np.column_stack([np.ones(5), np.arange(5.), 2 * np.arange(5.)])
    assert orthonormal_basis(X).shape[1] == 2


@pytest.mark.parametrize("terms, match", [
    (["nope"], "column 'nope' is not in the sample table"),
    (["one"], "single level"),
    (["id"], "every sample its own level"),
])
def test_design_errors(info, terms, match):
    with pytest.raises(DesignError, match=match):
        model_matrix(info, terms)


def test_missing_covariate_named(info):
    bad = info.copy()
    bad.loc["s2", "day"] = np.nan
    with pytest.raises(DesignError, match="column 'day' has missing values for sample\\(s\\) \\['s2'\\]"):
        model_matrix(bad, ["day"])


def test_no_residual_df(info):
    with pytest.raises(DesignError, match="leaving none for the residual"):
        model_matrix(info, ["trt", "blk", "trt:blk"]).X  # 6 columns, 6 samples
