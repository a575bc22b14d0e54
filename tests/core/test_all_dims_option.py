"""``all_dims=False`` (size_shape): the table by number of shape dimensions stops at the k
used; the fractions, R^2 table and every row it keeps are those of the default call (each
row of ``by_dims`` depends only on the first k shape coordinates: the running sums of
``partition_by_dims``). Data are synthetic."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import tallyform as tly
from tallyform.core.cache import clear_cache


def _table(n=60, p=30, seed=3):
    rng = np.random.default_rng(seed)
    lam = rng.gamma(0.9, 4.0, size=(1, p)) * rng.lognormal(0, 0.6, size=(n, 1))
    x = rng.poisson(lam) + np.eye(n, p, dtype=int)
    return tly.CommunityTable(pd.DataFrame(x, index=[f"s{i}" for i in range(n)],
                                           columns=[f"t{j}" for j in range(p)]))


@pytest.mark.parametrize("measure", ["bray_curtis", "hellinger"])
@pytest.mark.parametrize("shape_dims", [None, 3])
def test_short_table_keeps_every_number_of_the_full_one(measure, shape_dims):
    tab = _table()
    clear_cache()
    full = tly.size_shape(tab, measure, shape_dims=shape_dims, progress=False)
    short = tly.size_shape(tab, measure, shape_dims=shape_dims, all_dims=False,
                           progress=False)
    k = full.shape_dims
    assert short.shape_dims == k
    assert full.by_dims().index.max() > k                # the full table goes further
    assert list(short.by_dims().index) == list(range(1, k + 1))
    pd.testing.assert_frame_equal(short.by_dims(), full.by_dims().loc[:k],
                                  check_exact=False, rtol=1e-12, atol=1e-14)
    pd.testing.assert_series_equal(short.fractions, full.fractions, rtol=1e-12)
    pd.testing.assert_frame_equal(short.r2, full.r2, rtol=1e-12)
    assert short.notes == full.notes
    assert short.provenance["all_dims"] is False and full.provenance["all_dims"] is True


def test_with_intervals_the_fractions_do_not_depend_on_it():
    tab = _table(n=40, p=20, seed=9)
    a = tly.size_shape(tab, "bray_curtis", n_boot=49, rng=2, progress=False)
    b = tly.size_shape(tab, "bray_curtis", n_boot=49, rng=2, all_dims=False, progress=False)
    pd.testing.assert_frame_equal(a.to_frame(), b.to_frame())
