"""A p-value cache with vectorised lookups, for the many rungs of a sweep.

:class:`~discovery.independence.PValueCache` keys each test in a Python dict: one hash per
test. A sweep asks for hundreds of thousands of tests per rung, most of them already known, and
for a vectorised test such as Fisher's z a dict lookup costs about as much as computing the
p-value again. :class:`SortedPValueCache` keeps the same keys (the row ``[x, y, s1..sk]``
packed into one 64-bit integer) in sorted numpy arrays instead: a batch is looked up with one
``searchsorted`` per run of stored keys, and new keys are appended as a sorted run, runs being
merged when they grow many (a log-structured layout). Rows too wide to pack are keyed by a
64-bit hash with the rows kept beside it, and a stored value is used only for an equal row.
"""

from __future__ import annotations

import numpy as np

from ..independence import PValueCache

__all__ = ["SortedPValueCache"]

_MAX_RUNS = 8


class _Runs:
    """Sorted runs of (key, p-value); the first run is the largest. For rows too wide to
    pack into one integer the key is a 64-bit hash and the rows are kept beside it: a value
    is returned only when the stored row equals the row asked for (a hash collision just
    means the test is computed again), so answers stay exact."""

    __slots__ = ("keys", "values", "rows")

    def __init__(self):
        self.keys: list[np.ndarray] = []
        self.values: list[np.ndarray] = []
        self.rows: list[np.ndarray | None] = []

    def lookup(self, want: np.ndarray, rows: np.ndarray | None = None):
        values = np.full(len(want), np.nan)
        known = np.zeros(len(want), dtype=bool)
        for keys, vals, stored in zip(self.keys, self.values, self.rows):
            at = np.minimum(np.searchsorted(keys, want), len(keys) - 1)
            hit = keys[at] == want
            if stored is not None:
                hit &= (stored[at] == rows).all(axis=1)
            values[hit] = vals[at[hit]]
            known |= hit
        return values, known

    def add(self, keys: np.ndarray, values: np.ndarray, rows: np.ndarray | None = None):
        if not len(keys):
            return
        keys, first = np.unique(keys, return_index=True)  # sorted, a repeated row once
        self.keys.append(keys)
        self.values.append(values[first])
        self.rows.append(None if rows is None else rows[first])
        # levelled merging: the newest run is merged into the one before while it is not
        # much smaller (or when runs are many), so every key is re-sorted O(log n) times
        while len(self.keys) > 1 and (4 * len(self.keys[-1]) >= len(self.keys[-2])
                                      or len(self.keys) > _MAX_RUNS):
            self._merge_last_two()

    def _merge_last_two(self):
        merged = np.concatenate(self.keys[-2:])
        order = np.argsort(merged, kind="stable")  # two sorted runs: a linear-time merge
        values = np.concatenate(self.values[-2:])[order]
        rows = None if self.rows[-1] is None else np.concatenate(self.rows[-2:])[order]
        self.keys[-2:] = [merged[order]]
        self.values[-2:] = [values]
        self.rows[-2:] = [rows]

    def __len__(self):
        return sum(len(k) for k in self.keys)


_MIX = np.array([0x9E3779B97F4A7C15, 0xC2B2AE3D27D4EB4F, 0x165667B19E3779F9,
                 0xD6E8FEB86659FD93, 0xFF51AFD7ED558CCD, 0xC4CEB9FE1A85EC53],
                dtype=np.uint64)


def _hash_rows(idx: np.ndarray) -> np.ndarray:
    """A 64-bit hash of each row (multiply by odd constants, add, xor-shift)."""
    h = np.zeros(len(idx), dtype=np.uint64)
    with np.errstate(over="ignore"):
        for k in range(idx.shape[1]):
            h += idx[:, k].astype(np.uint64) * _MIX[k % len(_MIX)]
            h ^= h >> np.uint64(29)
            h *= _MIX[(k + 3) % len(_MIX)]
    return h


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
        rows = None
        if bits * idx.shape[1] > 62:  # too wide to pack: hash, and check the rows
            packed, rows = _hash_rows(idx), idx
        else:
            packed = np.zeros(len(idx), dtype=np.int64)
            for k in range(idx.shape[1]):
                packed |= idx[:, k].astype(np.int64) << (bits * k)
        key = (test.settings_key(), idx.shape[1])
        with self._lock:
            runs = self._runs.setdefault(key, _Runs())
            values, known = runs.lookup(packed, rows)
        todo = np.flatnonzero(~known)
        if len(todo):
            fresh = np.asarray(test.pvalues_array(idx[todo], executor=executor), dtype=float)
            values[todo] = fresh
            with self._lock:
                runs.add(packed[todo], fresh, None if rows is None else rows[todo])
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
