"""A p-value cache with vectorised lookups, for the many rungs of a sweep.

:class:`~discovery.independence.PValueCache` keys each test in a Python dict: one hash per
test. A sweep asks for hundreds of thousands of tests per rung, most of them already known, and
for a vectorised test such as Fisher's z a dict lookup costs about as much as computing the
p-value again. :class:`SortedPValueCache` keeps the same keys (the row ``[x, y, s1..sk]``
packed into one 64-bit integer) in sorted numpy arrays instead: a batch is looked up with one
``searchsorted`` per run of stored keys, and new keys are appended as a sorted run, runs being
merged when they grow many (a log-structured layout). Rows that do not fit in 64 bits go
through the dict of the base class.
"""

from __future__ import annotations

import numpy as np

from ..independence import PValueCache

__all__ = ["SortedPValueCache"]

_MAX_RUNS = 6


class _Runs:
    """Sorted runs of (key, p-value); the first run is the largest."""

    __slots__ = ("keys", "values")

    def __init__(self):
        self.keys: list[np.ndarray] = []
        self.values: list[np.ndarray] = []

    def lookup(self, want: np.ndarray):
        values = np.full(len(want), np.nan)
        known = np.zeros(len(want), dtype=bool)
        for keys, vals in zip(self.keys, self.values):
            at = np.minimum(np.searchsorted(keys, want), len(keys) - 1)
            hit = keys[at] == want
            values[hit] = vals[at[hit]]
            known |= hit
        return values, known

    def add(self, keys: np.ndarray, values: np.ndarray) -> None:
        if not len(keys):
            return
        keys, first = np.unique(keys, return_index=True)  # sorted, a repeated row once
        self.keys.append(keys)
        self.values.append(values[first])
        if len(self.keys) > _MAX_RUNS:
            merged = np.concatenate(self.keys)
            order = np.argsort(merged, kind="stable")
            self.keys = [merged[order]]
            self.values = [np.concatenate(self.values)[order]]

    def __len__(self):
        return sum(len(k) for k in self.keys)


class SortedPValueCache(PValueCache):
    """A :class:`~discovery.independence.PValueCache` whose tables are sorted numpy runs.

    Answers exactly as the base class (same keys, same stored values, NaN kept as NaN), with
    the same ``hits`` and ``misses`` counters.
    """

    def __init__(self):
        super().__init__()
        self._runs: dict[tuple, _Runs] = {}

    def pvalues_array(self, test, idx, *, executor=None):
        idx = np.asarray(idx, dtype=np.intp)
        if len(idx) == 0:
            return np.empty(0)
        bits = max(1, int(len(test.variables)).bit_length())
        if bits * idx.shape[1] > 62:
            return super().pvalues_array(test, idx, executor=executor)
        packed = np.zeros(len(idx), dtype=np.int64)
        for k in range(idx.shape[1]):
            packed |= idx[:, k].astype(np.int64) << (bits * k)
        key = (test.settings_key(), idx.shape[1])
        with self._lock:
            runs = self._runs.setdefault(key, _Runs())
            values, known = runs.lookup(packed)
        todo = np.flatnonzero(~known)
        if len(todo):
            fresh = np.asarray(test.pvalues_array(idx[todo], executor=executor), dtype=float)
            values[todo] = fresh
            with self._lock:
                runs.add(packed[todo], fresh)
        with self._lock:
            self.misses += len(todo)
            self.hits += len(idx) - len(todo)
        return values

    def __len__(self) -> int:
        others = super().__len__()  # takes the lock itself (not re-entrant)
        with self._lock:
            return others + sum(len(r) for r in self._runs.values())

    def clear(self) -> None:
        with self._lock:
            self._runs.clear()
        super().clear()
