"""Layouts (Qt-free): boxes keep their distance, edges are never a few pixels long, no box
sits on an edge, variables without edges are packed aside, a layered layout without stages
points every arrow right."""

import networkx as nx
import numpy as np
import pytest

from gui._layout import CLEAR_X, CLEAR_Y, arrange, direction_layers, node_size


def _graph(n, m, seed):
    g = nx.gnm_random_graph(n, m, seed=seed)
    names = [f"variable_{i}" + "_long" * (i % 4) for i in g]
    return names, [(names[a], names[b]) for a, b in g.edges], g


def _visible_length(pos, a, b):
    """The part of the segment between two centres that lies outside both boxes."""
    (x1, y1), (x2, y2) = pos[a], pos[b]
    dx, dy = x2 - x1, y2 - y1

    def inside(v):
        hw, hh = node_size(v)[0] / 2, node_size(v)[1] / 2
        return min(hw / abs(dx) if dx else np.inf, hh / abs(dy) if dy else np.inf)
    return np.hypot(dx, dy) * (1 - inside(a) - inside(b))


def _box_on_edge(pos, a, b, v, pad=2.0):
    p, q, c = (np.array(pos[k]) for k in (a, b, v))
    hw, hh = node_size(v)[0] / 2 + pad, node_size(v)[1] / 2 + pad
    pts = p + (q - p) * np.linspace(0, 1, 400)[:, None]
    return bool(np.any((np.abs(pts[:, 0] - c[0]) < hw) & (np.abs(pts[:, 1] - c[1]) < hh)))


@pytest.mark.parametrize("n, m, seed", [(8, 9, 1), (25, 35, 2), (60, 80, 3)])
def test_force_layout_respects_boxes_and_edges(n, m, seed):
    names, edges, g = _graph(n, m, seed)
    pos = arrange(names, edges)
    assert pos == arrange(names, edges)  # repeatable
    for i, a in enumerate(names):
        for b in names[i + 1:]:
            gap_x = abs(pos[a][0] - pos[b][0]) - (node_size(a)[0] + node_size(b)[0]) / 2
            gap_y = abs(pos[a][1] - pos[b][1]) - (node_size(a)[1] + node_size(b)[1]) / 2
            assert max(gap_x, gap_y) >= min(CLEAR_X, CLEAR_Y) * 0.7, (a, b)
    # no edge a few pixels long (it was 5 px before the layout knew the boxes)
    assert min(_visible_length(pos, a, b) for a, b in edges) >= 20
    # no box over an edge it is not an end of
    over = [(a, b, v) for a, b in edges for v in names
            if v not in (a, b) and _box_on_edge(pos, a, b, v)]
    assert over == []


def test_isolated_variables_are_packed_in_a_row_below():
    names, edges, g = _graph(12, 14, 4)
    alone = [f"alone_{i}" for i in range(5)]
    pos = arrange(names + alone, edges)
    bottom_of_drawing = max(pos[v][1] for v in names if g.degree(names.index(v)))
    ys = {round(pos[v][1], 1) for v in alone}
    assert len(ys) == 1 and min(ys) > bottom_of_drawing  # one row, under the drawing
    xs = sorted(pos[v][0] for v in alone)
    steps = np.diff(xs)
    assert steps.max() < 200  # packed side by side, not flung to corners
    linked = [v for v in names if g.degree(names.index(v))]
    row = [v for v in names + alone if v not in linked]
    left = min(pos[v][0] - node_size(v)[0] / 2 for v in linked)
    assert min(pos[v][0] - node_size(v)[0] / 2 for v in row) == pytest.approx(left)


def test_layered_layout_without_stages_points_every_arrow_right():
    # a small textbook diagram: the "sprinkler" network (Pearl 1988): season → sprinkler,
    # season → rain, sprinkler → wet, rain → wet, wet → slippery
    arrows = [("season", "sprinkler"), ("season", "rain"), ("sprinkler", "wet"),
              ("rain", "wet"), ("wet", "slippery")]
    names = ["slippery", "wet", "rain", "sprinkler", "season", "unrelated"]
    pos = arrange(names, arrows, style="layered")
    for a, b in arrows:
        assert pos[a][0] < pos[b][0]
    assert direction_layers(names[:5], arrows) == [["season"], ["rain", "sprinkler"],
                                                   ["wet"], ["slippery"]]
    assert pos["unrelated"][1] > max(pos[v][1] for v in names[:5])  # aside, below
    with pytest.raises(ValueError, match="layout style must be one of"):
        arrange(names, arrows, style="circle")


def test_direction_layers_ignore_an_arrow_that_closes_a_cycle():
    layers = direction_layers(["a", "b", "c"], [("a", "b"), ("b", "c"), ("c", "a")])
    assert layers == [["a"], ["b"], ["c"]]
