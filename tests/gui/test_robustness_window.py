"""The window's sweep and resampling: toolbar actions, the Survival and Support panels, the
unrelated rule in the toolbar, on the worker thread with Stop, stored in the session file.
The session-model part needs no Qt (first tests)."""

import pytest

from discovery import SupportResult, SweepResult, discover
from gui._session import Session


def _open(session, csv):
    assert session.open_data(csv)
    return session


# -- the session model (no Qt) ---------------------------------------------------------------

def test_session_sweep_equals_the_library_and_is_saved(collider_csv, tmp_path):
    s = _open(Session(), collider_csv)
    assert s.run_analysis_inline("sweep", alphas=[0.01, 0.05, 0.2])
    assert isinstance(s.sweep, SweepResult) and s.status == "done"
    for alpha, rung in zip(s.sweep.alphas, s.sweep.results):  # each rung = a fresh search
        fresh = discover(s.dataset.frame[list(s.included)], alpha=alpha)
        assert {(e.source, e.target, e.kind) for e in rung.edges} == \
            {(e.source, e.target, e.kind) for e in fresh.edges}
    assert s.run_analysis_inline("support", resamples=6, seed=3, cutoff=0.6)
    assert isinstance(s.support, SupportResult) and s.support.seed == 3
    assert s.save_session(tmp_path / "w.edgewise")
    t = Session()
    assert t.open_session(tmp_path / "w.edgewise")
    assert t.sweep.to_dict() == s.sweep.to_dict()
    assert t.support.to_dict() == s.support.to_dict()
    assert _open(t, collider_csv) and t.sweep is None and t.support is None  # new data


def test_session_sweep_and_resample_follow_the_hidden_causes_toggle(collider_csv):
    # with Hidden causes ticked, each rung and each resample is the hidden-causes search
    # (the library's sweep with hidden_causes=True gives the same rungs)
    from discovery import sweep
    s = _open(Session(), collider_csv)
    assert s.set_setting("hidden_causes", True)
    assert s.run_analysis_inline("sweep", alphas=[0.01, 0.2])
    assert all(r.settings.hidden_causes for r in s.sweep.results)
    library = sweep(s.dataset.frame[list(s.included)], alphas=[0.01, 0.2], hidden_causes=True)
    assert [[e.arrow() for e in r.edges] for r in s.sweep.results] == \
        [[e.arrow() for e in r.edges] for r in library.results]
    assert s.run_analysis_inline("support", resamples=4, seed=3)
    assert s.support.settings["hidden_causes"] is True
    assert all(p.marks_at_a for p in s.support.pairs if p.contested < p.adjacent)


def test_session_unrelated_rule_reaches_the_search(collider_csv):
    s = _open(Session(), collider_csv)
    assert not s.set_unrelated("equivalence", 1.5)  # refused with the engine's line
    assert s.notifications.history[-1].message.startswith("The 'margin' parameter")
    assert s.set_unrelated("equivalence", 0.05)
    assert s.run_inline()
    assert s.result.settings.unrelated == "equivalence" and s.result.settings.margin == 0.05


def test_session_analysis_bad_input_is_one_line(collider_csv):
    s = _open(Session(), collider_csv)
    assert not s.run_analysis_inline("sweep", alphas=[0.1, 0.01])
    assert s.status == "failed" and s.sweep is None
    assert "strictly increasing" in s.notifications.history[-1].message
    assert not s.run_analysis_inline("support", resamples=0)
    assert "at least 1" in s.notifications.history[-1].message


# -- the window ------------------------------------------------------------------------------

pytest.importorskip("pytestqt")

RUN_TIMEOUT = 120_000


@pytest.fixture
def window(window):
    window.resize(1300, 900)
    return window


def _wait(qtbot, w):
    qtbot.waitUntil(lambda: w.session.status not in ("running", "stopping"),
                    timeout=RUN_TIMEOUT)


def test_sweep_button_fills_the_survival_panel_and_a_click_selects(qtbot, window,
                                                                   collider_csv):
    from PySide6.QtCore import QPoint, Qt
    from PySide6.QtWidgets import QWidget
    assert window.open_path(collider_csv)
    button = window.toolbar.findChild(QWidget, "sweepButton")
    qtbot.mouseClick(button, Qt.LeftButton)
    _wait(qtbot, window)
    record = window.session.sweep
    assert record is not None and len(record.alphas) == 12
    chart = window.survival.chart
    assert chart.record is record and chart.current == window.session.settings.alpha
    assert "12 rungs" in window.survival.summary.text()
    window.survival_dock.raise_()
    qtbot.waitExposed(chart)
    first = record.edges[0]
    qtbot.mouseClick(chart, Qt.LeftButton, pos=QPoint(chart.width() // 2, 26 + 10))
    assert set(window.session.selection) == {first.a, first.b}
    assert chart.selected == frozenset((first.a, first.b))


def test_resample_sets_edge_widths_and_the_cutoff_moves_the_consensus(qtbot, window,
                                                                       collider_csv):
    from PySide6.QtCore import Qt
    from PySide6.QtWidgets import QWidget

    from gui._qt.canvas import support_weight
    assert window.open_path(collider_csv)
    assert window.run()
    _wait(qtbot, window)
    panel = window.support_panel
    panel.resamples.setValue(8)
    panel.seed.setValue(5)
    qtbot.mouseClick(window.toolbar.findChild(QWidget, "resampleButton"), Qt.LeftButton)
    _wait(qtbot, window)
    record = window.session.support
    assert record.resamples == 8 and record.seed == 5
    assert panel.chart.record is record
    edge = window.session.result.edges[0]
    share = record.pair(edge.source, edge.target).adjacent
    assert support_weight(window.session, edge.source, edge.target) == \
        pytest.approx(0.5 + 1.5 * share)
    panel.cutoff.setValue(1.0)
    assert window.session.support.cutoff == 1.0
    assert len(window.session.support.consensus) == sum(p.adjacent >= 1.0
                                                        for p in record.pairs)


def test_unrelated_rule_in_the_toolbar_drives_the_settings_and_back(qtbot, window,
                                                                     collider_csv):
    assert window.open_path(collider_csv)
    assert not window.margin_box.isEnabled()
    window.unrelated_choice.setCurrentIndex(window.unrelated_choice.findData("equivalence"))
    assert window.session.settings.unrelated == "equivalence"
    assert window.margin_box.isEnabled()
    window.margin_box.setValue(0.1)
    assert window.session.settings.margin == pytest.approx(0.1)
    window.session.set_unrelated("significance")  # model → widgets, without an echo
    assert window.unrelated_choice.currentData() == "significance"
    assert window.session.settings.unrelated == "significance"


def test_a_sweep_can_be_stopped(qtbot, window, tmp_path):
    import numpy as np
    import pandas as pd
    rng = np.random.default_rng(0)
    x = rng.standard_normal((3000, 40))
    x[:, 1:] += 0.5 * x[:, :-1]
    path = tmp_path / "wide.csv"
    pd.DataFrame(x, columns=[f"v{i:02d}" for i in range(40)]).to_csv(path, index=False)
    assert window.open_path(path)
    assert window.runner.start_analysis("sweep", alphas=list(np.geomspace(1e-6, 0.5, 40)))
    qtbot.waitUntil(lambda: window.session.status == "running", timeout=RUN_TIMEOUT)
    assert window.stop()
    _wait(qtbot, window)
    assert window.session.status == "stopped" and window.session.sweep is None


def test_inspector_reads_equivalence_p_values_the_right_way(qtbot, window, collider_csv):
    assert window.open_path(collider_csv)
    window.session.set_unrelated("equivalence", 0.1)
    assert window.run()
    _wait(qtbot, window)
    result = window.session.result
    removed = next(r for r in result.removed if r.by == "test")
    window.session.select_pair(removed.a, removed.b)
    text = window.inspector.body.text()
    assert "shown unrelated" in text and "within ±0.1" in text
    verdicts = {window.inspector.tests.item(i, 2).text()
                for i in range(window.inspector.tests.rowCount())}
    assert "within margin" in verdicts
