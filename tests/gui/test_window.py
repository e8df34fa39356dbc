"""The window, offscreen with pytest-qt: drive the widgets and check the model, drive the
model and check the widgets, no echo, runs on a worker thread, files, errors."""

import json

import pytest

pytest.importorskip("pytestqt")

import gui._qt  # noqa: E402,F401  (applies the binding guard before Qt work)
from PySide6.QtCore import QMimeData, QPoint, QPointF, QSettings, Qt, QTimer, QUrl  # noqa: E402
from PySide6.QtGui import QDropEvent  # noqa: E402
from PySide6.QtWidgets import (QAbstractButton, QAbstractSlider, QAbstractSpinBox,  # noqa: E402
                               QComboBox, QGraphicsView, QLineEdit, QListWidget,
                               QMessageBox, QTableWidget)

from discovery import ASSUMPTIONS, load_result  # noqa: E402
from discovery.data import read_table  # noqa: E402
from discovery.exceptions import DataValidationError  # noqa: E402
from gui._qt.canvas import EdgeItem, OverlayItem  # noqa: E402
from gui._qt.window import MainWindow, alpha_to_slider, slider_to_alpha  # noqa: E402
from gui_data import RUN_TIMEOUT, run_and_wait  # noqa: E402

def drawn(w):
    return {(e.source, e.target, e.kind) for e in w.canvas.edges.values()}


def expected(result):
    return {(e.source, e.target, e.kind) for e in result.edges}


# -- the main loop: open, run, see, add knowledge, re-run -------------------------------------

def test_open_run_and_the_canvas_shows_exactly_the_result(qtbot, window, example_csv):
    assert window.open_path(example_csv)
    run_and_wait(qtbot, window)
    result = window.session.result
    assert window.session.status == "done"
    assert drawn(window) == expected(result)
    assert len(window.canvas.edges) == len(result.edges)
    for edge in result.edges:
        item = window.canvas.edges[edge.pair]
        assert isinstance(item, EdgeItem) and item.kind == edge.kind
        if edge.kind == "directed":  # the head is drawn at the target
            assert (item.source, item.target) == (edge.source, edge.target)
        p = edge.max_pvalue
        if p == p:
            assert f"{p:.3g}" in item.toolTip()  # hover shows the decisive p-value
    assert set(window.canvas.nodes) == set(result.variables)


def test_forbid_from_the_inspector_removes_the_edge_after_rerun(qtbot, window, collider_csv):
    window.open_path(collider_csv)
    run_and_wait(qtbot, window)
    assert window.session.result.edge("c", "d") is not None
    window.session.select_pair("c", "d")
    qtbot.mouseClick(window.inspector.buttons["forbidEdge"], Qt.LeftButton)
    assert window.session.knowledge.forbidden == (("c", "d"),)
    assert window.inspector.buttons["forbidEdge"].isChecked()
    assert window.canvas.banner.isVisibleTo(window.canvas)  # stale until re-run
    run_and_wait(qtbot, window)
    assert window.session.result.edge("c", "d") is None
    assert frozenset(("c", "d")) not in window.canvas.edges
    assert ("forbidden", frozenset(("c", "d"))) in window.canvas.overlay_marks()
    assert drawn(window) == expected(window.session.result)
    assert not window.canvas.banner.isVisibleTo(window.canvas)


def test_lock_from_the_context_menu_keeps_the_pair(qtbot, window, collider_csv):
    window.open_path(collider_csv)
    run_and_wait(qtbot, window)
    assert window.session.result.edge("a", "b") is None
    window.session.select_node("a")
    menu = window.canvas.build_context_menu(window.canvas.nodes["b"])  # node pair a, b
    assert window.session.selection == ("a", "b")
    lock = next(a for a in menu.actions() if a.objectName() == "lockEdge")
    lock.trigger()
    assert ("pending-lock", frozenset(("a", "b"))) in window.canvas.overlay_marks()
    run_and_wait(qtbot, window)
    item = window.canvas.edges[frozenset(("a", "b"))]
    assert item.locked
    assert drawn(window) == expected(window.session.result)


def test_edge_context_menu_offers_every_knowledge_action(qtbot, window, collider_csv):
    window.open_path(collider_csv)
    run_and_wait(qtbot, window)
    item = window.canvas.edges[frozenset(("a", "c"))]
    menu = window.canvas.build_context_menu(item)
    names = {a.objectName() for a in menu.actions()}
    assert {"lockEdge", "lockForward", "lockBackward", "forbidEdge", "forbidForward",
            "forbidBackward", "clearPair"} <= names
    next(a for a in menu.actions() if a.objectName() == "forbidBackward").trigger()
    assert window.session.knowledge.forbidden_directions in ((("c", "a"),), (("a", "c"),))


def test_auto_rerun_after_a_knowledge_edit(qtbot, window, collider_csv):
    window.act_auto.setChecked(True)
    window.open_path(collider_csv)
    run_and_wait(qtbot, window)
    window.session.forbid("c", "d")
    qtbot.waitUntil(lambda: window.session.result.edge("c", "d") is None
                    and window.session.status == "done", timeout=RUN_TIMEOUT)
    assert window.session.result.counts["tests_computed"] == 0  # all from the cache


def test_stop_a_long_run_keeps_the_window_answering(qtbot, window, latent_csv):
    window.open_path(latent_csv)
    ticks = []
    timer = QTimer()
    timer.timeout.connect(lambda: ticks.append(1))
    timer.start(20)
    assert window.run()
    qtbot.waitUntil(lambda: (window.session.progress or {}).get("level", 0) >= 2,
                    timeout=RUN_TIMEOUT)
    assert window.session.status == "running"
    assert window.progress_bar.isVisible() and window.cancel_button.isEnabled()
    before = len(ticks)
    qtbot.mouseClick(window.stop_button, Qt.LeftButton)
    qtbot.waitUntil(lambda: window.session.status == "stopped", timeout=RUN_TIMEOUT)
    timer.stop()
    assert len(ticks) > before or before > 0  # the event loop kept turning
    assert window.session.result is None
    assert window.canvas.edges == {}
    assert "no diagram" in window.canvas.hint.text()
    assert window.status_text.text().startswith("Stopped")
    qtbot.waitUntil(lambda: not window.runner.busy, timeout=RUN_TIMEOUT)


def test_stop_keeps_the_previous_complete_result(qtbot, window, latent_csv):
    window.open_path(latent_csv)
    window.session.set_setting("max_depth", 0)
    run_and_wait(qtbot, window)
    previous = window.session.result
    window.session.set_setting("max_depth", None)
    window.run()
    qtbot.waitUntil(lambda: (window.session.progress or {}).get("level", 0) >= 2,
                    timeout=RUN_TIMEOUT)
    window.stop()
    qtbot.waitUntil(lambda: window.session.status == "stopped", timeout=RUN_TIMEOUT)
    assert window.session.result is previous and window.session.stale
    assert window.canvas.banner.isVisibleTo(window.canvas)


# -- files ------------------------------------------------------------------------------------

def test_save_close_open_gives_the_same_session(qtbot, tmp_path, window, collider_csv,
                                                dialogs):
    s = window.session
    window.open_path(collider_csv)
    s.forbid("a", "e")
    s.set_setting("alpha", 0.01)
    run_and_wait(qtbot, window)
    s.move_nodes({"a": (33.0, 44.0)})
    assert s.save_session(tmp_path / "mine.edgewise")
    saved = json.loads((tmp_path / "mine.edgewise").read_text(encoding="utf-8"))
    window.close()

    settings = QSettings(str(tmp_path / "settings.ini"), QSettings.IniFormat)
    again = MainWindow(settings=settings, autosave_path=tmp_path / "autosave.edgewise")
    qtbot.addWidget(again)
    again.act_auto.setChecked(False)
    assert str((tmp_path / "mine.edgewise").resolve()) in again.recent_files()
    assert again.open_path(tmp_path / "mine.edgewise")
    t = again.session
    assert t.settings.alpha == 0.01 and again.alpha_box.text() == "0.01"
    assert t.knowledge.forbidden == (("a", "e"),)
    assert t.result.to_dict()["edges"] == saved["result"]["edges"]
    assert drawn(again) == expected(t.result)
    assert again.canvas.nodes["a"].pos() == QPointF(33.0, 44.0)
    assert not dialogs


def test_bad_file_shows_the_clear_message_in_a_dialog(qtbot, tmp_path, window, dialogs):
    bad = tmp_path / "broken.csv"
    bad.write_text("x,y\n1,2\n3\n", encoding="utf-8")
    assert not window.open_path(bad)
    qtbot.waitUntil(lambda: len(dialogs) == 1)
    with pytest.raises(DataValidationError) as raised:
        read_table(bad)
    assert dialogs == [("Open data", str(raised.value))]
    assert "Traceback" not in dialogs[0][1] and "\n" not in dialogs[0][1]


def test_bad_session_file_shows_one_line(qtbot, tmp_path, window, dialogs):
    bad = tmp_path / "bad.edgewise"
    bad.write_text('{"format": "something-else"}', encoding="utf-8")
    assert not window.open_path(bad)
    qtbot.waitUntil(lambda: len(dialogs) == 1)
    assert dialogs[0][0] == "Open session" and "not an Edgewise session" in dialogs[0][1]


def test_drop_a_csv_on_the_window(qtbot, window, collider_csv):
    data = QMimeData()
    data.setUrls([QUrl.fromLocalFile(str(collider_csv))])
    event = QDropEvent(QPointF(50, 50), Qt.CopyAction, data, Qt.LeftButton, Qt.NoModifier)
    window.dropEvent(event)
    qtbot.waitUntil(lambda: window.session.dataset is not None)
    assert window.session.data_path == str(collider_csv.resolve())
    assert window.recent_files()[0] == str(collider_csv.resolve())
    assert window.recent_menu.actions()[0].toolTip() == str(collider_csv.resolve())


def test_exports(qtbot, tmp_path, window, collider_csv):
    window.open_path(collider_csv)
    run_and_wait(qtbot, window)
    for kind in ("png", "svg", "pdf", "dot", "graphml", "json"):
        path = window.export(kind, tmp_path / f"out.{kind}")
        assert path is not None and path.stat().st_size > 100, kind
    assert (tmp_path / "out.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert (tmp_path / "out.pdf").read_bytes()[:5] == b"%PDF-"
    assert "<svg" in (tmp_path / "out.svg").read_text(encoding="utf-8")
    assert expected(load_result(tmp_path / "out.json")) == expected(window.session.result)


# -- widgets ↔ model --------------------------------------------------------------------------

def test_widgets_drive_the_model(qtbot, window, collider_csv):
    window.open_path(collider_csv)
    s = window.session
    window.depth_box.setValue(2)
    assert s.settings.max_depth == 2
    window.depth_box.setValue(window.depth_box.minimum())
    assert s.settings.max_depth is None
    window.collider_choice.setCurrentIndex(window.collider_choice.findData("majority"))
    assert s.settings.collider_rule == "majority"
    window.alpha_box.clear()
    qtbot.keyClicks(window.alpha_box, "0.002")
    qtbot.keyClick(window.alpha_box, Qt.Key_Return)
    assert s.settings.alpha == 0.002
    window.alpha_slider.setValue(alpha_to_slider(0.1))
    assert s.settings.alpha == pytest.approx(0.1, rel=0.05)
    row = window.variables._rows["e"]
    window.variables.table.item(row, 0).setCheckState(Qt.Unchecked)
    assert "e" not in s.included
    window.variables.missing.setCurrentIndex(window.variables.missing.findData("test-wise"))
    assert s.settings.missing == "test-wise"
    window.stages.move_variables(["a", "b"], 0)
    window.stages.move_variables(["d"], 1)
    assert s.knowledge.stages == (("a", "b"), ("d",))
    assert window.stages.group_names()[1:3] == [["a", "b"], ["d"]]
    window.act_overlay.setChecked(False)
    assert s.overlay is False
    window.variables.table.selectRow(window.variables._rows["c"])
    assert s.selection == ("c",)


def test_model_drives_the_widgets(qtbot, window, collider_csv):
    window.open_path(collider_csv)
    s = window.session
    s.set_setting("max_depth", 3)
    s.set_setting("alpha", 0.0123)
    s.set_setting("collider_rule", "conservative")
    assert window.depth_box.value() == 3
    assert window.alpha_box.text() == "0.0123"
    assert window.alpha_slider.value() == alpha_to_slider(0.0123)
    assert window.collider_choice.currentData() == "conservative"
    s.set_included("a", False)
    assert window.variables.table.item(window.variables._rows["a"], 0).checkState() \
        == Qt.Unchecked
    assert not window.canvas.nodes["a"].included
    s.set_stages([["a"], ["b", "c"]])
    assert window.stages.group_names() == [["d", "e"], ["a"], ["b", "c"], []]
    assert len(window.canvas.bands) == 2
    s.select_node("c")
    assert window.inspector.title.text() == "c"
    assert window.canvas.nodes["c"].selected
    s.overlay = False
    assert not window.act_overlay.isChecked()
    s.forbid("d", "e")
    assert window.act_undo.isEnabled() and "Forbid d — e" in window.act_undo.text()


def test_refreshes_do_not_echo_back_into_the_model(qtbot, window, collider_csv):
    window.open_path(collider_csv)
    s = window.session
    calls = []
    original = s.set_setting

    def spy(name, value):
        calls.append((name, value))
        return original(name, value)

    s.set_setting = spy  # instance attribute: the widgets call through it
    included_events = []
    s.events.included.connect(included_events.append)
    s.update({"settings": s.settings.__class__(alpha=0.003, max_depth=4,
                                               collider_rule="majority", missing="test-wise")})
    s.update({"included": ("a", "b", "c")})
    assert calls == []  # no widget wrote the model's own values back
    assert included_events == [("a", "b", "c")]
    assert window.alpha_box.text() == "0.003" and window.depth_box.value() == 4


def test_undo_redo_from_the_keyboard(qtbot, window, collider_csv):
    window.open_path(collider_csv)
    s = window.session
    s.forbid("a", "b")
    window.act_undo.trigger()
    assert s.knowledge.forbidden == ()
    window.act_redo.trigger()
    assert s.knowledge.forbidden == (("a", "b"),)
    assert window.act_undo.shortcut().toString() == "Ctrl+Z"


def test_dragging_a_node_is_kept_in_the_session_and_undoable(qtbot, window, collider_csv):
    window.open_path(collider_csv)
    s = window.session
    node = window.canvas.nodes["a"]
    start = s.positions["a"]
    window.canvas._node_pressed(node, Qt.NoModifier)
    node.setPos(QPointF(start[0] + 80, start[1] + 30))
    window.canvas._node_released(node)
    assert s.positions["a"] == (start[0] + 80, start[1] + 30)
    s.undo()
    assert node.pos() == QPointF(*start)


def test_every_interactive_widget_has_a_stable_object_name(qtbot, window, collider_csv):
    window.open_path(collider_csv)
    run_and_wait(qtbot, window)
    window.session.select_pair("a", "c")
    kinds = (QAbstractButton, QComboBox, QLineEdit, QAbstractSpinBox, QTableWidget,
             QListWidget, QGraphicsView)
    unnamed = []
    for widget in window.findChildren(kinds[0].__mro__[1]):
        if not isinstance(widget, kinds) or isinstance(widget, QAbstractSlider):
            continue
        if widget.objectName().startswith("qt_") or widget.parent() is None:
            continue
        if isinstance(widget, QLineEdit) and isinstance(widget.parent(),
                                                        (QAbstractSpinBox, QComboBox)):
            continue  # the editor inside a spin box or combo box
        if not widget.objectName():
            unnamed.append(f"{type(widget).__name__} in {type(widget.parent()).__name__}")
    assert unnamed == []
    assert window.alpha_slider.objectName() == "alphaSlider"


def test_assumptions_are_always_reachable(qtbot, window):
    assert window.act_assumptions.shortcut().toString() == "F1"
    button = window.toolbar.widgetForAction(window.act_assumptions)
    assert button.objectName() == "assumptionsButton"
    dialog = window.show_assumptions()
    qtbot.addWidget(dialog)
    text = dialog.findChild(type(window.status_text), "assumptionsText").text()
    for line in ASSUMPTIONS:
        assert line in text


def test_alpha_slider_is_log_scale():
    assert slider_to_alpha(alpha_to_slider(0.05)) == pytest.approx(0.05, rel=0.02)
    mid = slider_to_alpha(200)  # halfway between 1e-4 and 0.5 on a log scale
    assert mid == pytest.approx((1e-4 * 0.5) ** 0.5, rel=0.05)


def test_recovery_is_offered_after_a_crash(qtbot, tmp_path, monkeypatch, collider_csv):
    from gui import Session
    auto = tmp_path / "autosave.edgewise"
    crashed = Session(autosave_path=auto)
    crashed.open_data(collider_csv)
    crashed.forbid("b", "d")
    assert crashed.autosave()
    asked = []
    monkeypatch.setattr(QMessageBox, "question",
                        staticmethod(lambda *a, **k: asked.append(a[2]) or QMessageBox.Yes))
    w = MainWindow(settings=QSettings(str(tmp_path / "s.ini"), QSettings.IniFormat),
                   autosave_path=auto)
    qtbot.addWidget(w)
    assert w.offer_recovery()
    assert asked and "did not close normally" in asked[0]
    assert w.session.knowledge.forbidden == (("b", "d"),)
    assert "•" in w.windowTitle()  # recovered work is unsaved


def test_window_state_is_remembered(qtbot, tmp_path):
    path = str(tmp_path / "state.ini")
    w = MainWindow(settings=QSettings(path, QSettings.IniFormat))
    qtbot.addWidget(w)
    w.ask_before_closing = False
    w.show()
    w.inspector_dock.hide()
    w.act_auto.setChecked(False)
    w.close()
    again = MainWindow(settings=QSettings(path, QSettings.IniFormat))
    qtbot.addWidget(again)
    again.show()
    assert not again.inspector_dock.isVisible()
    assert not again.act_auto.isChecked()


def test_canvas_mouse_selects_edges_and_nodes(qtbot, window, collider_csv):
    window.open_path(collider_csv)
    run_and_wait(qtbot, window)
    canvas = window.canvas
    item = canvas.edges[frozenset(("c", "d"))]
    mid = (item.p1 + item.p2) / 2
    qtbot.mouseClick(canvas.viewport(), Qt.LeftButton, pos=canvas.mapFromScene(mid))
    assert set(window.session.selection) == {"c", "d"}
    node = canvas.nodes["b"]
    qtbot.mouseClick(canvas.viewport(), Qt.LeftButton, pos=canvas.mapFromScene(node.pos()))
    assert window.session.selection == ("b",)
    qtbot.mouseClick(canvas.viewport(), Qt.LeftButton, Qt.ControlModifier,
                     pos=canvas.mapFromScene(canvas.nodes["e"].pos()))
    assert window.session.selection == ("b", "e")
    assert window.inspector.title.text() == "b — e"
    far = canvas.mapFromScene(QPointF(-350, -250))
    qtbot.mouseClick(canvas.viewport(), Qt.LeftButton, pos=QPoint(far.x(), far.y()))
    assert window.session.selection == ()
    assert not any(isinstance(i, OverlayItem) for i in canvas.scene().selectedItems())


def test_dropping_variables_on_a_stage_list(qtbot, window, collider_csv):
    from gui._qt.panels import _MIME
    window.open_path(collider_csv)
    target = window.stages.lists[-1]  # "drop here to add a stage"
    data = QMimeData()
    data.setData(_MIME, b"a\nb")
    event = QDropEvent(QPointF(5, 5), Qt.MoveAction, data, Qt.LeftButton, Qt.NoModifier)
    target.dropEvent(event)
    assert window.session.knowledge.stages == (("a", "b"),)
    pool = window.stages.lists[0]
    data2 = QMimeData()
    data2.setData(_MIME, b"b")
    pool.dropEvent(QDropEvent(QPointF(5, 5), Qt.MoveAction, data2, Qt.LeftButton,
                              Qt.NoModifier))
    assert window.session.knowledge.stages == (("a",),)
    qtbot.wait(10)  # the replaced lists are deleted later, safely
    assert window.stages.group_names()[1] == ["a"]


def test_typing_in_the_alpha_box_does_not_fire_single_key_shortcuts(qtbot, window,
                                                                      collider_csv):
    window.open_path(collider_csv)
    window.session.select_pair("a", "b")
    window.activateWindow()
    window.alpha_box.setFocus()
    window.alpha_box.selectAll()
    qtbot.keyClicks(window.alpha_box, "LF")
    qtbot.keyClick(window.alpha_box, Qt.Key_Delete)
    assert window.session.knowledge.is_empty()
