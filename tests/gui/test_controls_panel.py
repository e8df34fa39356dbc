"""The Controls panel, offscreen with pytest-qt: drive the widgets and check the model, drive
the model and check the widgets and the canvas, store the roles in the session file.

The reference answers come from the textbook shapes of the test tables (Pearl 1995): in
a → c ← b, c → d the effect of c on d needs no control and conditioning on the collider c
opens a — c — b; in a chain a — b — c (a CPDAG with nothing oriented) the effect of a on c is
not identifiable by adjustment (Perković et al. 2018).
"""

import numpy as np
import pandas as pd
import pytest

pytest.importorskip("pytestqt")

import gui._qt  # noqa: E402,F401
from PySide6.QtCore import QPoint, QSettings, Qt  # noqa: E402
from PySide6.QtGui import QColor  # noqa: E402
from PySide6.QtWidgets import QMessageBox  # noqa: E402

from gui._qt.controls_panel import OUTCOME_FILL, TREATMENT_FILL  # noqa: E402
from gui._qt.window import MainWindow  # noqa: E402


@pytest.fixture
def window(window):
    window.controls_dock.raise_()
    return window


def open_and_run(w, path):
    assert w.open_path(path)
    assert w.session.run_inline()


@pytest.fixture
def chain_csv(tmp_path):
    rng = np.random.default_rng(2)
    a = rng.normal(size=1500)
    b = 0.9 * a + rng.normal(size=1500)
    c = 0.9 * b + rng.normal(size=1500)
    path = tmp_path / "chain.csv"
    pd.DataFrame({"a": a, "b": b, "c": c}).to_csv(path, index=False)
    return path


def node_colour(w, name):
    node = w.canvas.nodes[name]
    w.canvas.viewport().repaint()
    image = w.canvas.viewport().grab().toImage()
    left = node.mapToScene(node.rect.left() + 4, 0)
    point = w.canvas.mapFromScene(left)
    return QColor(image.pixel(point.x(), point.y() + 8))


def close(c1: QColor, c2: QColor, tol=30):
    return all(abs(a - b) <= tol for a, b in zip(c1.getRgb()[:3], c2.getRgb()[:3]))


def test_widgets_drive_the_model_and_the_canvas(window, collider_csv, qtbot):
    w, s = window, window.session
    open_and_run(w, collider_csv)
    panel = w.controls
    panel.treatment_box.setCurrentText("c")
    panel.outcome_box.setCurrentText("d")
    assert (s.treatment, s.outcome) == ("c", "d")
    assert "Identifiable by adjustment" in panel.status.text()
    # c → d directed, nothing else reaches d: no control needed (Pearl 1995, back-door)
    texts = [panel.sets.item(i).text() for i in range(panel.sets.count())]
    assert "optimal: {} (no controls)" in texts and "canonical: {a, b}" in texts
    canonical = next(panel.sets.item(i) for i in range(panel.sets.count())
                     if panel.sets.item(i).text().startswith("canonical"))
    panel.sets.itemClicked.emit(canonical)
    assert s.planned == ("a", "b")
    assert "valid" in panel.verdict.text() and "not valid" not in panel.verdict.text()
    assert close(node_colour(w, "c"), TREATMENT_FILL)
    assert close(node_colour(w, "d"), OUTCOME_FILL)
    assert not panel.chart.pixmap().isNull()  # the effect range chart (data are open)
    assert "Cautions" in panel.cautions.text()


def test_model_drives_the_widgets_and_the_open_path(window, collider_csv):
    w, s = window, window.session
    open_and_run(w, collider_csv)
    s.update({"treatment": "a", "outcome": "b"})
    panel = w.controls
    assert panel.treatment_box.currentText() == "a" and panel.outcome_box.currentText() == "b"
    # conditioning on the collider c opens a → c ← b (common practice, Pearl 1995)
    assert s.set_planned(["c"])
    assert "not valid" in panel.verdict.text()
    assert w.canvas.path_pairs == {frozenset("ac"), frozenset("bc")}
    assert panel.planned_edit.text() == "c"


def test_node_context_menu_sets_roles(window, collider_csv):
    w, s = window, window.session
    open_and_run(w, collider_csv)
    menu = w.canvas.build_context_menu(w.canvas.nodes["c"])
    next(a for a in menu.actions() if a.objectName() == "setTreatment").trigger()
    menu = w.canvas.build_context_menu(w.canvas.nodes["d"])
    next(a for a in menu.actions() if a.objectName() == "setOutcome").trigger()
    s.clear_selection()
    menu = w.canvas.build_context_menu(w.canvas.nodes["e"])
    next(a for a in menu.actions() if a.objectName() == "togglePlanned").trigger()
    assert (s.treatment, s.outcome, s.planned) == ("c", "d", ("e",))


def test_not_amenable_is_said_and_highlighted(window, chain_csv):
    w, s = window, window.session
    open_and_run(w, chain_csv)
    s.update({"treatment": "a", "outcome": "c"})
    assert "Not identifiable" in w.controls.status.text()
    assert w.canvas.path_pairs == {frozenset("ab"), frozenset("bc")}
    assert w.controls.sets.count() == 0


def test_bad_planned_set_is_one_line_and_changes_nothing(window, collider_csv):
    w, s = window, window.session
    open_and_run(w, collider_csv)
    s.update({"treatment": "c", "outcome": "d"})
    w.controls.planned_edit.setText("a, nope")
    w.controls.check_button.click()
    assert s.planned == ()
    assert w.controls.planned_edit.text() == ""
    assert "'nope' is not a variable" in s.notifications.history[-1].message
    assert not s.set_planned(["c"])  # the treatment
    assert "contains the treatment 'c'" in s.notifications.history[-1].message


def test_roles_are_stored_in_the_session(window, collider_csv, tmp_path, qtbot):
    w, s = window, window.session
    open_and_run(w, collider_csv)
    s.update({"treatment": "c", "outcome": "d", "planned": ("e",)})
    assert s.save_session(tmp_path / "roles.edgewise")
    from gui._session import Session
    again = Session()
    assert again.open_session(tmp_path / "roles.edgewise")
    assert (again.treatment, again.outcome, again.planned) == ("c", "d", ("e",))
    assert again.controls is not None and again.planned_verdict.valid
