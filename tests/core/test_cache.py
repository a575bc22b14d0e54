"""ResultCache: least recently used first, within a byte budget, an item count and a number
of large items (the oldest large item goes first; small items stay); the shared cache keeps
the two most recent large dissimilarities. Data are synthetic."""
from __future__ import annotations

import numpy as np
import pandas as pd

import tallyform as tly
from tallyform.core.cache import ResultCache, clear_cache, shared_cache


def test_oldest_large_item_goes_and_small_items_stay():
    c = ResultCache(max_items=10, max_bytes=1000, max_large=2, large_bytes=100)
    c.put("small1", 1, 5)
    c.put("big1", "B1", 200)
    c.put("small2", 2, 5)
    c.put("big2", "B2", 200)
    assert c.get("big1") == "B1"                 # big1 is now the most recently used
    c.put("big3", "B3", 200)
    assert c.get("big2") is None                 # the least recently used large one went
    assert c.get("big1") == "B1" and c.get("big3") == "B3"
    assert c.get("small1") == 1 and c.get("small2") == 2
    assert len(c) == 4


def test_byte_budget_and_item_count_still_hold():
    c = ResultCache(max_items=3, max_bytes=100, max_large=5, large_bytes=1000)
    for i in range(5):
        c.put(i, i, 10)
    assert len(c) == 3 and c.get(0) is None and c.get(4) == 4
    c.put("heavy", "h", 90)                      # over the byte budget: oldest go
    assert c.get("heavy") == "h" and c._bytes <= 100
    assert c.put("huge", "x", 101) == "x" and c.get("huge") is None   # never kept


def test_shared_cache_keeps_the_two_latest_large_dissimilarities():
    n, p = 1500, 8                               # 9 MB distances + 18 MB for G: large
    rng = np.random.default_rng(0)
    tab = tly.CommunityTable(pd.DataFrame(rng.poisson(4.0, size=(n, p)) + 1,
                                          index=[f"s{i}" for i in range(n)],
                                          columns=[f"t{j}" for j in range(p)]))
    clear_cache()
    first = [tly.dissimilarity(tab, "bray_curtis", transform=tly.Power(a))
             for a in (0.9, 0.8, 0.7)]
    again = [tly.dissimilarity(tab, "bray_curtis", transform=tly.Power(a))
             for a in (0.8, 0.7)]
    assert again[0] is first[1] and again[1] is first[2]          # cached
    assert tly.dissimilarity(tab, "bray_curtis", transform=tly.Power(0.9)) is not first[0]
    np.testing.assert_array_equal(first[0].condensed,
                                  tly.dissimilarity(tab, "bray_curtis",
                                                    transform=tly.Power(0.9)).condensed)
    assert shared_cache.max_large == 2
    clear_cache()
