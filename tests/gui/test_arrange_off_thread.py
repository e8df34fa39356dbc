"""Arrange on a dense diagram: the layout is computed off the GUI thread, so the window keeps
answering (the force-directed layout of 100 variables and 400 edges takes seconds on a shared
machine); only the latest request is applied, and never to a diagram that changed meanwhile.

No timing is asserted: the check is that a timer tick is processed by the event loop while
the layout is being computed, which cannot happen if the layout blocks the GUI thread.
"""

from __future__ import annotations

import threading

import networkx as nx
import pytest

pytest.importorskip("pytestqt")

import gui._qt  # noqa: E402,F401
from PySide6.QtCore import QSettings, QTimer  # noqa: E402

from discovery.result import SearchResult  # noqa: E402
from gui._qt.window import MainWindow  # noqa: E402
from gui._session import ArrangePlan, Session  # noqa: E402


def dense_result(n=100, m=400, seed=1) -> SearchResult:
    """A result document of a random graph (networkx's G(n, m)); invented, for layout only."""
    graph = nx.gnm_random_graph(n, m, seed=seed)
    names = [f"reading_{i:03d}" for i in range(n)]
    return SearchResult.from_dict({
        "format": "edgewise-result", "version": 1, "variables": names, "settings": {},
        "knowledge": {}, "removed": [], "evidence": {"tests": []},
        "edges": [{"from": names[a], "to": names[b], "kind": "undirected"}
                  for a, b in graph.edges]}, source="dense")


@pytest.fixture
def window(qtbot, tmp_path):
    w = MainWindow(settings=QSettings(str(tmp_path / "s.ini"), QSettings.IniFormat))
    w.ask_before_closing = False
    w.act_auto.setChecked(False)
    qtbot.addWidget(w)
    w.show()
    yield w
    w.arranger.wait()
    w.runner.shutdown()


def test_the_event_loop_turns_while_a_dense_diagram_is_arranged(qtbot, window, monkeypatch):
    s = window.session
    s.update({"result": dense_result()})
    s.arrange("layered")
    assert len(s.positions) == 100 and len(s.result.edges) == 400
    before = dict(s.positions)
    layouts = s.layouts

    ticks = []
    ticked = threading.Event()
    timer = QTimer()
    timer.setInterval(5)
    timer.timeout.connect(lambda: (ticks.append(1), ticked.set()))
    seen = {}
    real_compute = ArrangePlan.compute

    def compute(plan):
        seen["thread"] = threading.current_thread()
        ticked.clear()
        # the GUI thread must process a tick while this layout is being computed
        seen["tick_while_arranging"] = ticked.wait(60)
        start = len(ticks)
        positions = real_compute(plan)  # the real, dense force-directed layout
        seen["ticks_during_layout"] = len(ticks) - start
        return positions

    monkeypatch.setattr(ArrangePlan, "compute", compute)
    timer.start()
    window.act_arrange_force.trigger()
    assert s.positions == before  # nothing is applied before the layout is done
    qtbot.waitUntil(lambda: s.layouts > layouts, timeout=120_000)
    timer.stop()
    assert seen["thread"] is not threading.main_thread()
    assert seen["tick_while_arranging"]
    assert seen["ticks_during_layout"] > 0
    assert set(s.positions) == set(before) and s.positions != before
    assert s.history[0] == "Arrange force-directed"  # one undoable step
    assert s.undo() and s.positions == before


def test_only_the_latest_arrange_is_applied_and_never_to_a_changed_diagram():
    s = Session()
    s.update({"result": dense_result(12, 20)})
    first = s.plan_arrange("force")
    second = s.plan_arrange("layered")
    assert not s.apply_arrange(first, first.compute())  # a later request came
    assert s.apply_arrange(second, second.compute())
    assert s.history[0] == "Arrange in layers"
    third = s.plan_arrange("force")
    s.update({"result": dense_result(12, 25, seed=2)})  # the diagram changed meanwhile
    assert not s.apply_arrange(third, third.compute())
    assert s.history[0] == "Arrange in layers"
    assert s.plan_arrange("sideways") is None  # an unknown style: one message, no plan


def test_the_canvas_menu_arranges_through_the_window(qtbot, window):
    s = window.session
    s.update({"result": dense_result(12, 20)})
    layouts = s.layouts
    menu = window.canvas.build_context_menu(None)
    next(a for a in menu.actions() if a.text() == "Arrange force-directed").trigger()
    qtbot.waitUntil(lambda: s.layouts > layouts, timeout=60_000)
    assert s.history[0] == "Arrange force-directed"
