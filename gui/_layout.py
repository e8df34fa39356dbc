"""Where the nodes go on the canvas: layered by stage, force-directed, or a grid.

Qt-free: positions are plain ``{name: (x, y)}`` in canvas units (about one pixel at zoom 1),
node centres. A node is drawn about 110 wide and 34 high, so layouts keep centres at least
:data:`MIN_GAP_X` / :data:`MIN_GAP_Y` apart.

- **Layered by stage** (when the knowledge has stages): one column per stage, left to right in
  stage order, unstaged variables in a last column; within a column, nodes are ordered by the
  mean row of their neighbours in the columns already placed (the barycentre heuristic of
  Sugiyama, Tagawa & Toda 1981, one sweep), which keeps arrows between columns short.
- **Force-directed** (no stages, some edges): Fruchterman & Reingold (1991) through
  :func:`networkx.spring_layout` with a fixed seed (the same graph gives the same picture),
  scaled to the node count, then overlapping nodes are pushed apart.
- **Grid** (no edges yet): variables in reading order, row by row.

References
----------
Sugiyama, K., Tagawa, S. & Toda, M. (1981). Methods for visual understanding of hierarchical
system structures. IEEE Trans. Systems, Man, and Cybernetics 11(2), 109–125.
Fruchterman, T. M. J. & Reingold, E. M. (1991). Graph drawing by force-directed placement.
Software: Practice and Experience 21(11), 1129–1164.
"""

from __future__ import annotations

import math
from typing import Iterable, Mapping, Sequence

import networkx as nx
import numpy as np

__all__ = ["arrange", "layered_layout", "force_layout", "grid_layout", "MIN_GAP_X",
           "MIN_GAP_Y"]

MIN_GAP_X = 150.0
MIN_GAP_Y = 64.0
COLUMN_GAP = 230.0
ROW_GAP = 72.0
SUB_COLUMN_GAP = 165.0
MAX_ROWS = 6


def arrange(variables: Sequence[str], edges: Iterable[tuple[str, str]] = (),
            stages: Sequence[Sequence[str]] = (), *, seed: int = 7) -> dict:
    """Choose the layout the window uses: layered when there are stages, else force-directed
    when there are edges, else a grid."""
    variables = list(variables)
    edges = [(a, b) for a, b in edges if a in variables and b in variables]
    staged = [[v for v in g if v in variables] for g in stages]
    if any(staged):
        return layered_layout(variables, edges, staged)
    if edges:
        return force_layout(variables, edges, seed=seed)
    return grid_layout(variables)


def grid_layout(variables: Sequence[str]) -> dict:
    """Variables row by row in a near-square grid."""
    n = len(variables)
    cols = max(1, math.ceil(math.sqrt(n * 1.6)))
    return {v: ((i % cols) * MIN_GAP_X * 1.1, (i // cols) * ROW_GAP * 1.4)
            for i, v in enumerate(variables)}


def layered_layout(variables: Sequence[str], edges: Iterable[tuple[str, str]],
                   stages: Sequence[Sequence[str]]) -> dict:
    """One column per stage (unstaged variables last), ordered by neighbour barycentres."""
    placed_stage = {v for g in stages for v in g}
    columns = [list(g) for g in stages if g]
    rest = [v for v in variables if v not in placed_stage]
    if rest:
        columns.append(rest)
    neighbours: dict[str, set] = {v: set() for v in variables}
    for a, b in edges:
        if a not in neighbours or b not in neighbours:
            continue
        neighbours[a].add(b)
        neighbours[b].add(a)
    row_of: dict[str, float] = {}
    positions = {}
    # a stage with many variables is split into staggered sub-columns, so that edges inside
    # the stage run diagonally instead of through the nodes between their ends
    split = [max(1, math.ceil(len(c) / MAX_ROWS)) for c in columns]
    if len(columns) > 1 or len(columns[0]) > MAX_ROWS:
        split = [max(s, 2) if len(c) > 3 else s for s, c in zip(split, columns)]
    heights = [math.ceil(len(c) / k) + (0.5 if k > 1 else 0) for c, k in zip(columns, split)]
    tallest = max(heights)
    x = 0.0
    order = {v: i for i, v in enumerate(variables)}
    for column, k in zip(columns, split):
        def key(v):
            rows = [row_of[u] for u in neighbours[v] if u in row_of]
            return (sum(rows) / len(rows) if rows else order[v] * tallest / len(variables),
                    order[v])

        column = sorted(column, key=key)
        rows_here = math.ceil(len(column) / k)
        offset = (tallest - rows_here - (0.5 if k > 1 else 0)) / 2.0
        for i, v in enumerate(column):
            sub, row = i % k, i // k
            y = row + offset + (sub * 1.0 / k if k > 1 else 0.0)
            row_of[v] = y
            positions[v] = (x + sub * SUB_COLUMN_GAP, y * ROW_GAP)
        x += (k - 1) * SUB_COLUMN_GAP + COLUMN_GAP
    return positions


def force_layout(variables: Sequence[str], edges: Iterable[tuple[str, str]], *,
                 seed: int = 7) -> dict:
    """Fruchterman–Reingold placement scaled to the node count, without overlaps."""
    graph = nx.Graph()
    graph.add_nodes_from(variables)
    graph.add_edges_from(edges)
    n = len(variables)
    if n == 1:
        return {variables[0]: (0.0, 0.0)}
    raw = nx.spring_layout(graph, seed=seed, iterations=80)
    xy = np.array([raw[v] for v in variables], dtype=float)
    xy -= xy.mean(axis=0)
    span = np.abs(xy).max(axis=0)
    span[span == 0] = 1.0
    half = np.array([MIN_GAP_X, MIN_GAP_Y * 1.3]) * math.sqrt(n) * 0.75
    xy = xy / span * half
    xy = _separate(xy)
    return {v: (float(x), float(y)) for v, (x, y) in zip(variables, xy)}


def _separate(xy: np.ndarray, *, rounds: int = 200) -> np.ndarray:
    """Push apart node centres closer than the minimum gaps (axis-aligned boxes).

    Each overlapping pair moves apart along the axis where it overlaps least (relative to
    the gap), each node by half the overlap; repeated until no pair overlaps.
    """
    gap = np.array([MIN_GAP_X * 0.85, MIN_GAP_Y * 0.85])
    xy = xy.copy()
    n = len(xy)
    rng = np.random.default_rng(0)
    xy += rng.normal(scale=1e-3, size=xy.shape)  # break exact ties
    for _ in range(rounds):
        d = xy[:, None, :] - xy[None, :, :]
        overlap = gap - np.abs(d)
        hit = (overlap[..., 0] > 0) & (overlap[..., 1] > 0)
        np.fill_diagonal(hit, False)
        if not hit.any():
            break
        along_x = overlap[..., 0] / gap[0] < overlap[..., 1] / gap[1]
        sign = np.where(d >= 0, 1.0, -1.0)
        push = np.zeros((n, 2))
        push[:, 0] = np.where(hit & along_x, (overlap[..., 0] + 1.0) * sign[..., 0] / 2,
                              0).sum(axis=1)
        push[:, 1] = np.where(hit & ~along_x, (overlap[..., 1] + 1.0) * sign[..., 1] / 2,
                              0).sum(axis=1)
        xy += push
    return xy


def bounds(positions: Mapping[str, tuple[float, float]]) -> tuple[float, float, float, float]:
    """(left, top, right, bottom) of the node centres."""
    if not positions:
        return (0.0, 0.0, 0.0, 0.0)
    xs = [p[0] for p in positions.values()]
    ys = [p[1] for p in positions.values()]
    return (min(xs), min(ys), max(xs), max(ys))
