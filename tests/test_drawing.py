"""The figure: files, visual language, layout.

Outside references: the PNG signature and IHDR chunk (PNG specification, ISO/IEC 15948 §5.2,
§11.2.2), the PDF header ``%PDF-`` (ISO 32000-1 §7.5.2), SVG as XML parsed by the standard
library; geometry checked with matplotlib's own ``Patch.contains_point`` on the drawn boxes.
"""

import dataclasses
import itertools
import subprocess
import sys
import xml.etree.ElementTree as ET

import matplotlib.colors as mcolors
import networkx as nx
import numpy as np
import pytest
from matplotlib.figure import Figure

from discovery import DiscoveryError, DSeparationOracle, Edge, Knowledge, SearchResult, discover
from discovery.drawing import box_size, draw_result, layout_positions
from discovery.settings import SearchSettings

BRICK, SLATE, TEAL = "#B5482F", "#44505C", "#1F6F78"

# a collider (genes → tar ← smoking) then a chain (tar → cancer → cough), as in the
# textbook smoking example; age — blood pressure is an undirected, locked pair
DAG = nx.DiGraph([("smoking", "tar"), ("genes", "tar"), ("tar", "cancer"), ("cancer", "cough"),
                  ("age", "blood pressure")])


@pytest.fixture(scope="module")
def result():
    kn = Knowledge(locked=[("age", "blood pressure")], forbidden=[("genes", "age")])
    r = discover(None, test=DSeparationOracle(DAG), knowledge=kn)
    # mark one edge contested by hand (the search makes them only from conflicting colliders)
    edges = tuple(dataclasses.replace(e, kind="contested", reason="colliders disagree",
                                      reason_kind="contested")
                  if (e.source, e.target) == ("cancer", "cough") else e for e in r.edges)
    return dataclasses.replace(r, edges=edges)


def by_gid(fig):
    out = {}
    for artist in fig.findobj():
        gid = artist.get_gid() if hasattr(artist, "get_gid") else None
        if gid:
            out[gid] = artist
    return out


def edge_index(result, source, target):
    return next(i for i, e in enumerate(result.edges) if (e.source, e.target) == (source, target))


# ---------------------------------------------------------------------------- files

def test_png_svg_pdf_files(result, tmp_path):
    fig = draw_result(result, tmp_path / "g.png")
    data = (tmp_path / "g.png").read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"                      # PNG signature
    width, height = (int.from_bytes(data[16:20], "big"), int.from_bytes(data[20:24], "big"))
    w_in, h_in = fig.get_size_inches()
    # IHDR holds the pixel size: 150 dpi (matplotlib truncates to whole pixels)
    assert abs(width - w_in * 150) < 1 and abs(height - h_in * 150) < 1
    draw_result(result, tmp_path / "g.pdf")
    assert (tmp_path / "g.pdf").read_bytes()[:5] == b"%PDF-"
    draw_result(result, tmp_path / "g.svg")
    root = ET.parse(tmp_path / "g.svg").getroot()
    assert root.tag == "{http://www.w3.org/2000/svg}svg"
    texts = {"".join(t.itertext()).strip() for t in root.iter("{http://www.w3.org/2000/svg}text")}
    assert set(result.variables) <= texts  # names kept as text, searchable


def test_unknown_extension_is_refused_before_drawing(result, tmp_path):
    with pytest.raises(DiscoveryError, match=r"'\.jpg'.*\.png, \.svg or \.pdf"):
        draw_result(result, tmp_path / "g.jpg")
    with pytest.raises(DiscoveryError, match="without extension"):
        draw_result(result, tmp_path / "g")
    assert list(tmp_path.iterdir()) == []


def test_unwritable_path(result, tmp_path):
    with pytest.raises(DiscoveryError, match="cannot write the figure"):
        draw_result(result, tmp_path / "missing folder" / "g.png")


def test_import_and_drawing_never_touch_pyplot(tmp_path):
    code = ("import sys, matplotlib; before = matplotlib.rcParams._get('backend');"
            "import networkx as nx; from discovery import discover, DSeparationOracle;"
            "from discovery.drawing import draw_result;"
            "r = discover(None, test=DSeparationOracle(nx.DiGraph([('a', 'b')])));"
            f"draw_result(r, {str(tmp_path / 'g.png')!r});"
            "assert 'matplotlib.pyplot' not in sys.modules, 'pyplot imported';"
            "assert matplotlib.rcParams._get('backend') == before, 'backend changed'")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr


# ---------------------------------------------------------------------- visual language

def test_contested_edge_is_dashed_brick_with_a_question_badge_and_no_heads(result):
    # Heads at both ends are the field's notation for a bidirected edge (a hidden common
    # cause; Richardson & Spirtes 2002, ancestral graphs, from memory): a contested pair must
    # not look like that.
    fig = draw_result(result)
    fig.canvas.draw()
    art = by_gid(fig)
    i = edge_index(result, "cancer", "cough")
    line = art[f"edge-{i}"]
    assert line.get_linestyle() == "--"
    assert mcolors.same_color(line.get_color(), BRICK)
    assert f"head-{i}-target" not in art and f"head-{i}-source" not in art
    assert art[f"contested-{i}-text"].get_text() == "?"
    # the line is broken where the badge sits: no drawn point inside the badge
    badge = art[f"contested-{i}"]
    xs, ys = line.get_xdata(), line.get_ydata()
    to_px = fig.axes[0].transData.transform
    assert np.isnan(xs).any()  # two pieces
    assert not any(badge.contains_point(to_px((x, y))) for x, y in zip(xs, ys)
                   if not np.isnan(x))
    assert "legend-contested" in art


def test_directed_edges_have_filled_heads_ending_at_the_box_border(result):
    fig = draw_result(result)
    fig.canvas.draw()
    art = by_gid(fig)
    ax = fig.axes[0]
    names = list(result.variables)
    directed = [(i, e) for i, e in enumerate(result.edges) if e.kind == "directed"]
    assert len(directed) == 3
    for i, e in directed:
        line, head = art[f"edge-{i}"], art[f"head-{i}-target"]
        assert line.get_linestyle() == "-" and mcolors.same_color(line.get_color(), SLATE)
        assert head.get_fill() and mcolors.same_color(head.get_facecolor(), SLATE)
        assert f"head-{i}-source" not in art
        box = art[f"node-{names.index(e.target)}"]
        tip, base = head.get_xy()[0], (head.get_xy()[1] + head.get_xy()[2]) / 2
        step = (tip - base) / np.hypot(*(tip - base))
        to_px = ax.transData.transform
        # matplotlib's own hit test on the drawn rounded box: tip just outside, and a tenth
        # of a row further along the arrow is inside
        assert not box.contains_point(to_px(tip))
        assert box.contains_point(to_px(tip + 0.1 * step))


def test_undirected_edges_have_no_heads(result):
    art = by_gid(draw_result(result))
    i = edge_index(result, "age", "blood pressure")
    assert result.edges[i].kind == "undirected"
    assert f"edge-{i}" in art and not any(g.startswith(f"head-{i}-") for g in art)


def test_knowledge_overlay(result):
    art = by_gid(draw_result(result))
    i = edge_index(result, "age", "blood pressure")
    assert mcolors.same_color(art[f"locked-{i}"].get_color(), TEAL)
    forbidden = art["forbidden-0"]
    assert forbidden.get_linestyle() != "-"                      # dotted, not solid
    assert mcolors.to_rgba(forbidden.get_color())[3] < 0.6       # faint
    assert "forbidden-0-cross" in art
    plain = by_gid(draw_result(result, show_knowledge=False))
    assert not any(g.startswith(("locked-", "forbidden-", "band-")) for g in plain)


def test_caption_and_caution(result):
    art = by_gid(draw_result(result, title="Smoking"))
    assert art["caption"].get_text() == "Edgewise · test d-separation · α 0.05"
    assert "sound only under stated assumptions" in art["caution"].get_text()
    assert art["title"].get_text() == "Smoking"


def test_stage_bands_are_behind_the_nodes():
    kn = Knowledge(stages=[["age", "genes", "smoking"], ["tar"], ["cancer", "cough"]])
    r = discover(None, test=DSeparationOracle(DAG), knowledge=kn)
    fig = draw_result(r)
    fig.canvas.draw()
    art = by_gid(fig)
    pos = layout_positions(r)
    for k, group in enumerate(kn.stages):
        band = art[f"band-{k}"]
        assert band.get_zorder() < art["node-0"].get_zorder()
        for v in group:
            px = fig.axes[0].transData.transform(pos[v])
            assert band.contains_point(px), (v, k)
    assert "band-none" in art  # 'blood pressure' is in no stage
    # stages read left to right (stage order is time order)
    xs = [[pos[v][0] for v in g] for g in kn.stages]
    assert max(xs[0]) < min(xs[1]) and max(xs[1]) < min(xs[2])


def test_draws_into_a_given_axes(result):
    fig = Figure(figsize=(6, 4))
    ax = fig.add_subplot(1, 1, 1)
    assert draw_result(result, ax=ax) is fig
    assert "node-0" in by_gid(fig)


# ------------------------------------------------------------------------------ layout

def hand_result(dag, kinds=None):
    """A SearchResult built directly from a DAG (no search): every edge directed, or the
    kind given in ``kinds``."""
    kinds = kinds or {}
    edges = tuple(sorted((Edge(str(a), str(b), kinds.get((a, b), "directed"))
                          for a, b in dag.edges), key=lambda e: (e.source, e.target)))
    return SearchResult(variables=tuple(str(v) for v in dag.nodes),
                        settings=SearchSettings(test="d-separation"), knowledge=Knowledge(),
                        edges=edges, removed=(), tests=())


def random_dag(n, p, seed):
    rng = np.random.default_rng(seed)
    g = nx.DiGraph()
    g.add_nodes_from(f"variable {i}" for i in range(n))
    for i, j in itertools.combinations(range(n), 2):
        if rng.random() < p:
            g.add_edge(f"variable {i}", f"variable {j}")
    return g


def assert_no_overlap(positions, gap=(0.0, 0.0)):
    names = list(positions)
    for a, b in itertools.combinations(names, 2):
        (xa, ya), (xb, yb) = positions[a], positions[b]
        (wa, ha), (wb, hb) = box_size(a), box_size(b)
        assert (abs(xa - xb) >= (wa + wb) / 2 + gap[0]
                or abs(ya - yb) >= (ha + hb) / 2 + gap[1]), (a, b)


@pytest.mark.parametrize("dag", [
    random_dag(30, 0.12, 1),
    nx.DiGraph([("hub", f"leaf {i}") for i in range(29)]),           # unbalanced: spring
    nx.DiGraph([(f"s{i}", f"s{i + 1}") for i in range(29)]),          # a long chain
], ids=["random", "star", "chain"])
def test_thirty_nodes_do_not_overlap_and_spread(dag):
    r = hand_result(dag)
    pos = layout_positions(r)
    assert set(pos) == set(r.variables)
    assert_no_overlap(pos, gap=(0.3, 0.3))
    xy = np.array(list(pos.values()))
    # spread: neither collapsed nor scattered — the bounding box holds the boxes' total area
    # and at most 12 times it (common practice, no source)
    area = np.prod(xy.max(axis=0) - xy.min(axis=0) + 1.0)
    boxes = sum(np.prod(box_size(v)) for v in pos)
    assert boxes <= area <= 12 * boxes


def test_drawn_boxes_do_not_overlap():
    r = hand_result(random_dag(30, 0.12, 2))
    fig = draw_result(r)
    fig.canvas.draw()
    art = by_gid(fig)
    boxes = [art[f"node-{k}"].get_window_extent() for k in range(30)]
    for a, b in itertools.combinations(boxes, 2):
        assert not a.overlaps(b)


def test_layout_is_deterministic(result):
    again = SearchResult.from_dict(result.to_dict())
    assert layout_positions(result) == layout_positions(again)
    star = hand_result(nx.DiGraph([("hub", f"leaf {i}") for i in range(29)]))
    assert layout_positions(star, seed=3) == layout_positions(star, seed=3)


def test_layered_layout_follows_arrows():
    # every directed edge points to a later column when the layering is used
    r = hand_result(random_dag(20, 0.15, 4))
    pos = layout_positions(r)
    assert all(pos[e.source][0] < pos[e.target][0] for e in r.edges)


def test_user_positions_are_scaled_apart_and_checked(result):
    pixels = {v: (40.0 * k, 10.0 * (k % 2)) for k, v in enumerate(result.variables)}
    fig = draw_result(result, positions=pixels)
    fig.canvas.draw()
    art = by_gid(fig)
    boxes = [art[f"node-{k}"].get_window_extent() for k in range(len(result.variables))]
    assert not any(a.overlaps(b) for a, b in itertools.combinations(boxes, 2))
    with pytest.raises(DiscoveryError, match=r"positions lack 1 variable\(s\) \['cough'\]"):
        draw_result(result, positions={v: p for v, p in pixels.items() if v != "cough"})
    same = dict(pixels, cough=pixels["tar"])
    with pytest.raises(DiscoveryError, match="have the same position"):
        draw_result(result, positions=same)
    with pytest.raises(DiscoveryError, match="pair of"):
        draw_result(result, positions=dict(pixels, cough=("a", 1)))


def test_two_variables_and_awkward_names(tmp_path):
    r = hand_result(nx.DiGraph([('say "$x$"', "two\nlines")]))
    fig = draw_result(r, tmp_path / "g.svg")
    art = by_gid(fig)
    assert art["label-0"].get_text() == 'say "$x$"'   # shown as written, not as math
    ET.parse(tmp_path / "g.svg")


@pytest.mark.slow
def test_three_hundred_nodes(tmp_path):
    r = hand_result(random_dag(300, 0.007, 5))
    pos = layout_positions(r)
    assert_no_overlap(pos)
    draw_result(r, tmp_path / "g.png", positions=pos)
    assert (tmp_path / "g.png").stat().st_size > 0


# ------------------------------------------------------------- caution, legend, locked bar

@pytest.mark.parametrize("width_in", [3.0, 4.5, 6.0])
def test_whole_caution_fits_narrow_figures(result, width_in):
    # A narrow axes: every caution line must end inside the figure, and together the lines
    # hold the whole caution, word for word.
    from discovery.io import CAUTION
    fig = Figure(figsize=(width_in, 4.0))
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0, 0, 1, 1))
    draw_result(result, ax=ax)
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    lines = [a for g, a in sorted(by_gid(fig).items()) if g == "caution"
             or g.startswith("caution-")]
    assert len(lines) >= 2
    text = " ".join(a.get_text() for a in sorted(lines, key=lambda a: -a.get_position()[1]))
    assert text.split() == (CAUTION + ".").split()
    fig_box = fig.bbox
    for a in lines:
        box = a.get_window_extent(renderer)
        assert box.x0 >= fig_box.x0 and box.x1 <= fig_box.x1, (a.get_text(), box, fig_box)


def test_legend_has_an_entry_for_every_mark_drawn(result):
    edges = list(result.edges)
    edges[0] = dataclasses.replace(edges[0], untestable="the test returned no p-value")
    r = dataclasses.replace(result, edges=tuple(edges),
                            knowledge=Knowledge(locked=[("age", "blood pressure")],
                                                forbidden=[("genes", "age")],
                                                stages=[["genes", "smoking"], ["tar"]]))
    art = by_gid(draw_result(r))
    drawn = {g.split("-")[0] for g in art if g.split("-")[0] in (
        "locked", "forbidden", "band", "contested", "untestable")}
    drawn |= {e.kind for e in r.edges}
    legend = {g[len("legend-"):] for g in art if g.startswith("legend-")
              and not g.endswith("-label")}
    expected = {"locked": "locked", "forbidden": "forbidden", "band": "stages",
                "contested": "contested", "untestable": "untestable", "directed": "directed",
                "undirected": "undirected"}
    assert {expected[d] for d in drawn} <= legend
    assert art["untestable-0-text"].get_text() == "no p"


def test_locked_bar_sits_away_from_crossings():
    # Two long edges crossing at their middles; the locked one's bar must not sit on the
    # crossing (common practice, no source: a mark on a crossing is ambiguous).
    names = ["a", "b", "c", "d"]
    edges = (Edge("a", "b", "undirected", locked=True), Edge("c", "d", "undirected"))
    r = SearchResult(variables=tuple(names), settings=SearchSettings(), knowledge=Knowledge(
        locked=[("a", "b")]), edges=edges, removed=(), tests=())
    positions = {"a": (0.0, 0.0), "b": (6.0, 6.0), "c": (0.0, 6.0), "d": (6.0, 0.0)}
    art = by_gid(draw_result(r, positions=positions))
    bar = art["locked-0"]
    xs, ys = np.asarray(bar.get_xdata(), float), np.asarray(bar.get_ydata(), float)
    centre = np.array([np.nanmean(xs), np.nanmean(ys)])
    other = art["edge-1"]
    pts = np.column_stack([other.get_xdata(), other.get_ydata()])
    # distance from the bar's centre to the other edge's straight line, against the drawn
    # length of the locked edge (the middle, where they cross, would give 0)
    p, q = pts[0], pts[-1]
    u, v = q - p, centre - p
    d = abs(u[0] * v[1] - u[1] * v[0]) / np.hypot(*u)
    own = art["edge-0"]
    length = np.hypot(np.ptp(own.get_xdata()), np.ptp(own.get_ydata()))
    assert d > 0.15 * length
