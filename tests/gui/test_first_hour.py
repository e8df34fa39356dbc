"""The window as a new user meets it: exports, fitting, layout, stale sessions, plain words,
the marks on the canvas (offscreen, pytest-qt)."""

import numpy as np
import pandas as pd
import pytest

pytest.importorskip("pytestqt")

import gui._qt  # noqa: E402,F401  (applies the binding guard before Qt work)
from PySide6.QtCore import QRectF, QSettings  # noqa: E402
from PySide6.QtGui import QFontMetricsF, QImage  # noqa: E402
from PySide6.QtWidgets import QMessageBox  # noqa: E402

from gui._qt.window import MainWindow  # noqa: E402
from gui_data import run_and_wait  # noqa: E402

def _ink_box(image: QImage, rect: QRectF):
    """The bounding box (x0, y0, x1, y1) of dark text pixels inside ``rect`` of ``image``."""
    arr = image.convertToFormat(QImage.Format_RGB32)
    w, h = arr.width(), arr.height()
    buf = np.frombuffer(arr.constBits(), dtype=np.uint8).reshape(h, arr.bytesPerLine())
    buf = buf[:, :4 * w].reshape(h, w, 4)[..., :3].astype(int)
    x0, y0 = max(0, int(rect.left())), max(0, int(rect.top()))
    x1, y1 = min(w, int(rect.right())), min(h, int(rect.bottom()))
    dark = buf[y0:y1, x0:x1].sum(axis=2) < 3 * 110  # label text #1B232B, not the glyph
    ys, xs = np.nonzero(dark)
    return x0 + xs.min(), y0 + ys.min(), x0 + xs.max() + 1, y0 + ys.max() + 1


# -- item 9: PNG labels at the export resolution ----------------------------------------------

def test_png_export_draws_labels_at_its_resolution(qtbot, tmp_path, window):
    """The rendered label is as wide and tall as the font says (times the export scale) and
    ends inside its box: no label cut off at 192 dpi."""
    rng = np.random.default_rng(1)
    frame = pd.DataFrame({"soil_moisture_percent": rng.normal(size=60),
                          "b": rng.normal(size=60)})
    frame.to_csv(tmp_path / "t.csv", index=False)
    assert window.open_path(tmp_path / "t.csv")
    path = window.export("png", tmp_path / "out.png")
    image = QImage(str(path))
    assert round(image.dotsPerMeterX() * 0.0254) == 192  # the file says 192 dpi
    from gui._qt.export import _diagram_rect
    source = _diagram_rect(window.canvas)
    scale = image.width() / source.width()
    assert scale == pytest.approx(2.0, rel=0.01)
    node = window.canvas.nodes["soil_moisture_percent"]
    box = node.mapRectToScene(node.rect)
    box_px = QRectF((box.left() - source.left()) * scale, (box.top() - source.top()) * scale,
                    box.width() * scale, box.height() * scale)
    # the text area: right of the kind glyph, inside the border
    inner = box_px.adjusted(26 * scale, 4 * scale, -3 * scale, -4 * scale)
    x0, y0, x1, y1 = _ink_box(image, inner)
    ink = QFontMetricsF(window.canvas.node_font).tightBoundingRect("soil_moisture_percent")
    assert (x1 - x0) == pytest.approx(ink.width() * scale, rel=0.12)
    assert (y1 - y0) == pytest.approx(ink.height() * scale, rel=0.2)
    assert x1 < inner.right() - 2  # ends before the box does


# -- item 14: the contested mark is our own; ends drawn from the marks ------------------------

def _paint(kind, **kw):
    from PySide6.QtCore import QPointF
    from PySide6.QtGui import QPainter
    from gui._qt import style
    from gui._qt.canvas import draw_edge
    image = QImage(260, 60, QImage.Format_RGB32)
    image.fill(style.CANVAS)
    painter = QPainter(image)
    draw_edge(painter, QPointF(20, 30), QPointF(240, 30), kind, **kw)
    painter.end()
    return image


def _colour(image, x, y):
    c = image.pixelColor(x, y)
    return c.red(), c.green(), c.blue()


def _is_canvas(image, x, y):
    return _colour(image, x, y) == (0xF7, 0xF6, 0xF3)


def test_contested_mark_has_no_heads_a_break_and_a_badge(qapp):
    """DESIGN.md §6: dashed brick red (#B5482F), a small break with a "?" badge in the
    middle, no heads — open heads at both ends are the field's bidirected edge."""
    image = _paint("contested")
    # no head at either end: just off the line, where a head's wings would be, is canvas
    for x in (23, 26, 234, 237):
        for dy in (-4, -3, 3, 4):
            assert _is_canvas(image, x, 30 + dy), (x, dy)
    # the badge: a ring of brick red around the middle with a "?" inside
    brick = [(x, y) for x in range(118, 143) for y in range(20, 41)
             if abs(_colour(image, x, y)[0] - 0xB5) < 40 and _colour(image, x, y)[2] < 110]
    assert len(brick) > 40
    assert min(y for _, y in brick) <= 24 and max(y for _, y in brick) >= 36  # taller than a line
    # the break: on the line, just outside the badge, canvas on both sides
    assert _is_canvas(image, 130 - 10, 30) or _is_canvas(image, 130 - 11, 30)
    assert _is_canvas(image, 130 + 10, 30) or _is_canvas(image, 130 + 11, 30)
    # dashed: gaps along the line away from the middle
    row = [_is_canvas(image, x, 30) for x in range(30, 100)]
    assert any(row) and not all(row)


@pytest.mark.parametrize("marks, filled_a, filled_b, ring_a, ring_b", [
    (("tail", "arrow"), False, True, False, False),
    (("arrow", "arrow"), True, True, False, False),    # bidirected
    (("circle", "arrow"), False, True, True, False),   # o→
    (("circle", "circle"), False, False, True, True),  # o–o
])
def test_edge_ends_are_drawn_from_the_marks(qapp, marks, filled_a, filled_b, ring_a, ring_b):
    image = _paint("edge", marks=marks)
    for x_tip, sign, filled, ring in ((20, 1, filled_a, ring_a), (240, -1, filled_b, ring_b)):
        wing = x_tip + sign * 10  # inside a filled head's triangle, off the line
        assert (not _is_canvas(image, wing, 33)) == filled, (marks, x_tip)
        # a ring: hollow centre (canvas) with slate around it
        centre = x_tip + sign * 4
        if ring:
            assert _is_canvas(image, centre, 30)
            assert not _is_canvas(image, centre, 26) and not _is_canvas(image, centre, 34)
        else:
            assert not _is_canvas(image, centre, 30)


def test_window_draws_contested_edges_with_our_mark(qtbot, window, tmp_path):
    from discovery.result import SearchResult
    from gui_data import collider_frame
    from gui._qt.canvas import edge_text
    collider_frame().to_csv(tmp_path / "c.csv", index=False)
    window.open_path(tmp_path / "c.csv")
    run_and_wait(qtbot, window)
    doc = window.session.result.to_dict()
    first = doc["edges"][0]
    first.update({"kind": "contested", "reason": "colliders oriented it both ways",
                  "reason_kind": "contested", "from_mark": "tail", "to_mark": "tail"})
    window.session.result = SearchResult.from_dict(doc)
    item = window.canvas.edges[frozenset((first["from"], first["to"]))]
    assert item.kind == "contested" and item.marks == ("tail", "tail")
    assert f"{first['from']} ?– {first['to']} (contested)" in item.toolTip()
    assert "↔" not in item.toolTip()
    assert edge_text(item.edge) == f"{first['from']} ?– {first['to']} (contested)"
    # the key has a row for it, drawn the same way
    assert ("contested", "contested (?)") in window.canvas.legend.rows
    # and the Inspector says it the same way
    window.session.select_pair(first["from"], first["to"])
    body = window.inspector.body.text()
    assert f"{first['from']} ?– {first['to']} (contested)" in body and "↔" not in body


def test_legend_folds_and_lists_the_marks_drawn(qtbot, window):
    from PySide6.QtCore import QPoint, Qt
    legend = window.canvas.legend
    tall = legend.height()
    qtbot.mouseClick(legend, Qt.LeftButton, pos=QPoint(10, 8))
    assert legend.collapsed and legend.height() < tall / 3
    qtbot.mouseClick(legend, Qt.LeftButton, pos=QPoint(10, 8))
    assert not legend.collapsed and legend.height() == tall
    legend.set_kinds({"directed", "bidirected", "partially-directed"})
    kinds = [k for k, _ in legend.rows]
    assert "bidirected" in kinds and "partially-directed" in kinds
    assert "nondirected" not in kinds


# -- item 8: the status bar says what the log says --------------------------------------------

def test_status_bar_time_and_counts_equal_the_log_and_the_engine(qtbot, window, tmp_path):
    import re
    from gui_data import collider_frame
    collider_frame().to_csv(tmp_path / "c.csv", index=False)
    window.open_path(tmp_path / "c.csv")
    run_and_wait(qtbot, window)
    status = window.status_text.text()
    line = [ln for ln in window.session.log if " done in " in ln][-1]
    seconds_status = re.search(r"Done in ([0-9.]+) s", status).group(1)
    seconds_log = re.search(r"done in ([0-9.]+) s", line).group(1)
    assert seconds_status == seconds_log
    c = window.session.result.counts  # the engine's own counts, nothing recounted
    for text in (status, line):
        assert f"{c['edges']} edges" in text
        assert f"{c['tests']} tests, {c['tests_from_cache']} from the cache" in text


# -- item 10: the view fits every new layout ---------------------------------------------------

def _all_nodes_in_view(canvas):
    view = canvas.mapToScene(canvas.viewport().rect()).boundingRect()
    return all(view.contains(n.sceneBoundingRect()) for n in canvas.nodes.values())


def test_view_fits_the_diagram_after_every_new_layout(qtbot, window, tmp_path):
    from gui_data import collider_frame
    collider_frame().to_csv(tmp_path / "c.csv", index=False)
    canvas = window.canvas
    window.open_path(tmp_path / "c.csv")
    assert _all_nodes_in_view(canvas)
    canvas.zoom(4.0)  # the user zooms in: nodes leave the view
    canvas.centerOn(5000, 5000)
    assert not _all_nodes_in_view(canvas)
    run_and_wait(qtbot, window)  # first run: a new layout around the edges
    assert _all_nodes_in_view(canvas)
    canvas.zoom(4.0)
    canvas.centerOn(5000, 5000)
    (tmp_path / "k.toml").write_text('stages = [["a", "b"], ["c"], ["d", "e"]]\n')
    assert window.session.load_knowledge(tmp_path / "k.toml")  # knowledge with stages
    assert _all_nodes_in_view(canvas)
    canvas.zoom(4.0)
    canvas.centerOn(5000, 5000)
    assert window.session.move_to_stage(["e"], 0)  # stages changed
    assert _all_nodes_in_view(canvas)
    canvas.zoom(4.0)
    canvas.centerOn(5000, 5000)
    window.session.arrange("layered")
    assert _all_nodes_in_view(canvas)


# -- item 12: a session on changed data opens stale, and waits ----------------------------------

def test_session_on_changed_data_opens_stale_with_a_banner_and_waits(qtbot, window, tmp_path):
    from gui_data import collider_frame
    data = tmp_path / "c.csv"
    collider_frame().to_csv(data, index=False)
    window.open_path(data)
    run_and_wait(qtbot, window)
    saved = tmp_path / "s.edgewise"
    assert window.session.save_session(saved)
    collider_frame(seed=11).to_csv(data, index=False)  # the data file changes
    window.act_auto.setChecked(True)  # auto re-run on: still, nothing runs by itself
    runs = window.session.run_id
    assert window.open_path(saved)
    s = window.session
    assert s.result is not None and s.stale and s.data_changed
    banner = window.canvas.banner
    assert banner.isVisible() and "data file changed" in banner.text()
    assert all(item.faded for item in window.canvas.edges.values())
    qtbot.wait(800)  # longer than the auto re-run's delay
    assert s.run_id == runs and s.status == "done"
    # an edit does not run it either: the user presses Run
    s.set_setting("alpha", 0.01)
    qtbot.wait(800)
    assert s.run_id == runs
    run_and_wait(qtbot, window)
    assert not s.data_changed and not s.stale and not banner.isVisible()


# -- item 13: plain words ----------------------------------------------------------------------

def test_test_names_are_readable_with_the_identifier_in_the_tooltip(window):
    from PySide6.QtCore import Qt
    from discovery.independence import TEST_NAMES
    combo = window.test_choice
    assert [combo.itemData(i) for i in range(combo.count())] == list(TEST_NAMES)
    for i in range(combo.count()):
        name = combo.itemData(i)
        assert combo.itemText(i) != name and "-" not in combo.itemText(i)
        assert name in combo.itemData(i, Qt.ToolTipRole)
    window.session.set_setting("test", "kci")
    assert combo.currentText() == "Nonlinear (kernel)" and "kci" in combo.toolTip()


def test_window_errors_name_window_controls_not_options(qtbot, window, dialogs, tmp_path):
    """The engine's message for perfectly collinear columns says "e.g. with --columns";
    the window says where to do that instead."""
    rng = np.random.default_rng(2)
    a, b = rng.normal(size=200), rng.normal(size=200)
    pd.DataFrame({"a": a, "b": b, "c": a + b}).to_csv(tmp_path / "col.csv", index=False)
    window.open_path(tmp_path / "col.csv")
    window.session.set_setting("test", "fisher-z")
    run_and_wait(qtbot, window)
    qtbot.waitUntil(lambda: bool(dialogs), timeout=5000)
    title, text = dialogs[-1]
    assert "collinear" in text and "Variables panel" in text
    assert "--" not in text and "--" not in window.session.log[-1]


def test_window_words_maps_each_option(window):
    from gui._words import window_words
    assert window_words("lower --max-depth to 2 or less") == "set the Depth box to 2 or less"
    assert "--" not in window_words("choose a test with --test g-squared")
    unknown = window_words("the column has decimal commas; use --decimal ,")
    assert "command line" in unknown and "not in the window" in unknown


def test_a_disabled_run_looks_disabled(window):
    from PySide6.QtCore import QPoint

    def background(button):
        image = button.grab().toImage()
        c = image.pixelColor(QPoint(4, image.height() // 2))
        return (c.red() + c.green() + c.blue()) / 3
    assert window.session.dataset is None and not window.run_button.isEnabled()
    disabled = background(window.run_button)
    window.run_button.setEnabled(True)
    enabled = background(window.run_button)
    assert enabled < 110 < 200 < disabled  # slate when it can run, pale when it cannot


def test_assumptions_reachable_from_a_visible_control_at_the_default_size(qtbot, tmp_path,
                                                                          dialogs):
    settings = QSettings(str(tmp_path / "fresh.ini"), QSettings.IniFormat)
    w = MainWindow(settings=settings)  # the default size, nothing restored
    w.ask_before_closing = False
    qtbot.addWidget(w)
    w.show()
    qtbot.waitExposed(w)
    button = w.status_assumptions
    assert button.isVisible() and button.objectName() == "statusAssumptions"
    inside = button.mapTo(w, button.rect().bottomRight())
    assert 0 <= inside.x() <= w.width() and 0 <= inside.y() <= w.height()
    button.click()
    from PySide6.QtWidgets import QDialog
    assert any(d.objectName() == "assumptionsDialog" and d.isVisible()
               for d in w.findChildren(QDialog))
    w.runner.shutdown()


@pytest.mark.parametrize("answer", ["yes", "no"])
def test_opening_an_example_offers_its_knowledge(qtbot, window, tmp_path, monkeypatch, answer):
    import shutil
    from discovery.knowledge import read_knowledge
    from gui_data import EXAMPLE
    if not (EXAMPLE / "knowledge.toml").exists():
        pytest.skip("the greenhouse example is not in this tree")
    folder = tmp_path / "greenhouse"
    folder.mkdir()
    for name in ("data.csv", "knowledge.toml"):
        shutil.copy(EXAMPLE / name, folder / name)
    asked = []

    def question(parent, title, text, *a):
        asked.append(text)
        return QMessageBox.Yes if answer == "yes" else QMessageBox.No
    monkeypatch.setattr(QMessageBox, "question", staticmethod(question))
    assert window.open_path(folder / "data.csv")
    assert len(asked) == 1 and "knowledge.toml" in asked[0]
    wanted = read_knowledge(folder / "knowledge.toml")
    if answer == "yes":
        assert window.session.knowledge == wanted
    else:
        assert window.session.knowledge != wanted
    # the title names the folder, since every example's table is called data.csv
    assert window.windowTitle().startswith("greenhouse/data.csv")


# -- item 11: find and focus, layout choices ---------------------------------------------------

def test_find_a_variable_and_focus_on_its_neighbourhood(qtbot, window, tmp_path):
    from PySide6.QtCore import Qt
    from gui_data import collider_frame
    collider_frame().to_csv(tmp_path / "c.csv", index=False)
    window.open_path(tmp_path / "c.csv")
    run_and_wait(qtbot, window)
    canvas = window.canvas
    assert canvas.neighbours("c") >= {"a", "b", "d"}  # a → c ← b, c → d
    window.act_find.trigger()
    assert window.act_find.shortcut().toString() == "Ctrl+F"
    box = canvas.find_box
    assert box.isVisible() and box.hasFocus()
    qtbot.keyClicks(box, "C")  # any case
    qtbot.keyClick(box, Qt.Key_Return)
    assert canvas.focused == "c" and window.session.selection == ("c",)
    near = canvas.neighbours("c") | {"c"}
    for name, node in canvas.nodes.items():
        assert (node.opacity() == 1.0) == (name in near), name
    view = canvas.mapToScene(canvas.viewport().rect()).boundingRect()
    for name in near:
        assert view.contains(canvas.nodes[name].sceneBoundingRect())
    qtbot.keyClick(box, Qt.Key_Escape)  # ends the focus
    assert canvas.focused is None and not box.isVisible()
    assert all(n.opacity() == 1.0 for n in canvas.nodes.values())
    # a name that is not there: one line, nothing focused
    canvas.show_find()
    box.setText("humidity")
    qtbot.keyClick(box, Qt.Key_Return)
    assert canvas.focused is None and "no variable matches 'humidity'" in canvas.find_message


def test_layered_layout_is_offered_without_stages(qtbot, window, tmp_path):
    from gui_data import collider_frame
    collider_frame().to_csv(tmp_path / "c.csv", index=False)
    window.open_path(tmp_path / "c.csv")
    run_and_wait(qtbot, window)
    assert not window.session.knowledge.stages
    assert window.act_arrange_layered in window.arrange_menu.actions()
    layouts = window.session.layouts
    window.act_arrange_layered.trigger()  # laid out on a worker thread
    qtbot.waitUntil(lambda: window.session.layouts > layouts, timeout=60_000)
    pos = window.session.positions
    for e in window.session.result.edges:
        if e.kind == "directed":
            assert pos[e.source][0] < pos[e.target][0]  # every arrow points right
    assert window.session.layout_style == "layered"
    window.session.undo()
    window.act_arrange_force.trigger()
    assert window.session.layout_style == "force"


def test_sixty_variables_are_readable_at_fit_zoom(qtbot, tmp_path, dialogs):
    """At the window's default size, a 60-variable diagram fits whole with labels at least
    7 px tall on screen (common practice, no source: below about 7 px a sans-serif label
    stops being legible), no two boxes overlapping and no edge shorter than 8 px."""
    from gui_data import sixty_frame
    sixty_frame().to_csv(tmp_path / "water.csv", index=False)
    settings = QSettings(str(tmp_path / "fresh.ini"), QSettings.IniFormat)
    w = MainWindow(settings=settings)  # the default size
    w.ask_before_closing = False
    qtbot.addWidget(w)
    w.show()
    qtbot.waitExposed(w)
    assert w.open_path(tmp_path / "water.csv")
    run_and_wait(qtbot, w)
    assert len(w.session.result.edges) > 40
    seen = w.canvas.readability()
    assert seen["nodes"] == 60 and seen["nodes_in_view"] == 60
    assert seen["overlapping_boxes"] == 0
    assert seen["label_px"] >= 7.0
    assert seen["shortest_edge_px"] >= 8.0
    assert not w.canvas._key_covers_a_node()
    w.runner.shutdown()


def test_badges_of_crossing_contested_edges_do_not_touch(qtbot, window, tmp_path):
    from discovery.result import SearchResult
    from gui._qt.canvas import BADGE_R
    from gui_data import collider_frame
    collider_frame().to_csv(tmp_path / "c.csv", index=False)
    window.open_path(tmp_path / "c.csv")
    run_and_wait(qtbot, window)
    doc = window.session.result.to_dict()
    template = dict(doc["edges"][0])
    for a, b in (("a", "d"), ("b", "e")):
        doc["edges"].append(dict(template, **{"from": a, "to": b, "kind": "contested",
                                               "from_mark": "tail", "to_mark": "tail",
                                               "reason": "colliders disagree",
                                               "reason_kind": "contested"}))
    window.session.result = SearchResult.from_dict(doc)
    # the two edges cross at their middles
    window.session.move_nodes({"a": (0, 0), "d": (400, 0), "b": (200, -200), "e": (200, 200),
                               "c": (600, 300)})
    one, two = (window.canvas.edges[frozenset(p)] for p in (("a", "d"), ("b", "e")))

    def badge(item):
        from PySide6.QtGui import QPainterPath
        path = QPainterPath(item.p1)
        path.lineTo(item.p2)
        return path.pointAtPercent(item.badge_t)
    p, q = badge(one), badge(two)
    assert ((p.x() - q.x()) ** 2 + (p.y() - q.y()) ** 2) ** 0.5 > 3 * BADGE_R
