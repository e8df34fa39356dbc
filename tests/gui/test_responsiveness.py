"""The event loop keeps turning while a search runs (the window never freezes).

A heartbeat timer ticks every 20 ms during a search on a 50-variable dataset; the longest gap
between ticks must stay under 200 ms (the issue's limit; about the delay at which a pause
is felt, common practice, no source). Timing on a shared machine is noisy, so this check is
marked slow and kept out of the default run; the benchmark records the figure too.
"""

import time

import pytest

pytest.importorskip("pytestqt")

import gui._qt  # noqa: E402,F401
from PySide6.QtCore import QSettings, QTimer  # noqa: E402

from discovery.simulate import random_dag, sample_linear_gaussian  # noqa: E402
from gui._qt.window import MainWindow  # noqa: E402


@pytest.mark.slow
def test_event_loop_never_blocks_during_a_50_variable_run(qtbot, tmp_path):
    frame = sample_linear_gaussian(random_dag(50, expected_degree=3.0, rng=11), 2000, rng=11)
    data = tmp_path / "fifty.csv"
    frame.to_csv(data, index=False)
    w = MainWindow(settings=QSettings(str(tmp_path / "s.ini"), QSettings.IniFormat))
    w.ask_before_closing = False
    qtbot.addWidget(w)
    w.show()
    assert w.open_path(data)
    beats = []
    heart = QTimer()
    heart.setInterval(20)
    heart.timeout.connect(lambda: beats.append(time.perf_counter()))
    heart.start()
    qtbot.wait(100)
    assert w.run()
    qtbot.waitUntil(lambda: w.session.status == "done", timeout=300_000)
    qtbot.wait(100)  # the result has been drawn
    heart.stop()
    gaps = [b - a for a, b in zip(beats, beats[1:])]
    assert len(w.canvas.edges) == len(w.session.result.edges) > 0
    assert max(gaps) < 0.2, f"longest pause {max(gaps) * 1000:.0f} ms"
