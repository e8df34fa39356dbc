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
        got = cache.pvalues_array(test, rows)
        for r, p in zip(map(tuple, rows.tolist()), got.tolist()):
            if r in reference:
                assert (np.isnan(p) and np.isnan(reference[r])) or p == reference[r]
            reference.setdefault(r, p)
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
        got = cache.pvalues_array(test, rows)
        for r, p in zip(map(tuple, rows.tolist()), got.tolist()):
            if r in reference:
                assert (np.isnan(p) and np.isnan(reference[r])) or p == reference[r]
            reference.setdefault(r, p)
        assert cache.nbytes <= budget  # the budget is honoured after every batch
        assert cache.nbytes == sum(t.nbytes for t in cache._store.values())
    assert cache.not_kept > 0 and len(cache) < len(reference)
    before = test.computed
    again = cache.pvalues_array(test, np.array(list(reference)))
    assert test.computed - before == len(reference) - len(cache)  # only what was not kept
    want = np.array(list(reference.values()))
    assert np.array_equal(np.isnan(again), np.isnan(want))
    assert np.array_equal(again[~np.isnan(want)], want[~np.isnan(want)])


def test_the_default_budget_is_a_share_of_the_memory(monkeypatch):
    from discovery import resources
    monkeypatch.setattr(resources, "available_memory", lambda: 400_000)
    assert PValueCache().max_bytes == 100_000  # a quarter of the memory available
    monkeypatch.setattr(resources, "available_memory", lambda: 1 << 40)
    assert PValueCache().max_bytes == 1 << 30  # at most 1 GiB
    assert PValueCache(max_bytes=None).max_bytes is None
