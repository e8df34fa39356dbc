"""The order-independent adjacency search (the skeleton phase of PC-stable).

Start from the complete graph. At level ``l = 0, 1, 2, ...`` every remaining pair ``x — y`` is
tested for ``x ⟂ y | S`` with ``S`` of size ``l`` drawn from the neighbours of ``x`` (then of
``y``) *as they stood when the level began*; a pair found independent is removed at the end of
the level and ``S`` is recorded as its separating set. Freezing the neighbourhoods for a level
makes the skeleton independent of the order in which variables or pairs are visited (Colombo &
Maathuis 2014, "Order-independent constraint-based causal structure learning", JMLR 15). The
separating set kept for a pair is the first independent one in an enumeration ordered by
variable *name*, so the recorded sets do not depend on column order either.

Each level is sent to the independence test as batches: every pair gets its next few candidate
sets, the batch is answered at once, pairs that found a separating set stop, the rest continue
with larger chunks.

Knowledge enters here: forbidden pairs are never adjacent (they are not neighbours of anyone)
but their separating set is still searched for, since collider decisions over them need it;
locked pairs are never removed, and a test that separates one is reported as a conflict.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from itertools import combinations, islice
from typing import Callable

import numpy as np
from scipy.special import comb

from ..exceptions import SearchCancelled

__all__ = ["SkeletonOutcome", "adjacency_search"]


@dataclass
class SkeletonOutcome:
    """What the adjacency search found, in test-index space (mutable, internal)."""

    adjacent: list[set[int]]
    sepsets: dict[tuple[int, int], tuple[tuple[int, ...], float]] = field(default_factory=dict)
    # every test run, in the order run: blocks of index rows [x, y, s1..sk] and p-values
    log: list[tuple[np.ndarray, np.ndarray]] = field(default_factory=list)
    locked_conflicts: list[tuple[int, int, tuple[int, ...], float]] = field(default_factory=list)
    unseparated_forbidden: list[tuple[int, int]] = field(default_factory=list)
    depth_reached: int = 0
    levels: list[dict] = field(default_factory=list)


def _ordered_sides(x: int, y: int, frozen: np.ndarray, association: np.ndarray):
    """Neighbours of x (without y) and of y (without x), strongest candidates first.

    A candidate z is ranked by ``min(association[x, z], association[y, z])``: a variable
    that separates x from y is usually associated with both. Ties go to the lower index,
    which the caller makes the order of names, so the ranking never depends on column order.
    """
    sides = []
    for a, b in ((x, y), (y, x)):
        nb = np.flatnonzero(frozen[a])
        nb = nb[nb != b]
        score = np.minimum(association[x, nb], association[y, nb])
        sides.append(nb[np.lexsort((nb, -score))].tolist())
    return sides


def _candidate_sets(side_x: list[int], side_y: list[int], level: int):
    """Yield conditioning sets of size ``level`` from adj(x)\\{y}, then new ones from adj(y)\\{x}.

    The sides come ranked (see :func:`_ordered_sides`); sets come out sorted ascending, as
    the cache's canonical rows need.
    """
    for s in combinations(side_x, level):
        yield tuple(sorted(s))
    in_x = set(side_x)
    for s in combinations(side_y, level):
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


def _level_one_candidates(pairs: np.ndarray, frozen: np.ndarray, association: np.ndarray):
    """All size-1 candidate rows of a level, in enumeration order, with owner and rank.

    For pair i = (x, y): every z adjacent to x (z != y), then every z adjacent to y but not
    to x (z != x); within each side strongest first, as in :func:`_ordered_sides`. Returns
    ``(idx, owner, rank)`` with ``rank`` the position of the row within its pair's list.
    """
    xs, ys = pairs[:, 0], pairs[:, 1]
    ax = frozen[xs].copy()
    ax[np.arange(len(xs)), ys] = False
    ay = frozen[ys] & ~ax
    ay[np.arange(len(xs)), xs] = False
    ox, zx = np.nonzero(ax)
    oy, zy = np.nonzero(ay)
    owner = np.concatenate([ox, oy])
    z = np.concatenate([zx, zy])
    side = np.concatenate([np.zeros(len(ox), np.int8), np.ones(len(oy), np.int8)])
    score = np.minimum(association[xs[owner], z], association[ys[owner], z])
    n_vars = frozen.shape[0]
    if n_vars < 2 ** 11 and len(pairs) < 2 ** 30:
        # one int64 key (owner, side, strongest first, then index): a single argsort
        weak = np.round((1.0 - np.clip(np.nan_to_num(score), 0.0, 1.0)) * (2 ** 20 - 1))
        key = (((owner.astype(np.int64) * 2 + side) << 31)
               | (weak.astype(np.int64) << 11) | z.astype(np.int64))
        order = np.argsort(key, kind="stable")
    else:
        order = np.lexsort((z, -score, side, owner))
    owner, z = owner[order], z[order]
    starts = np.searchsorted(owner, np.arange(len(pairs)))
    rank = np.arange(len(owner)) - starts[owner]
    idx = np.column_stack([xs[owner], ys[owner], z])
    return idx, owner, rank


def adjacency_search(n_vars: int, pvalues: Callable, *, alpha: float, max_depth=None,
                     locked=(), forbidden=(), progress=None, cancelled=None,
                     association: np.ndarray | None = None) -> SkeletonOutcome:
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
    out = SkeletonOutcome(adjacent=[])
    ghosts = set(forbidden)  # forbidden pairs still looking for a separating set
    conflicted = set()  # locked pairs the data already separated once
    level = 0
    while max_depth is None or level <= max_depth:
        frozen = adj.copy()
        degree = frozen.sum(axis=1)
        upper = np.argwhere(np.triu(frozen, 1))
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
            pairs = pairs[room >= level]
            sizes = _count_sets(pairs, frozen, degree, level)
        keep = sizes > 0
        pairs, sizes = pairs[keep], sizes[keep]
        if not len(pairs):
            break
        total = int(sizes.sum())
        done = 0
        removed_now = []

        def settle(idx, p, owner_of_row):
            """Record the batch; return the owners that found a separating set."""
            out.log.append((idx, p))
            hits = np.flatnonzero(p > alpha)
            # first independent row of each owner (an owner's rows are contiguous, in order)
            hit_owners, first = np.unique(owner_of_row[hits], return_index=True)
            found = set(hit_owners.tolist())
            chosen = hits[first]
            rows = idx[chosen].tolist()
            for r, pv in zip(rows, p[chosen].tolist()):
                pair, s = (r[0], r[1]), tuple(r[2:])
                if pair in locked:
                    out.locked_conflicts.append((pair[0], pair[1], s, pv))
                    conflicted.add(pair)
                else:
                    out.sepsets[pair] = (s, pv)
                    removed_now.append(pair)
            return found

        if cancelled is not None and cancelled():
            raise SearchCancelled("the search was stopped before it finished")
        if level == 0:
            idx = pairs.copy()
            p = np.asarray(pvalues(idx), dtype=float)
            done = len(idx)
            settle(idx, p, np.arange(len(pairs)))
            if association is None:
                association = np.zeros((n_vars, n_vars))
                association[idx[:, 0], idx[:, 1]] = 1.0 - np.nan_to_num(p, nan=1.0)
                association = np.maximum(association, association.T)
            if progress is not None:
                progress({"phase": "skeleton", "level": level, "done": done,
                          "planned": total})
        elif level == 1:
            all_idx, all_owner, all_rank = _level_one_candidates(pairs, frozen, association)
            active = np.ones(len(pairs), dtype=bool)
            lo, hi = 0, 1
            while True:
                if cancelled is not None and cancelled():
                    raise SearchCancelled("the search was stopped before it finished")
                take = (all_rank >= lo) & (all_rank < hi) & active[all_owner]
                if not take.any():
                    break
                idx, owner = all_idx[take], all_owner[take]
                p = np.asarray(pvalues(idx), dtype=float)
                done += len(idx)
                found = settle(idx, p, owner)
                if found:
                    active[list(found)] = False
                width = hi - lo
                lo, hi = hi, hi + (2 if width == 1 else 4 * width)
                if progress is not None:
                    progress({"phase": "skeleton", "level": level, "done": done,
                              "planned": total})
        else:
            iters = [_candidate_sets(*_ordered_sides(int(x), int(y), frozen, association),
                                     level) for x, y in pairs]
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
                p = np.asarray(pvalues(idx), dtype=float)
                done += len(idx)
                found = settle(idx, p, owner)
                active = [o for o in full if o not in found]
                chunk = chunk * 4 if chunk > 1 else 2
                if progress is not None:
                    progress({"phase": "skeleton", "level": level, "done": done,
                              "planned": total})
        for x, y in removed_now:
            if (x, y) in ghosts:
                ghosts.discard((x, y))
            else:
                adj[x, y] = adj[y, x] = False
        out.levels.append({"level": level, "pairs": len(pairs), "tests": done,
                           "removed": len(removed_now)})
        out.depth_reached = level
        level += 1
    out.adjacent = [set(np.flatnonzero(row).tolist()) for row in adj]
    out.unseparated_forbidden = sorted(ghosts)
    return out
