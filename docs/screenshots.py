"""Render screenshots of the window's main states into docs/images/ (offscreen, no display).

Run from the repository root::

    python docs/screenshots.py

It opens the bundled greenhouse example (invented data), runs searches, adds knowledge and
captures each state as a PNG used by docs/window.md. Settings and autosave go to a temporary
folder, so the user's own Edgewise settings are not touched.
"""

from __future__ import annotations

import os
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import gui._qt  # noqa: E402,F401  (binding guard before any Qt work)
from PySide6.QtCore import QEventLoop, QSettings, QTimer  # noqa: E402
from PySide6.QtWidgets import QApplication, QMessageBox  # noqa: E402

OUT = ROOT / "docs" / "images"
EXAMPLE = ROOT / "example_sets" / "greenhouse"
SIZE = (1400, 880)


def pump(app, ms=60):
    loop = QEventLoop()
    QTimer.singleShot(ms, loop.quit)
    loop.exec()


def wait(app, condition, timeout=120.0):
    end = time.perf_counter() + timeout
    while not condition():
        if time.perf_counter() > end:
            raise TimeoutError("state not reached")
        pump(app, 20)


def shot(widget, name):
    OUT.mkdir(parents=True, exist_ok=True)
    path = OUT / name
    widget.grab().save(str(path))
    print(f"wrote {path.relative_to(ROOT)}")


def main() -> int:
    from gui._qt.window import MainWindow

    app = QApplication.instance() or QApplication(sys.argv[:1])
    folder = Path(tempfile.mkdtemp())
    errors = []
    QMessageBox.warning = staticmethod(lambda parent, title, text, *a: errors.append(
        (title, text)))
    questions = []
    answers = {"yes": False}

    def question(parent, title, text, *a):
        questions.append((title, text))
        return QMessageBox.Yes if answers["yes"] else QMessageBox.No
    QMessageBox.question = staticmethod(question)

    w = MainWindow(settings=QSettings(str(folder / "s.ini"), QSettings.IniFormat),
                   autosave_path=folder / "autosave.edgewise")
    w.ask_before_closing = False
    w.act_auto.setChecked(False)
    w.resize(*SIZE)
    w.show()
    pump(app)
    shot(w, "01-start.png")

    w.open_path(EXAMPLE / "data.csv")
    pump(app)
    shot(w, "02-data-open.png")
    if questions:  # the offer to load the knowledge file beside the example's data
        box = QMessageBox(QMessageBox.Question, *questions[-1],
                          QMessageBox.Yes | QMessageBox.No, w)
        box.setObjectName("knowledgeOffer")
        box.show()
        pump(app)
        shot(box, "11-knowledge-offer.png")
        box.close()

    w.run()
    wait(app, lambda: w.session.status == "done")
    w.canvas.request_fit()
    pump(app)
    shot(w, "03-result.png")

    s = w.session
    contested = next((e for e in s.result.edges if e.kind == "contested"), s.result.edges[0])
    s.select_pair(contested.source, contested.target)
    pump(app)
    shot(w, "04-evidence.png")

    # the Controls panel on the diagram without knowledge: a pair whose effect no control
    # set can identify in the whole class (an undirected edge out of the treatment)
    from discovery import control_sets
    w.controls_dock.raise_()
    names = s.result.variables
    bad = next((a for a in (control_sets(s.result, x, y) for x in names for y in names
                            if x != y) if not a.amenable), None)
    if bad is not None:
        s.clear_selection()
        s.update({"treatment": bad.treatment, "outcome": bad.outcome, "planned": ()})
        pump(app, 200)
        shot(w, "12-controls-not-identifiable.png")
        s.update({"treatment": None, "outcome": None})
    w.inspector_dock.raise_()

    s.load_knowledge(EXAMPLE / "knowledge.toml")
    w.run()
    wait(app, lambda: w.session.status == "done")
    w.canvas.request_fit()
    s.select_pair("humidity", "fungal_spots")
    pump(app)
    shot(w, "05-knowledge-and-stages.png")

    # the Controls panel: a treatment, an outcome, a planned set and the effect range
    s.clear_selection()
    w.controls_dock.raise_()
    pairs = [(x, y) for y in ("fruit_yield", "leaf_area") for x in s.result.variables
             if x != y]
    answers = [control_sets(s.result, x, y) for x, y in pairs]
    good = next(a for a in answers if a.optimal and a.causal_nodes and len(a.minimal) > 1)
    s.update({"treatment": good.treatment, "outcome": good.outcome,
              "planned": tuple(good.minimal[-1])})
    pump(app, 200)
    shot(w, "11-controls.png")
    s.update({"treatment": None, "outcome": None})
    w.inspector_dock.raise_()
    # which edges survive: a sweep over α and 40 bootstrap resamples, each in its panel
    w.runner.start_analysis("sweep")
    wait(app, lambda: w.session.status == "done")
    s.select_pair("humidity", "fungal_spots")
    pump(app)
    shot(w, "11-survival.png")
    w.support_panel.resamples.setValue(40)
    w.runner.start_analysis("support", **w.support_panel.options())
    wait(app, lambda: w.session.status == "done")
    pump(app)
    shot(w, "12-support.png")
    s.update({"sweep": None, "support": None})

    s.clear_selection()
    s.forbid("air_temp", "humidity")
    pump(app)
    shot(w, "06-stale-after-edit.png")

    # a long search to catch the progress bar: many variables driven by one hidden factor
    import numpy as np
    import pandas as pd
    rng = np.random.default_rng(5)
    factor = rng.normal(size=300)
    pd.DataFrame({f"sensor_{i:02d}": 0.8 * factor + rng.normal(scale=0.6, size=300)
                  for i in range(30)}).to_csv(folder / "sensors.csv", index=False)
    w.open_path(folder / "sensors.csv")
    w.run()
    wait(app, lambda: (s.progress or {}).get("level", 0) >= 2 and (s.progress or {}).get(
        "done", 0) > 0)
    pump(app, 300)
    shot(w, "07-running.png")
    w.stop()
    wait(app, lambda: s.status == "stopped")
    pump(app)
    shot(w, "08-stopped.png")

    bad = folder / "survey.csv"
    bad.write_text("age,income,score\n34,5200,7\n41,6100\n", encoding="utf-8")
    w.open_path(bad)
    wait(app, lambda: errors)
    box = QMessageBox(QMessageBox.Warning, errors[-1][0], errors[-1][1], QMessageBox.Ok, w)
    box.setObjectName("errorDialog")
    box.show()
    pump(app)
    shot(box, "09-data-error.png")
    box.close()

    dialog = w.show_assumptions()
    pump(app)
    shot(dialog, "10-assumptions.png")
    dialog.close()

    # a session whose data changed since it was saved: stale, with its banner
    import shutil
    copy = folder / "greenhouse"
    copy.mkdir()
    shutil.copy(EXAMPLE / "data.csv", copy / "data.csv")
    w.open_path(copy / "data.csv")
    w.run()
    wait(app, lambda: s.status == "done")
    s.save_session(copy / "greenhouse.edgewise")
    frame = pd.read_csv(copy / "data.csv")
    frame.iloc[: len(frame) // 2].to_csv(copy / "data.csv", index=False)  # a changed export
    w.open_path(copy / "greenhouse.edgewise")
    pump(app, 200)
    shot(w, "12-data-changed.png")

    # 60 variables at the fit zoom, then one found by name (Ctrl+F) and its neighbourhood
    sys.path.insert(0, str(ROOT / "tests" / "gui"))
    from gui_data import sixty_frame
    sixty_frame().to_csv(folder / "water_network.csv", index=False)
    w.open_path(folder / "water_network.csv")
    w.run()
    wait(app, lambda: s.status == "done")
    pump(app, 200)
    seen = w.canvas.readability()
    print("60 variables at fit zoom: " + ", ".join(
        f"{k} {v:.2f}" if isinstance(v, float) else f"{k} {v}" for k, v in seen.items()))
    shot(w, "13-sixty-variables.png")
    w.canvas.show_find()
    w.canvas.find_box.setText("pressure_3")
    w.canvas._find_entered()
    pump(app, 200)
    shot(w, "14-find-and-focus.png")
    w.canvas.find_box.hide()
    w.canvas.clear_focus()
    report_shots(app, w)
    hidden_causes_shot(app, w)
    w.close()
    return 0


def hidden_causes_shot(app, w):
    """The invented office example searched with hidden causes allowed, its ↔ edge selected."""
    QMessageBox.question = staticmethod(lambda *a: QMessageBox.No)  # no knowledge offer
    w.open_path(ROOT / "example_sets" / "office_building" / "data.csv")
    w.hidden_toggle.setChecked(True)
    w.run()
    wait(app, lambda: w.session.status == "done")
    w.canvas.request_fit()
    both = next(e for e in w.session.result.edges if e.kind == "bidirected")
    w.session.select_pair(both.source, both.target)
    pump(app, 200)
    shot(w, "hidden-causes-window.png")
    w.hidden_toggle.setChecked(False)


def report_shots(app, w):
    """The export menu with its Report… entry (the window's way to `edgewise report`)."""
    w.export_menu.popup(w.export_button.mapToGlobal(w.export_button.rect().bottomLeft()))
    pump(app, 200)
    shot(w.export_menu, "11-export-and-report-menu.png")
    w.export_menu.close()


if __name__ == "__main__":
    raise SystemExit(main())
