"""The order-independent adjacency search (the skeleton phase of PC-stable).

Start from the complete graph. At level ``l = 0, 1, 2, ...`` every remaining pair ``x — y`` is
tested for ``x ⟂ y | S`` with ``S`` of size ``l`` drawn from the neighbours of ``x`` (then of
``y``) *as they stood when the level began*; a pair found independent is removed at the end of
the level and ``S`` is recorded as its separating set. Freezing the neighbourhoods for a level
makes the skeleton independent of the order in which variables or pairs are visited (Colombo &
Maathuis 2014, "Order-independent constraint-based causal structure learning", JMLR 15).

The separating set kept for a pair is the first independent one in a fixed enumeration:
subsets of x's neighbours before y's, the candidates most associated with both x and y first
(the test's association matrix, e.g. absolute correlations, or ``1 - p`` of the unconditional
tests), ties broken by variable *name*, each side's k-subsets in colexicographic order.
Variables are indexed in name order, so neither the sets recorded nor the tests run depend on
column order. The ranking changes only which valid separating set is found first and how many
tests that takes, never which pairs are removed.

Each level is sent to the independence test as batches: every pair gets its next candidate
sets (its best one, then 2, 8, 32, ... more), the batch is answered at once, pairs that found
a separating set stop, the rest continue. Candidates are built as arrays, a round at a time.
At level 1 a test may rule single candidates out beforehand (``may_separate``): a test that
cannot separate is not run.

Knowledge enters here: forbidden pairs are never adjacent (they are not neighbours of anyone)
but their separating set is still searched for, since collider decisions over them need it;
locked pairs are never removed, and a test that separates one is reported as a conflict.
"""

from __future__ import annotations

import math
import time
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from scipy.special import comb

from .._evidence import EvidenceLog, evidence_memory_budget, free_disk_space
from ..exceptions import SearchCancelled
from ..resources import available_memory

__all__ = ["SeparatingSets", "SkeletonOutcome", "adjacency_search"]


class SeparatingSets(Mapping):
    """``(x, y) -> (S, p)`` for every separated pair (``x < y``), in test-index space.

    Kept as the blocks of rows ``[x, y, s1..sk]`` and p-values the search recorded (a large
    search separates tens of thousands of pairs); a record becomes Python tuples only when
    read, and lookups go through a sorted index of pair keys built on the first one.
    """

    def __init__(self, n_vars: int):
        self._n = max(int(n_vars), 1)
        self._blocks: list[tuple[np.ndarray, np.ndarray]] = []
        self._index = None  # pair key -> record number (see _locate)

    def record(self, rows: np.ndarray, p: np.ndarray) -> None:
        """Record separating rows ``[x, y, s1..sk]`` (pairs not yet recorded) and p-values."""
        if len(rows):
            self._blocks.append((rows, np.asarray(p, dtype=float)))
            self._index = None

    def _locate(self, want: np.ndarray) -> np.ndarray:
        """Record number (over all blocks, in the order recorded) of each pair key in
        ``want``, -1 where the pair was not recorded. The index is built on the first call:
        a dense table of pair keys (up to 4,096 variables), else the keys sorted."""
        if self._index is None:
            keys = np.concatenate([rows[:, 0].astype(np.int64) * self._n + rows[:, 1]
                                   for rows, _ in self._blocks] or [np.empty(0, np.int64)])
            if self._n <= 4096:
                table = np.full(self._n * self._n, -1, dtype=np.int64)
                table[keys] = np.arange(len(keys))
                self._index = table
            else:
                order = np.argsort(keys)
                self._index = (keys[order], order)
        if isinstance(self._index, np.ndarray):
            return self._index[want]
        keys, order = self._index
        at = np.minimum(np.searchsorted(keys, want), max(len(keys) - 1, 0))
        found = keys[at] == want if len(keys) else np.zeros(len(want), dtype=bool)
        return np.where(found, order[at] if len(keys) else -1, -1)

    def __getitem__(self, pair):
        return self.many([pair])[0]

    def many(self, pairs) -> list[tuple[tuple[int, ...], float]]:
        """``(S, p)`` of each pair of ``pairs`` (``x < y``), looked up together."""
        pairs = np.asarray(pairs, dtype=np.int64).reshape(-1, 2)
        record = self._locate(pairs[:, 0] * self._n + pairs[:, 1])
        if (record < 0).any():
            raise KeyError(tuple(pairs[np.flatnonzero(record < 0)[0]].tolist()))
        sizes = [len(rows) for rows, _ in self._blocks]
        starts = np.cumsum(sizes) - sizes
        block = np.searchsorted(starts, record, side="right") - 1
        out: list = [None] * len(record)
        for b, (rows, p) in enumerate(self._blocks):
            chosen = np.flatnonzero(block == b)
            if len(chosen):
                r = record[chosen] - starts[b]
                for i, s, q in zip(chosen.tolist(), rows[r, 2:].tolist(), p[r].tolist()):
                    out[i] = (tuple(s), q)
        return out

    def __len__(self) -> int:
        return sum(len(rows) for rows, _ in self._blocks)

    def __iter__(self):
        keys = np.concatenate([rows[:, 0].astype(np.int64) * self._n + rows[:, 1]
                               for rows, _ in self._blocks] or [np.empty(0, np.int64)])
        for key in np.sort(keys).tolist():
            yield divmod(key, self._n)

    def items(self):
        """Every ``((x, y), (S, p))`` in the order recorded (a list, built in one pass)."""
        out = []
        for rows, p in self._blocks:
            sets = ([()] * len(rows) if rows.shape[1] == 2
                    else map(tuple, rows[:, 2:].tolist()))
            out += zip(zip(rows[:, 0].tolist(), rows[:, 1].tolist()), zip(sets, p.tolist()))
        return out


@dataclass
class SkeletonOutcome:
    """What the adjacency search found, in test-index space (mutable, internal)."""

    adjacent: list[set[int]]
    sepsets: SeparatingSets
    # every test run, in the order run: blocks of index rows [x, y, s1..sk] and p-values
    # (past a memory budget, in a temporary file)
    log: EvidenceLog = field(default_factory=EvidenceLog)
    locked_conflicts: list[tuple[int, int, tuple[int, ...], float]] = field(default_factory=list)
    unseparated_forbidden: list[tuple[int, int]] = field(default_factory=list)
    depth_reached: int = 0
    levels: list[dict] = field(default_factory=list)
    # why the search stopped deepening before its depth limit, if it did ("" otherwise)
    memory_limit: str = ""


_WEAK_BITS = 16  # resolution of the association ranking: 65,536 steps


def _weakness_codes(association: np.ndarray) -> np.ndarray:
    """``1 - association`` in 2^16 integer steps (int32, n x n): the ranking key of a
    candidate, computed once per search so that ranking a level costs integer gathers only."""
    a = np.clip(np.nan_to_num(np.asarray(association, dtype=float), nan=0.0), 0.0, 1.0)
    return np.rint((1.0 - a) * (2 ** _WEAK_BITS - 1)).astype(np.int32)


def _key_layout(n: int):
    """(dtype, shift): keys are ``((side << 16 | weakness) << shift) | index``; they fit in
    int32 (half the memory traffic) up to 2^11 variables."""
    shift = max(11, int(n).bit_length())
    return (np.int32 if shift + _WEAK_BITS + 2 <= 31 else np.int64), shift


def _level_one_candidates(pairs: np.ndarray, frozen: np.ndarray):
    """Masks (pairs x variables) of each pair's single candidates: ``candidate`` (a neighbour
    of x or of y, the partner excluded) and ``on_x`` (a neighbour of x: x's side)."""
    rows = np.arange(len(pairs))
    on_x = np.take(frozen, pairs[:, 0], axis=0)  # (np.take: a fast row gather)
    on_x[rows, pairs[:, 1]] = False
    candidate = np.take(frozen, pairs[:, 1], axis=0)
    candidate[rows, pairs[:, 0]] = False
    candidate |= on_x
    return candidate, on_x


def _candidate_keys(pairs: np.ndarray, candidate: np.ndarray, on_x: np.ndarray,
                    weakness: np.ndarray) -> np.ndarray:
    """Ranking keys (pairs x variables) of every variable as a single candidate of each pair.

    The key orders x's side first, then y's, each strongest first (smallest
    ``max(weakness[x, z], weakness[y, z])``: a separator is usually associated with both),
    ties by index (= name) order; non-candidates come last. Keys are distinct integers.
    """
    n = candidate.shape[1]
    dtype, shift = _key_layout(n)
    # side 0 = x, 1 = y only, 2 = not a candidate
    side = (~(on_x & candidate)).view(np.uint8) + (~candidate).view(np.uint8)
    key = np.maximum(np.take(weakness, pairs[:, 0], axis=0),
                     np.take(weakness, pairs[:, 1], axis=0)).astype(dtype, copy=False)
    key |= side.astype(dtype) << _WEAK_BITS
    key <<= shift
    key |= np.arange(n, dtype=dtype)[None, :]
    return key


def _pruned_candidates(pairs: np.ndarray, frozen: np.ndarray, may_separate: Callable,
                       block: int):
    """Each pair's single candidates that the test's shortcut leaves, as flat entries
    ``(owner, z, on_x)`` (pair, candidate, whether it is on x's side), in pair order; None
    when the test has no shortcut. Pairs go in blocks small enough for the cache: the
    masks are passed over several times."""
    n = frozen.shape[1]
    owners, zs, sides = [], [], []
    for start in range(0, len(pairs), block):
        sub = pairs[start:start + block]
        possible = may_separate(sub)
        if possible is None:
            return None
        candidate, on_x = _level_one_candidates(sub, frozen)
        candidate &= possible
        flat = np.flatnonzero(candidate)  # few entries: dividing them beats counting rows
        owner, z = np.divmod(flat, n)
        owners.append(owner + start)
        zs.append(z)
        sides.append(on_x.ravel()[flat])
    if not owners:
        return np.empty(0, np.intp), np.empty(0, np.intp), np.empty(0, bool)
    return np.concatenate(owners), np.concatenate(zs), np.concatenate(sides)


def _entry_keys(pairs: np.ndarray, owner: np.ndarray, z: np.ndarray, weakness: np.ndarray,
                y_side: np.ndarray | None = None) -> np.ndarray:
    """Sort keys (int64) of flat candidate entries, candidate ``z`` of pair ``owner``: by pair,
    then x's side before y's (when ``y_side`` is given), then strongest first (smallest
    ``max(weakness[x, z], weakness[y, z])``), then index (= name) order."""
    n = weakness.shape[1]
    key = np.maximum(weakness.take(pairs[owner, 0] * n + z),
                     weakness.take(pairs[owner, 1] * n + z)).astype(np.int64)
    if y_side is not None:
        key |= y_side.astype(np.int64) << _WEAK_BITS
    key |= owner.astype(np.int64) << (_WEAK_BITS + 1)
    key <<= int(n).bit_length()
    key |= z
    return key


def _ranked_candidates(pairs: np.ndarray, owner: np.ndarray, z: np.ndarray,
                       on_x: np.ndarray, weakness: np.ndarray):
    """Flat candidate entries (``owner``, ``z``, ``on_x`` as from :func:`_pruned_candidates`)
    in the order of :func:`_candidate_keys`, as a function of which pairs are still open.

    Returns ``(first, rest)``: ``first`` are the rows ``[x, y, z]`` of every pair's best
    candidate with their owners; ``rest(open_pairs)`` gives ``(idx, owner, rank)`` for the
    other candidates of the pairs still open (rank counted from 0 = the best), sorted only
    then, since most pairs stop at their best candidate.
    """
    key = _entry_keys(pairs, owner, z, weakness, y_side=~on_x)
    starts = np.flatnonzero(np.r_[True, owner[1:] != owner[:-1]]) if len(owner) else owner
    best = np.zeros(len(owner), dtype=bool)
    if len(owner):
        best[key == np.repeat(np.minimum.reduceat(key, starts),
                              np.diff(np.r_[starts, len(owner)]))] = True

    def rows(chosen):
        out = np.empty((len(chosen), 3), dtype=np.intp)
        out[:, 0], out[:, 1], out[:, 2] = pairs[owner[chosen], 0], pairs[owner[chosen], 1], \
            z[chosen]
        return out

    first = np.flatnonzero(best)

    def rest(open_pairs: np.ndarray):
        left = np.flatnonzero(~best & open_pairs[owner])
        left = left[np.argsort(key[left])]
        left_owner = owner[left]
        begin = np.searchsorted(left_owner, left_owner)  # a pair's rows are contiguous
        return rows(left), left_owner, np.arange(len(left)) - begin + 1

    return (rows(first), owner[first]), rest


def _rank_rows(key: np.ndarray, top: int | None) -> np.ndarray:
    """Columns of each row of ``key`` in ascending key order: all of them, or the first
    ``top`` (one pass for ``top=1``, a linear-time partition and a small sort otherwise).
    Most pairs are separated by one of their first few candidates."""
    if top == 1:
        return key.argmin(axis=1)[:, None]
    if top is not None and top < key.shape[1]:
        part = np.argpartition(key, top - 1, axis=1)[:, :top]
        inner = np.argsort(np.take_along_axis(key, part, axis=1), axis=1)
        return np.take_along_axis(part, inner, axis=1)
    return np.argsort(key, axis=1)


def _side_orders(pairs: np.ndarray, frozen: np.ndarray, weakness: np.ndarray):
    """For each side (x, then y) of every pair: the neighbour mask (partner excluded), the
    neighbours' count, and the neighbours ranked strongest first (ties by index = name), as
    rows of a ``(pairs, largest count)`` array padded with -1."""
    rows = np.arange(len(pairs))
    n = frozen.shape[1]
    for a, b in ((0, 1), (1, 0)):
        member = np.take(frozen, pairs[:, a], axis=0)
        member[rows, pairs[:, b]] = False
        counts = np.count_nonzero(member, axis=1)
        owner = np.repeat(rows, counts)
        z = np.flatnonzero(member) - owner * n
        z = z[np.argsort(_entry_keys(pairs, owner, z, weakness))]
        ranked = np.full((len(pairs), int(counts.max()) if len(pairs) else 0), -1,
                         dtype=np.intp)
        starts = np.cumsum(counts) - counts
        ranked[owner, np.arange(len(z)) - starts[owner]] = z
        yield member, counts, ranked


# A batch costs a fixed overhead worth a few thousand vectorised tests: when no more rows than
# this are left at a level, a vectorised test gets them in one batch even if some pairs would
# have stopped earlier.
_ONE_BATCH = 4096
_MAX_BATCH = 1_000_000  # at most about this many rows in one round
_DISK_SHARE = 0.6  # a level whose evidence could need more of the free disk is not run
_SATURATE = 1 << 62  # set counts are capped here: no round ever reaches that far


class _LevelSets:
    """The candidate sets of one level (size ``k``), numbered per pair and built a round at
    a time.

    A pair's sets are numbered from 0: the k-subsets of adj(x)\\{y} in colexicographic
    order of its ranked neighbours, then those of adj(y)\\{x}. Colex order sorts subsets by
    their largest member, then the next largest, ...: {1st, 2nd}, {1st, 3rd}, {2nd, 3rd},
    {1st, 4th}, ... so every set of the c strongest candidates comes before any set that
    needs a weaker one. A set of y's side that lies inside adj(x) keeps its number but is
    never sent: it was tried from x's side. The set at a number is found by unranking in the
    combinatorial number system (a set {c1 < ... < ck} is number C(c1, 1) + ... + C(ck, k) in
    colex order), so only the sets a round sends are ever built.
    """

    def __init__(self, pairs, frozen, weakness, level):
        (self.member_x, count_x, self.ranked_x), (_, count_y, self.ranked_y) = \
            _side_orders(pairs, frozen, weakness)
        self.pairs, self.k = pairs, level
        width = max(self.ranked_x.shape[1], self.ranked_y.shape[1], level)
        # table[i][c] = C(c, i + 1), saturated; it unranks and counts
        self.table = np.array([[min(math.comb(c, i), _SATURATE) for c in range(width + 1)]
                               for i in range(1, level + 1)], dtype=np.int64)
        self.n_x = self.table[-1][count_x]
        self.slots = np.minimum(self.n_x + self.table[-1][count_y], _SATURATE)

    def left(self, active: np.ndarray, lo: int) -> int:
        """How many sets numbered ``lo`` or more the active pairs have (inside ones too)."""
        return int(np.maximum(self.slots[active] - lo, 0).sum())

    def batch(self, active: np.ndarray, lo: int, hi: int):
        """Rows ``[x, y, s1..sk]`` (sets ascending) of the sets numbered lo..hi-1 of the
        active pairs, and the pair of each row; each pair's rows in number order."""
        act = np.flatnonzero(active & (self.slots > lo))
        count = np.minimum(self.slots[act], hi) - lo
        owner = np.repeat(act, count)
        number = lo + np.arange(len(owner)) - np.repeat(np.cumsum(count) - count, count)
        on_x = number < self.n_x[owner]
        own_x, own_y = owner[on_x], owner[~on_x]
        sets_x = self.ranked_x[own_x[:, None], self._unrank(number[on_x])]
        sets_y = self.ranked_y[own_y[:, None],
                               self._unrank(number[~on_x] - self.n_x[own_y])]
        new = ~self.member_x[own_y[:, None], sets_y].all(axis=1)  # not tried from x's side
        owner = np.concatenate([own_x, own_y[new]])
        idx = np.empty((len(owner), self.k + 2), dtype=np.intp)
        idx[:, 0], idx[:, 1] = self.pairs[owner, 0], self.pairs[owner, 1]
        idx[:, 2:] = _sort_rows(np.concatenate([sets_x, sets_y[new]]))
        return idx, owner

    def _unrank(self, number: np.ndarray) -> np.ndarray:
        """Positions (in a ranked list) of the k-subsets at colex numbers ``number``."""
        out = np.empty((len(number), self.k), dtype=np.intp)
        rest = number.astype(np.int64)
        for i in range(self.k, 0, -1):
            # the largest c with C(c, i) <= rest
            c = np.searchsorted(self.table[i - 1], rest, side="right") - 1
            out[:, i - 1] = c
            rest = rest - self.table[i - 1][c]
        return out


def _sort_rows(a: np.ndarray) -> np.ndarray:
    """Each row of a narrow integer array in ascending order. Up to 6 columns this runs a
    transposition network on whole columns (a handful of elementwise minima and maxima, far
    faster than a sort per row); wider arrays use ``np.sort``."""
    k = a.shape[1]
    if k > 6:
        return np.sort(a, axis=1)
    cols = [a[:, i].copy() for i in range(k)]
    for step in range(k):
        for i in range(step % 2, k - 1, 2):
            low = np.minimum(cols[i], cols[i + 1])
            np.maximum(cols[i], cols[i + 1], out=cols[i + 1])
            cols[i] = low
    return np.stack(cols, axis=1) if cols else a


def _count_sets(pairs: np.ndarray, frozen: np.ndarray, degree: np.ndarray,
                level: int) -> np.ndarray:
    """Number of candidate sets of each pair at a level (for progress and to skip pairs)."""
    xs, ys = pairs[:, 0], pairs[:, 1]
    link = frozen[xs, ys].astype(np.int64)
    common = np.count_nonzero(frozen[xs] & frozen[ys], axis=1)
    sizes = (comb(degree[xs] - link, level) + comb(degree[ys] - link, level)
             - comb(common, level))
    return np.rint(sizes).astype(np.int64)


def adjacency_search(n_vars: int, pvalues: Callable, *, alpha: float, max_depth=None,
                     locked=(), forbidden=(), progress=None, cancelled=None,
                     association: np.ndarray | None = None,
                     batch_limit: int | None = None,
                     may_separate: Callable | None = None,
                     evidence_budget: int | None = None) -> SkeletonOutcome:
    """Run the order-independent adjacency search.

    Parameters
    ----------
    n_vars : int
        Number of variables, indexed ``0 .. n_vars-1`` in the order of their names.
    pvalues : callable
        ``pvalues(idx) -> array`` answering an index array of canonical rows
        ``[x, y, s1..sk]`` (``x < y``, the ``s`` ascending), e.g. through the cache.
    alpha : float
        A pair is independent when its p-value is above ``alpha``; a NaN p-value never
        separates.
    max_depth : int or None
        Largest conditioning-set size.
    locked, forbidden : iterable of (int, int)
        Pairs that must stay adjacent / must never be adjacent.
    progress : callable, optional
        Called with a dict ``{"phase", "level", "done", "planned"}`` after each batch.
    cancelled : callable, optional
        Returns True when the search must stop; checked between batches.
    batch_limit : int, optional
        Send at most this many tests at once (for slow tests: progress is reported and the
        cancel flag checked between the pieces of a large batch). None: no limit.
    may_separate : callable, optional
        ``may_separate(pairs) -> bool array (pairs x variables) or None``: False where the test
        can tell without running it that conditioning on that single variable cannot separate
        the pair (see ``IndependenceTest.may_separate``); level 1 skips those tests.
    association : array, optional
        A symmetric matrix of association strengths (e.g. absolute correlations) used to try
        the most promising conditioning variables first; by default ``1 - p`` of the
        unconditional tests. It changes only which separating set is found first (any one is
        valid) and how many tests that takes.
    evidence_budget : int, optional
        Bytes of evidence (the log of every test) kept in memory; the rest goes to a
        temporary file (see :mod:`discovery._evidence`). Default: a quarter of the memory
        available, at most 1 GiB.

    Notes
    -----
    Each level is sent as a few batches: every pair gets its next candidate sets (1, then 2,
    8, 32, ... at a time), and a pair stops as soon as one separates it. So a level's tests
    are vectorised, yet no pair runs many more tests than it needs.
    """
    locked = {(min(a, b), max(a, b)) for a, b in locked}
    forbidden = {(min(a, b), max(a, b)) for a, b in forbidden}
    log_dtype = np.uint16 if n_vars < 2**16 else np.int32
    adj = ~np.eye(n_vars, dtype=bool)
    for a, b in forbidden:
        adj[a, b] = adj[b, a] = False
    if evidence_budget is None:
        evidence_budget = evidence_memory_budget(available_memory())
    out = SkeletonOutcome(adjacent=[], sepsets=SeparatingSets(n_vars),
                          log=EvidenceLog(budget=evidence_budget))
    locked_keys = np.array(sorted(a * n_vars + b for a, b in locked), dtype=np.int64)
    ghosts = set(forbidden)  # forbidden pairs still looking for a separating set
    conflicted = set()  # locked pairs the data already separated once
    level = 0
    upper = np.argwhere(np.triu(adj, 1))  # the adjacent pairs x < y, in index order
    while max_depth is None or level <= max_depth:
        frozen = adj.copy()
        degree = np.count_nonzero(frozen, axis=1)
        upper = upper[frozen.ravel().take(upper[:, 0] * n_vars + upper[:, 1])]
        if conflicted:
            upper = np.array([p for p in map(tuple, upper) if p not in conflicted],
                             dtype=np.intp).reshape(-1, 2)
        pairs = np.concatenate([upper, np.array(sorted(ghosts), dtype=np.intp).reshape(-1, 2)])
        if level == 0:
            sizes = np.ones(len(pairs), dtype=np.int64)
        else:
            # a pair needs a neighbour (besides its partner) on either side to be tested
            room = np.maximum(degree[pairs[:, 0]], degree[pairs[:, 1]]) - \
                frozen[pairs[:, 0], pairs[:, 1]]
            pairs = pairs[room >= level]  # exactly the pairs with a candidate set
            # the number of candidate sets bounds the level's tests (progress, memory)
            sizes = _count_sets(pairs, frozen, degree, level)
        if not len(pairs):
            break
        total = int(sizes.sum())
        need = total * (np.dtype(log_dtype).itemsize * (level + 2) + 8)
        if level > 1 and need > max(evidence_budget - out.log.nbytes_in_memory, 0) + \
                _DISK_SHARE * free_disk_space():
            # the evidence keeps every test (in memory up to its budget, then in a temporary
            # file): a level whose evidence could outgrow both is not started (the search
            # stops deepening instead of failing half-way)
            out.memory_limit = (
                f"depth limited to {level - 1} by memory and disk space: level {level} could "
                f"run up to {total:,} tests, whose evidence needs up to "
                f"{need / 2**30:,.1f} GiB, more than the memory set aside for it and "
                f"{_DISK_SHARE:.0%} of the free disk space for temporary files; pairs still "
                "adjacent may be separable by larger sets (set a depth, search fewer "
                "variables, or point TMPDIR to a larger disk)")
            break
        level_started = time.perf_counter()
        done = 0
        removed_now = []

        def answer(idx):
            """p-values of a batch, in pieces of at most ``batch_limit`` tests."""
            if batch_limit is None or len(idx) <= batch_limit:
                return np.asarray(pvalues(idx), dtype=float)
            out_p = np.empty(len(idx))
            for a in range(0, len(idx), batch_limit):
                if cancelled is not None and cancelled():
                    raise SearchCancelled("the search was stopped before it finished")
                out_p[a:a + batch_limit] = pvalues(idx[a:a + batch_limit])
                if progress is not None:
                    progress({"phase": "skeleton", "level": level,
                              "done": done + min(a + batch_limit, len(idx)),
                              "planned": total})
            return out_p

        def settle(idx, p, owner_of_row):
            """Record the batch; return the owners that found a separating set."""
            # the evidence keeps every test: 16-bit indices (32 for huge tables) take a
            # quarter (a half) of what 64-bit ones would
            out.log.append((idx.astype(log_dtype), p))
            hits = np.flatnonzero(p > alpha)
            if owner_of_row is None:  # one row per pair (level 0)
                hit_owners = chosen = hits
            else:
                # first independent row of each owner (a batch has its rows in rank order)
                hit_owners, first = np.unique(owner_of_row[hits], return_index=True)
                chosen = hits[first]
            rows, pvs = idx[chosen], p[chosen]
            if len(locked_keys):
                is_locked = np.isin(rows[:, 0].astype(np.int64) * n_vars + rows[:, 1],
                                    locked_keys)
                for row, pv in zip(rows[is_locked].tolist(), pvs[is_locked].tolist()):
                    out.locked_conflicts.append((row[0], row[1], tuple(row[2:]), pv))
                    conflicted.add((row[0], row[1]))
                rows, pvs = rows[~is_locked], pvs[~is_locked]
            out.sepsets.record(rows, pvs)
            removed_now.append(rows[:, :2])
            return hit_owners

        def run_rounds(batch, left, n_owners, start=0):
            """Send each still-open pair its candidate sets ranked lo..hi-1, round after
            round (1, then 2, 8, 32, ... sets; ranks below ``start``, 0 or 1, were sent
            already). ``batch(active, lo, hi)`` builds a round's rows and their pairs;
            ``left(active, lo)`` counts the rows not sent yet."""
            nonlocal done
            active = np.ones(n_owners, dtype=bool)
            lo, hi = (0, 1) if start == 0 else (1, 3)
            while True:
                if cancelled is not None and cancelled():
                    raise SearchCancelled("the search was stopped before it finished")
                remaining = left(active, lo)
                if not remaining:
                    return
                # a vectorised test takes the rest in one batch: fewer, fuller batches (a slow
                # one keeps to rounds, so that no pair runs many tests past its separating set)
                last = batch_limit is None and remaining <= _ONE_BATCH
                if not last:  # keep a round's rows within bounds
                    hi = min(hi, lo + max(1, _MAX_BATCH // int(np.count_nonzero(active))))
                idx, owner = batch(active, lo, _SATURATE if last else hi)
                p = answer(idx)
                done += len(idx)
                found = settle(idx, p, owner)
                if progress is not None:
                    progress({"phase": "skeleton", "level": level, "done": done,
                              "planned": total})
                if last:
                    return
                active[found] = False
                width = hi - lo
                lo, hi = hi, min(hi + (2 if width == 1 else 4 * width), _SATURATE)

        def run_flat(all_idx, all_owner, all_rank, n_owners, start=0):
            """:func:`run_rounds` over candidate rows given as flat arrays with their ranks."""
            def rows(active, lo, hi):
                take = (all_rank >= lo) & (all_rank < hi) & active[all_owner]
                return np.compress(take, all_idx, axis=0), all_owner[take]
            run_rounds(rows, lambda active, lo: int(np.count_nonzero(
                (all_rank >= lo) & active[all_owner])), n_owners, start)

        def run_staged():
            """Level 1 without a shortcut: rank candidates per pair in blocks (a pairs x
            variables matrix each); round r sends every still-open pair its candidates
            ranked lo..hi-1."""
            nonlocal done
            block = max(1, 4_000_000 // max(n_vars, 1))
            for start in range(0, len(pairs), block):
                sub = pairs[start:start + block]
                candidate, on_x = _level_one_candidates(sub, frozen)
                possible = may_separate(sub) if may_separate is not None else None
                if possible is not None:
                    candidate &= possible  # skip tests that cannot separate
                count = np.count_nonzero(candidate, axis=1)
                key = _candidate_keys(sub, candidate, on_x, weakness)
                gid = np.arange(start, start + len(sub))  # pair ids of the rows of `sub`
                # Ranking is done in stages: the best candidate of every pair (one pass),
                # then the next ten for the pairs still open, then all for the few left.
                tops = [1, 11, None]
                order = _rank_rows(key, tops[0])
                stage = 0
                ranked = order.shape[1]
                active = np.flatnonzero(count > 0)
                lo, hi = 0, 1
                while len(active):
                    if cancelled is not None and cancelled():
                        raise SearchCancelled("the search was stopped before it finished")
                    if hi > ranked and ranked < n_vars:
                        # rank further, for the pairs still open only
                        stage += 1
                        sub, gid, count = sub[active], gid[active], count[active]
                        key = key[active]
                        order = _rank_rows(key, tops[stage])
                        ranked = order.shape[1]
                        active = np.arange(len(sub))
                    cols = order[active, lo:hi]
                    valid = np.arange(lo, lo + cols.shape[1])[None, :] < count[active][:, None]
                    local = np.broadcast_to(active[:, None], cols.shape)[valid]
                    z = cols[valid]
                    idx = np.column_stack([sub[local, 0], sub[local, 1], z])
                    p = answer(idx)
                    done += len(idx)
                    found = settle(idx, p, gid[local])
                    still = count[active] > hi
                    if len(found):
                        still &= ~np.isin(gid[active], found)
                    active = active[still]
                    width = hi - lo
                    lo, hi = hi, hi + (2 if width == 1 else 4 * width)
                    if progress is not None:
                        progress({"phase": "skeleton", "level": level, "done": done,
                                  "planned": total})

        if cancelled is not None and cancelled():
            raise SearchCancelled("the search was stopped before it finished")
        if level == 0:
            idx = pairs.copy()
            p = answer(idx)
            done = len(idx)
            settle(idx, p, None)
            if association is None:
                association = np.zeros((n_vars, n_vars))
                association[idx[:, 0], idx[:, 1]] = 1.0 - np.nan_to_num(p, nan=1.0)
                association = np.maximum(association, association.T)
            weakness = _weakness_codes(association)
            if progress is not None:
                progress({"phase": "skeleton", "level": level, "done": done,
                          "planned": total})
        elif level == 1:
            entries = None if may_separate is None else _pruned_candidates(
                pairs, frozen, may_separate, block=max(64, 2 ** 18 // n_vars))
            if entries is not None and 8 * len(entries[0]) < len(pairs) * n_vars:
                # the test ruled most single candidates out: rank the few left as flat arrays
                (idx, owner), rest = _ranked_candidates(pairs, *entries, weakness)
                found = settle(idx, answer(idx), owner)  # every pair's best candidate
                done += len(idx)
                still = np.ones(len(pairs), dtype=bool)
                still[found] = False
                run_flat(*rest(still), len(pairs), start=1)
            else:
                run_staged()
        else:
            sets = _LevelSets(pairs, frozen, weakness, level)
            run_rounds(sets.batch, sets.left, len(pairs))
        gone = np.concatenate(removed_now) if removed_now else np.empty((0, 2), np.intp)
        if ghosts and len(gone):
            ghosts -= set(map(tuple, gone.tolist()))  # forbidden pairs now separated
        adj[gone[:, 0], gone[:, 1]] = False  # (a no-op for forbidden pairs)
        adj[gone[:, 1], gone[:, 0]] = False
        out.levels.append({"level": level, "pairs": len(pairs), "tests": done,
                           "removed": sum(len(r) for r in removed_now),
                           "seconds": round(time.perf_counter() - level_started, 6)})
        out.depth_reached = level
        level += 1
    out.adjacent = [set() for _ in range(n_vars)]
    for a, b in np.argwhere(np.triu(adj, 1)).tolist():  # the few edges left
        out.adjacent[a].add(b)
        out.adjacent[b].add(a)
    out.unseparated_forbidden = sorted(ghosts)
    return out
