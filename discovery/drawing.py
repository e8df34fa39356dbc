"""Drawing a result as a figure (PNG, SVG or PDF) in Edgewise's visual language.

The look (docs/result-format.md, "The figure"): a warm light-grey canvas; each variable a white
rounded box with a slate border; edges slate — directed edges solid with a filled head that
stops at the box border, undirected edges solid without heads, contested edges dashed brick red
without heads, broken in the middle by a small "?" badge (never open heads at both ends: the
field reads those as a bidirected edge, a hidden common cause). An untestable pair (a test
returned no p-value) carries a small grey "no p" badge. Knowledge is overlaid: a locked pair
carries a short deep-teal double bar across its edge, placed along the edge where it is
farthest from other lines (away from crossings); a forbidden pair is a faint dotted line with a
small cross (at the middle, or near the end whose arrowhead is forbidden for a forbidden
direction); stages are soft bands behind their variables. A footer holds a legend with an
entry for every mark drawn, the caption ``Edgewise · test … · α … · n rows`` and the whole
caution, wrapped to the figure's width.

Layout (:func:`layout_positions`) is deterministic. With stages, each stage is a band of
columns read left to right. Otherwise variables are put in columns by a longest-path layering
of the graph whose directed edges are kept and whose undirected and contested edges follow one
topological order; within columns, the barycentre heuristic reduces crossings (Sugiyama,
Tagawa & Toda 1981, "Methods for visual understanding of hierarchical system structures",
IEEE Trans. SMC 11(2)) and rows are placed by isotonic regression so that nodes sit near
their neighbours without overlapping. When the layering is very unbalanced (a hub with many
neighbours) or the directed part has a cycle, the layout of Kamada & Kawai (1989, "An
algorithm for drawing general undirected graphs", Inf. Process. Lett. 31) from a seeded
spring start (Fruchterman & Reingold 1991), both from networkx, is used, turned so its longest
spread is horizontal, then boxes are pushed apart until none overlaps.

Only :class:`matplotlib.figure.Figure` and the Agg canvas are used: this module never imports
pyplot nor changes matplotlib's global backend, so it is safe inside the Qt window.
"""

from __future__ import annotations

import math
from functools import lru_cache
from pathlib import Path

import matplotlib
import matplotlib.transforms as mtransforms
import networkx as nx
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.font_manager import FontProperties
from matplotlib.lines import Line2D
from matplotlib.patches import BoxStyle, Circle, FancyBboxPatch, Polygon
from matplotlib.textpath import TextToPath

from .exceptions import DiscoveryError
from .io import BRICK, CANVAS, SLATE, STAGE_FILL, TEAL, caption, caution_of
from .result import SearchResult

__all__ = ["draw_result", "layout_positions", "box_size", "FIGURE_FORMATS"]

#: File extensions :func:`draw_result` writes, with their matplotlib format names.
FIGURE_FORMATS = {".png": "png", ".svg": "svg", ".pdf": "pdf"}

FONT = "DejaVu Sans"
INK = "#27303A"          # node names: a darker slate, for contrast on white
_FONT_PER_UNIT = 0.30    # node font size (pt) per point of one layout unit
_PAD_X = 0.26            # box padding left and right of the name (units)
_BOX_H = 0.56            # box height for a one-line name (units)
_LINE_H = 0.36           # extra height per additional line of a name
_ROW_GAP = 0.44          # vertical gap between boxes in a column
_COL_GAP = 1.25          # horizontal gap between columns (grows with column size)
_STAGE_GAP = 0.9         # extra gap between the columns of two stages
_RADIUS = 0.12           # corner radius of the boxes
_HEAD_L, _HEAD_W = 0.21, 0.075   # arrowhead length and half width (units)
_CLEAR = 0.04            # gap between an arrow tip and the box border
_FOOTER_PT, _TITLE_PT = 48.0, 26.0
_MAX_FIG_IN, _MIN_FIG_W_IN, _MIN_FIG_H_IN = 24.0, 5.0, 2.2
_MAX_UNIT_PT, _MIN_UNIT_PT = 40.0, 11.0


# --------------------------------------------------------------------------------- sizes

@lru_cache(maxsize=4096)
def _text_width(line: str) -> float:
    """Width of a line of text in points at font size 10."""
    if not line:
        return 0.0
    w, _, _ = TextToPath().get_text_width_height_descent(
        line, FontProperties(family=FONT, size=10), ismath=False)
    return float(w)


def box_size(name: str) -> tuple[float, float]:
    """Width and height of a variable's box, in layout units (a row is about one unit)."""
    lines = name.split("\n")
    width = max(_text_width(line) for line in lines) / 10.0 * _FONT_PER_UNIT + 2 * _PAD_X
    return max(width, 0.9), _BOX_H + _LINE_H * (len(lines) - 1)


def _sizes(names) -> np.ndarray:
    return np.array([box_size(v) for v in names], dtype=float).reshape(-1, 2)


# -------------------------------------------------------------------------------- layout

def layout_positions(result: SearchResult, *, seed: int = 0) -> dict[str, tuple[float, float]]:
    """Positions of the variables' box centres, in layout units (y up), for drawing.

    Parameters
    ----------
    result : SearchResult
    seed : int
        Seed of the spring layout, used only when the layered layout does not fit (see the
        module docstring). The same result and seed always give the same positions.

    Returns
    -------
    dict
        ``{name: (x, y)}``. Boxes (:func:`box_size`) placed there do not overlap: columns are
        at least ``1.25`` units apart (box edge to box edge) and rows ``0.44``.
    """
    names = list(result.variables)
    if not names:
        return {}
    sizes = _sizes(names)
    pos = _layered(result, names, sizes)
    if pos is None:
        pos = _spring(result, names, sizes, seed)
    pos -= (pos.min(axis=0) + pos.max(axis=0)) / 2
    return {v: (float(x), float(y)) for v, (x, y) in zip(names, pos)}


def _neighbours(result, index) -> list[set[int]]:
    nbrs = [set() for _ in index]
    for e in result.edges:
        a, b = index[e.source], index[e.target]
        nbrs[a].add(b)
        nbrs[b].add(a)
    return nbrs


def _total_order(result, index) -> list[int] | None:
    """A topological order of the directed edges in which each connected group of
    undirected (and contested) edges flows outward from one of its most peripheral variables
    in breadth-first order, so a chain reads left to right. Ties follow column order. None
    when the directed edges alone have a cycle."""
    n = len(index)
    directed = nx.DiGraph()
    directed.add_nodes_from(range(n))
    directed.add_edges_from((index[e.source], index[e.target]) for e in result.edges
                            if e.kind == "directed")
    if not nx.is_directed_acyclic_graph(directed):
        return None
    loose = nx.Graph()
    loose.add_edges_from((index[e.source], index[e.target]) for e in result.edges
                         if e.kind != "directed")
    flowing = directed.copy()
    for part in sorted(nx.connected_components(loose), key=min):
        sub = loose.subgraph(part)
        eccentricity = nx.eccentricity(sub)
        root = min(part, key=lambda v: (-eccentricity[v], v))
        step = {root: 0}
        for u, v in nx.bfs_edges(sub, root, sort_neighbors=sorted):
            step[v] = step[u] + 1
        flowing.add_edges_from((u, v) if (step[u], u) < (step[v], v) else (v, u)
                               for u, v in sub.edges)
    if not nx.is_directed_acyclic_graph(flowing):
        flowing = directed
    return list(nx.lexicographical_topological_sort(flowing))


def _layer(members: list[int], arcs: list[tuple[int, int]]) -> dict[int, int]:
    """Longest-path layering of ``members`` (already in topological order); sources are then
    pulled next to their first child."""
    preds = {v: [] for v in members}
    succs = {v: [] for v in members}
    for a, b in arcs:
        if a in preds and b in preds:
            succs[a].append(b)
            preds[b].append(a)
    layer = {}
    for v in members:
        layer[v] = max((layer[u] + 1 for u in preds[v]), default=0)
    for v in reversed(members):
        if not preds[v] and succs[v]:
            layer[v] = min(layer[w] for w in succs[v]) - 1
    return layer


def _columns_of(members, arcs, *, isolated_spread: bool) -> list[list[int]]:
    layer = _layer(members, arcs)
    linked = {v for a, b in arcs for v in (a, b) if a in layer and b in layer}
    columns: dict[int, list[int]] = {}
    lonely = []
    for v in members:
        if v in linked or not isolated_spread:
            columns.setdefault(layer[v], []).append(v)
        else:
            lonely.append(v)
    out = [columns[k] for k in sorted(columns)]
    if not out:
        # no edges: a compact grid, filled column by column in column order
        per = max(1, math.ceil(math.sqrt(len(lonely) * 1.5)))
        return [lonely[i:i + per] for i in range(0, len(lonely), per)]
    for v in lonely:  # isolated variables go to the shortest columns
        min(out, key=len).append(v)
    return out


def _layered(result, names, sizes) -> np.ndarray | None:
    index = {v: i for i, v in enumerate(names)}
    order = _total_order(result, index)
    stages = [[index[v] for v in g if v in index] for g in result.knowledge.stages]
    stages = [g for g in stages if g]
    if order is None:
        if not stages:
            return None
        order = list(range(len(names)))
    rank = {v: k for k, v in enumerate(order)}
    arcs = []
    for e in result.edges:
        a, b = index[e.source], index[e.target]
        if e.kind != "directed" and rank[b] < rank[a]:
            a, b = b, a
        arcs.append((a, b))
    nbrs = _neighbours(result, index)
    if stages:
        staged = {v for g in stages for v in g}
        groups = stages + ([[v for v in range(len(names)) if v not in staged]]
                           if len(staged) < len(names) else [])
        tall = max(8, math.ceil(2.2 * math.sqrt(len(names))))
        columns, column_group = [], []
        for k, g in enumerate(groups):
            members = sorted(g, key=rank.__getitem__)
            for col in _columns_of(members, arcs, isolated_spread=True):
                col = sorted(col, key=rank.__getitem__)
                for i in range(0, len(col), tall):   # wrap very tall columns
                    columns.append(col[i:i + tall])
                    column_group.append(k)
    else:
        columns = _columns_of(order, arcs, isolated_spread=True)
        column_group = [0] * len(columns)
        n = len(names)
        limit = 3 * math.sqrt(n) + 3
        if n > 8 and max(map(len, columns)) > limit:
            return None
    columns = _order_within(columns, nbrs)
    return _place(columns, column_group, nbrs, sizes)


def _order_within(columns, nbrs) -> list[list[int]]:
    """Barycentre ordering (Sugiyama et al. 1981), alternating down and up sweeps."""
    columns = [list(c) for c in columns]
    col_of = {v: c for c, col in enumerate(columns) for v in col}
    rank = {}

    def refresh(c):
        col = columns[c]
        for i, v in enumerate(col):
            rank[v] = i - (len(col) - 1) / 2

    for c in range(len(columns)):
        refresh(c)
    for sweep in range(8):
        down = sweep % 2 == 0
        span = range(1, len(columns)) if down else range(len(columns) - 2, -1, -1)
        for c in span:
            keys = []
            for v in columns[c]:
                near = [rank[u] for u in nbrs[v]
                        if (col_of[u] < c if down else col_of[u] > c)]
                keys.append(sum(near) / len(near) if near else rank[v])
            columns[c] = [v for _, _, v in sorted(zip(keys, range(len(keys)), columns[c]))]
            refresh(c)
    return columns


def _isotonic_decreasing(target, weight) -> np.ndarray:
    """Weighted least-squares non-increasing fit (pool-adjacent-violators)."""
    blocks = []  # [mean, weight, count]
    for t, w in zip(target, weight):
        blocks.append([t, w, 1])
        while len(blocks) > 1 and blocks[-2][0] < blocks[-1][0]:
            m2, w2, c2 = blocks.pop()
            m1, w1, c1 = blocks.pop()
            blocks.append([(m1 * w1 + m2 * w2) / (w1 + w2), w1 + w2, c1 + c2])
    return np.concatenate([np.full(c, m) for m, _, c in blocks])


def _place(columns, column_group, nbrs, sizes) -> np.ndarray:
    n = len(sizes)
    pos = np.zeros((n, 2))
    col_of = {v: c for c, col in enumerate(columns) for v in col}
    x = 0.0
    for c, col in enumerate(columns):
        width = max(sizes[v, 0] for v in col)
        if c > 0:
            prev = columns[c - 1]
            gap = _COL_GAP + 0.11 * min(max(len(prev), len(col)), 25)
            if column_group[c] != column_group[c - 1]:
                gap += _STAGE_GAP
            x += max(sizes[v, 0] for v in prev) / 2 + gap + width / 2
        for v in col:
            pos[v, 0] = x

    def settle(c, desired, weights):
        col = columns[c]
        h = sizes[col, 1]
        sep = (h[:-1] + h[1:]) / 2 + _ROW_GAP
        offs = np.concatenate([[0.0], np.cumsum(sep)])
        u = _isotonic_decreasing(np.asarray(desired) + offs, weights)
        for v, y in zip(col, u - offs):
            pos[v, 1] = y

    for c, col in enumerate(columns):   # start: every column centred, evenly spaced
        settle(c, [0.0] * len(col), [1.0] * len(col))
    for sweep in range(4):
        down = sweep % 2 == 0
        span = range(1, len(columns)) if down else range(len(columns) - 2, -1, -1)
        for c in span:
            desired, weights = [], []
            for v in columns[c]:
                near = [pos[u, 1] for u in nbrs[v]
                        if (col_of[u] < c if down else col_of[u] > c)]
                if near:
                    target = sum(near) / len(near)
                    desired.append(target if down else (target + pos[v, 1]) / 2)
                    weights.append(1.0)
                else:
                    desired.append(pos[v, 1])
                    weights.append(0.25)
            settle(c, desired, weights)
    return pos


def _spring(result, names, sizes, seed) -> np.ndarray:
    """Kamada & Kawai (1989) layout started from a seeded spring layout (Fruchterman &
    Reingold 1991), both from networkx; scaled to layout units and separated. Variables
    without edges go in a grid below."""
    index = {v: i for i, v in enumerate(names)}
    g = nx.Graph()
    g.add_edges_from((index[e.source], index[e.target]) for e in result.edges)
    linked = sorted(g.nodes)
    lonely = [i for i in range(len(names)) if i not in g]
    pos = np.zeros((len(names), 2))
    if linked:
        start = nx.spring_layout(g, seed=seed, iterations=100)
        raw = nx.kamada_kawai_layout(g, pos=start) if len(linked) > 2 else start
        part = np.array([raw[i] for i in linked], dtype=float)
        part -= part.mean(axis=0)
        if len(linked) > 2:   # turn the longest spread horizontal, with fixed signs
            _, vectors = np.linalg.eigh(np.cov(part.T))
            part = part @ vectors[:, ::-1]
            part *= np.where(part[0] > 0, -1.0, 1.0)
        where = {v: k for k, v in enumerate(linked)}
        lengths = [np.linalg.norm(part[where[a]] - part[where[b]]) for a, b in g.edges]
        part *= 2.6 / max(float(np.median(lengths)), 1e-9)
        pos[linked] = _separate(part, sizes[linked], seed)
    if lonely:
        cell_w = sizes[lonely, 0].max() + 0.9
        if linked:
            left = (pos[linked, 0] - sizes[linked, 0] / 2).min()
            right = (pos[linked, 0] + sizes[linked, 0] / 2).max()
            top = (pos[linked, 1] - sizes[linked, 1] / 2).min() - 1.4
        else:
            left, right, top = 0.0, cell_w * math.ceil(math.sqrt(len(lonely) * 2)), 0.0
        per_row = max(1, int((right - left + 0.9) // cell_w))
        for k, v in enumerate(lonely):
            pos[v] = (left + cell_w * (k % per_row) + cell_w / 2 - 0.45, top - k // per_row)
    return pos


def _separate(pos, sizes, seed, *, gap=(0.9, 0.4)) -> np.ndarray:
    """Push boxes apart (along the axis of least overlap) until none overlaps."""
    pos = pos.copy()
    rng = np.random.default_rng(seed)
    need_x = (sizes[:, None, 0] + sizes[None, :, 0]) / 2 + gap[0]
    need_y = (sizes[:, None, 1] + sizes[None, :, 1]) / 2 + gap[1]
    n = len(pos)
    upper = np.triu(np.ones((n, n), dtype=bool), 1)
    for _ in range(500):
        dx = pos[None, :, 0] - pos[:, None, 0]
        dy = pos[None, :, 1] - pos[:, None, 1]
        ox, oy = need_x - np.abs(dx), need_y - np.abs(dy)
        clash = (ox > 1e-9) & (oy > 1e-9) & upper
        if not clash.any():
            break
        push = np.zeros_like(pos)
        i, j = np.nonzero(clash)
        same = (np.abs(dx[i, j]) < 1e-9) & (np.abs(dy[i, j]) < 1e-9)
        if same.any():
            pos[j[same]] += rng.normal(scale=0.05, size=(int(same.sum()), 2))
            continue
        along_x = ox[i, j] / need_x[i, j] <= oy[i, j] / need_y[i, j]
        sx = np.where(dx[i, j] >= 0, 1.0, -1.0) * ox[i, j] / 2 * along_x
        sy = np.where(dy[i, j] >= 0, 1.0, -1.0) * oy[i, j] / 2 * ~along_x
        np.add.at(push, i, -np.column_stack([sx, sy]))
        np.add.at(push, j, np.column_stack([sx, sy]))
        pos += push * 0.6
    return pos


def _from_user(positions, names, sizes) -> np.ndarray:
    """Check user positions and scale them to layout units without overlaps."""
    missing = [v for v in names if v not in positions]
    if missing:
        raise DiscoveryError(f"positions lack {len(missing)} variable(s) {missing[:5]}; give "
                             "an (x, y) for every variable, or none for an automatic layout")
    try:
        pos = np.array([[float(c) for c in positions[v]] for v in names], dtype=float)
    except (TypeError, ValueError):
        raise DiscoveryError("positions must map each variable to an (x, y) pair of "
                             "numbers") from None
    if pos.shape != (len(names), 2) or not np.isfinite(pos).all():
        raise DiscoveryError("positions must map each variable to an (x, y) pair of finite "
                             "numbers")
    if len(names) < 2:
        return pos - pos.mean(axis=0)
    d = np.abs(pos[:, None, :] - pos[None, :, :])
    same = (d.sum(axis=2) == 0) & ~np.eye(len(names), dtype=bool)
    if same.any():
        i, j = np.argwhere(same)[0]
        raise DiscoveryError(f"variables {names[i]!r} and {names[j]!r} have the same position; "
                             "move one of them")
    need = (sizes[:, None, :] + sizes[None, :, :]) / 2 + np.array([0.5, 0.3])
    with np.errstate(divide="ignore"):
        factor = np.minimum(np.where(d[..., 0] > 0, need[..., 0] / d[..., 0], np.inf),
                            np.where(d[..., 1] > 0, need[..., 1] / d[..., 1], np.inf))
    np.fill_diagonal(factor, 0)
    nearest = np.sqrt((d ** 2).sum(axis=2) + np.eye(len(names)) * 1e300).min(axis=1)
    scale = max(float(factor.max()), 1.1 / float(np.median(nearest)))
    pos = pos * scale
    return pos - (pos.min(axis=0) + pos.max(axis=0)) / 2


# ------------------------------------------------------------------------------ geometry

def _box_sdf(points, centre, half):
    """Signed distance from points to a rounded box (negative inside)."""
    q = np.abs(points - centre) - (half - _RADIUS)
    outside = np.linalg.norm(np.maximum(q, 0), axis=-1)
    inside = np.minimum(np.max(q, axis=-1), 0)
    return outside + inside - _RADIUS


def _bezier(p, c, q, t):
    t = np.asarray(t)[..., None]
    return (1 - t) ** 2 * p + 2 * (1 - t) * t * c + t ** 2 * q


def _bezier_d(p, c, q, t):
    return 2 * (1 - t) * (c - p) + 2 * t * (q - c)


def _ports(pos, sizes, pairs) -> list[tuple[np.ndarray, np.ndarray]]:
    """Where each edge aims inside its two boxes: edges meeting one side of a box are spread
    along that side in the order of their other ends, so their heads do not pile up."""
    sides: dict[tuple[int, str], list] = {}
    for k, (i, j) in enumerate(pairs):
        for end, (v, o) in enumerate(((i, j), (j, i))):
            d = pos[o] - pos[v]
            w, h = sizes[v]
            if abs(d[0]) / w >= abs(d[1]) / h:
                side, key = ("L" if d[0] < 0 else "R"), d[1] / (abs(d[0]) or 1e-9)
            else:
                side, key = ("B" if d[1] < 0 else "T"), d[0] / (abs(d[1]) or 1e-9)
            sides.setdefault((v, side), []).append((key, k, end))
    aims = [[pos[i].copy(), pos[j].copy()] for i, j in pairs]
    for (v, side), items in sides.items():
        m = len(items)
        if m < 2:
            continue
        w, h = sizes[v]
        if side in "LR":
            span = min(0.8 * h, 0.12 * (m - 1))
        else:
            span = min(0.8 * w, 0.3 * (m - 1))
        offsets = np.linspace(-span / 2, span / 2, m)
        for offset, (_, k, end) in zip(offsets, sorted(items)):
            aims[k][end][1 if side in "LR" else 0] += offset
    return [(a, b) for a, b in aims]


class _Router:
    """Straight edges where they are clear; otherwise a gentle curve around the boxes."""

    def __init__(self, pos, sizes):
        self.pos, self.half = pos, sizes / 2

    def route(self, i, j, aim_i=None, aim_j=None):
        p = self.pos[i] if aim_i is None else aim_i
        q = self.pos[j] if aim_j is None else aim_j
        d = q - p
        length = float(np.hypot(*d)) or 1e-9
        normal = np.array([-d[1], d[0]]) / length
        lo, hi = np.minimum(p, q), np.maximum(p, q)
        reach = 0.5 * min(length, 7.0) + 0.5
        near = np.all((self.pos + self.half > lo - reach) & (self.pos - self.half < hi + reach),
                      axis=1)
        near[[i, j]] = False
        others = np.nonzero(near)[0]
        t = np.linspace(0.0, 1.0, 48)
        best = None
        for bend in (0.0, 0.16, -0.16, 0.32, -0.32, 0.5, -0.5):
            c = (p + q) / 2 + normal * bend * min(length, 7.0)
            pts = _bezier(p, c, q, t)
            hits = 0
            for k in others:
                hits += int((_box_sdf(pts, self.pos[k], self.half[k] + 0.06) < 0).any())
            if best is None or hits < best[0]:
                best = (hits, c)
            if hits == 0:
                break
        c = best[1]
        t0 = self._exit(p, c, q, i, forward=True)
        t1 = self._exit(p, c, q, j, forward=False)
        return p, c, q, t0, t1

    def _exit(self, p, c, q, k, *, forward):
        """Curve parameter where the curve leaves box k (plus a small clearance)."""
        centre, half = self.pos[k], self.half[k]

        def inside(t):
            return _box_sdf(_bezier(p, c, q, t), centre, half) < _CLEAR

        a, b = (0.0, 0.5) if forward else (1.0, 0.5)
        if inside(b):
            return b
        for _ in range(40):
            m = (a + b) / 2
            if inside(m):
                a = m
            else:
                b = m
        return b


def _t_back(p, c, q, t_end, distance, *, toward):
    """Parameter on the curve at ``distance`` from the point at ``t_end`` (going toward the
    other end, ``toward`` is 0.0 or 1.0)."""
    tip = _bezier(p, c, q, t_end)
    a, b = t_end, toward
    if np.hypot(*(_bezier(p, c, q, b) - tip)) < distance:
        return b
    for _ in range(40):
        m = (a + b) / 2
        if np.hypot(*(_bezier(p, c, q, m) - tip)) < distance:
            a = m
        else:
            b = m
    return a


# ------------------------------------------------------------------------------- drawing

def draw_result(result: SearchResult, path=None, *, positions=None, ax=None, title=None,
                show_knowledge: bool = True) -> Figure:
    """Draw a result; save it when ``path`` is given.

    Parameters
    ----------
    result : SearchResult
    path : str or os.PathLike, optional
        Output file; the format follows the extension: ``.png`` (150 dpi), ``.svg`` (text
        kept as text) or ``.pdf``.
    positions : mapping, optional
        ``{name: (x, y)}`` box centres with y pointing up (for instance from the window's
        canvas after flipping y); they are scaled as a whole so that no boxes overlap. By
        default :func:`layout_positions`.
    ax : matplotlib.axes.Axes, optional
        Draw into this axes (its figure is returned) instead of a new figure sized to fit.
    title : str, optional
        A title at the top left.
    show_knowledge : bool
        Overlay the knowledge: locked bars, forbidden pairs and stage bands.

    Returns
    -------
    matplotlib.figure.Figure
        Made with the Agg canvas; pyplot is never used. Artists carry ids (``gid``):
        ``node-<k>`` and ``label-<k>`` (k indexes ``result.variables``), ``edge-<i>``,
        ``head-<i>-target``, ``contested-<i>`` (the "?" badge), ``untestable-<i>`` and
        ``locked-<i>`` (i indexes ``result.edges``), ``forbidden-<k>``, ``band-<k>``,
        ``legend-<entry>`` for every legend entry, ``caption``, ``caution`` (first line) and
        ``caution-<k>`` (its further lines).

    Raises
    ------
    DiscoveryError
        The extension of ``path`` is not .png, .svg or .pdf; the file cannot be written;
        ``positions`` lacks a variable, is not numeric, or puts two variables on one spot.
    """
    fmt = None
    if path is not None:
        fmt = FIGURE_FORMATS.get(Path(path).suffix.lower())
        if fmt is None:
            raise DiscoveryError(f"{path}: cannot draw a figure as "
                                 f"{Path(path).suffix or 'a file without extension'!r}; "
                                 "use one of .png, .svg or .pdf")
    names = list(result.variables)
    sizes = _sizes(names)
    if positions is None:
        layout = layout_positions(result)
        pos = np.array([layout[v] for v in names], dtype=float).reshape(-1, 2)
    else:
        pos = _from_user(positions, names, sizes)
    index = {v: i for i, v in enumerate(names)}
    bands = _band_boxes(result, index, pos, sizes) if show_knowledge else []
    router = _Router(pos, sizes)
    pairs = [(index[e.source], index[e.target]) for e in result.edges]
    routes = [router.route(i, j, *aim)
              for (i, j), aim in zip(pairs, _ports(pos, sizes, pairs))]
    forbidden = _forbidden_pairs(result, index) if show_knowledge else []
    forbidden_routes = [router.route(a, b) for a, b, _ in forbidden]

    # extent of the drawing in layout units: boxes, bands and curves
    lo = (pos - sizes / 2).min(axis=0) if names else np.zeros(2)
    hi = (pos + sizes / 2).max(axis=0) if names else np.ones(2)
    for _, _, (x0, y0, x1, y1) in bands:
        lo = np.minimum(lo, [x0, y0])
        hi = np.maximum(hi, [x1, y1])
    for p, c, q, t0, t1 in routes + forbidden_routes:
        pts = _bezier(p, c, q, np.linspace(t0, t1, 17))
        lo = np.minimum(lo, pts.min(axis=0) - 0.15)
        hi = np.maximum(hi, pts.max(axis=0) + 0.15)
    lo, hi = lo - 0.45, hi + 0.45
    extent = hi - lo
    top_pt = _TITLE_PT if title else 0.0
    entries = _legend_entries(result, show_knowledge, bool(bands))

    if ax is None:
        unit = min(_MAX_UNIT_PT, (_MAX_FIG_IN * 72) / extent[0],
                   (_MAX_FIG_IN * 72 - _FOOTER_PT - top_pt) / extent[1])
        unit = max(unit, _MIN_UNIT_PT)
        width_in = max(extent[0] * unit / 72, _MIN_FIG_W_IN)
        footer = _footer_layout(result, entries, width_in * 72)
        height_in = max((extent[1] * unit + footer["height"] + top_pt) / 72, _MIN_FIG_H_IN)
        fig = Figure(figsize=(width_in, height_in), facecolor=CANVAS)
        FigureCanvasAgg(fig)
        ax = fig.add_axes((0, 0, 1, 1))
        ax_w_pt, ax_h_pt = width_in * 72, height_in * 72
    else:
        fig = ax.figure
        box = ax.get_position()
        ax_w_pt = box.width * fig.get_figwidth() * 72
        ax_h_pt = box.height * fig.get_figheight() * 72
        footer = _footer_layout(result, entries, ax_w_pt)
        unit = max(min(ax_w_pt / extent[0],
                       max(ax_h_pt - footer["height"] - top_pt, 1.0) / extent[1]), 1.0)
    ax.set_axis_off()
    ax.set_facecolor(CANVAS)
    ax.patch.set_visible(True)
    # limits that make one unit = `unit` points in both directions, footer below, title above
    cx = (lo[0] + hi[0]) / 2
    half_w = ax_w_pt / unit / 2
    graph_h = (ax_h_pt - footer["height"] - top_pt) / unit
    y_bottom = (lo[1] + hi[1]) / 2 - graph_h / 2 - footer["height"] / unit
    ax.set_xlim(cx - half_w, cx + half_w)
    ax.set_ylim(y_bottom, y_bottom + ax_h_pt / unit)

    font_pt = _FONT_PER_UNIT * unit
    line_w = float(np.clip(0.034 * unit, 0.5, 1.4))
    _draw_bands(ax, bands, font_pt)
    lock_at = {i: _clear_spot(i, routes, pos, sizes)
               for i, e in enumerate(result.edges) if e.locked and show_knowledge}
    marks = [_bezier(*routes[i][:3], t) for i, t in lock_at.items()]
    for k, ((_, _, where), route) in enumerate(zip(forbidden, forbidden_routes)):
        marks.append(_draw_forbidden(ax, k, route, where, line_w, marks))
    for i, (e, route) in enumerate(zip(result.edges, routes)):
        _draw_edge(ax, i, e, route, line_w, show_knowledge, lock_at.get(i), font_pt)
    for k, v in enumerate(names):
        _draw_node(ax, k, v, pos[k], sizes[k], font_pt, line_w)
    _draw_footer(fig, ax, result, footer)
    if title:
        ax.annotate(title, xy=(0, 1), xycoords="axes fraction", xytext=(12, -8),
                    textcoords="offset points", ha="left", va="top", fontsize=11,
                    fontfamily=FONT, fontweight="bold", color=INK, annotation_clip=False,
                    gid="title")
    if path is not None:
        _save(fig, path, fmt)
    return fig


def _band_boxes(result, index, pos, sizes):
    """[(label, gid, (x0, y0, x1, y1))] for each stage, and the unstaged variables."""
    stages = [[index[v] for v in g if v in index] for g in result.knowledge.stages]
    if not any(stages) or not len(pos):
        return []
    y0 = (pos[:, 1] - sizes[:, 1] / 2).min() - 0.35
    y1 = (pos[:, 1] + sizes[:, 1] / 2).max() + 0.85
    out = []
    staged = set()
    for k, members in enumerate(stages):
        if not members:
            continue
        staged.update(members)
        m = np.array(members)
        x0 = (pos[m, 0] - sizes[m, 0] / 2).min() - 0.35
        x1 = (pos[m, 0] + sizes[m, 0] / 2).max() + 0.35
        out.append((f"stage {k + 1}", f"band-{k}", (x0, y0, x1, y1)))
    rest = [i for i in range(len(pos)) if i not in staged]
    if rest:
        m = np.array(rest)
        x0 = (pos[m, 0] - sizes[m, 0] / 2).min() - 0.35
        x1 = (pos[m, 0] + sizes[m, 0] / 2).max() + 0.35
        out.append(("no stage", "band-none", (x0, y0, x1, y1)))
    return out


def _draw_bands(ax, bands, font_pt):
    for label, gid, (x0, y0, x1, y1) in bands:
        unstaged = gid == "band-none"
        ax.add_patch(FancyBboxPatch(
            (x0 + 0.2, y0 + 0.2), x1 - x0 - 0.4, y1 - y0 - 0.4,
            boxstyle=BoxStyle.Round(pad=0.2, rounding_size=0.3), mutation_scale=1,
            facecolor="none" if unstaged else STAGE_FILL,
            edgecolor=STAGE_FILL if unstaged else "none", linewidth=1.0,
            linestyle=(0, (4, 3)) if unstaged else "-", zorder=0, gid=gid))
        ax.text(x0 + 0.22, y1 - 0.2, label.upper(), ha="left", va="top",
                fontsize=max(0.62 * font_pt, 4.0), fontfamily=FONT, color=SLATE,
                alpha=0.55 if unstaged else 0.8, fontweight="bold", parse_math=False,
                zorder=0.5, gid=gid + "-label")


def _draw_node(ax, k, name, centre, size, font_pt, line_w):
    w, h = size
    x0, y0 = centre - size / 2
    ax.add_patch(FancyBboxPatch(   # a faint offset shadow, for depth on the canvas
        (x0 + _RADIUS + 0.035, y0 + _RADIUS - 0.05), w - 2 * _RADIUS, h - 2 * _RADIUS,
        boxstyle=BoxStyle.Round(pad=_RADIUS, rounding_size=_RADIUS), mutation_scale=1,
        facecolor=SLATE, edgecolor="none", alpha=0.10, zorder=4.5, gid=f"shadow-{k}"))
    ax.add_patch(FancyBboxPatch(
        (x0 + _RADIUS, y0 + _RADIUS), w - 2 * _RADIUS, h - 2 * _RADIUS,
        boxstyle=BoxStyle.Round(pad=_RADIUS, rounding_size=_RADIUS), mutation_scale=1,
        facecolor="#FFFFFF", edgecolor=SLATE, linewidth=line_w, zorder=5, gid=f"node-{k}"))
    ax.text(centre[0], centre[1], name, ha="center", va="center_baseline",
            multialignment="center", fontsize=font_pt, fontfamily=FONT, color=INK,
            parse_math=False, zorder=6, gid=f"label-{k}")


def _head(ax, tip, direction, *, filled, color, line_w, gid):
    normal = np.array([-direction[1], direction[0]])
    base = tip - direction * _HEAD_L
    ax.add_patch(Polygon([tip, base + normal * _HEAD_W, base - normal * _HEAD_W],
                         closed=True, facecolor=color if filled else "none", edgecolor=color,
                         fill=filled, linewidth=line_w, joinstyle="miter", zorder=3,
                         gid=gid))


def _unit(v):
    return v / (np.hypot(*v) or 1.0)


def _clear_spot(i, routes, pos, sizes) -> float:
    """Where along edge ``i`` (a curve parameter) its locked bar sits: the point of the middle
    half of the edge farthest from every other edge and from the boxes, so that the bar
    never lands on a crossing."""
    p, c, q, t0, t1 = routes[i]
    ts = t0 + (t1 - t0) * np.linspace(0.3, 0.7, 9)
    candidates = _bezier(p, c, q, ts)
    others = [_bezier(*r[:3], np.linspace(r[3], r[4], 24)) for k, r in enumerate(routes)
              if k != i]
    clearance = np.full(len(ts), np.inf)
    for pts in others:
        d = np.hypot(*(candidates[:, None, :] - pts[None, :, :]).transpose(2, 0, 1)).min(axis=1)
        clearance = np.minimum(clearance, d)
    if len(pos):
        inside = np.max(np.abs(candidates[:, None, :] - pos[None, :, :]) - sizes[None] / 2,
                        axis=2).min(axis=1)
        clearance = np.minimum(clearance, inside + 0.3)
    # prefer the middle when several spots are equally clear
    score = np.minimum(clearance, 0.9) - 0.05 * np.abs(np.linspace(-1, 1, len(ts)))
    return float(ts[int(np.argmax(score))])


#: The hidden-causes kinds, drawn from their end marks: a circle end is a small open ring,
#: an arrow end a filled head (a bidirected edge has one at each end); solid slate lines.
_PAG_LABELS = {"bidirected": "↔ hidden common cause", "partially-directed": "o→ end undecided",
               "nondirected": "o–o either way or hidden",
               "partially-undirected": "o– end undecided"}
_RING_R = 0.06


def _draw_marked_edge(ax, i, e, route, line_w, show_knowledge):
    p, c, q, t0, t1 = route
    start, end = t0, t1
    for mark, t, toward, sign, side in ((e.to_mark, t1, 0.0, 1.0, "target"),
                                        (e.from_mark, t0, 1.0, -1.0, "source")):
        if mark == "tail":
            continue
        tip, d = _bezier(p, c, q, t), sign * _unit(_bezier_d(p, c, q, t))
        if mark == "arrow":
            _head(ax, tip, d, filled=True, color=SLATE, line_w=line_w, gid=f"head-{i}-{side}")
            back = _HEAD_L * 0.92
        else:
            ax.add_patch(Circle(tuple(tip - d * _RING_R), _RING_R, facecolor=CANVAS,
                                edgecolor=SLATE, linewidth=line_w, zorder=3,
                                gid=f"ring-{i}-{side}"))
            back = 2 * _RING_R
        moved = _t_back(p, c, q, t, back, toward=toward)
        start, end = (start, moved) if side == "target" else (moved, end)
    straight = np.allclose(c, (p + q) / 2)
    pts = _bezier(p, c, q, np.linspace(start, end, 2 if straight else 32))
    ax.add_line(Line2D(pts[:, 0], pts[:, 1], color=SLATE, linewidth=line_w,
                       solid_capstyle="butt", zorder=2, gid=f"edge-{i}"))
    if show_knowledge and e.locked:  # the teal double bar of a locked pair
        mid, tangent = _bezier(p, c, q, (t0 + t1) / 2), _unit(_bezier_d(p, c, q, (t0 + t1) / 2))
        normal = np.array([-tangent[1], tangent[0]])
        bars = [m + normal * k for m in (mid - tangent * 0.05, mid + tangent * 0.05)
                for k in (-0.14, 0.14)]
        xs = [bars[0][0], bars[1][0], np.nan, bars[2][0], bars[3][0]]
        ys = [bars[0][1], bars[1][1], np.nan, bars[2][1], bars[3][1]]
        ax.add_line(Line2D(xs, ys, color=TEAL, linewidth=line_w * 1.7,
                           solid_capstyle="butt", zorder=4, gid=f"locked-{i}"))


def _draw_edge(ax, i, e, route, line_w, show_knowledge, lock_t=None, font_pt=10.0):
    if e.kind in _PAG_LABELS:
        _draw_marked_edge(ax, i, e, route, line_w, show_knowledge)
        return
    p, c, q, t0, t1 = route
    contested = e.kind == "contested"
    color = BRICK if contested else SLATE
    start, end = t0, t1
    if e.kind == "directed":
        end = _t_back(p, c, q, t1, _HEAD_L * 0.92, toward=0.0)
        _head(ax, _bezier(p, c, q, t1), _unit(_bezier_d(p, c, q, t1)), filled=True,
              color=color, line_w=line_w, gid=f"head-{i}-target")
    straight = np.allclose(c, (p + q) / 2)
    style = dict(color=color, linewidth=line_w, solid_capstyle="butt", dash_capstyle="butt",
                 zorder=2)
    if contested:
        # dashed, no heads, broken in the middle around a "?" badge
        t_mid = (t0 + t1) / 2
        gap_a = _t_back(p, c, q, t_mid, _BADGE_R * 1.6, toward=0.0)
        gap_b = _t_back(p, c, q, t_mid, _BADGE_R * 1.6, toward=1.0)
        xs, ys = [], []
        for a, b in ((start, gap_a), (gap_b, end)):
            pts = _bezier(p, c, q, np.linspace(a, b, 2 if straight else 16))
            xs += list(pts[:, 0]) + [np.nan]
            ys += list(pts[:, 1]) + [np.nan]
        ax.add_line(Line2D(xs, ys, linestyle="--", dashes=(4, 2.5), gid=f"edge-{i}", **style))
        _badge(ax, _bezier(p, c, q, t_mid), "?", BRICK, line_w, font_pt, gid=f"contested-{i}")
    else:
        pts = _bezier(p, c, q, np.linspace(start, end, 2 if straight else 32))
        ax.add_line(Line2D(pts[:, 0], pts[:, 1], linestyle="-", gid=f"edge-{i}", **style))
    if e.untestable:
        t_badge = t0 + (t1 - t0) * (0.3 if contested else 0.5)
        if lock_t is not None and abs(lock_t - t_badge) < 0.15 * (t1 - t0):
            t_badge = t0 + (t1 - t0) * 0.25
        _badge(ax, _bezier(p, c, q, t_badge), "no p", SLATE, line_w, font_pt * 0.8,
               gid=f"untestable-{i}", wide=True)
    if show_knowledge and e.locked:
        t = lock_t if lock_t is not None else (t0 + t1) / 2
        mid, tangent = _bezier(p, c, q, t), _unit(_bezier_d(p, c, q, t))
        normal = np.array([-tangent[1], tangent[0]])
        xs, ys = [], []
        for shift in (-0.05, 0.05):
            m = mid + tangent * shift
            seg = np.array([m - normal * 0.14, m + normal * 0.14, [np.nan, np.nan]])
            xs += list(seg[:, 0])
            ys += list(seg[:, 1])
        ax.add_line(Line2D(xs, ys, color=TEAL, linewidth=line_w * 1.7,
                           solid_capstyle="butt", zorder=4, gid=f"locked-{i}"))


_BADGE_R = 0.13  # radius of the contested "?" badge (units)


def _badge(ax, centre, text, color, line_w, font_pt, *, gid, wide=False):
    """A small white rounded badge with a short text, centred on an edge."""
    w = _BADGE_R * (2.6 if wide else 1.0)
    ax.add_patch(FancyBboxPatch((centre[0] - w, centre[1] - _BADGE_R), 2 * w, 2 * _BADGE_R,
                                boxstyle=BoxStyle("Round", pad=0.0, rounding_size=_BADGE_R),
                                facecolor="#FFFFFF", edgecolor=color, linewidth=line_w * 0.8,
                                zorder=5, gid=gid))
    ax.text(centre[0], centre[1], text, ha="center", va="center_baseline", color=color,
            fontsize=max(font_pt * 0.75, 5.0), fontfamily=FONT, fontweight="bold", zorder=6,
            parse_math=False, gid=f"{gid}-text")


def _forbidden_pairs(result, index) -> list[tuple[int, int, float]]:
    """Forbidden pairs to overlay: (a, b, where the cross sits along a → b). A forbidden
    direction a → b is shown only while a and b are not adjacent, its cross near b."""
    kn = result.knowledge
    adjacent = {e.pair for e in result.edges}
    pairs = [(a, b, 0.5) for a, b in kn.forbidden]
    pairs += [(a, b, 0.78) for a, b in kn.forbidden_directions
              if frozenset((a, b)) not in adjacent
              and frozenset((a, b)) not in kn.forbidden_adjacent()]
    return [(index[a], index[b], w) for a, b, w in pairs if a in index and b in index]


def _draw_forbidden(ax, k, route, where, line_w, marks):
    """Draw a forbidden pair; its cross keeps clear of the other marks (locked bars,
    crosses), which matters where two lines cross. Returns the cross's centre."""
    p, c, q, t0, t1 = route
    faint = matplotlib.colors.to_rgba(SLATE, 0.42)
    pts = _bezier(p, c, q, np.linspace(t0, t1, 32))
    for shift in (0.0, -0.12, 0.12, -0.24, 0.24):
        at = min(max(where + shift, 0.15), 0.85)
        mid = _bezier(p, c, q, t0 + (t1 - t0) * at)
        if all(np.hypot(*(mid - m)) >= 0.65 for m in marks):
            break
    else:
        mid = _bezier(p, c, q, t0 + (t1 - t0) * where)
    s = 0.075
    cross = np.array([mid + [-s, -s], mid + [s, s], [np.nan, np.nan],
                      mid + [-s, s], mid + [s, -s]])
    ax.add_line(Line2D(pts[:, 0], pts[:, 1], color=faint, linewidth=line_w * 0.9,
                       linestyle=(0, (1, 2.2)), dash_capstyle="round", zorder=1,
                       gid=f"forbidden-{k}"))
    ax.add_line(Line2D(cross[:, 0], cross[:, 1], color=faint, linewidth=line_w,
                       solid_capstyle="round", zorder=1, gid=f"forbidden-{k}-cross"))
    return mid


_LEGEND_LABELS = {"directed": "directed", "undirected": "undirected",
                  "contested": "contested (?)", "untestable": "untestable (no p-value)",
                  "locked": "locked", "forbidden": "forbidden", "stages": "stage",
                  **_PAG_LABELS}


def _legend_entries(result, show_knowledge, bands) -> list[str]:
    """One entry for every kind of mark the figure draws, in a fixed order."""
    kinds = {e.kind for e in result.edges}
    entries = [k for k in ("directed", "undirected", "contested", *_PAG_LABELS) if k in kinds]
    if any(e.untestable for e in result.edges):
        entries.append("untestable")
    if show_knowledge and any(e.locked for e in result.edges):
        entries.append("locked")
    if show_knowledge and (result.knowledge.forbidden or result.knowledge.forbidden_directions):
        entries.append("forbidden")
    if bands:
        entries.append("stages")
    return entries


def _wrap(text: str, width_pt: float, size: float) -> list[str]:
    """Greedy word wrap of ``text`` to lines at most ``width_pt`` wide at font ``size``."""
    lines, line = [], ""
    for word in text.split():
        trial = f"{line} {word}".strip()
        if line and _text_width(trial) * size / 10 > width_pt:
            lines.append(line)
            line = word
        else:
            line = trial
    if line:
        lines.append(line)
    return lines


def _footer_layout(result, entries, width_pt) -> dict:
    """Rows of legend entries, the caution's lines and the footer's height, for a figure (or
    axes) ``width_pt`` points wide."""
    usable = max(width_pt - 24.0, 60.0)
    rows, row, x = [], [], 0.0
    for entry in entries:
        w = 25 + _text_width(_LEGEND_LABELS[entry]) * 0.7 + 16
        if row and x + w > usable:
            rows.append(row)
            row, x = [], 0.0
        row.append(entry)
        x += w
    if row:
        rows.append(row)
    caution = _wrap(caution_of(result).rstrip(".") + ".", usable, 7.0)
    height = 8 + 9 * len(caution) + 12 + 15 * max(len(rows), 1) + 4
    return {"rows": rows, "caution": caution, "height": max(height, _FOOTER_PT)}


def _draw_footer(fig, ax, result, footer):
    """Legend glyphs, the caption and the whole caution (wrapped), laid out in points from
    the axes' bottom-left corner."""
    to_pt = (mtransforms.Affine2D().scale(1 / 72) + fig.dpi_scale_trans
             + mtransforms.ScaledTranslation(0, 0, ax.transAxes))
    caution = footer["caution"]
    caption_y = 8 + 9 * len(caution) + 3
    lw = 1.0
    for r, entries in enumerate(footer["rows"]):
        x, y = 12.0, caption_y + 15 + 15 * (len(footer["rows"]) - 1 - r)
        for entry in entries:
            _legend_glyph(ax, to_pt, entry, x, y, lw)
            label = _LEGEND_LABELS[entry]
            ax.text(x + 25, y, label, transform=to_pt, ha="left", va="center_baseline",
                    fontsize=7, fontfamily=FONT, color=SLATE, gid=f"legend-{entry}-label")
            x += 25 + _text_width(label) * 0.7 + 16
    ax.text(12, caption_y, caption(result), transform=to_pt, ha="left", va="baseline",
            fontsize=7.5, fontfamily=FONT, color=INK, parse_math=False, gid="caption")
    for k, line in enumerate(caution):
        ax.text(12, 8 + 9 * (len(caution) - 1 - k), line, transform=to_pt, ha="left",
                va="baseline", fontsize=7, fontfamily=FONT, fontstyle="italic", color=SLATE,
                alpha=0.85, parse_math=False, gid="caution" if k == 0 else f"caution-{k}")


def _legend_glyph(ax, to_pt, entry, x, y, lw):
    """The small drawing of one legend entry, 20 points wide, centred on ``y``."""
    seg = np.array([[x, y], [x + 20, y]])
    if entry == "forbidden":
        ax.add_line(Line2D(seg[:, 0], seg[:, 1], transform=to_pt, color=SLATE, alpha=0.5,
                           linewidth=lw, linestyle=(0, (1, 2)), gid="legend-forbidden"))
        ax.add_line(Line2D([x + 7, x + 13, np.nan, x + 7, x + 13],
                           [y - 3, y + 3, np.nan, y + 3, y - 3], transform=to_pt,
                           color=SLATE, alpha=0.6, linewidth=lw))
    elif entry == "locked":
        ax.add_line(Line2D(seg[:, 0], seg[:, 1], transform=to_pt, color=SLATE, linewidth=lw))
        ax.add_line(Line2D([x + 8.5, x + 8.5, np.nan, x + 11.5, x + 11.5],
                           [y - 4, y + 4, np.nan, y - 4, y + 4], transform=to_pt,
                           color=TEAL, linewidth=1.6, solid_capstyle="butt",
                           gid="legend-locked"))
    elif entry == "stages":
        ax.add_patch(FancyBboxPatch((x, y - 5), 20, 10, transform=to_pt,
                                    boxstyle=BoxStyle("Round", pad=0.0, rounding_size=3),
                                    facecolor=STAGE_FILL, edgecolor="none",
                                    gid="legend-stages"))
    elif entry == "contested":
        ax.add_line(Line2D([x, x + 6, np.nan, x + 14, x + 20], [y, y, np.nan, y, y],
                           transform=to_pt, color=BRICK, linewidth=lw, linestyle="--",
                           dashes=(3, 1.5), gid="legend-contested"))
        ax.text(x + 10, y, "?", transform=to_pt, ha="center", va="center_baseline",
                fontsize=7, fontfamily=FONT, fontweight="bold", color=BRICK)
    elif entry in _PAG_LABELS:
        _legend_marked(ax, to_pt, x, y, entry, lw)
    elif entry == "untestable":
        ax.add_line(Line2D(seg[:, 0], seg[:, 1], transform=to_pt, color=SLATE, linewidth=lw,
                           gid="legend-untestable"))
        ax.add_patch(FancyBboxPatch((x + 4, y - 3.5), 12, 7, transform=to_pt,
                                    boxstyle=BoxStyle("Round", pad=0.0, rounding_size=3),
                                    facecolor="#FFFFFF", edgecolor=SLATE, linewidth=0.7))
    else:
        end = x + (15 if entry == "directed" else 20)
        ax.add_line(Line2D([x, end], [y, y], transform=to_pt, color=SLATE, linewidth=lw,
                           gid=f"legend-{entry}"))
        if entry == "directed":
            ax.add_patch(Polygon([[x + 20, y], [x + 15, y + 2.2], [x + 15, y - 2.2]],
                                 closed=True, transform=to_pt, facecolor=SLATE,
                                 edgecolor=SLATE, linewidth=lw))


def _legend_marked(ax, to_pt, x, y, kind, lw):
    """The legend glyph of a hidden-causes kind: a line with a ring or a filled head at each
    end, from the kind's marks."""
    from .result import KIND_MARKS
    marks = KIND_MARKS[kind]
    left = x + (4 if marks[0] != "tail" else 0)
    ax.add_line(Line2D([left, x + 15 if marks[1] == "arrow" else x + 16], [y, y],
                       transform=to_pt, color=SLATE, linewidth=lw, gid=f"legend-{kind}"))
    for mark, tip, sign in ((marks[1], x + 20, 1), (marks[0], x, -1)):
        if mark == "arrow":
            ax.add_patch(Polygon([[tip, y], [tip - 5 * sign, y + 2.2], [tip - 5 * sign, y - 2.2]],
                                 closed=True, transform=to_pt, facecolor=SLATE,
                                 edgecolor=SLATE, linewidth=lw))
        elif mark == "circle":
            ax.add_patch(Circle((tip - 2 * sign, y), 2, transform=to_pt, facecolor=CANVAS,
                                edgecolor=SLATE, linewidth=lw))


def _save(fig, path, fmt):
    options = {"svg.fonttype": "none", "pdf.fonttype": 42}
    try:
        with matplotlib.rc_context(options):
            fig.savefig(path, format=fmt, dpi=150, facecolor=CANVAS)
    except OSError as err:
        raise DiscoveryError(f"{path}: cannot write the figure ({err.strerror or err}); "
                             "check that the folder exists and is writable") from None
