"""Speed of the window, measured offscreen (called by ``edgewise bench``; runnable alone).

- ``layout_paint_100x300_s``: force-directed layout, building the canvas and its first paint
  for a diagram of 100 variables and 300 edges (target: under 1 s);
- ``rerun_after_edit_s``: on the bundled example, a search after one knowledge edit, with the
  session's p-value cache warm (target: under 0.2 s); ``rerun_after_edit_window_s`` is the
  same measured in the window, from the edit to the new diagram drawn (worker thread
  included);
- ``heartbeat_max_gap_ms``: the longest pause of a 20 ms timer on the GUI thread while a
  50-variable search runs on the worker thread (target: under 200 ms);
- ``stop_latency_s``: the longest time from Stop to the run reported stopped, on a search
  that would run for minutes (target: under 1 s).

Each figure is the best of a few repeats (the machine is shared).

Run alone: ``python tests/benchmarks/bench_gui.py``.
"""

from __future__ import annotations

import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))
if not os.environ.get("DISPLAY") and not os.environ.get("WAYLAND_DISPLAY"):
    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

__all__ = ["gui_benchmarks"]


def _app():
    import gui._qt  # noqa: F401  (binding guard)
    from PySide6.QtWidgets import QApplication
    return QApplication.instance() or QApplication(sys.argv[:1])


def _wait(app, condition, timeout=300.0):
    from PySide6.QtCore import QEventLoop, QTimer
    end = time.perf_counter() + timeout
    loop = QEventLoop()
    while not condition():
        if time.perf_counter() > end:
            raise TimeoutError("benchmark step did not finish")
        QTimer.singleShot(5, loop.quit)
        loop.exec()


def _big_result(n=100, m=300, seed=4):
    import networkx as nx
    from discovery import Edge, Knowledge, SearchResult, SearchSettings
    g = nx.gnm_random_graph(n, m, seed=seed)
    names = [f"var_{i:03d}" for i in range(n)]
    kinds = ("directed", "directed", "undirected", "contested")
    edges = sorted((Edge(names[a], names[b], kinds[(a + b) % 4], "", "", 0.01, 3)
                    for a, b in g.edges), key=lambda e: (e.source, e.target))
    return SearchResult(variables=tuple(names), settings=SearchSettings(),
                        knowledge=Knowledge(), edges=tuple(edges), removed=(), tests=())


def bench_layout_paint(repeat=3) -> float:
    from gui import Session
    from gui._layout import arrange
    from gui._qt.canvas import GraphCanvas
    app = _app()
    result = _big_result()
    best = float("inf")
    for _ in range(repeat):
        session = Session()
        canvas = GraphCanvas(session)
        canvas.resize(1200, 800)
        canvas.show()
        t = time.perf_counter()
        positions = arrange(result.variables, [(e.source, e.target) for e in result.edges])
        session.update({"result": result, "positions": positions})
        canvas.viewport().grab()  # forces the first paint of every visible item
        best = min(best, time.perf_counter() - t)
        assert len(canvas.edges) == 300
        canvas.close()
        canvas.deleteLater()

    return best


def _example_data() -> Path:
    """The greenhouse example's table, copied alone to a temporary folder: beside its
    knowledge file the window would ask (in a modal dialog) whether to load it, and the
    benchmark would wait for an answer that never comes."""
    data = ROOT / "example_sets" / "greenhouse" / "data.csv"
    if data.exists():
        path = Path(tempfile.mkdtemp()) / "greenhouse.csv"
        shutil.copyfile(data, path)
        return path
    import numpy as np
    import pandas as pd
    rng = np.random.default_rng(1)
    a, b = rng.normal(size=2000), rng.normal(size=2000)
    c = a + b + rng.normal(size=2000)
    path = Path(tempfile.mkdtemp()) / "example.csv"
    pd.DataFrame({"a": a, "b": b, "c": c, "d": c + rng.normal(size=2000)}).to_csv(path,
                                                                                  index=False)
    return path


def bench_rerun(repeat=5) -> float:
    from gui import Session
    session = Session()
    assert session.open_data(_example_data())
    session.run_inline()
    edges = list(session.result.edges)
    best = float("inf")
    for i in range(repeat):
        e = edges[i % len(edges)]
        session.forbid(e.source, e.target)
        t = time.perf_counter()
        session.run_inline()
        best = min(best, time.perf_counter() - t)
        assert session.result.edge(e.source, e.target) is None
        session.undo()
    return best


def bench_rerun_window(repeat=5) -> float:
    from PySide6.QtCore import QSettings
    from gui._qt.window import MainWindow
    app = _app()
    folder = tempfile.mkdtemp()
    w = MainWindow(settings=QSettings(os.path.join(folder, "s.ini"), QSettings.IniFormat))
    w.ask_before_closing = False
    w.act_auto.setChecked(False)
    w.show()
    assert w.open_path(_example_data())
    w.run()
    _wait(app, lambda: w.session.status == "done")
    edges = list(w.session.result.edges)
    best = float("inf")
    for i in range(repeat):
        e = edges[i % len(edges)]
        t = time.perf_counter()
        w.session.forbid(e.source, e.target)
        w.run()
        _wait(app, lambda: w.session.status == "done"
              and frozenset((e.source, e.target)) not in w.canvas.edges)
        w.canvas.viewport().grab()
        best = min(best, time.perf_counter() - t)
        w.session.undo()
    w.close()
    return best


def bench_heartbeat() -> float:
    from PySide6.QtCore import QSettings, QTimer
    from discovery.simulate import random_dag, sample_linear_gaussian
    from gui._qt.window import MainWindow
    app = _app()
    folder = tempfile.mkdtemp()
    data = Path(folder) / "fifty.csv"
    sample_linear_gaussian(random_dag(50, expected_degree=3.0, rng=11), 2000,
                           rng=11).to_csv(data, index=False)
    w = MainWindow(settings=QSettings(os.path.join(folder, "s.ini"), QSettings.IniFormat))
    w.ask_before_closing = False
    w.show()
    w.open_path(data)
    beats = []
    heart = QTimer()
    heart.setInterval(20)
    heart.timeout.connect(lambda: beats.append(time.perf_counter()))
    heart.start()
    _wait(app, lambda: len(beats) > 3)
    w.run()
    _wait(app, lambda: w.session.status == "done")
    start = len(beats)
    _wait(app, lambda: len(beats) > start + 3)
    heart.stop()
    w.close()
    return max(b - a for a, b in zip(beats, beats[1:])) * 1000


def bench_stop(repeat=3) -> float:
    """Seconds from Stop to the window reporting the run stopped (worst of a few)."""
    import numpy as np
    import pandas as pd
    from PySide6.QtCore import QSettings
    from gui._qt.window import MainWindow
    app = _app()
    folder = tempfile.mkdtemp()
    rng = np.random.default_rng(5)
    factor = rng.normal(size=300)
    data = Path(folder) / "latent.csv"
    pd.DataFrame({f"v{i:02d}": 0.8 * factor + rng.normal(scale=0.6, size=300)
                  for i in range(40)}).to_csv(data, index=False)
    w = MainWindow(settings=QSettings(os.path.join(folder, "s.ini"), QSettings.IniFormat))
    w.ask_before_closing = False
    w.show()
    w.open_path(data)
    worst = 0.0
    for _ in range(repeat):
        w.run()
        _wait(app, lambda: (w.session.progress or {}).get("level", 0) >= 3)
        t = time.perf_counter()
        w.stop()
        _wait(app, lambda: w.session.status == "stopped")
        worst = max(worst, time.perf_counter() - t)
        _wait(app, lambda: not w.runner.busy)
    w.close()
    return worst


def gui_benchmarks() -> dict:
    """Run the window's benchmarks; return ``{name: value}`` (seconds or milliseconds)."""
    return {
        "layout_paint_100x300_s": round(bench_layout_paint(), 4),
        "rerun_after_edit_s": round(bench_rerun(), 4),
        "rerun_after_edit_window_s": round(bench_rerun_window(), 4),
        "heartbeat_max_gap_ms": round(bench_heartbeat(), 1),
        "stop_latency_s": round(bench_stop(), 3),
    }


if __name__ == "__main__":
    for name, value in gui_benchmarks().items():
        print(f"{name}: {value}")
