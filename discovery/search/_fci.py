"""The possible-d-separating-set phase of FCI: removing edges that only hidden causes explain.

With hidden common causes, two variables that are not adjacent in the true diagram may be
separated only by a set that contains some of their non-neighbours, so the adjacency search of
PC (which conditions on neighbours only) can leave extra edges. FCI (Spirtes, Meek & Richardson
1999, "An algorithm for causal inference in the presence of latent variables and selection
bias", in *Computation, Causation and Discovery*; Spirtes, Glymour & Scheines 2000, *Causation,
Prediction, and Search*, 2nd ed., §6.7) therefore:

1. runs the adjacency search (:mod:`._skeleton`);
2. marks the colliders of that skeleton (rule R0, :mod:`._pag_orientation`);
3. for every vertex ``x`` builds **Possible-D-Sep(x)**: the vertices ``v`` reachable from ``x``
   along a path on which every inner vertex is a collider or sits in a triangle with its two
   path neighbours;
4. tests each remaining pair ``x — y`` given the subsets of Possible-D-Sep(x) (then of
   Possible-D-Sep(y)) without ``x`` and ``y``, smallest first, and removes the pair at the
   first independence, recording the set;
5. orients the final skeleton from scratch (R0, then R1–R10).

Only vertices that lie on a path between ``x`` and ``y`` can be needed in a separating set, so
for the pair x — y the sets are cut to the biconnected component of the skeleton that holds
the edge (every other path from x to y closes a cycle with the edge; Colombo, Maathuis,
Kalisch & Richardson 2012, §3.3). On sparse graphs this removes most of the cost.

Here the sets of step 3 are computed once on the graph of step 2 and removals take effect only
at the end of the phase, so the result does not depend on the order of the variables (the
"stable" version, Colombo, Maathuis, Kalisch & Richardson 2012, "Learning high-dimensional
directed acyclic graphs with latent and selection variables", Ann. Statist. 40). Sets that the
adjacency search already tried (subsets of the final neighbours) are skipped.

Cost: the number of subsets grows fast with the size of Possible-D-Sep, so the set size is
bounded by the depth limit, and the phase stops after ``budget`` tests; pairs not fully
checked are reported (their edges may be extra), with a :class:`SearchLimitWarning`.
"""

from __future__ import annotations

import time
from collections import deque
from itertools import combinations
from math import comb

import numpy as np

from ..exceptions import SearchCancelled
from ._pag_orientation import ARROW

__all__ = ["possible_d_sep", "possible_d_sep_phase", "PDS_AUTO_FACTOR", "PDS_AUTO_MINIMUM"]

#: The automatic budget of the phase: this many times the adjacency search's tests ...
PDS_AUTO_FACTOR = 4
#: ... and at least this many tests.
PDS_AUTO_MINIMUM = 5_000


def possible_d_sep(x: int, adjacent, marks) -> set[int]:
    """Possible-D-Sep(x): vertices reachable from x along paths whose every inner vertex is a
    collider (arrowheads from both sides) or forms a triangle with its path neighbours
    (Spirtes, Glymour & Scheines 2000, §6.7)."""
    found = set(adjacent[x])
    seen = {(x, v) for v in adjacent[x]}
    queue = deque(seen)
    while queue:
        u, v = queue.popleft()
        for w in adjacent[v]:
            if w == u or w == x:
                continue
            if (marks[u, v] == ARROW and marks[w, v] == ARROW) or w in adjacent[u]:
                found.add(w)
                if (v, w) not in seen:
                    seen.add((v, w))
                    queue.append((v, w))
    found.discard(x)
    return found


def possible_d_sep_phase(adjacent, marks, pvalues, *, alpha, max_depth, locked=(),
                         budget=float("inf"), progress=None, cancelled=None,
                         batch_limit=None):
    """Test every remaining pair given subsets of its Possible-D-Sep sets.

    Parameters
    ----------
    adjacent : list of set of int
        The skeleton of the adjacency search (not modified).
    marks : array
        Its marks after rule R0 (``marks[i, j]``: the mark at j on i–j).
    pvalues : callable
        ``pvalues(idx) -> array`` for canonical rows ``[x, y, s1..sk]`` of one width.
    alpha, max_depth : float, int or None
    locked : iterable of (int, int)
        Pairs that must stay adjacent (tested, and a separation is a conflict).
    budget : int or float
        Largest number of tests in this phase (``inf``: no limit).

    Returns
    -------
    dict
        ``removed``: ``[(x, y, S, p)]`` (x < y); ``log``: ``[(idx, p)]`` blocks; ``levels``:
        per set size, ``{"phase", "level", "pairs", "tests", "removed", "seconds"}``;
        ``tests``; ``unfinished``: pairs whose candidate sets were not all tried;
        ``locked_conflicts``: ``[(x, y, S, p)]``; ``largest``: the largest Possible-D-Sep.
    """
    n = len(adjacent)
    locked = {(min(a, b), max(a, b)) for a, b in locked}
    pds = [possible_d_sep(v, adjacent, marks) for v in range(n)]
    block_of = _blocks(adjacent)
    out = {"removed": [], "log": [], "levels": [], "tests": 0, "unfinished": [],
           "locked_conflicts": [], "largest": 0}
    pairs = [(x, y) for x in range(n) for y in sorted(adjacent[x]) if x < y]
    bases = {}
    for x, y in pairs:
        block = block_of[(x, y)]
        bx = sorted((pds[x] & block) - {x, y})
        by = sorted((pds[y] & block) - {x, y})
        # sets inside the final neighbours were all tried by the adjacency search
        if set(bx) <= adjacent[x] and set(by) <= adjacent[y]:
            continue
        bases[(x, y)] = (bx, by)
        out["largest"] = max(out["largest"], len(bx), len(by))
    open_pairs = list(bases)
    top = max((max(len(bx), len(by)) for bx, by in bases.values()), default=0)
    if max_depth is not None:
        top = min(top, max_depth)
    level = 1
    while open_pairs and level <= top:
        started = time.perf_counter()
        streams = {pair: _candidates(pair, *bases[pair], adjacent, level)
                   for pair in open_pairs}
        planned = sum(_count(*bases[p], level) for p in open_pairs)
        done_level, removed_level, width = 0, 0, 1
        active = [p for p in open_pairs if _count(*bases[p], level)]
        pairs_at_level = len(active)
        separated = []
        while active:
            if cancelled is not None and cancelled():
                raise SearchCancelled("the search was stopped before it finished")
            rows, owner = [], []
            still = []
            for pair in active:
                taken = 0
                for s in streams[pair]:
                    rows.append((pair[0], pair[1], *s))
                    owner.append(pair)
                    taken += 1
                    if taken == width:
                        still.append(pair)
                        break
            if not rows:
                break
            if out["tests"] + len(rows) > budget:
                keep = max(0, budget - out["tests"])
                rows, owner = rows[:keep], owner[:keep]
                out["unfinished"] = [q for q in open_pairs if q not in separated and (
                    q in active or max(map(len, bases[q])) > level)]
                if not rows:
                    break
            idx = np.asarray(rows, dtype=np.intp)
            p = _answer(pvalues, idx, batch_limit, cancelled)
            out["log"].append((idx, p))
            out["tests"] += len(idx)
            done_level += len(idx)
            hit = set()
            for row, pair, pv in zip(rows, owner, p.tolist()):
                if pv > alpha and pair not in hit:
                    hit.add(pair)
                    if pair in locked:
                        out["locked_conflicts"].append((pair[0], pair[1], tuple(row[2:]), pv))
                        continue
                    out["removed"].append((pair[0], pair[1], tuple(row[2:]), pv))
                    separated.append(pair)
                    removed_level += 1
            if progress is not None:
                progress({"phase": "possible-d-sep", "level": level, "done": done_level,
                          "planned": planned})
            if out["unfinished"]:
                out["unfinished"] = [q for q in out["unfinished"] if q not in hit]
                break
            active = [pair for pair in still if pair not in hit]
            width = min(4 * width, 4096)
        out["levels"].append({"phase": "possible-d-sep", "level": level,
                              "pairs": pairs_at_level, "tests": done_level,
                              "removed": removed_level,
                              "seconds": round(time.perf_counter() - started, 6)})
        gone = set(separated)
        open_pairs = [p for p in open_pairs if p not in gone]
        if out["unfinished"]:
            break
        level += 1
    return out


def _blocks(adjacent) -> dict:
    """``(x, y) -> vertices of the biconnected component holding the edge x — y`` (x < y)."""
    import networkx as nx
    g = nx.Graph()
    g.add_nodes_from(range(len(adjacent)))
    g.add_edges_from((a, b) for a in range(len(adjacent)) for b in adjacent[a] if a < b)
    out = {}
    for edges in nx.biconnected_component_edges(g):
        members = frozenset(v for e in edges for v in e)
        for a, b in edges:
            out[(min(a, b), max(a, b))] = members
    return out


def _count(bx, by, k) -> int:
    return comb(len(bx), k) + comb(len(by), k) - comb(len(set(bx) & set(by)), k)


def _candidates(pair, bx, by, adjacent, k):
    """Sets of size k from Possible-D-Sep(x), then Possible-D-Sep(y) (each once), skipping
    those inside x's or y's final neighbours (already tried by the adjacency search)."""
    x, y = pair
    # a set lies inside x's neighbours when it misses every non-neighbour of x
    away_x = frozenset(v for v in (*bx, *by) if v not in adjacent[x])
    away_y = frozenset(v for v in (*bx, *by) if v not in adjacent[y])
    for s in combinations(bx, k):
        if not away_x.isdisjoint(s) and not away_y.isdisjoint(s):
            yield s
    in_x = frozenset(bx)
    for s in combinations(by, k):
        if not in_x.issuperset(s) and not away_x.isdisjoint(s) \
                and not away_y.isdisjoint(s):  # (sets inside bx came from the first loop)
            yield s


def _answer(pvalues, idx, batch_limit, cancelled):
    if batch_limit is None or len(idx) <= batch_limit:
        return np.asarray(pvalues(idx), dtype=float)
    out = np.empty(len(idx))
    for a in range(0, len(idx), batch_limit):
        if cancelled is not None and cancelled():
            raise SearchCancelled("the search was stopped before it finished")
        out[a:a + batch_limit] = pvalues(idx[a:a + batch_limit])
    return out
