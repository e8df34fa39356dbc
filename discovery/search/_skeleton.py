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
tests), ties broken by variable *name*. Variables are indexed in name order, so neither the
sets recorded nor the tests run depend on column order. The ranking changes only which valid
separating set is found first and how many tests that takes, never which pairs are removed.

Each level is sent to the independence test as batches: every pair gets its next candidate
sets (its best one, then 2, 8, 32, ... more), the batch is answered at once, pairs that found
a separating set stop, the rest continue. Level 1 and the larger higher levels generate their
candidates as arrays.

Knowledge enters here: forbidden pairs are never adjacent (they are not neighbours of anyone)
but their separating set is still searched for, since collider decisions over them need it;
locked pairs are never removed, and a test that separates one is reported as a conflict.
"""

from __future__ import annotations

import time
from collections.abc import Mapping
from dataclasses import dataclass, field
from itertools import islice
from typing import Callable

import numpy as np
from scipy.special import comb

from ..exceptions import SearchCancelled

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
    log: list[tuple[np.ndarray, np.ndarray]] = field(default_factory=list)
    locked_conflicts: list[tuple[int, int, tuple[int, ...], float]] = field(default_factory=list)
    unseparated_forbidden: list[tuple[int, int]] = field(default_factory=list)
    depth_reached: int = 0
    levels: list[dict] = field(default_factory=list)


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
        flat = np.flatnonzero(candidate)
        owner = np.repeat(np.arange(len(sub)), candidate.sum(axis=1))
        owners.append(owner + start)
        zs.append(flat - owner * n)
        sides.append(on_x.ravel()[flat])
    if not owners:
        return np.empty(0, np.intp), np.empty(0, np.intp), np.empty(0, bool)
    return np.concatenate(owners), np.concatenate(zs), np.concatenate(sides)


def _ranked_candidates(pairs: np.ndarray, owner: np.ndarray, z: np.ndarray,
                       on_x: np.ndarray, weakness: np.ndarray):
    """Flat candidate entries (``owner``, ``z``, ``on_x`` as from :func:`_pruned_candidates`)
    in the order of :func:`_candidate_keys`, as a function of which pairs are still open.

    Returns ``(first, rest)``: ``first`` are the rows ``[x, y, z]`` of every pair's best
    candidate with their owners; ``rest(open_pairs)`` gives ``(idx, owner, rank)`` for the
    other candidates of the pairs still open (rank counted from 0 = the best), sorted only
    then, since most pairs stop at their best candidate.
    """
    n = weakness.shape[1]
    shift = int(n).bit_length()
    key = np.maximum(weakness.take(pairs[owner, 0] * n + z),
                     weakness.take(pairs[owner, 1] * n + z)).astype(np.int64)
    key |= (~on_x).astype(np.int64) << _WEAK_BITS
    key |= owner.astype(np.int64) << (_WEAK_BITS + 1)
    key <<= shift
    key |= z
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
    shift = int(n).bit_length()
    for a, b in ((0, 1), (1, 0)):
        member = np.take(frozen, pairs[:, a], axis=0)
        member[rows, pairs[:, b]] = False
        counts = member.sum(axis=1)
        owner = np.repeat(rows, counts)
        z = np.flatnonzero(member) - owner * n
        key = np.maximum(weakness.take(pairs[owner, 0] * n + z),
                         weakness.take(pairs[owner, 1] * n + z)).astype(np.int64)
        key |= owner.astype(np.int64) << _WEAK_BITS
        key <<= shift
        key |= z
        z = z[np.argsort(key)]
        ranked = np.full((len(pairs), int(counts.max()) if len(pairs) else 0), -1,
                         dtype=np.intp)
        starts = np.cumsum(counts) - counts
        ranked[owner, np.arange(len(z)) - starts[owner]] = z
        yield member, counts, ranked


def _ranked_sides(pairs: np.ndarray, frozen: np.ndarray, weakness: np.ndarray):
    """For each pair, adj(x)\\{y} and adj(y)\\{x} as lists, strongest candidates first."""
    return [[order[i, :counts[i]].tolist() for i in range(len(pairs))]
            for _, counts, order in _side_orders(pairs, frozen, weakness)]


# A batch costs a fixed overhead worth a few thousand vectorised tests: when no more rows than
# this are left at a level, a vectorised test gets them in one batch even if some pairs would
# have stopped earlier.
_ONE_BATCH = 4096

_COMBOS: dict[tuple[int, int], np.ndarray] = {}


def _colex(n: int, k: int) -> np.ndarray:
    """All k-subsets of range(n) as ascending rows, in colexicographic order (cached).

    Colex order sorts subsets by their largest member, then the next largest, and so on:
    {0,1}, {0,2}, {1,2}, {0,3}, ... So the subsets of range(c) are its first C(c, k) rows
    for every c, and over ranked neighbours, every set of the c strongest comes before any
    set that needs a weaker one.
    """
    rows = _COMBOS.get((n, k))
    if rows is None:
        rows = (np.array(list(_colex_subsets(range(n), k)), dtype=np.intp).reshape(-1, k)
                if k else np.zeros((1, 0), dtype=np.intp))
        if len(rows) <= 100_000:  # keep the small ones for the next level or search
            _COMBOS[(n, k)] = rows
    return rows


def _colex_subsets(items, k: int):
    """Yield the k-subsets of ``items`` (a sequence) as tuples, lazily, in colex order."""
    if k == 0:
        yield ()
        return
    for last in range(k - 1, len(items)):
        for head in _colex_subsets(items[:last], k - 1):
            yield head + (items[last],)


def _flat_candidate_sets(pairs, frozen, weakness, level, limit=4_000_000):
    """Every candidate set of every pair at once, in enumeration order, or None if too many.

    Returns ``(idx, owner, rank)``: rows ``[x, y, s1..sk]`` (sets ascending), the pair each
    row belongs to, and the row's position in its pair's order (rows of equal rank come in
    pair order, and a pair's rows in rank order):
    first the k-subsets of adj(x)\\{y}, then those of adj(y)\\{x} not inside adj(x), each in
    colex order of the ranked neighbours (:func:`_colex`), as :func:`_candidate_sets`.
    """
    m = len(pairs)
    (member_x, count_x, ranked_x), (_, count_y, ranked_y) = _side_orders(pairs, frozen,
                                                                         weakness)
    n_x = np.rint(comb(count_x, level)).astype(np.int64)
    n_y = np.rint(comb(count_y, level)).astype(np.int64)
    if int(n_x.sum() + n_y.sum()) > limit:
        return None
    pieces = []  # (owner, sets, position within the owner's order)
    for side, n_sets, ranked in ((0, n_x, ranked_x), (1, n_y, ranked_y)):
        owner = np.repeat(np.arange(m), n_sets)
        position = np.arange(len(owner)) - (np.cumsum(n_sets) - n_sets)[owner]
        sets = ranked[owner[:, None], _colex(ranked.shape[1], level)[position]]
        if side == 1:
            keep = ~member_x[owner[:, None], sets].all(axis=1)  # new: not inside adj(x)
            sets, owner = sets[keep], owner[keep]
            kept = np.bincount(owner, minlength=m)
            position = n_x[owner] + np.arange(len(owner)) - (np.cumsum(kept) - kept)[owner]
        pieces.append((owner, sets, position))
    # x's sides of all pairs, then y's: a pair's rows are not contiguous, but within any
    # batch of ranks its rows still come in rank order, which is all the rounds need
    all_owner = np.concatenate([piece[0] for piece in pieces])
    all_sets = np.concatenate([piece[1] for piece in pieces])
    rank = np.concatenate([piece[2] for piece in pieces])
    idx = np.empty((len(all_sets), level + 2), dtype=np.intp)
    idx[:, 0], idx[:, 1] = pairs[all_owner, 0], pairs[all_owner, 1]
    idx[:, 2:] = _sort_rows(all_sets)
    return idx, all_owner, rank


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


def _candidate_sets(side_x: list[int], side_y: list[int], level: int):
    """Yield conditioning sets of size ``level`` from adj(x)\\{y}, then new ones from adj(y)\\{x}.

    The sides come ranked (see :func:`_side_orders`), and each side's sets follow colex order
    (:func:`_colex`); sets come out sorted ascending, as the cache's canonical rows need.
    """
    for s in _colex_subsets(side_x, level):
        yield tuple(sorted(s))
    in_x = set(side_x)
    for s in _colex_subsets(side_y, level):
        if not in_x.issuperset(s):
            yield tuple(sorted(s))


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
                     may_separate: Callable | None = None) -> SkeletonOutcome:
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

    Notes
    -----
    Each level is sent as a few batches: every pair gets its next candidate sets (1, then 2,
    8, 32, ... at a time), and a pair stops as soon as one separates it. So a level's tests
    are vectorised, yet no pair runs many more tests than it needs.
    """
    locked = {(min(a, b), max(a, b)) for a, b in locked}
    forbidden = {(min(a, b), max(a, b)) for a, b in forbidden}
    adj = ~np.eye(n_vars, dtype=bool)
    for a, b in forbidden:
        adj[a, b] = adj[b, a] = False
    out = SkeletonOutcome(adjacent=[], sepsets=SeparatingSets(n_vars))
    locked_keys = np.array(sorted(a * n_vars + b for a, b in locked), dtype=np.int64)
    ghosts = set(forbidden)  # forbidden pairs still looking for a separating set
    conflicted = set()  # locked pairs the data already separated once
    level = 0
    upper = np.argwhere(np.triu(adj, 1))  # the adjacent pairs x < y, in index order
    while max_depth is None or level <= max_depth:
        frozen = adj.copy()
        degree = frozen.sum(axis=1)
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
            # the number of candidate sets is needed only to report progress
            sizes = _count_sets(pairs, frozen, degree, level) if progress is not None \
                else None
        if not len(pairs):
            break
        total = int(sizes.sum()) if sizes is not None else 0
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
            out.log.append((idx, p))
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

        def run_flat(all_idx, all_owner, all_rank, n_owners, start=0):
            """Send candidate rows given as flat arrays in rounds (ranks lo..hi-1 of every
            still-open owner; ranks below ``start``, 0 or 1, were sent already)."""
            nonlocal done
            active = np.ones(n_owners, dtype=bool)
            lo, hi = (0, 1) if start == 0 else (1, 3)
            while True:
                if cancelled is not None and cancelled():
                    raise SearchCancelled("the search was stopped before it finished")
                take = (all_rank >= lo) & active[all_owner]
                left = np.count_nonzero(take)
                if not left:
                    return
                # a vectorised test takes the rest in one batch: fewer, fuller batches (a slow
                # one keeps to rounds, so that no pair runs many tests past its separating set)
                last = batch_limit is None and left <= _ONE_BATCH
                if not last:
                    take &= all_rank < hi
                idx, owner = all_idx[take], all_owner[take]
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
                lo, hi = hi, hi + (2 if width == 1 else 4 * width)

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
                count = candidate.sum(axis=1)
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
        elif (flat := _flat_candidate_sets(pairs, frozen, weakness, level)) is not None:
            # the whole level's candidate sets as arrays; round r sends ranks lo..hi-1
            run_flat(*flat, len(pairs))
        else:
            side_x, side_y = _ranked_sides(pairs, frozen, weakness)
            iters = [_candidate_sets(sx, sy, level) for sx, sy in zip(side_x, side_y)]
            active = list(range(len(pairs)))
            chunk = 1
            while active:
                if cancelled is not None and cancelled():
                    raise SearchCancelled("the search was stopped before it finished")
                rows, owner_list, full = [], [], []
                for o in active:
                    x, y = int(pairs[o, 0]), int(pairs[o, 1])
                    taken = 0
                    for s in islice(iters[o], chunk):
                        rows.extend((x, y, *s))
                        taken += 1
                    owner_list.extend([o] * taken)
                    if taken == chunk:
                        full.append(o)
                if not owner_list:
                    break
                idx = np.asarray(rows, dtype=np.intp).reshape(len(owner_list), level + 2)
                owner = np.asarray(owner_list)
                p = answer(idx)
                done += len(idx)
                found = set(settle(idx, p, owner).tolist())
                active = [o for o in full if o not in found]
                chunk = chunk * 4 if chunk > 1 else 2
                if progress is not None:
                    progress({"phase": "skeleton", "level": level, "done": done,
                              "planned": total})
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
