"""Where the nodes go on the canvas: layered (by stage, or by direction), force-directed, or a
grid.

Qt-free: positions are plain ``{name: (x, y)}`` in canvas units (about one pixel at zoom 1),
node centres. Layouts know each node's box (:func:`node_size` estimates it from the name; the
window passes the drawn sizes), and keep boxes apart by at least :data:`CLEAR_X` /
:data:`CLEAR_Y` between their borders, so no edge is only a few pixels long.

- **Layered by stage** (when the knowledge has stages): one column per stage, left to right in
  stage order, unstaged variables in a last column; within a column, nodes are ordered by the
  mean row of their neighbours in the columns already placed (the barycentre heuristic of
  Sugiyama, Tagawa & Toda 1981, one sweep), which keeps arrows between columns short.
- **Layered by direction** (offered without stages too): the columns are the longest-path
  layers of the directed edges (every arrow points right), then the same ordering.
- **Force-directed** (no stages, some edges): Fruchterman & Reingold (1991) through
  :func:`networkx.spring_layout` with a fixed seed (the same graph gives the same picture),
  scaled to the area the boxes need, then boxes are pushed apart and off the edges they sit
  on.
- **Grid** (no edges yet): variables in reading order, row by row.

In the two diagram layouts, variables without any edge are packed in rows below the drawing
instead of being flung to its corners.

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

__all__ = ["arrange", "layered_layout", "direction_layers", "force_layout", "grid_layout",
           "node_size", "STYLES", "MIN_GAP_X", "MIN_GAP_Y", "CLEAR_X", "CLEAR_Y"]

MIN_GAP_X = 150.0
MIN_GAP_Y = 64.0
COLUMN_GAP = 230.0
ROW_GAP = 72.0
SUB_COLUMN_GAP = 165.0
MAX_ROWS = 6
NODE_H = 34.0
#: Least free space between two boxes' borders, across and down (canvas units).
CLEAR_X = 34.0
CLEAR_Y = 26.0
#: Least free space between a box and an edge that passes it.
EDGE_CLEAR = 10.0
#: Extra space between two boxes joined by an edge, so that the edge shows (and a contested
#: edge's "?" badge fits with line on both sides).
EDGE_ROOM = 16.0
#: ``auto`` picks layered-by-stage when there are stages, else force-directed when there are
#: edges, else a grid.
STYLES = ("auto", "layered", "force")


def node_size(name: str) -> tuple[float, float]:
    """The drawn box of a node named ``name``, estimated (a 10-point sans-serif label, the
    kind glyph and padding); the window passes measured sizes instead."""
    return max(64.0, 7.4 * len(name) + 40.0), NODE_H


def arrange(variables: Sequence[str], edges: Iterable[tuple[str, str]] = (),
            stages: Sequence[Sequence[str]] = (), *, style: str = "auto",
            directed: Iterable[tuple[str, str]] | None = None,
            sizes: Mapping[str, tuple[float, float]] | None = None, seed: int = 7,
            aspect: float | None = None) -> dict:
    """Lay the variables out.

    Parameters
    ----------
    variables : sequence of str
    edges : iterable of (a, b)
        Every adjacency of the diagram.
    stages : sequence of sequences of str
    style : {"auto", "layered", "force"}
        ``layered`` uses the stages when there are any, else the direction of the arrows.
    directed : iterable of (a, b), optional
        The edges that are arrows a → b (for the layered-by-direction columns); by default
        every edge counts as one.
    sizes : mapping of name to (width, height), optional
        Drawn box sizes; :func:`node_size` by default.
    aspect : float, optional
        Width over height of the view the drawing should fill (force-directed layouts);
        :data:`ASPECT` by default.

    Raises
    ------
    ValueError
        An unknown ``style``.
    """
    if style not in STYLES:
        raise ValueError(f"layout style must be one of {STYLES}; got {style!r}")
    variables = list(variables)
    known = set(variables)
    edges = [(a, b) for a, b in edges if a in known and b in known and a != b]
    sizes = {v: tuple((sizes or {}).get(v) or node_size(v)) for v in variables}
    staged = [[v for v in g if v in known] for g in stages]
    if style == "auto":
        style = "layered" if any(staged) else "force" if edges else "grid"
    if style == "grid" or (style == "force" and not edges):
        return grid_layout(variables)
    linked = {v for e in edges for v in e}
    in_stage = {v for g in staged for v in g}
    aside = [v for v in variables if v not in linked and v not in in_stage]
    main = [v for v in variables if v not in set(aside)]
    if not main:
        return grid_layout(variables)
    if style == "layered":
        if any(staged):
            columns = staged
        else:
            arrows = edges if directed is None else [
                (a, b) for a, b in directed if a in known and b in known]
            columns = direction_layers(main, arrows)
        positions = layered_layout(main, edges, columns, sizes=sizes)
    else:
        positions = force_layout(main, edges, seed=seed, sizes=sizes, aspect=aspect)
    positions.update(_pack_aside(aside, positions, sizes))
    return positions


def direction_layers(variables: Sequence[str], arrows: Iterable[tuple[str, str]]) -> list:
    """Columns by longest path along the arrows (a variable sits one column right of its
    furthest-right parent); arrows that would close a cycle are ignored."""
    graph = nx.DiGraph()
    graph.add_nodes_from(variables)
    for a, b in arrows:
        if a in graph and b in graph and not graph.has_edge(b, a):
            graph.add_edge(a, b)
            if not nx.is_directed_acyclic_graph(graph):
                graph.remove_edge(a, b)
    layer = {}
    for v in nx.topological_sort(graph):
        layer[v] = max((layer[u] + 1 for u in graph.predecessors(v)), default=0)
    columns = [[] for _ in range(max(layer.values(), default=0) + 1)]
    for v in variables:
        columns[layer[v]].append(v)
    return [c for c in columns if c]


def _pack_aside(names: Sequence[str], placed: Mapping[str, tuple[float, float]],
                sizes: Mapping[str, tuple[float, float]]) -> dict:
    """Rows of ``names`` under the ``placed`` drawing, left-aligned with it, wrapped at its
    width (or at about eight boxes when it is narrow)."""
    if not names:
        return {}
    if placed:
        lefts = [placed[v][0] - sizes[v][0] / 2 for v in placed]
        rights = [placed[v][0] + sizes[v][0] / 2 for v in placed]
        bottoms = [placed[v][1] + sizes[v][1] / 2 for v in placed]
        left, width, top = min(lefts), max(rights) - min(lefts), max(bottoms) + 2.5 * CLEAR_Y
    else:
        left, width, top = 0.0, 0.0, 0.0
    width = max(width, 8 * (110 + CLEAR_X))
    out, x, row = {}, left, 0
    for v in names:
        w, h = sizes[v]
        if x > left and x + w > left + width:
            x, row = left, row + 1
        out[v] = (x + w / 2, top + h / 2 + row * (h + CLEAR_Y))
        x += w + CLEAR_X * 0.6
    return out


def grid_layout(variables: Sequence[str]) -> dict:
    """Variables row by row in a near-square grid."""
    n = len(variables)
    cols = max(1, math.ceil(math.sqrt(n * 1.6)))
    return {v: ((i % cols) * MIN_GAP_X * 1.1, (i // cols) * ROW_GAP * 1.4)
            for i, v in enumerate(variables)}


def layered_layout(variables: Sequence[str], edges: Iterable[tuple[str, str]],
                   stages: Sequence[Sequence[str]], *,
                   sizes: Mapping[str, tuple[float, float]] | None = None) -> dict:
    """One column per stage (unstaged variables last), ordered by neighbour barycentres."""
    sizes = {v: tuple((sizes or {}).get(v) or node_size(v)) for v in variables}
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
    # a big diagram gets taller columns, so that the drawing keeps a screen's proportions
    max_rows = max(MAX_ROWS, round(math.sqrt(len(variables)) * 1.4))
    split = [max(1, math.ceil(len(c) / max_rows)) for c in columns]
    if len(columns) > 1 or len(columns[0]) > max_rows:
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
        widest = max(sizes[v][0] for v in column)
        sub_gap = max(SUB_COLUMN_GAP, widest + CLEAR_X + 20)
        rows_here = math.ceil(len(column) / k)
        offset = (tallest - rows_here - (0.5 if k > 1 else 0)) / 2.0
        for i, v in enumerate(column):
            sub, row = i % k, i // k
            y = row + offset + (sub * 1.0 / k if k > 1 else 0.0)
            row_of[v] = y
            positions[v] = (x + sub * sub_gap, y * ROW_GAP)
        x += (k - 1) * sub_gap + max(COLUMN_GAP, widest + 110)
    return positions


#: Width over height of a force-directed drawing (a window's canvas is wider than tall).
ASPECT = 1.35


def force_layout(variables: Sequence[str], edges: Iterable[tuple[str, str]], *,
                 seed: int = 7, sizes: Mapping[str, tuple[float, float]] | None = None,
                 aspect: float | None = None) -> dict:
    """Fruchterman–Reingold placement scaled to the area the boxes need, then boxes pushed
    apart and off the edges that run under them."""
    variables = list(variables)
    edges = list(edges)
    sizes = {v: tuple((sizes or {}).get(v) or node_size(v)) for v in variables}
    graph = nx.Graph()
    graph.add_nodes_from(variables)
    graph.add_edges_from(edges)
    n = len(variables)
    if n == 1:
        return {variables[0]: (0.0, 0.0)}
    raw = nx.spring_layout(graph, seed=seed, iterations=100)
    xy = np.array([raw[v] for v in variables], dtype=float)
    xy -= xy.mean(axis=0)
    half = np.array([sizes[v] for v in variables], dtype=float) / 2
    # room for every box with its clearance, about twice over (edges need space too)
    area = float(np.sum((2 * half[:, 0] + 1.2 * CLEAR_X) * (2 * half[:, 1] + 1.5 * CLEAR_Y)))
    # pushing wide boxes apart stretches a drawing sideways: aim a little taller
    aspect = min(max(aspect or ASPECT, 0.5), 3.0) * 0.9
    width = math.sqrt(area * aspect)
    span = xy.max(axis=0) - xy.min(axis=0)
    span[span == 0] = 1.0
    xy = xy / span * np.array([width, width / aspect])
    index = {v: i for i, v in enumerate(variables)}
    pairs = np.array([(index[a], index[b]) for a, b in edges if a in index and b in index],
                     dtype=int).reshape(-1, 2)
    xy = _untangle(xy, half, pairs)
    xy = _compact(xy, half, pairs, aspect=aspect)
    return {v: (round(float(x), 2), round(float(y), 2)) for v, (x, y) in zip(variables, xy)}


def _compact(xy: np.ndarray, half: np.ndarray, pairs: np.ndarray, *, steps: int = 8,
             factor: float = 0.93, aspect: float = ASPECT) -> np.ndarray:
    """Draw the layout together while it stays clean: shrink it towards its centre, let
    :func:`_untangle` settle it, keep the result if the drawing got smaller and nothing
    overlaps or sits on an edge (a spring layout leaves wide empty margins)."""
    def extent(p):
        lo = (p - half).min(axis=0)
        hi = (p + half).max(axis=0)
        return float(np.prod(hi - lo))

    def shape_ok(p):  # squeezing one axis must not turn the drawing into a strip
        lo = (p - half).min(axis=0)
        hi = (p + half).max(axis=0)
        ratio = (hi[0] - lo[0]) / max(hi[1] - lo[1], 1.0)
        return aspect / 1.4 <= ratio <= aspect * 1.4

    def clean(p):
        d = np.abs(p[:, None, :] - p[None, :, :])
        gap = _gaps(half, pairs) - 0.5
        hit = (d[..., 0] < gap[..., 0]) & (d[..., 1] < gap[..., 1])
        np.fill_diagonal(hit, False)
        return not hit.any() and (not len(pairs) or _edge_shove(p, half, pairs) is None)

    if not clean(xy):
        return xy
    # both axes together, then each alone (one axis often has room the other lacks)
    for scale in ((factor, factor), (factor, 1.0), (1.0, factor)):
        for _ in range(steps):
            centre = xy.mean(axis=0)
            trial = _untangle(centre + (xy - centre) * np.array(scale), half, pairs,
                              rounds=150)
            if (not clean(trial) or extent(trial) >= extent(xy) * 0.99
                    or (scale[0] != scale[1] and not shape_ok(trial))):
                break
            xy = trial
    return xy


def _gaps(half: np.ndarray, pairs: np.ndarray) -> np.ndarray:
    """``[i, j] -> (x, y)``: how far apart two centres must be, across and down."""
    gap = np.stack([half[:, None, 0] + half[None, :, 0] + CLEAR_X,
                    half[:, None, 1] + half[None, :, 1] + CLEAR_Y], axis=-1)
    if len(pairs):
        gap[pairs[:, 0], pairs[:, 1]] += EDGE_ROOM
        gap[pairs[:, 1], pairs[:, 0]] += EDGE_ROOM
    return gap


def _untangle(xy: np.ndarray, half: np.ndarray, pairs: np.ndarray, *,
              rounds: int = 400) -> np.ndarray:
    """Push boxes apart (at least :data:`CLEAR_X` / :data:`CLEAR_Y` between borders) and off
    the edges that pass under them (:data:`EDGE_CLEAR`), until nothing is in the way.

    Two overlapping boxes move apart along the axis where they overlap least (relative to
    the gap), each by half the overlap. A box that an edge crosses moves away from the edge
    along the edge's normal, by what it lacks.
    """
    xy = xy.copy()
    n = len(xy)
    rng = np.random.default_rng(0)
    xy += rng.normal(scale=1e-3, size=xy.shape)  # break exact ties
    gap = _gaps(half, pairs)
    # boxes apart and off edges; then, if a crowded drawing has not settled, boxes apart only
    # (overlapping boxes are worse than an edge under a box, which the canvas bends around)
    for step in range(rounds + 100):
        moved = False
        d = xy[:, None, :] - xy[None, :, :]
        overlap = gap - np.abs(d)
        hit = (overlap[..., 0] > 0) & (overlap[..., 1] > 0)
        np.fill_diagonal(hit, False)
        if hit.any():
            moved = True
            along_x = overlap[..., 0] / gap[..., 0] < overlap[..., 1] / gap[..., 1]
            sign = np.where(d >= 0, 1.0, -1.0)
            push = np.zeros((n, 2))
            push[:, 0] = np.where(hit & along_x, (overlap[..., 0] + 1.0) * sign[..., 0] / 2,
                                  0).sum(axis=1)
            push[:, 1] = np.where(hit & ~along_x, (overlap[..., 1] + 1.0) * sign[..., 1] / 2,
                                  0).sum(axis=1)
            xy += push
        if len(pairs) and step < rounds:
            shove = _edge_shove(xy, half, pairs)
            if shove is not None:
                moved = True
                xy += shove
        if not moved:
            break
    return xy


def _segments_hit_boxes(p, q, centres, half):
    """``[edge, box]``: whether segment p–q meets the box, by the separating-axis test on
    the two box axes (the segment's normal is tested by the caller)."""
    seg_lo, seg_hi = np.minimum(p, q), np.maximum(p, q)
    lo, hi = centres - half, centres + half
    return ((seg_lo[:, None, 0] < hi[None, :, 0]) & (seg_hi[:, None, 0] > lo[None, :, 0])
            & (seg_lo[:, None, 1] < hi[None, :, 1]) & (seg_hi[:, None, 1] > lo[None, :, 1]))


def _edge_shove(xy, half, pairs):
    """For every (edge, box) where the edge's segment runs through the box (inflated by
    :data:`EDGE_CLEAR`), the move that takes the box off it; None when nothing is hit."""
    p, q = xy[pairs[:, 0]], xy[pairs[:, 1]]
    d = q - p
    length = np.hypot(d[:, 0], d[:, 1])
    length[length == 0] = 1.0
    u = d / length[:, None]
    normal = np.stack([-u[:, 1], u[:, 0]], axis=1)
    rel = xy[None, :, :] - p[:, None, :]                   # edges × nodes × 2
    off = rel[..., 0] * normal[:, None, 0] + rel[..., 1] * normal[:, None, 1]
    need = (np.abs(normal[:, None, 0]) * (half[None, :, 0] + EDGE_CLEAR)
            + np.abs(normal[:, None, 1]) * (half[None, :, 1] + EDGE_CLEAR))
    hit = (np.abs(off) < need) & _segments_hit_boxes(p, q, xy, half + EDGE_CLEAR)
    hit[np.arange(len(pairs)), pairs[:, 0]] = False
    hit[np.arange(len(pairs)), pairs[:, 1]] = False
    if not hit.any():
        return None
    sign = np.where(off >= 0, 1.0, -1.0)
    amount = np.where(hit, (need - np.abs(off) + 1.0) * sign, 0.0)
    shove = (amount[..., None] * normal[:, None, :]).sum(axis=0)
    # the edge's ends give way a little the other way, so that a box between two close
    # ends does not shuttle back and forth
    back = np.zeros_like(xy)
    per_edge = (amount[..., None] * normal[:, None, :]).sum(axis=1) * 0.25
    np.add.at(back, pairs[:, 0], -per_edge)
    np.add.at(back, pairs[:, 1], -per_edge)
    return shove + back


def bounds(positions: Mapping[str, tuple[float, float]]) -> tuple[float, float, float, float]:
    """(left, top, right, bottom) of the node centres."""
    if not positions:
        return (0.0, 0.0, 0.0, 0.0)
    xs = [p[0] for p in positions.values()]
    ys = [p[1] for p in positions.values()]
    return (min(xs), min(ys), max(xs), max(ys))
