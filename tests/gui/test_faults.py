"""Faults during work in the window: an exception raised inside the search on the worker
thread reaches the user as one message and Run works again; Stop never leaves a half result
marked final. The standard is the project's own promise (README, "Bad input"; DEVELOPERS.md,
"Errors are one line"): one line, no traceback, nothing lost.
"""

from __future__ import annotations

import json

import pytest

pytest.importorskip("pytestqt")

import gui._qt  # noqa: E402,F401
from PySide6.QtCore import QSettings, Qt  # noqa: E402
from PySide6.QtWidgets import QMessageBox  # noqa: E402

import discovery  # noqa: E402
from discovery.independence import PValueCache  # noqa: E402
from discovery.independence._fisher_z import FisherZ  # noqa: E402
from gui._qt.window import MainWindow  # noqa: E402
from gui._session import Session  # noqa: E402
from gui_data import RUN_TIMEOUT  # noqa: E402

def wait_idle(qtbot, w):
    qtbot.waitUntil(lambda: w.session.status not in ("running", "stopping"),
                    timeout=RUN_TIMEOUT)
    qtbot.waitUntil(lambda: not w.runner.busy, timeout=RUN_TIMEOUT)


def _planted_discover(*args, **kwargs):
    raise RuntimeError("planted fault in the search")


def _planted_batch(self, idx):
    raise ZeroDivisionError("planted fault in a test batch")


@pytest.mark.parametrize("target, name, fault, what", [
    (discovery, "discover", _planted_discover, "RuntimeError: planted fault in the search"),
    (FisherZ, "_batch_array", _planted_batch, "ZeroDivisionError: planted fault in a test"),
    (FisherZ, "_batch_array", lambda self, idx: (_ for _ in ()).throw(MemoryError()),
     "ran out of memory; untick variables in the Variables panel or set the Depth box"),
], ids=["discover-raises", "batch-raises", "out-of-memory"])
def test_an_exception_on_the_worker_thread_is_one_message_and_run_works_again(
        target, name, fault, what, qtbot, window, dialogs, collider_csv, monkeypatch, capfd):
    s = window.session
    assert window.open_path(collider_csv)
    window.run()
    wait_idle(qtbot, window)
    previous = s.result
    assert previous is not None
    s.set_setting("alpha", 0.01)
    object.__setattr__(s, "cache", PValueCache())  # empty: the next run computes its tests
    capfd.readouterr()
    with monkeypatch.context() as patch:
        patch.setattr(target, name, fault)
        qtbot.mouseClick(window.run_button, Qt.LeftButton)
        wait_idle(qtbot, window)
        qtbot.waitUntil(lambda: len(dialogs) > 0, timeout=5_000)
    assert s.status == "failed"
    assert len(dialogs) == 1 and dialogs[0][0] == "Run"
    message = dialogs[0][1]
    assert what in message and "\n" not in message, message
    assert "Traceback" not in capfd.readouterr().err
    assert s.result is previous  # the previous complete result stays, marked stale
    assert s.stale and window.canvas.banner.isVisibleTo(window.canvas)
    assert window.run_button.isEnabled()
    # the fault is gone: Run works again and gives a current result
    qtbot.mouseClick(window.run_button, Qt.LeftButton)
    wait_idle(qtbot, window)
    assert s.status == "done" and s.result is not previous and not s.stale
    assert s.result.settings.alpha == 0.01
    assert len(dialogs) == 1


def test_stop_leaves_the_previous_result_everywhere_and_nothing_marked_current(
        qtbot, window, latent_csv, tmp_path):
    s = window.session
    assert window.open_path(latent_csv)
    s.set_setting("max_depth", 0)
    window.run()
    wait_idle(qtbot, window)
    previous = s.result
    assert previous is not None and not s.stale
    s.set_setting("max_depth", None)
    window.run()
    qtbot.waitUntil(lambda: (s.progress or {}).get("level", 0) >= 2, timeout=RUN_TIMEOUT)
    qtbot.mouseClick(window.stop_button, Qt.LeftButton)
    wait_idle(qtbot, window)
    assert s.status == "stopped"
    assert window.status_text.text().startswith("Stopped")
    # the result is the previous, complete one, and it is not passed off as current
    assert s.result is previous and s.result.settings.max_depth == 0
    assert s.stale and window.canvas.banner.isVisibleTo(window.canvas)
    assert {e.pair for e in previous.edges} == set(window.canvas.edges)
    # what is saved and autosaved is that previous result, nothing from the stopped run
    assert s.save_session(tmp_path / "after_stop.edgewise")
    saved = json.loads((tmp_path / "after_stop.edgewise").read_text(encoding="utf-8"))
    assert saved["result"] == json.loads(json.dumps(previous.to_dict()))
    assert saved["result_inputs"]["settings"]["max_depth"] == 0
    t = Session()
    assert t.open_session(tmp_path / "after_stop.edgewise")
    assert t.stale  # reopened, it is still the result of other inputs than the current ones


def test_a_result_that_arrives_after_stop_is_thrown_away(collider_csv):
    # the race: the search finished just as Stop was pressed
    s = Session()
    assert s.open_data(collider_csv)
    assert s.run_inline()
    previous = s.result
    s.set_setting("alpha", 0.2)
    job = s.start_run()
    result, seen = job.run()  # complete, but...
    assert s.stop_run()  # ...Stop came first
    assert not s.finish_run(job, result, seen)
    assert s.result is previous and s.status == "stopped" and s.stale
    assert "no result from it" in s.log[-1]
    # a failure reported by a stopped run is a stop, not an error
    job = s.start_run()
    s.stop_run()
    s.fail_run(job, "late failure")
    assert s.status == "stopped" and s.result is previous


def test_a_search_too_large_for_memory_is_refused_in_words_of_the_window(
        qtbot, window, dialogs, collider_csv, monkeypatch):
    # the engine's memory estimate (discovery/resources.py) refuses before allocating; the
    # window tells the user which control chooses fewer columns
    import discovery.resources
    s = window.session
    assert window.open_path(collider_csv)
    monkeypatch.setattr(discovery.resources, "available_memory", lambda: 1000)
    window.run()
    wait_idle(qtbot, window)
    qtbot.waitUntil(lambda: len(dialogs) > 0, timeout=5_000)
    assert s.status == "failed" and s.result is None
    (title, message), = dialogs
    assert title == "Run" and "\n" not in message
    assert "need about" in message and "of memory" in message
    assert "choose fewer columns (untick them in the Variables panel)" in message
    assert "--" not in message
    monkeypatch.undo()
    window.run()
    wait_idle(qtbot, window)
    assert s.status == "done" and s.result is not None
