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
from itertools import combinations
from math import comb
from typing import Callable

import numpy as np

from ..exceptions import SearchCancelled

__all__ = ["SkeletonOutcome", "adjacency_search"]


@dataclass
class SkeletonOutcome:
    """What the adjacency search found, in test-index space (mutable, internal)."""

    adjacent: list[set[int]]
    sepsets: dict[tuple[int, int], tuple[tuple[int, ...], float]] = field(default_factory=dict)
    # every test run: (x, y, S, p) with x < y
    log: list[tuple[int, int, tuple[int, ...], float]] = field(default_factory=list)
    locked_conflicts: list[tuple[int, int, tuple[int, ...], float]] = field(default_factory=list)
    unseparated_forbidden: list[tuple[int, int]] = field(default_factory=list)
    depth_reached: int = 0
    levels: list[dict] = field(default_factory=list)


def _candidate_sets(x: int, y: int, frozen: list[set[int]], rank: np.ndarray, level: int):
    """Yield conditioning sets of size ``level`` from adj(x)\\{y}, then new ones from adj(y)\\{x}.

    Neighbours are ordered by variable name (``rank``) so the enumeration, and with it the
    separating set kept, does not depend on column order.
    """
    key = rank.__getitem__
    if key(y) < key(x):
        x, y = y, x
    nx_ = sorted(frozen[x] - {y}, key=key)
    for s in combinations(nx_, level):
        yield s
    nx_set = set(nx_)
    ny_ = sorted(frozen[y] - {x}, key=key)
    for s in combinations(ny_, level):
        if not set(s) <= nx_set:
            yield s


def _count_sets(x, y, frozen, level) -> int:
    ax = len(frozen[x] - {y})
    ay = len(frozen[y] - {x})
    common = len((frozen[x] & frozen[y]) - {x, y})
    return comb(ax, level) + comb(ay, level) - comb(common, level)


def adjacency_search(n_vars: int, pvalues: Callable, *, alpha: float, names, max_depth=None,
                     locked=(), forbidden=(), progress=None, cancelled=None,
                     first_chunk: int = 4) -> SkeletonOutcome:
    """Run the order-independent adjacency search.

    Parameters
    ----------
    n_vars : int
        Number of variables (indices ``0 .. n_vars-1``).
    pvalues : callable
        ``pvalues(list of (x, y, S)) -> array`` answering a batch (through the cache).
    alpha : float
        A pair is independent when its p-value is above ``alpha``; a NaN p-value never
        separates.
    names : sequence of str
        Variable names, used only to order enumeration.
    max_depth : int or None
        Largest conditioning-set size.
    locked, forbidden : iterable of (int, int)
        Pairs that must stay adjacent / must never be adjacent.
    progress : callable, optional
        Called with a dict ``{"phase", "level", "done", "planned"}`` after each batch.
    cancelled : callable, optional
        Returns True when the search must stop; checked between batches.
    """
    rank = np.empty(n_vars, dtype=np.intp)
    rank[np.argsort(np.asarray(names, dtype=object), kind="stable")] = np.arange(n_vars)
    locked = {(min(a, b), max(a, b)) for a, b in locked}
    forbidden = {(min(a, b), max(a, b)) for a, b in forbidden}
    adjacent = [set(range(n_vars)) - {i} for i in range(n_vars)]
    for a, b in forbidden:
        adjacent[a].discard(b)
        adjacent[b].discard(a)
    out = SkeletonOutcome(adjacent=adjacent)
    ghosts = set(forbidden)  # forbidden pairs still looking for a separating set
    conflicted = set()  # locked pairs the data already separated once
    level = 0
    while max_depth is None or level <= max_depth:
        frozen = [set(s) for s in adjacent]
        pairs = [(x, y) for x in range(n_vars) for y in frozen[x] if x < y]
        pairs = [pair for pair in pairs if pair not in conflicted] + sorted(ghosts)
        planned = {pair: _count_sets(*pair, frozen, level) for pair in pairs}
        pairs = [pair for pair in pairs if planned[pair] > 0]
        if not pairs:
            break
        total = sum(planned[pair] for pair in pairs)
        iters = {pair: _candidate_sets(*pair, frozen, rank, level) for pair in pairs}
        active = list(pairs)
        chunk = first_chunk if level > 0 else 1
        done = 0
        removed_now = []
        while active:
            if cancelled is not None and cancelled():
                raise SearchCancelled("the search was stopped before it finished")
            batch, owners = [], []
            for pair in active:
                taken = 0
                for s in iters[pair]:
                    batch.append((pair[0], pair[1], s))
                    taken += 1
                    if taken == chunk:
                        break
                owners.append((pair, taken))
            if not batch:
                break
            p = pvalues(batch)
            done += len(batch)
            still = []
            at = 0
            for pair, taken in owners:
                found = None
                for k in range(at, at + taken):
                    out.log.append((pair[0], pair[1], batch[k][2], float(p[k])))
                    if found is None and p[k] > alpha:
                        found = k
                at += taken
                if found is not None:
                    s, pv = batch[found][2], float(p[found])
                    if pair in locked:
                        out.locked_conflicts.append((pair[0], pair[1], s, pv))
                        conflicted.add(pair)
                    else:
                        out.sepsets[pair] = (s, pv)
                        removed_now.append(pair)
                elif taken == chunk:
                    still.append(pair)
            active = still
            chunk *= 4
            if progress is not None:
                progress({"phase": "skeleton", "level": level, "done": done,
                          "planned": total})
        for x, y in removed_now:
            if (x, y) in ghosts:
                ghosts.discard((x, y))
            else:
                adjacent[x].discard(y)
                adjacent[y].discard(x)
        out.levels.append({"level": level, "pairs": len(pairs), "tests": done,
                           "removed": len(removed_now)})
        out.depth_reached = level
        level += 1
    out.unseparated_forbidden = sorted(ghosts)
    return out
