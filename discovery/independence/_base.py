"""The one protocol every independence test follows, and the shared p-value cache.

A conditional-independence test asks whether ``x`` and ``y`` are independent given a
conditioning set ``S``; its p-value is small when the data speak against independence. The
search never calls a test one triple at a time: it hands over a *batch* of triples (every test
of one level of the adjacency search, with adjacencies frozen), so that a test can vectorise
the batch in numpy or spread it over an executor.

Variables are addressed by their position in ``test.variables``. A triple is
``(x, y, S)`` with ``x != y`` two ints and ``S`` a tuple of ints containing neither.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass
from itertools import chain
from typing import Iterable, Sequence

import numpy as np

__all__ = [
    "Triple",
    "IndependenceResult",
    "IndependenceTest",
    "PValueCache",
    "canonical_triple",
    "group_by_size",
]

Triple = tuple  # (x: int, y: int, given: tuple[int, ...])


def canonical_triple(x: int, y: int, given: Iterable[int]) -> tuple[int, int, tuple[int, ...]]:
    """Return the triple with ``x < y`` and a sorted conditioning set (tests are symmetric)."""
    if x > y:
        x, y = y, x
    return (int(x), int(y), tuple(sorted(int(s) for s in given)))


def group_by_size(triples: Sequence[Triple]) -> list[tuple[np.ndarray, np.ndarray]]:
    """Split a batch by conditioning-set size into ``(rows, idx)`` arrays.

    ``rows`` are positions in the batch; ``idx`` has one row ``[x, y, s1, ..., sk]`` per test.
    Tests use it to stack a batch into numpy arrays without a Python loop per test.
    """
    sizes = np.fromiter((len(t[2]) for t in triples), dtype=np.intp, count=len(triples))
    out = []
    for size in np.unique(sizes):
        rows = np.flatnonzero(sizes == size)
        chosen = triples if len(rows) == len(triples) else [triples[i] for i in rows]
        flat = np.fromiter(chain.from_iterable((t[0], t[1], *t[2]) for t in chosen),
                           dtype=np.intp, count=len(rows) * (int(size) + 2))
        out.append((rows, flat.reshape(len(rows), int(size) + 2)))
    return out


@dataclass(frozen=True, slots=True)
class IndependenceResult:
    """One test of ``x ⟂ y | given``: its statistic and p-value, with the context to read them.

    Attributes
    ----------
    statistic : float
        The test's statistic (Fisher's z, G², HSIC, ...); NaN when the test could not be run.
    pvalue : float
        Probability under independence of a statistic at least as extreme; NaN when not run.
    x, y : str
        The two variables tested.
    given : tuple of str
        The conditioning set.
    n : int or None
        Rows used (None for an oracle).
    method : str
        The test's name, e.g. ``"fisher-z"``.
    """

    statistic: float
    pvalue: float
    x: str
    y: str
    given: tuple[str, ...]
    n: int | None
    method: str

    def __repr__(self) -> str:
        given = ", ".join(self.given)
        cond = f" | {given}" if given else ""
        return (f"IndependenceResult({self.method}: {self.x} ⟂ {self.y}{cond}; "
                f"statistic={self.statistic:.4g}, pvalue={self.pvalue:.4g}, n={self.n})")


class IndependenceTest:
    """Base class of the batch protocol.

    A batch is an integer array ``idx`` of shape ``(m, k + 2)``: one row ``[x, y, s1..sk]`` per
    test, ``x < y`` and the ``s`` ascending (every row of a batch has the same set size ``k``).
    Subclasses implement either :meth:`_batch_array` (vectorised, preferred) or
    :meth:`_batch` (a list of ``(x, y, S)`` triples), returning statistics and p-values. They
    also implement :meth:`settings_key`, a hashable description of everything that changes a
    p-value (data fingerprint, kernel widths, seeds, ...), which keys the shared cache.

    Attributes
    ----------
    name : str
        Short name of the test family (``"fisher-z"``, ``"d-separation"``, ...).
    variables : tuple of str
        The variables, in the order the triples address them.
    n : int or None
        Number of rows (None when the test is not computed from data).
    vectorised : bool
        True when a batch is one cheap numpy computation that should stay in-process; the
        search then sends whole levels at once. False spreads batches over the executor.
    """

    name: str = "abstract"
    variables: tuple[str, ...] = ()
    n: int | None = None
    vectorised: bool = True

    # -- to implement -------------------------------------------------------------------------
    def settings_key(self) -> tuple:
        """Hashable identity of the test and everything that changes its p-values."""
        raise NotImplementedError

    def _batch(self, triples: Sequence[Triple]) -> tuple[np.ndarray, np.ndarray]:
        """Statistics and p-values (two float arrays) for canonical triples."""
        return self._batch_array_grouped(triples)

    def _batch_array(self, idx: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Statistics and p-values for an index array of one set size."""
        triples = [(int(r[0]), int(r[1]), tuple(int(v) for v in r[2:])) for r in idx]
        return self._batch(triples)

    def _batch_array_grouped(self, triples):
        if type(self)._batch_array is IndependenceTest._batch_array:
            raise NotImplementedError("implement _batch or _batch_array")
        stat = np.full(len(triples), np.nan)
        pval = np.full(len(triples), np.nan)
        for rows, idx in group_by_size(triples):
            stat[rows], pval[rows] = self._batch_array(idx)
        return stat, pval

    def association(self) -> np.ndarray | None:
        """Optional: a symmetric matrix of association strengths between the variables.

        The search tries the conditioning variables most associated with both members of a
        pair first, which finds separating sets with fewer tests. None (the default) lets the
        search use ``1 - p`` of the unconditional tests instead.
        """
        return None

    def may_separate(self, pairs: np.ndarray, alpha: float) -> np.ndarray | None:
        """Optional: which single variables could separate each pair at level ``alpha``.

        ``pairs`` is an ``(m, 2)`` index array. Returns a boolean ``(m, len(variables))``
        array that is False only where the test can tell, without running it, that
        conditioning on that one variable cannot give a p-value above ``alpha``; the search
        then skips those tests. None (the default): no such knowledge, every test is run.
        """
        return None

    # -- provided -----------------------------------------------------------------------------
    def pvalues(self, triples: Sequence[Triple], *, executor=None,
                canonical: bool = False) -> np.ndarray:
        """Return the p-values of a batch of triples, as a float array in the batch's order.

        Parameters
        ----------
        triples : sequence of (int, int, tuple of int)
            The tests to run.
        executor : discovery.executor.Executor, optional
            Where to spread the work. Vectorised tests ignore it and compute in-process.
        canonical : bool
            The caller promises ``x < y`` and ascending sets (skips re-sorting).
        """
        canon = list(triples) if canonical else [canonical_triple(*t) for t in triples]
        out = np.full(len(canon), np.nan)
        for rows, idx in group_by_size(canon):
            out[rows] = self.pvalues_array(idx, executor=executor)
        return out

    def pvalues_array(self, idx: np.ndarray, *, executor=None) -> np.ndarray:
        """p-values for an index array of canonical rows ``[x, y, s1..sk]`` (one set size)."""
        idx = np.asarray(idx, dtype=np.intp)
        if len(idx) == 0:
            return np.empty(0)
        if executor is None or self.vectorised or len(idx) < 2 or executor.jobs == 1:
            return np.asarray(self._batch_array(idx)[1], dtype=float)
        if not hasattr(executor, "map_rows"):  # an executor of the older, map-only kind
            parts = executor.chunks(range(len(idx)))
            results = executor.map(_pvalues_of_chunk, [(self, idx[part[0]:part[-1] + 1])
                                                       for part in parts])
            return np.concatenate([np.asarray(r, dtype=float) for r in results])
        # The test (with its data) goes to each worker once; chunks carry index rows only.
        # Rows sorted by conditioning set first keep tests that share a set (and the features
        # or residual makers a test builds for it) in one chunk. Before the set comes a side
        # drawn from the set alone: the caller takes pieces from the back of a batch and the
        # workers from the front, so a set goes to the same side in every batch, where its
        # cached pieces are (sorted by set alone, the kernel search at n = 10,000 built 63
        # conditioning-set features on 2 processes where one process builds 50).
        if idx.shape[1] <= 2:
            order = np.lexsort(idx[:, ::-1].T)
        else:
            side = (idx[:, 2:].astype(np.uint64).sum(axis=1) * np.uint64(_MIX)) >> np.uint64(63)
            order = np.lexsort(np.vstack([idx[:, 1], idx[:, 0], idx[:, :1:-1].T, side]))
        rows = idx[order]
        groups = None
        if rows.shape[1] > 2:  # label each row by its conditioning set
            change = np.any(rows[1:, 2:] != rows[:-1, 2:], axis=1)
            groups = np.concatenate([[0], np.cumsum(change)])
        out = np.empty(len(idx))
        out[order] = executor.map_rows(_pvalues_of_rows, self, rows, groups=groups)
        return out

    def test(self, x: str, y: str, given: Iterable[str] = ()) -> IndependenceResult:
        """Run one test by variable names and return an :class:`IndependenceResult`."""
        index = {v: i for i, v in enumerate(self.variables)}
        given = tuple(given)
        missing = [v for v in (x, y, *given) if v not in index]
        if missing:
            raise KeyError(f"variables {missing} are not among {list(self.variables)}")
        if x == y or x in given or y in given:
            raise ValueError("`x`, `y` and `given` must name different variables")
        triple = canonical_triple(index[x], index[y], [index[g] for g in given])
        stat, p = self._batch_array(np.array([[triple[0], triple[1], *triple[2]]],
                                             dtype=np.intp))
        return IndependenceResult(float(stat[0]), float(p[0]), x, y, given, self.n, self.name)

    def __repr__(self) -> str:
        return f"{type(self).__name__}({len(self.variables)} variables, n={self.n})"


_MIX = 0x9E3779B97F4A7C15  # odd 64-bit multiplier (2^64 / golden ratio): spreads set sums


def _pvalues_of_rows(test, part):
    return np.asarray(test._batch_array(part)[1], dtype=float)


def _pvalues_of_chunk(args):
    test, part = args
    return test._batch_array(part)[1]


class _SizeTable:
    """p-values of one test and one set size, as a few sorted runs of packed keys.

    A row ``[x, y, s1..sk]`` is packed into unsigned 64-bit words, ``bits`` per variable and
    as many variables as fit in a word (seven of 300 variables). A row that fits one word is
    its own key; a wider row is kept as its words and sorted by a 64-bit mix of them, and a
    lookup compares the words themselves, so two rows that mix alike are still told apart
    (the key only orders the run; the words decide). Keys, words and p-values live in numpy
    arrays, sorted run by run (a log-structured merge: a new batch is a run of its own, and
    runs of similar size are merged), so a lookup is a binary search of 64-bit integers per
    run, and a stored test costs 16 bytes (a wide row 8 more per word and 8 for its key),
    against about 200 in a dictionary of Python objects, which is what lets a search of tens
    of millions of tests fit in memory.
    """

    def __init__(self, n_vars: int, width: int):
        self.bits = max(1, int(n_vars).bit_length())
        self.per_word = 64 // self.bits
        self.words = -(-width // self.per_word)
        self.width = width
        # each run: (sorted 64-bit keys, the rows' words in the same order or None, p-values)
        self.runs: list[tuple[np.ndarray, np.ndarray | None, np.ndarray]] = []
        # stored but not sorted yet: sorted into a run by the next lookup (rows no later
        # search asks for, such as the deepest levels of a sweep's densest rung, never are)
        self.unsorted: list[tuple[np.ndarray, np.ndarray | None, np.ndarray]] = []

    def keys_of(self, idx: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
        """(64-bit keys, the rows' words or None when one word is the key), in batch order.
        Only the table's shape is read: safe without the cache's lock."""
        words = np.zeros((len(idx), self.words), dtype=np.uint64)
        for k in range(idx.shape[1]):
            # the first variable of a word in its highest bits: rows that come in row order
            # (a level of pairs, say) come with their keys already sorted
            column = idx[:, k].astype(np.uint64)
            column <<= np.uint64(self.bits * (self.per_word - 1 - k % self.per_word))
            words[:, k // self.per_word] |= column
        if self.words == 1:
            return words[:, 0], None
        return _mixed(words), words

    def lookup(self, keys: np.ndarray, words: np.ndarray | None = None
               ) -> tuple[np.ndarray, np.ndarray]:
        """(p-values, mask of known keys), in the order given; unknown keys get NaN.

        The keys are searched in ascending order: a binary search that starts where the last
        one ended stays in cached memory, two to four times faster than the same searches in
        batch order even after paying for the sort. The largest run is searched first and
        each later run only for the keys still unknown."""
        values = np.full(len(keys), np.nan)
        known = np.zeros(len(keys), dtype=bool)
        self.settle()
        if not self.runs or not len(keys):
            return values, known
        todo = _ascending(keys)
        for run in sorted(self.runs, key=lambda r: -len(r[0])):
            if not len(todo):
                break
            hit, at = _find(run, keys[todo], None if words is None
                            else words.take(todo, axis=0))
            values[todo[hit]] = run[2][at[hit]]
            known[todo[hit]] = True
            todo = todo[~hit]
        return values, known

    def store(self, keys: np.ndarray, words: np.ndarray | None, values: np.ndarray) -> None:
        """Add keys (with their words) and p-values in any order; of copies of one row the
        first is kept, and rows already stored keep their value. Sorted when first needed."""
        self.unsorted.append((keys, words, np.asarray(values, dtype=float)))

    def settle(self) -> None:
        """Sort the rows stored since the last lookup into a run; merge runs of similar size."""
        if not self.unsorted:
            return
        parts, self.unsorted = self.unsorted, []
        keys = np.concatenate([k for k, _, _ in parts]) if len(parts) > 1 else parts[0][0]
        words = None if parts[0][1] is None else (
            np.concatenate([w for _, w, _ in parts]) if len(parts) > 1 else parts[0][1])
        values = np.concatenate([v for _, _, v in parts]) if len(parts) > 1 else parts[0][2]
        order = _ascending(keys)
        # (np.take along the first axis: several times faster than fancy indexing of rows)
        self.runs.append(_unique_run(keys[order], None if words is None
                                     else words.take(order, axis=0), values[order], order))
        while len(self.runs) > 1 and len(self.runs[-2][0]) <= 2 * len(self.runs[-1][0]):
            second = self.runs.pop()
            self.runs[-1] = _merged_runs(self.runs[-1], second)

    @property
    def nbytes(self) -> int:
        """Bytes of the stored keys, words and p-values."""
        return sum(a.nbytes for part in (*self.runs, *self.unsorted) for a in part
                   if a is not None)

    def __len__(self):
        self.settle()
        return sum(len(r[0]) for r in self.runs)


def _ascending(keys: np.ndarray) -> np.ndarray:
    """The order that sorts ``keys``: checked first, since batches often come sorted."""
    if len(keys) < 2 or bool((keys[1:] >= keys[:-1]).all()):
        return np.arange(len(keys))
    return np.argsort(keys)


def _mixed(words: np.ndarray) -> np.ndarray:
    """A 64-bit mix of each row of words (the finaliser of Steele, Lea & Flood's SplitMix64,
    2014, applied word after word): it only orders a run, so equal mixes of different rows
    cost a comparison, never a wrong answer."""
    h = np.zeros(len(words), dtype=np.uint64)
    for j in range(words.shape[1]):
        h ^= words[:, j]
        h ^= h >> np.uint64(30)
        h *= np.uint64(0xBF58476D1CE4E5B9)
        h ^= h >> np.uint64(27)
        h *= np.uint64(0x94D049BB133111EB)
        h ^= h >> np.uint64(31)
    return h


def _find(run, keys: np.ndarray, words: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    """(found mask, position) of each key (and row of words) in a sorted run: a found row's
    position in the run, else where it would be inserted to keep the run sorted. Wide rows
    are compared word by word, walking over the run's rows whose keys are equal."""
    run_keys, run_words, _ = run
    at = np.searchsorted(run_keys, keys)
    inside = np.flatnonzero(at < len(run_keys))
    hit = np.zeros(len(keys), dtype=bool)
    hit[inside] = run_keys[at[inside]] == keys[inside]
    if run_words is None:
        return hit, at
    same = np.flatnonzero(hit)
    hit[same] = (run_words.take(at[same], axis=0) == words.take(same, axis=0)).all(axis=1)
    walk = same[~hit[same]]  # equal keys, other rows: try the next equal keys
    while len(walk):
        at[walk] += 1
        walk = walk[at[walk] < len(run_keys)]
        walk = walk[run_keys[at[walk]] == keys[walk]]
        match = (run_words.take(at[walk], axis=0) == words.take(walk, axis=0)).all(axis=1)
        hit[walk[match]] = True
        walk = walk[~match]
    return hit, at


def _merged_runs(first, second):
    """Two sorted runs as one, in linear time: each row of the second goes to its searched
    position shifted by the rows inserted before it, the first's rows fill the gaps (rows of
    the second already in the first keep the first's value)."""
    found, at = _find(first, second[0], second[1])
    fresh = np.flatnonzero(~found)
    size = len(first[0]) + len(fresh)
    at = at[fresh] + np.arange(len(fresh))
    from_first = np.ones(size, dtype=bool)
    from_first[at] = False
    merged = []
    for one, two in zip(first, second):
        if one is None:
            merged.append(None)
            continue
        out = np.empty((size,) + one.shape[1:], dtype=one.dtype)
        out[at] = two.take(fresh, axis=0)
        out[from_first] = one
        merged.append(out)
    return tuple(merged)


def _unique_run(keys: np.ndarray, words: np.ndarray | None, values: np.ndarray,
                first: np.ndarray):
    """Sorted keys as a run, each row once: of copies, the one lowest in ``first``."""
    if len(keys) < 2:
        return keys, words, values
    tie = keys[1:] == keys[:-1]
    if not tie.any():
        return keys, words, values
    # copies of a row, or equal keys of different wide rows (rare): order each group of
    # equal keys by the words, then by ``first``, so that copies sit together, the first first
    order = np.lexsort((first, *([] if words is None else words.T[::-1]), keys))
    keys, values = keys[order], values[order]
    tie = keys[1:] == keys[:-1]
    if words is not None:
        words = words.take(order, axis=0)
        tie &= (words[1:] == words[:-1]).all(axis=1)
    keep = np.ones(len(keys), dtype=bool)
    keep[1:] = ~tie
    return keys[keep], None if words is None else words[keep], values[keep]


#: The p-value store keeps at most this many bytes by default ...
CACHE_MEMORY_CAP = 1 << 30
#: ... and at most this share of the memory available when it is made.
CACHE_MEMORY_SHARE = 0.25


def default_cache_budget() -> int:
    """Bytes a new :class:`PValueCache` may hold: a quarter of the memory available, at most
    1 GiB."""
    from ..resources import available_memory
    return int(min(CACHE_MEMORY_CAP, CACHE_MEMORY_SHARE * available_memory()))


class PValueCache:
    """Thread-safe store of p-values keyed by test settings and the canonical triple.

    One cache can serve many searches: a knowledge edit, a new α or a re-run reuses every
    p-value already known for the same test settings. Lookups and inserts are vectorised
    (rows packed into 64-bit keys, kept sorted), so the cache costs little even for the
    hundreds of thousands of tests of a large search. A caller that never asks for one test
    twice (the adjacency search) goes through :meth:`deferred`, which stores its p-values
    when it ends; rows are sorted only when a lookup first needs them.

    Parameters
    ----------
    max_bytes : int, "auto" or None
        The most bytes of keys and p-values the store holds (a store of 16 to 40 bytes a
        test would otherwise grow past the memory on a search of hundreds of millions of
        tests). A batch whose new p-values would take it past this is answered but not
        stored: a later search computes those again. ``"auto"`` (the default): a quarter of
        the memory available when the store is made, at most 1 GiB; None: no limit. (Merging
        its sorted runs briefly needs up to as much again as the largest run.)

    Attributes
    ----------
    hits, misses : int
        p-values answered from the store, and computed.
    not_kept : int
        p-values computed but not stored because the store was full.
    """

    def __init__(self, max_bytes="auto"):
        self._store: dict[tuple, _SizeTable] = {}
        self._lock = threading.Lock()
        self.hits = 0
        self.misses = 0
        self.not_kept = 0
        self.max_bytes = default_cache_budget() if max_bytes == "auto" else max_bytes
        self.nbytes = 0

    def pvalues(self, test: IndependenceTest, triples: Sequence[Triple], *,
                executor=None, canonical: bool = False) -> np.ndarray:
        """Return p-values for a list of triples, computing only those not yet known."""
        canon = triples if canonical else [canonical_triple(*t) for t in triples]
        out = np.full(len(canon), np.nan)
        for rows, idx in group_by_size(canon):
            out[rows] = self.pvalues_array(test, idx, executor=executor)
        return out

    def pvalues_array(self, test: IndependenceTest, idx: np.ndarray, *,
                      executor=None) -> np.ndarray:
        """Return p-values for canonical index rows of one set size (see IndependenceTest)."""
        return self._answer(test, idx, executor, None)

    def deferred(self) -> "DeferredStore":
        """A view of the cache for a caller that never asks for one test twice, such as the
        adjacency search (each level tests each pair with each set at most once).

        Lookups go to the cache as it stands; the p-values computed are kept aside and
        handed to the cache when the view is closed (use it as a context manager), to be
        sorted once, when a lookup first needs them, instead of batch by batch. Until then,
        other callers do not see them and would compute them again (with the same result).
        """
        return DeferredStore(self)

    def _answer(self, test, idx, executor, pending) -> np.ndarray:
        idx = np.asarray(idx, dtype=np.intp)
        if len(idx) == 0:
            return np.empty(0)
        key = (test.settings_key(), idx.shape[1])
        with self._lock:
            table = self._store.get(key)
            if table is None:
                table = self._store[key] = _SizeTable(len(test.variables), idx.shape[1])
        keys, words = table.keys_of(idx)
        with self._lock:
            values, known = table.lookup(keys, words)
        todo = np.flatnonzero(~known)
        if len(todo) == len(idx):  # nothing known (often: a new level of a search)
            fresh = np.asarray(test.pvalues_array(idx, executor=executor), dtype=float)
            values = fresh.copy()  # the caller's to keep: the store keeps its own
        elif len(todo):
            fresh = np.asarray(test.pvalues_array(idx.take(todo, axis=0), executor=executor),
                               dtype=float)
            values[todo] = fresh
            keys = keys[todo]
            words = None if words is None else words.take(todo, axis=0)
        if len(todo) and pending is None:
            with self._lock:
                self._keep(table, keys, words, fresh)
        elif len(todo):
            pending.setdefault(id(table), (table, []))[1].append((keys, words, fresh))
        with self._lock:
            self.misses += len(todo)
            self.hits += len(idx) - len(todo)
        return values

    def _keep(self, table: "_SizeTable", keys, words, fresh) -> None:
        """Store fresh p-values, unless they would take the store past ``max_bytes`` (then
        they are answered but not kept: a later search computes them again). Call locked."""
        size = keys.nbytes + fresh.nbytes + (0 if words is None else words.nbytes)
        if self.max_bytes is None or self.nbytes + size <= self.max_bytes:
            table.store(keys, words, fresh)
            self.nbytes += size
        else:
            self.not_kept += len(fresh)

    def _store_pending(self, pending: dict) -> None:
        with self._lock:
            for table, parts in pending.values():
                for keys, words, fresh in parts:
                    self._keep(table, keys, words, fresh)
        pending.clear()

    def __len__(self) -> int:
        with self._lock:
            return sum(len(t) for t in self._store.values())

    def clear(self) -> None:
        """Forget every stored p-value."""
        with self._lock:
            self._store.clear()
            self.hits = self.misses = self.not_kept = self.nbytes = 0


class DeferredStore:
    """What :meth:`PValueCache.deferred` returns: answers like the cache, stores on close."""

    def __init__(self, cache: PValueCache):
        self.cache = cache
        self._pending: dict = {}

    def pvalues_array(self, test: IndependenceTest, idx: np.ndarray, *,
                      executor=None) -> np.ndarray:
        """p-values for canonical index rows of one set size, computing those not stored."""
        return self.cache._answer(test, idx, executor, self._pending)

    def close(self) -> None:
        """Store the p-values computed through this view."""
        self.cache._store_pending(self._pending)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False
