"""The main window: toolbar, Variables and stages on the left, the canvas in the centre, the
Inspector on the right, the run log below, progress in the status bar.

The window owns no state of its own beyond Qt's: everything lives in the session model, which
the panels observe. Widget signals call session methods; session events refresh widgets with
their signals blocked.
"""

from __future__ import annotations

import math
from pathlib import Path

from PySide6.QtCore import QSettings, QSize, Qt, QTimer
from PySide6.QtGui import QAction, QKeySequence
from PySide6.QtWidgets import (QApplication, QCheckBox, QComboBox, QDialog, QDialogButtonBox,
                               QDockWidget, QFileDialog, QHBoxLayout, QLabel, QLineEdit,
                               QMainWindow, QMessageBox, QPlainTextEdit, QProgressBar,
                               QPushButton, QSlider, QSpinBox, QToolBar, QToolButton,
                               QVBoxLayout, QWidget, QMenu)

from discovery.independence import TEST_NAMES
from discovery.result import ASSUMPTIONS
from discovery.settings import PARAMETERS

from .. import _session
from .._words import test_label
from . import export as _export
from . import robustness_actions, style
from .canvas import GraphCanvas
from .controls_panel import ControlsPanel
from .inspector import Inspector
from .panels import StagesEditor, VariablesPanel
from .style import signals_blocked
from .worker import ArrangeRunner, SearchRunner

#: The α slider spans this range on a log scale; the number box accepts anything the
#: constraint table allows (0 < α < 1).
ALPHA_SLIDER_RANGE = (1e-4, 0.5)
_SLIDER_STEPS = 400
_DATA_SUFFIXES = {".csv", ".tsv", ".tab", ".txt", ".parquet", ".pq"}
_RECENT_MAX = 8
#: Errors from these actions are shown in a dialog; others (inline edits) in the status bar.
_DIALOG_TITLES = {"Open data", "Open session", "Open result", "Run", "Load knowledge", "Save session",
                  "Save knowledge", "Export", "Knowledge", "Stages"}

SHORTCUTS = (
    ("Ctrl+O", "open a data table"), ("Ctrl+Shift+O", "open a session"),
    ("Ctrl+S", "save the session"), ("Ctrl+Shift+S", "save the session as…"),
    ("Ctrl+R or F5", "run the search"), ("Esc", "stop the search"),
    ("Ctrl+Z / Ctrl+Shift+Z", "undo / redo a knowledge edit or node move"),
    ("Ctrl+0", "fit the diagram to the view"), ("Ctrl++ / Ctrl+-", "zoom in / out"),
    ("Ctrl+L", "arrange again (View → Arrange as: layers or force-directed)"),
    ("Ctrl+F", "find a variable and focus on its neighbours (Esc ends the focus)"),
    ("Ctrl+K", "knowledge overlay on/off"), ("Ctrl+E", "export…"),
    ("L / F / Delete", "lock / forbid / clear the selected pair"),
    ("F1", "assumptions and cautions"),
)


def alpha_to_slider(alpha: float) -> int:
    lo, hi = (math.log10(v) for v in ALPHA_SLIDER_RANGE)
    a = min(max(alpha, ALPHA_SLIDER_RANGE[0]), ALPHA_SLIDER_RANGE[1])
    return round((math.log10(a) - lo) / (hi - lo) * _SLIDER_STEPS)


def slider_to_alpha(position: int) -> float:
    lo, hi = (math.log10(v) for v in ALPHA_SLIDER_RANGE)
    value = 10 ** (lo + (hi - lo) * position / _SLIDER_STEPS)
    return float(f"{value:.2g}")


#: Data file names that say nothing by themselves: the title adds their folder.
_GENERIC_STEMS = {"data", "table", "export", "dataset", "raw", "input"}


def _data_title(path) -> str:
    """The data file's name for the title; ``greenhouse/data.csv`` for a generic name."""
    path = Path(path)
    if path.stem.lower() in _GENERIC_STEMS and path.parent.name:
        return f"{path.parent.name}/{path.name}"
    return path.name


class AssumptionsDialog(QDialog):
    """The assumptions and cautions every result carries (DESIGN.md §2)."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setObjectName("assumptionsDialog")
        self.setWindowTitle("Assumptions and cautions")
        layout = QVBoxLayout(self)
        text = QLabel("<h3>Read the diagram as hypotheses</h3><ul>"
                      + "".join(f"<li style='margin-bottom:6px'>{a}</li>" for a in ASSUMPTIONS)
                      + "</ul>")
        text.setObjectName("assumptionsText")
        text.setWordWrap(True)
        text.setTextFormat(Qt.RichText)
        text.setMinimumWidth(460)
        layout.addWidget(text)
        buttons = QDialogButtonBox(QDialogButtonBox.Close)
        buttons.rejected.connect(self.reject)
        buttons.button(QDialogButtonBox.Close).setObjectName("assumptionsClose")
        layout.addWidget(buttons)


class MainWindow(QMainWindow):
    """The Edgewise window over one :class:`~gui._session.Session`.

    Parameters
    ----------
    session : Session, optional
        A new one by default.
    settings : QSettings, optional
        Where recent files and window state are kept (the user's Edgewise settings by
        default; tests pass a temporary file).
    autosave_path : path, optional
        Passed to a new session (ignored when ``session`` is given).
    """

    def __init__(self, session=None, *, settings: QSettings | None = None,
                 autosave_path=None):
        super().__init__()
        self.session = session or _session.Session(autosave_path=autosave_path)
        self.qsettings = settings or QSettings("Edgewise", "Edgewise")
        self.ask_before_closing = True
        self.setObjectName("mainWindow")
        self.setWindowTitle("Edgewise")
        self.setStyleSheet(style.STYLE_SHEET)
        self.setAcceptDrops(True)
        self.resize(QSize(1360, 860))
        self.runner = SearchRunner(self.session, self)
        self.arranger = ArrangeRunner(self.session, self)  # layouts off the GUI thread

        self.canvas = GraphCanvas(self.session)
        self.canvas.arrange = self.arrange
        self.canvas.setAcceptDrops(False)
        self.canvas.viewport().setAcceptDrops(False)
        self.setCentralWidget(self.canvas)
        self._build_actions()
        self._build_toolbar()
        self._build_docks()
        self._build_menus()
        self._build_status()
        robustness_actions.install(self)  # sweep, resample, unrelated rule; two panels

        self._auto_timer = QTimer(self)
        self._auto_timer.setSingleShot(True)
        self._auto_timer.setInterval(300)
        self._auto_timer.timeout.connect(self._auto_run)
        self._rerun_after_stop = False
        self._autosave_timer = QTimer(self)
        self._autosave_timer.setInterval(20_000)
        self._autosave_timer.timeout.connect(self.session.autosave)
        self._autosave_timer.start()
        self._elapsed_timer = QTimer(self)
        self._elapsed_timer.setInterval(100)
        self._elapsed_timer.timeout.connect(self._tick_elapsed)

        ev = self.session.events
        ev.settings.connect(self._on_settings)
        ev.status.connect(self._on_status)
        ev.progress.connect(self._on_progress)
        ev.history.connect(self._on_history)
        ev.log.connect(self._on_log)
        ev.overlay.connect(self._on_overlay)
        ev.selection.connect(self._on_selection)
        ev.session_path.connect(self._update_title)
        ev.session_path.connect(self._on_session_path)
        ev.dirty.connect(self._update_title)
        ev.data_path.connect(self._update_title)
        ev.dataset.connect(self._on_dataset)
        ev.result.connect(self._on_result)
        ev.result.connect(self._update_title)  # a result file opened without data
        for name in ("settings", "knowledge", "included"):
            getattr(ev, name).connect(self._inputs_changed)
        self.session.notifications.posted.connect(self._on_notification)

        self._on_settings(self.session.settings)
        self._on_status(self.session.status)
        self._on_history(self.session.history)
        self._on_log(self.session.log)
        self._on_overlay(self.session.overlay)
        self._on_selection(self.session.selection)
        self._on_dataset(self.session.dataset)
        self._update_title()
        self._rebuild_recent()
        self._restore_state()
        from . import report_action
        report_action.install(self)  # "Report…" in the export menu

    # ------------------------------------------------------------------------------ building
    def _action(self, name, text, slot, shortcut=None, tip=None, checkable=False):
        act = QAction(text, self)
        act.setObjectName(name)
        if shortcut:
            if isinstance(shortcut, (list, tuple)):
                act.setShortcuts([QKeySequence(k) for k in shortcut])
            else:
                act.setShortcut(QKeySequence(shortcut))
        if tip:
            act.setToolTip(tip)
            act.setStatusTip(tip)
        act.setCheckable(checkable)
        if checkable:
            act.toggled.connect(slot)
        else:
            act.triggered.connect(lambda _=False: slot())
        self.addAction(act)
        return act

    def _build_actions(self):
        s = self.session
        a = self._action
        self.act_open = a("actionOpenData", "Open…", self.choose_data, QKeySequence.Open,
                          "Open a CSV, TSV or Parquet table")
        self.act_open_session = a("actionOpenSession", "Open session…", self.choose_session,
                                  "Ctrl+Shift+O", "Open a saved .edgewise session")
        self.act_open_result = a("actionOpenResult", "Open result…", self.choose_result,
                                 None, "Show a saved result (.json) without its data")
        self.act_save = a("actionSave", "Save", self.save, QKeySequence.Save,
                          "Save the session (data path, settings, knowledge, result, layout)")
        self.act_save_as = a("actionSaveAs", "Save session as…", self.save_as,
                             "Ctrl+Shift+S")
        self.act_load_knowledge = a("actionLoadKnowledge", "Load knowledge…",
                                    self.choose_knowledge, None,
                                    "Read a knowledge file (TOML) into the session")
        self.act_save_knowledge = a("actionSaveKnowledge", "Save knowledge…",
                                    self.save_knowledge_as)
        self.act_quit = a("actionQuit", "Quit", self.close, QKeySequence.Quit)
        self.act_run = a("actionRun", "Run", self.run, ["Ctrl+R", "F5"],
                         "Search for the diagram with the current settings and knowledge")
        self.act_stop = a("actionStop", "Stop", self.stop, "Esc", "Stop the running search")
        self.act_undo = a("actionUndo", "Undo", s.undo, QKeySequence.Undo)
        self.act_redo = a("actionRedo", "Redo", s.redo, [QKeySequence(QKeySequence.Redo),
                                                          QKeySequence("Ctrl+Y")])
        self.act_fit = a("actionFit", "Fit", self.canvas.request_fit, "Ctrl+0",
                         "Fit the diagram to the view")
        self.act_zoom_in = a("actionZoomIn", "Zoom in", lambda: self.canvas.zoom(1.25),
                             ["Ctrl++", "Ctrl+="])
        self.act_zoom_out = a("actionZoomOut", "Zoom out", lambda: self.canvas.zoom(0.8),
                              "Ctrl+-")
        self.act_arrange = a("actionArrange", "Arrange", self.arrange, "Ctrl+L",
                             "Lay the diagram out again, in the layout chosen last (at first: "
                             "layered by stage, else force-directed)")
        self.act_arrange_auto = a("actionArrangeAuto", "Layered by stage, else force-directed",
                                  lambda: self.arrange("auto"))
        self.act_arrange_layered = a("actionArrangeLayered", "In layers (by stage, else by "
                                     "arrow direction)", lambda: self.arrange("layered"),
                                     None, "Columns left to right: stages, or without stages "
                                     "the arrows' direction (every arrow points right)")
        self.act_arrange_force = a("actionArrangeForce", "Force-directed",
                                   lambda: self.arrange("force"))
        self.act_find = a("actionFind", "Find a variable…", self.canvas.show_find,
                          QKeySequence.Find, "Find a variable by name and focus on its "
                                             "neighbours (Esc in the box ends the focus)")
        self.act_overlay = a("actionOverlay", "Overlay",
                             lambda on: setattr(s, "overlay", on), "Ctrl+K",
                             "Show locked and forbidden pairs on the diagram", checkable=True)
        self.act_auto = a("actionAutoRun", "Auto re-run", lambda on: None, None,
                          "Run again by itself after a change of settings or knowledge "
                          "(answers from the p-value cache)", checkable=True)
        self.act_auto.setChecked(True)
        self.act_assumptions = a("actionAssumptions", "Assumptions", self.show_assumptions,
                                 "F1", "The assumptions under which the diagram is sound")
        self.act_shortcuts = a("actionShortcuts", "Keyboard shortcuts", self.show_shortcuts)
        self.act_lock = a("actionLockPair", "Lock selected pair",
                          lambda: self._pair_action("lock"), "L")
        self.act_forbid = a("actionForbidPair", "Forbid selected pair",
                            lambda: self._pair_action("forbid"), "F")
        self.act_clear = a("actionClearPair", "Clear knowledge on selected pair",
                           lambda: self._pair_action("clear"), QKeySequence.Delete)
        self.act_select_none = a("actionSelectNone", "Select none", s.clear_selection)
        self.act_export = a("actionExport", "Export…", self.export_menu_at_button, "Ctrl+E")
        self.export_actions = {}
        for kind, (label, _, _) in _export.FORMATS.items():
            self.export_actions[kind] = a(f"actionExport_{kind}", label + "…",
                                          lambda k=kind: self.export(k))

    def _build_toolbar(self):
        tb = QToolBar("Main")
        tb.setObjectName("mainToolbar")
        tb.setMovable(False)
        tb.setToolButtonStyle(Qt.ToolButtonTextOnly)
        self.addToolBar(Qt.TopToolBarArea, tb)
        self.toolbar = tb

        def add(action, name):
            tb.addAction(action)
            tb.widgetForAction(action).setObjectName(name)

        add(self.act_open, "openButton")
        add(self.act_save, "saveButton")
        tb.addSeparator()
        self.run_button = QPushButton("Run")
        self.run_button.setObjectName("runButton")
        self.run_button.setToolTip("Run the search (Ctrl+R)")
        self.run_button.clicked.connect(self.run)
        tb.addWidget(self.run_button)
        self.stop_button = QPushButton("Stop")
        self.stop_button.setObjectName("stopButton")
        self.stop_button.setToolTip("Stop the search (Esc)")
        self.stop_button.clicked.connect(self.stop)
        tb.addWidget(self.stop_button)
        tb.addSeparator()

        tb.addWidget(QLabel("Test"))
        self.test_choice = QComboBox()
        self.test_choice.setObjectName("testChoice")
        for name, desc in TEST_NAMES.items():
            self.test_choice.addItem(test_label(name), name)
            self.test_choice.setItemData(self.test_choice.count() - 1, f"{name}: {desc}",
                                         Qt.ToolTipRole)
        self.test_choice.setToolTip("independence test")
        self.test_choice.currentIndexChanged.connect(self._test_tooltip)
        self.test_choice.currentIndexChanged.connect(
            lambda i: self.session.set_setting("test", self.test_choice.itemData(i)))
        tb.addWidget(self.test_choice)

        tb.addWidget(QLabel("α"))
        self.alpha_slider = QSlider(Qt.Horizontal)
        self.alpha_slider.setObjectName("alphaSlider")
        self.alpha_slider.setRange(0, _SLIDER_STEPS)
        self.alpha_slider.setFixedWidth(120)
        self.alpha_slider.setToolTip(
            f"significance level, log scale from {ALPHA_SLIDER_RANGE[0]:g} to "
            f"{ALPHA_SLIDER_RANGE[1]:g} ({PARAMETERS['alpha'].help})")
        self.alpha_slider.valueChanged.connect(self._on_alpha_slider)
        tb.addWidget(self.alpha_slider)
        self.alpha_box = QLineEdit()
        self.alpha_box.setObjectName("alphaBox")
        self.alpha_box.setFixedWidth(64)
        self.alpha_box.setToolTip(f"α: {PARAMETERS['alpha'].describe()}")
        self.alpha_box.editingFinished.connect(self._on_alpha_box)
        tb.addWidget(self.alpha_box)

        tb.addWidget(QLabel("Depth"))
        depth = PARAMETERS["max_depth"]
        self.depth_box = QSpinBox()
        self.depth_box.setObjectName("depthBox")
        self._depth_none = int(depth.low) - 1
        self.depth_box.setRange(self._depth_none, 99 if depth.high is None else int(depth.high))
        self.depth_box.setSpecialValueText("no limit")
        self.depth_box.setToolTip(depth.help)
        self.depth_box.valueChanged.connect(self._on_depth)
        tb.addWidget(self.depth_box)

        tb.addWidget(QLabel("Colliders"))
        self.collider_choice = QComboBox()
        self.collider_choice.setObjectName("colliderChoice")
        for option in PARAMETERS["collider_rule"].options:
            self.collider_choice.addItem(option, option)
        self.collider_choice.setToolTip(PARAMETERS["collider_rule"].help)
        self.collider_choice.currentIndexChanged.connect(
            lambda i: self.session.set_setting("collider_rule",
                                               self.collider_choice.itemData(i)))
        tb.addWidget(self.collider_choice)
        self.hidden_toggle = QCheckBox("Hidden causes")
        self.hidden_toggle.setObjectName("hiddenCausesToggle")
        self.hidden_toggle.setToolTip(
            "Allow unmeasured common causes (FCI): edges get circle marks (o, an end the data "
            "cannot decide) and ↔ (a hidden common cause). "
            + PARAMETERS["hidden_causes"].help)
        self.hidden_toggle.toggled.connect(
            lambda on: self.session.set_setting("hidden_causes", bool(on)))
        tb.addWidget(self.hidden_toggle)
        tb.addSeparator()
        add(self.act_auto, "autoRunToggle")
        add(self.act_arrange, "arrangeButton")
        self.arrange_menu = QMenu(self)
        self.arrange_menu.setObjectName("arrangeMenu")
        for act in (self.act_arrange_auto, self.act_arrange_layered, self.act_arrange_force):
            self.arrange_menu.addAction(act)
        arrange_button = tb.widgetForAction(self.act_arrange)
        arrange_button.setMenu(self.arrange_menu)
        arrange_button.setPopupMode(QToolButton.MenuButtonPopup)
        add(self.act_fit, "fitButton")
        add(self.act_overlay, "overlayToggle")
        tb.addSeparator()
        self.export_button = QToolButton()
        self.export_button.setObjectName("exportButton")
        self.export_button.setText("Export")
        self.export_button.setPopupMode(QToolButton.InstantPopup)
        self.export_menu = QMenu(self.export_button)
        self.export_menu.setObjectName("exportMenu")
        for act in self.export_actions.values():
            self.export_menu.addAction(act)
        self.export_button.setMenu(self.export_menu)
        tb.addWidget(self.export_button)
        spacer = QWidget()
        spacer.setSizePolicy(spacer.sizePolicy().horizontalPolicy().Expanding,
                             spacer.sizePolicy().verticalPolicy().Preferred)
        tb.addWidget(spacer)
        add(self.act_assumptions, "assumptionsButton")

    def _dock(self, title, widget, name, area):
        dock = QDockWidget(title, self)
        dock.setObjectName(name)
        dock.setWidget(widget)
        dock.setFeatures(QDockWidget.DockWidgetMovable | QDockWidget.DockWidgetClosable
                         | QDockWidget.DockWidgetFloatable)
        self.addDockWidget(area, dock)
        return dock

    def _build_docks(self):
        s = self.session
        self.variables = VariablesPanel(s)
        self.stages = StagesEditor(s)
        self.inspector = Inspector(s)
        self.log_view = QPlainTextEdit()
        self.log_view.setObjectName("runLog")
        self.log_view.setReadOnly(True)
        self.log_view.setMaximumBlockCount(2000)
        font = self.log_view.font()
        font.setFamily("DejaVu Sans Mono")
        font.setStyleHint(font.StyleHint.Monospace)
        font.setPointSizeF(9)
        self.log_view.setFont(font)
        self.variables_dock = self._dock("Variables", self.variables, "variablesDock",
                                         Qt.LeftDockWidgetArea)
        self.stages_dock = self._dock("Stages", self.stages, "stagesDock",
                                      Qt.LeftDockWidgetArea)
        self.inspector_dock = self._dock("Inspector", self.inspector, "inspectorDock",
                                         Qt.RightDockWidgetArea)
        self.log_dock = self._dock("Run log", self.log_view, "logDock",
                                   Qt.BottomDockWidgetArea)
        self.controls = ControlsPanel(s)
        self.controls_dock = self._dock("Controls", self.controls, "controlsDock",
                                        Qt.RightDockWidgetArea)
        self.tabifyDockWidget(self.inspector_dock, self.controls_dock)
        self.inspector_dock.raise_()
        self.setCorner(Qt.BottomLeftCorner, Qt.LeftDockWidgetArea)
        self.setCorner(Qt.BottomRightCorner, Qt.RightDockWidgetArea)
        self.resizeDocks([self.variables_dock, self.inspector_dock], [270, 330], Qt.Horizontal)
        self.resizeDocks([self.variables_dock, self.stages_dock], [420, 300], Qt.Vertical)
        self.resizeDocks([self.log_dock], [130], Qt.Vertical)

    def _build_menus(self):
        bar = self.menuBar()
        m = bar.addMenu("&File")
        m.setObjectName("fileMenu")
        for act in (self.act_open, self.act_open_session, self.act_open_result):
            m.addAction(act)
        self.recent_menu = m.addMenu("Open recent")
        self.recent_menu.setObjectName("recentMenu")
        m.addSeparator()
        for act in (self.act_save, self.act_save_as):
            m.addAction(act)
        m.addSeparator()
        m.addAction(self.act_load_knowledge)
        m.addAction(self.act_save_knowledge)
        m.addSeparator()
        export = m.addMenu("Export")
        for act in self.export_actions.values():
            export.addAction(act)
        m.addSeparator()
        m.addAction(self.act_quit)
        m = bar.addMenu("&Edit")
        for act in (self.act_undo, self.act_redo):
            m.addAction(act)
        m.addSeparator()
        for act in (self.act_lock, self.act_forbid, self.act_clear, self.act_select_none):
            m.addAction(act)
        m = bar.addMenu("&Search")
        for act in (self.act_run, self.act_stop, self.act_auto):
            m.addAction(act)
        m = bar.addMenu("&View")
        for act in (self.act_fit, self.act_zoom_in, self.act_zoom_out, self.act_find,
                    self.act_arrange):
            m.addAction(act)
        arrange = m.addMenu("Arrange as")
        arrange.setObjectName("arrangeAsMenu")
        for act in (self.act_arrange_auto, self.act_arrange_layered, self.act_arrange_force):
            arrange.addAction(act)
        m.addAction(self.act_overlay)
        m.addSeparator()
        for dock in (self.variables_dock, self.stages_dock, self.inspector_dock,
                     self.controls_dock, self.log_dock):
            m.addAction(dock.toggleViewAction())
        m = bar.addMenu("&Help")
        m.addAction(self.act_assumptions)
        m.addAction(self.act_shortcuts)

    def _build_status(self):
        sb = self.statusBar()
        sb.setObjectName("statusBar")
        self.status_text = QLabel("Ready")
        self.status_text.setObjectName("statusText")
        sb.addWidget(self.status_text, 1)
        self.progress_bar = QProgressBar()
        self.progress_bar.setObjectName("runProgress")
        self.progress_bar.setFixedWidth(300)
        self.progress_bar.setTextVisible(True)
        sb.addPermanentWidget(self.progress_bar)
        self.elapsed_label = QLabel("")
        self.elapsed_label.setObjectName("elapsedLabel")
        self.elapsed_label.setMinimumWidth(60)
        sb.addPermanentWidget(self.elapsed_label)
        self.cancel_button = QPushButton("Cancel")
        self.cancel_button.setObjectName("statusCancel")
        self.cancel_button.clicked.connect(self.stop)
        sb.addPermanentWidget(self.cancel_button)
        # the assumptions note is one click away whatever the window's width (the toolbar's
        # own button can be pushed into its overflow menu)
        self.status_assumptions = QPushButton("Assumptions and cautions (F1)")
        self.status_assumptions.setObjectName("statusAssumptions")
        self.status_assumptions.setFlat(True)
        self.status_assumptions.setToolTip("The assumptions under which the diagram is sound")
        self.status_assumptions.clicked.connect(self.show_assumptions)
        sb.addPermanentWidget(self.status_assumptions)
        self.progress_bar.hide()
        self.cancel_button.hide()

    # ------------------------------------------------------------------------------ model → UI
    def _on_settings(self, settings):
        with signals_blocked(self.test_choice, self.alpha_slider, self.alpha_box,
                             self.depth_box, self.collider_choice, self.hidden_toggle):
            self.test_choice.setCurrentIndex(max(0, self.test_choice.findData(settings.test)))
            self._test_tooltip(self.test_choice.currentIndex())
            self.alpha_slider.setValue(alpha_to_slider(settings.alpha))
            self.alpha_box.setText(f"{settings.alpha:g}")
            self.depth_box.setValue(self._depth_none if settings.max_depth is None
                                    else settings.max_depth)
            self.collider_choice.setCurrentIndex(
                max(0, self.collider_choice.findData(settings.collider_rule)))
            self.hidden_toggle.setChecked(settings.hidden_causes)

    def _on_status(self, status):
        running = status in ("running", "stopping")
        self.run_button.setEnabled(not running and self.session.dataset is not None)
        self.act_run.setEnabled(not running)
        self.stop_button.setEnabled(status == "running")
        self.act_stop.setEnabled(status == "running")
        self.cancel_button.setVisible(running)
        self.cancel_button.setEnabled(status == "running")
        self.progress_bar.setVisible(running)
        if running:
            self._elapsed_timer.start()
        else:
            self._elapsed_timer.stop()
            self._tick_elapsed()
        text = {"idle": "Ready", "running": "Searching…", "stopping": "Stopping…",
                "done": "Done", "stopped": "Stopped — no result from that run",
                "failed": "The run failed — see the message and the run log"}[status]
        if status == "done" and self.session.result is not None:
            r = self.session.result
            seconds = self.session.last_run_seconds
            text = f"Done: {_session.run_counts(r)}"
            if seconds is not None:  # the same measure as the run log's line
                text = f"Done in {seconds:.2f} s: {_session.run_counts(r)}"
        self.status_text.setText(text)
        if not running and self._rerun_after_stop:
            self._rerun_after_stop = False
            QTimer.singleShot(0, self.run)

    def _on_progress(self, info):
        if not info:
            self.progress_bar.setRange(0, 1)
            self.progress_bar.setValue(0)
            return
        planned, done = int(info.get("planned") or 0), int(info.get("done") or 0)
        if planned <= 0:
            self.progress_bar.setRange(0, 0)  # busy indicator
            self.progress_bar.setFormat("preparing…")
        else:
            self.progress_bar.setRange(0, planned)
            self.progress_bar.setValue(min(done, planned))
            self.progress_bar.setFormat(f"level {info.get('level', 0)}: {done:,} of "
                                        f"{planned:,} tests")

    def _tick_elapsed(self):
        job = self.session.job
        info = self.session.progress
        if job is not None and self.session.status in ("running", "stopping"):
            import time
            self.elapsed_label.setText(f"{time.perf_counter() - job.started:.1f} s")
        elif info is None:
            self.elapsed_label.setText("")

    def _on_history(self, history):
        undo, redo = history
        self.act_undo.setEnabled(undo is not None)
        self.act_undo.setText(f"Undo {undo}" if undo else "Undo")
        self.act_redo.setEnabled(redo is not None)
        self.act_redo.setText(f"Redo {redo}" if redo else "Redo")

    def _on_log(self, lines):
        shown = self.log_view.blockCount() if self.log_view.toPlainText() else 0
        if len(lines) < shown or shown == 0:
            self.log_view.setPlainText("\n".join(lines))
        else:
            for line in lines[shown:]:
                self.log_view.appendPlainText(line)
        self.log_view.verticalScrollBar().setValue(self.log_view.verticalScrollBar().maximum())

    def _on_overlay(self, on):
        with signals_blocked(self.act_overlay):
            self.act_overlay.setChecked(on)

    def _on_selection(self, selection):
        pair = len(selection) == 2
        for act in (self.act_lock, self.act_forbid, self.act_clear):
            act.setEnabled(pair)

    def _on_dataset(self, dataset):
        self.run_button.setEnabled(dataset is not None
                                   and self.session.status not in ("running", "stopping"))

    def _on_result(self, result):
        if result is not None:
            self.session.autosave()

    def _on_session_path(self, path):
        if path and Path(path).exists():
            self.add_recent(path)

    def _update_title(self, _=None):
        s = self.session
        name = Path(s.session_path).name if s.session_path else (
            _data_title(s.data_path) if s.data_path else
            f"{Path(s.result_path).name} (a result, no data)" if s.result_path else "no data")
        self.setWindowTitle(f"{name}{' •' if s.dirty else ''} — Edgewise")

    def _on_notification(self, note):
        if note.level == "error" and note.title in _DIALOG_TITLES:
            QTimer.singleShot(0, lambda n=note: self.show_error(n.title, n.message))
        else:
            self.statusBar().showMessage(note.message, 8000)

    def show_error(self, title: str, message: str):
        """The one-line message, in a dialog (never a traceback)."""
        box = QMessageBox.warning
        box(self, title or "Edgewise", message)

    # ------------------------------------------------------------------------------ UI → model
    def _on_alpha_slider(self, position):
        alpha = slider_to_alpha(position)
        self.session.set_setting("alpha", alpha)

    def _on_alpha_box(self):
        text = self.alpha_box.text().strip().replace(",", ".")
        try:
            value = float(text)
        except ValueError:
            self.session.notifications.error(
                f"α must be a number in (0, 1), e.g. 0.05; got {text!r}", title="Settings")
            self._on_settings(self.session.settings)
            return
        if not self.session.set_setting("alpha", value):
            self._on_settings(self.session.settings)

    def _test_tooltip(self, index):
        name = self.test_choice.itemData(index)
        self.test_choice.setToolTip(f"independence test: {name} — {TEST_NAMES.get(name, '')}")

    def _on_depth(self, value):
        self.session.set_setting("max_depth", None if value == self._depth_none else value)

    def _pair_action(self, what):
        sel = self.session.selection
        if len(sel) != 2:
            return
        {"lock": self.session.lock, "forbid": self.session.forbid,
         "clear": self.session.clear_pair}[what](*sel)

    def _inputs_changed(self, _=None):
        s = self.session
        if self.act_auto.isChecked() and s.result is not None:
            self._auto_timer.start()

    def _auto_run(self):
        s = self.session
        if not (s.stale and s.result is not None):
            return
        if s.data_changed:  # a saved result on changed data: the user decides when to run
            return
        if s.status in ("running", "stopping"):
            self._rerun_after_stop = True
            self.runner.stop()
            return
        self.run()

    # ------------------------------------------------------------------------------ commands
    def run(self):
        self.statusBar().clearMessage()  # a passing note of an earlier step is now stale
        return self.runner.start()

    def stop(self):
        self._rerun_after_stop = False
        return self.runner.stop()

    def arrange(self, style=None) -> bool:
        """Lay the diagram out again on a worker thread (the window keeps answering)."""
        started = self.arranger.start(style)
        if started:
            self.statusBar().showMessage("Arranging…", 2000)
        return started

    def open_path(self, path) -> bool:
        """Open a data table, a ``.edgewise`` session or a ``.json`` result, by its suffix."""
        path = str(path)
        self.statusBar().clearMessage()  # a passing note about the previous file
        if Path(path).suffix.lower() == _session.SUFFIX:
            ok = self.session.open_session(path)
        elif Path(path).suffix.lower() == ".json":
            ok = self.session.open_result(path)
        else:
            ok = self.session.open_data(path)
            if ok:
                self.offer_knowledge_beside(path)
        if ok:
            self._auto_timer.stop()  # opening is not an edit: nothing runs by itself
            self.add_recent(path)
            self.canvas.request_fit()
        return ok

    def offer_knowledge_beside(self, data_path) -> bool:
        """When a knowledge file sits beside the data (as in the bundled examples), ask
        whether to load it; True when it was loaded."""
        found = self.session.knowledge_beside(data_path)
        if found is None:
            return False
        answer = QMessageBox.question(
            self, "Knowledge beside the data",
            f"{found.name} sits beside {Path(data_path).name}. Load its knowledge (locked "
            "and forbidden pairs, stages) into the session? You can edit or clear it "
            "afterwards.", QMessageBox.Yes | QMessageBox.No, QMessageBox.Yes)
        if answer != QMessageBox.Yes:
            return False
        return self.session.load_knowledge(found)

    def _dialog_folder(self) -> str:
        return str(self.qsettings.value("lastFolder", str(Path.home())))

    def _remember_folder(self, path):
        self.qsettings.setValue("lastFolder", str(Path(path).parent))

    def choose_data(self):
        if not self._may_discard():
            return
        path, _ = QFileDialog.getOpenFileName(
            self, "Open data", self._dialog_folder(),
            "Tables (*.csv *.tsv *.tab *.txt *.parquet *.pq);;All files (*)")
        if path:
            self._remember_folder(path)
            self.open_path(path)

    def choose_session(self):
        if not self._may_discard():
            return
        path, _ = QFileDialog.getOpenFileName(self, "Open session", self._dialog_folder(),
                                              "Edgewise session (*.edgewise)")
        if path:
            self._remember_folder(path)
            self.open_path(path)

    def choose_result(self):
        if not self._may_discard():
            return
        path, _ = QFileDialog.getOpenFileName(self, "Open result", self._dialog_folder(),
                                              "Edgewise result (*.json)")
        if path:
            self._remember_folder(path)
            self.open_path(path)

    def choose_knowledge(self):
        path, _ = QFileDialog.getOpenFileName(self, "Load knowledge", self._dialog_folder(),
                                              "Knowledge (*.toml *.json);;All files (*)")
        if path:
            self.session.load_knowledge(path)

    def save_knowledge_as(self):
        path, _ = QFileDialog.getSaveFileName(self, "Save knowledge", self._dialog_folder(),
                                              "Knowledge (*.toml)")
        if path:
            self.session.save_knowledge(path if path.endswith(".toml") else path + ".toml")

    def save(self) -> bool:
        if self.session.session_path:
            return self.session.save_session(self.session.session_path)
        return self.save_as()

    def save_as(self) -> bool:
        start = self.session.session_path or (
            str(Path(self.session.data_path).with_suffix(_session.SUFFIX))
            if self.session.data_path else self._dialog_folder())
        path, _ = QFileDialog.getSaveFileName(self, "Save session", start,
                                              "Edgewise session (*.edgewise)")
        if not path:
            return False
        return self.session.save_session(path)

    def export(self, kind: str, path=None):
        label, filt, suffix = _export.FORMATS[kind]
        if path is None:
            base = Path(self.session.session_path or self.session.data_path or "diagram")
            path, _ = QFileDialog.getSaveFileName(self, label, str(base.with_suffix(suffix)),
                                                  filt)
            if not path:
                return None
        try:
            written = _export.export(self.session, self.canvas, kind, path)
        except Exception as err:  # DiscoveryError, or a Qt/OS failure: one line
            self.session.notifications.error(str(err), title="Export")
            return None
        self.session.append_log(f"exported {kind.upper()} to {written}")
        return written

    def export_menu_at_button(self):
        self.export_menu.popup(self.export_button.mapToGlobal(
            self.export_button.rect().bottomLeft()))

    def show_assumptions(self):
        dialog = AssumptionsDialog(self)
        dialog.setAttribute(Qt.WA_DeleteOnClose)
        dialog.show()
        return dialog

    def show_shortcuts(self):
        rows = "".join(f"<tr><td><b>{k}</b></td><td style='padding-left:12px'>{v}</td></tr>"
                       for k, v in SHORTCUTS)
        box = QMessageBox(self)
        box.setObjectName("shortcutsDialog")
        box.setWindowTitle("Keyboard shortcuts")
        box.setText(f"<table>{rows}</table>")
        box.setAttribute(Qt.WA_DeleteOnClose)
        box.show()
        return box

    # ------------------------------------------------------------------------------ recent files
    def recent_files(self) -> list[str]:
        value = self.qsettings.value("recentFiles", [])
        if isinstance(value, str):
            value = [value]
        return [v for v in (value or []) if isinstance(v, str)]

    def add_recent(self, path):
        path = str(Path(path).resolve())
        files = [path] + [p for p in self.recent_files() if p != path]
        self.qsettings.setValue("recentFiles", files[:_RECENT_MAX])
        self._rebuild_recent()

    def _rebuild_recent(self):
        self.recent_menu.clear()
        files = self.recent_files()
        for i, path in enumerate(files):
            act = self.recent_menu.addAction(f"{i + 1}  {Path(path).name}")
            act.setObjectName(f"recent{i}")
            act.setToolTip(path)
            act.triggered.connect(lambda _=False, p=path: self._open_recent(p))
        self.recent_menu.setEnabled(bool(files))

    def _open_recent(self, path):
        if self._may_discard():
            self.open_path(path)

    # ------------------------------------------------------------------------------ drag and drop
    @staticmethod
    def _dropped_path(event):
        urls = event.mimeData().urls() if event.mimeData().hasUrls() else []
        for url in urls:
            if url.isLocalFile():
                path = url.toLocalFile()
                if Path(path).suffix.lower() in _DATA_SUFFIXES | {_session.SUFFIX}:
                    return path
        return None

    def dragEnterEvent(self, event):
        if self._dropped_path(event):
            event.acceptProposedAction()
        else:
            event.ignore()

    def dragMoveEvent(self, event):
        self.dragEnterEvent(event)

    def dropEvent(self, event):
        path = self._dropped_path(event)
        if path:
            event.acceptProposedAction()
            QTimer.singleShot(0, lambda: self._may_discard() and self.open_path(path))

    # ------------------------------------------------------------------------------ state
    def _restore_state(self):
        geometry = self.qsettings.value("geometry")
        state = self.qsettings.value("windowState")
        if geometry is not None:
            self.restoreGeometry(geometry)
        if state is not None:
            self.restoreState(state)
        self.act_overlay.setChecked(self.session.overlay)
        auto = self.qsettings.value("autoRun", True)
        self.act_auto.setChecked(auto not in (False, "false", "0", 0))

    def _may_discard(self) -> bool:
        s = self.session
        if not (self.ask_before_closing and s.dirty and (s.result or s.dataset)):
            return True
        answer = QMessageBox.question(
            self, "Unsaved session", "Save the current session first?",
            QMessageBox.Save | QMessageBox.Discard | QMessageBox.Cancel, QMessageBox.Save)
        if answer == QMessageBox.Save:
            return self.save()
        return answer == QMessageBox.Discard

    def closeEvent(self, event):
        if not self._may_discard():
            event.ignore()
            return
        self.runner.shutdown()
        self.arranger.wait()
        self.qsettings.setValue("geometry", self.saveGeometry())
        self.qsettings.setValue("windowState", self.saveState())
        self.qsettings.setValue("autoRun", self.act_auto.isChecked())
        self.qsettings.sync()
        self._autosave_timer.stop()
        self.session.discard_autosave()
        super().closeEvent(event)

    def offer_recovery(self) -> bool:
        """If an autosave from a crash exists, ask whether to recover it."""
        s = self.session
        if s.autosave_path is None:
            return False
        offer = _session.Session.recovery_offer(s.autosave_path)
        if offer is None:
            return False
        what = Path(offer["session"] or offer["data"] or "an unsaved session").name
        answer = QMessageBox.question(
            self, "Recover unsaved work",
            f"Edgewise did not close normally last time. Recover the autosaved work on "
            f"{what} (saved {offer['saved']})?", QMessageBox.Yes | QMessageBox.No,
            QMessageBox.Yes)
        if answer == QMessageBox.Yes:
            return s.recover()
        s.discard_autosave()
        return False
