"""A small, thread-safe, memory-bounded cache for expensive intermediate results.

Keys start with the table's fingerprint (a hash of its values, labels and sample
information), so a changed table never meets an old entry. The live dashboard moves a slider
and calls the same public functions again: what did not change (the shape coordinates, the
dissimilarity of an unchanged setting) is then taken from here instead of recomputed.
"""
from __future__ import annotations

import threading
from collections import OrderedDict

__all__ = ["ResultCache", "shared_cache", "clear_cache"]


class ResultCache:
    """Least-recently-used cache bounded by item count, by an estimate of bytes, and by the
    number of large items.

    Large items (``large_bytes`` and up: the dissimilarities of thousands of samples, each
    with room for its n x n Gower matrix) are few: a slider that passes over twenty
    settings would otherwise keep the last ten of them, and every new one would need memory
    the process has never touched. On the 2-core test machine that first touch cost more
    than the dissimilarity itself (measured at 2000 samples, Bray-Curtis: a slider step took
    265-310 ms holding up to ten, 200-215 ms holding two). The least recently used large
    item goes first; small items (shape coordinates, small tables) are not displaced by it.
    """

    def __init__(self, max_items: int = 32, max_bytes: float = 512e6, *,
                 max_large: int = 2, large_bytes: float = 16e6):
        self.max_items, self.max_bytes = int(max_items), float(max_bytes)
        self.max_large, self.large_bytes = int(max_large), float(large_bytes)
        self._data: OrderedDict = OrderedDict()
        self._bytes = 0.0
        self._lock = threading.Lock()
        self.hits = 0
        self.misses = 0

    def get(self, key):
        with self._lock:
            if key in self._data:
                self._data.move_to_end(key)
                self.hits += 1
                return self._data[key][0]
            self.misses += 1
            return None

    def put(self, key, value, nbytes: float = 0.0):
        if nbytes > self.max_bytes:       # too big to keep: the caller keeps its own copy
            return value
        with self._lock:
            if key in self._data:
                self._bytes -= self._data.pop(key)[1]
            self._data[key] = (value, float(nbytes))
            self._bytes += nbytes
            large = [k for k, (_, b) in self._data.items() if b >= self.large_bytes]
            for k in large[:max(0, len(large) - self.max_large)]:   # oldest first
                self._bytes -= self._data.pop(k)[1]
            while self._data and (len(self._data) > self.max_items
                                  or self._bytes > self.max_bytes):
                _, (_, b) = self._data.popitem(last=False)
                self._bytes -= b
        return value

    def clear(self):
        with self._lock:
            self._data.clear()
            self._bytes = 0.0

    def __len__(self):
        return len(self._data)


shared_cache = ResultCache()


def clear_cache() -> None:
    """Forget every cached intermediate result (tables are unaffected)."""
    shared_cache.clear()
