"""The p-value cache against a plain dictionary (common practice, no source: a cache must
answer exactly what was stored, and compute only what was not)."""

import numpy as np
import pytest

from discovery.independence import PValueCache
from discovery.independence._base import IndependenceTest


class CountingTest(IndependenceTest):
    """A test whose p-value is a fixed function of the row, counting the rows it computes."""

    name = "counting"
    vectorised = True

    def __init__(self, n_vars):
        self.variables = tuple(f"v{i}" for i in range(n_vars))
        self.n = None
        self.computed = 0

    def settings_key(self):
        return ("counting", len(self.variables))

    def _batch_array(self, idx):
        self.computed += len(idx)
        p = (np.sin(idx.astype(float) @ np.arange(1, idx.shape[1] + 1)) + 1) / 2
        p[idx[:, 0] % 7 == 3] = np.nan  # some untestable rows: "known to be NaN" is kept
        return p, p


def _rows(rng, n_vars, width, count):
    rows = np.sort(rng.choice(n_vars, size=(count, width), replace=True), axis=1)
    rows = rows[(np.diff(rows, axis=1) > 0).all(axis=1)]  # distinct variables in a row
    return rows


@pytest.mark.parametrize("n_vars, width", [(40, 3), (1000, 9), (70_000, 4)])
def test_the_cache_answers_what_a_dictionary_would(n_vars, width):
    rng = np.random.default_rng(width)
    test, cache, reference = CountingTest(n_vars), PValueCache(), {}
    for _ in range(30):  # many batches: many runs, merged as they grow
        rows = _rows(rng, n_vars, width, int(rng.integers(1, 400)))
        if reference and rng.random() < 0.5:  # repeat some rows already known
            old = np.array(list(reference)[: int(rng.integers(1, 50))])
            rows = np.concatenate([rows, old])
        _ask_and_compare(cache, test, rows, reference)
    assert len(cache) == len(reference)
    # every row in the reference is answered from the cache now, nothing recomputed
    before = test.computed
    again = cache.pvalues_array(test, np.array(list(reference)))
    assert test.computed == before
    want = np.array(list(reference.values()))
    assert np.array_equal(np.isnan(again), np.isnan(want))
    assert np.array_equal(again[~np.isnan(want)], want[~np.isnan(want)])


@pytest.mark.parametrize("n_vars, width", [(40, 3), (70_000, 4)])
def test_a_full_store_keeps_its_budget_and_still_answers_what_a_dictionary_would(n_vars, width):
    # the store's byte budget: past it nothing more is kept, but every answer is still the
    # test's own (computed again when not kept)
    rng = np.random.default_rng(width + 1)
    budget = 3000
    test, cache, reference = CountingTest(n_vars), PValueCache(max_bytes=budget), {}
    for _ in range(30):
        rows = _rows(rng, n_vars, width, int(rng.integers(1, 200)))
        if reference and rng.random() < 0.5:
            rows = np.concatenate([rows, np.array(list(reference)[: int(rng.integers(1, 50))])])
        _ask_and_compare(cache, test, rows, reference)
        assert cache.nbytes <= budget  # the budget is honoured after every batch
        # the count is of rows as handed over: copies within a batch are kept once
        assert sum(t.nbytes for t in cache._store.values()) <= cache.nbytes
    assert cache.not_kept > 0 and len(cache) < len(reference)
    before = test.computed
    again = cache.pvalues_array(test, np.array(list(reference)))
    assert test.computed - before == len(reference) - len(cache)  # only what was not kept
    want = np.array(list(reference.values()))
    assert np.array_equal(np.isnan(again), np.isnan(want))
    assert np.array_equal(again[~np.isnan(want)], want[~np.isnan(want)])


def _ask_and_compare(cache, test, rows, reference):
    """Ask the cache for ``rows``; every row asked before must get its earlier answer (the
    plain dictionary ``reference``, which then learns the new rows)."""
    got = cache.pvalues_array(test, rows)
    for r, p in zip(map(tuple, rows.tolist()), got.tolist()):
        if r in reference:
            assert (np.isnan(p) and np.isnan(reference[r])) or p == reference[r]
        reference.setdefault(r, p)


def test_the_default_budget_is_a_share_of_the_memory(monkeypatch):
    from discovery import resources
    monkeypatch.setattr(resources, "available_memory", lambda: 400_000)
    assert PValueCache().max_bytes == 100_000  # a quarter of the memory available
    monkeypatch.setattr(resources, "available_memory", lambda: 1 << 40)
    assert PValueCache().max_bytes == 1 << 30  # at most 1 GiB
    assert PValueCache(max_bytes=None).max_bytes is None


def test_wide_rows_whose_keys_collide_are_told_apart(monkeypatch):
    # Rows wider than one 64-bit word are ordered by a mix of their words; a mix that sends
    # many different rows to the same few keys must still give each row its own p-value
    # (common practice, no source: a hash only orders, equality decides)
    import discovery.independence._base as base
    monkeypatch.setattr(base, "_mixed", lambda words: words[:, 0] & np.uint64(3))
    rng = np.random.default_rng(5)
    test, cache, reference = CountingTest(300), PValueCache(), {}
    for _ in range(20):
        rows = _rows(rng, 300, 9, int(rng.integers(1, 300)))  # 9 x 9 bits: two words
        if reference and rng.random() < 0.5:
            rows = np.concatenate([rows, np.array(list(reference)[: int(rng.integers(1, 40))])])
        _ask_and_compare(cache, test, rows, reference)
    assert len(cache) == len(reference)
    before = test.computed
    again = cache.pvalues_array(test, np.array(list(reference))[::-1])
    assert test.computed == before
    want = np.array(list(reference.values()))[::-1]
    assert np.array_equal(np.isnan(again), np.isnan(want))
    assert np.array_equal(again[~np.isnan(want)], want[~np.isnan(want)])
    assert np.array_equal(np.nan_to_num(again, nan=-1),
                          np.nan_to_num(test._batch_array(np.array(list(reference))[::-1])[1],
                                        nan=-1))


def test_a_deferred_view_stores_what_it_computed_when_closed():
    # common practice, no source: a write-behind view must answer like the cache, and lose
    # nothing it computed, also when the caller stops with an error
    rng = np.random.default_rng(11)
    test, cache = CountingTest(300), PValueCache()
    known = _rows(rng, 300, 4, 200)
    first = cache.pvalues_array(test, known)
    fresh = _rows(rng, 300, 4, 200)
    fresh = fresh[~(fresh[:, None, :] == known[None, :, :]).all(axis=2).any(axis=1)]
    with pytest.raises(RuntimeError):
        with cache.deferred() as view:
            got = view.pvalues_array(test, np.concatenate([known, fresh]))
            assert np.array_equal(got[:len(known)], first, equal_nan=True)
            assert cache.hits == len(known) and cache.misses == len(known) + len(fresh)
            assert len(cache) == len(known)  # kept aside until the view closes
            raise RuntimeError("stopped")
    assert len(cache) == len(known) + len(fresh)
    before = test.computed
    again = cache.pvalues_array(test, fresh)
    assert test.computed == before
    assert np.array_equal(again, test._batch_array(fresh)[1], equal_nan=True)
