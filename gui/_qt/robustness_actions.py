"""The window's part for "which edges survive": the Sweep and Resample actions, the unrelated
rule and margin in the toolbar, and the Survival and Support panels as docks.

:func:`install` adds them to a :class:`~gui._qt.window.MainWindow`; everything runs through
the session model (``Session.start_analysis``) on the window's worker thread, with the same
progress bar and Stop as a search.
"""

from __future__ import annotations

from PySide6.QtCore import QObject, Qt
from PySide6.QtGui import QAction
from PySide6.QtWidgets import QComboBox, QDoubleSpinBox, QLabel

from discovery.settings import PARAMETERS

from .style import signals_blocked
from .support_panel import SupportPanel
from .survival_panel import SurvivalPanel

__all__ = ["install"]


def install(window) -> None:
    """Add the sweep and resampling actions, the unrelated-rule controls and the two panels
    to ``window``."""
    s = window.session
    tb = window.toolbar
    actions = tb.actions()

    def after(widget):
        """The toolbar action that follows ``widget``'s (new items go before it)."""
        at = next(i for i, a in enumerate(actions) if tb.widgetForAction(a) is widget)
        return actions[at + 1] if at + 1 < len(actions) else None

    before = next((a for a in actions if a is window.act_auto), None)  # after the settings

    def insert(widget_or_action):
        if isinstance(widget_or_action, QAction):
            tb.insertAction(before, widget_or_action)
            return widget_or_action
        return tb.insertWidget(before, widget_or_action)

    insert(QLabel("Unrelated"))
    window.unrelated_choice = QComboBox()
    window.unrelated_choice.setObjectName("unrelatedChoice")
    for option in PARAMETERS["unrelated"].options:
        window.unrelated_choice.addItem(option, option)
    window.unrelated_choice.setToolTip(PARAMETERS["unrelated"].help)
    insert(window.unrelated_choice)
    margin = PARAMETERS["margin"]
    window.margin_box = QDoubleSpinBox()
    window.margin_box.setObjectName("marginBox")
    window.margin_box.setDecimals(3)
    window.margin_box.setRange(0.001, 0.999)
    window.margin_box.setSingleStep(0.01)
    window.margin_box.setValue(0.05)
    window.margin_box.setPrefix("δ ")
    window.margin_box.setToolTip(f"{margin.help}: {margin.describe()}")
    insert(window.margin_box)
    tb.insertSeparator(before)

    def push_rule(_=None):
        s.set_unrelated(window.unrelated_choice.currentData(),
                        round(window.margin_box.value(), 6))

    window.unrelated_choice.currentIndexChanged.connect(push_rule)
    window.margin_box.valueChanged.connect(
        lambda _: push_rule() if window.unrelated_choice.currentData() == "equivalence"
        else None)

    window.act_sweep = window._action(
        "actionSweep", "Sweep", lambda: sweep(window), "Ctrl+Shift+W",
        "Run the search over a ladder of α (or of δ with the equivalence rule) and show "
        "each edge's survival range")
    window.act_resample = window._action(
        "actionResample", "Resample", lambda: resample(window), "Ctrl+Shift+B",
        "Search resampled copies of the data and show each edge's support")
    before = after(window.stop_button)  # beside Run and Stop
    for act, name in ((window.act_sweep, "sweepButton"),
                      (window.act_resample, "resampleButton")):
        insert(act)
        tb.widgetForAction(act).setObjectName(name)

    window.survival = SurvivalPanel(s)
    window.survival.sweep_requested.connect(lambda: sweep(window))
    window.support_panel = SupportPanel(s)
    window.support_panel.resample_requested.connect(lambda: resample(window))
    window.survival_dock = window._dock("Survival", window.survival, "survivalDock",
                                        Qt.BottomDockWidgetArea)
    window.support_dock = window._dock("Support", window.support_panel, "supportDock",
                                       Qt.BottomDockWidgetArea)
    window.tabifyDockWidget(window.log_dock, window.survival_dock)
    window.tabifyDockWidget(window.survival_dock, window.support_dock)
    window.log_dock.raise_()
    for action in window.menuBar().actions():
        if action.text().replace("&", "") == "View" and action.menu() is not None:
            action.menu().addAction(window.survival_dock.toggleViewAction())
            action.menu().addAction(window.support_dock.toggleViewAction())
    window.resizeDocks([window.log_dock], [190], Qt.Vertical)

    window.robustness = _Views(window)


class _Views(QObject):
    """Keeps the toolbar controls in step with the session (bound methods: the session's
    emitters hold them weakly, so a closed window stops listening)."""

    def __init__(self, window):
        super().__init__(window)
        self.window = window
        ev = window.session.events
        ev.settings.connect(self.on_settings)
        ev.status.connect(self.on_status)
        ev.progress.connect(self.on_progress)
        ev.sweep.connect(self.on_sweep)
        ev.support.connect(self.on_support)
        self.on_settings(window.session.settings)
        self.on_status(window.session.status)

    def on_settings(self, settings):
        w = self.window
        with signals_blocked(w.unrelated_choice, w.margin_box):
            w.unrelated_choice.setCurrentIndex(
                max(0, w.unrelated_choice.findData(settings.unrelated)))
            if settings.margin is not None:
                w.margin_box.setValue(settings.margin)
        w.margin_box.setEnabled(settings.unrelated == "equivalence")

    def on_status(self, status):
        w = self.window
        running = status in ("running", "stopping")
        w.act_sweep.setEnabled(not running)
        w.act_resample.setEnabled(not running)
        kind = getattr(w.session.job, "kind", None)
        if status == "running" and kind is not None:
            w.status_text.setText("Sweeping…" if kind == "sweep" else "Resampling…")

    def on_progress(self, info):
        if info and info.get("phase") in ("sweep", "support") and info.get("planned"):
            unit = "rungs" if info["phase"] == "sweep" else "resamples"
            self.window.progress_bar.setFormat(f"{info['phase']}: {int(info['done'])} of "
                                               f"{int(info['planned'])} {unit}")

    def on_sweep(self, record):
        if record is not None:
            self._show(self.window.survival_dock, len(record.edges))
            whole = sum(all(e.present) for e in record.edges)
            self.window.status_text.setText(
                f"Sweep done: {len(record.ladder)} rungs; {whole} of {len(record.edges)} "
                "pairs present at every rung")

    def on_support(self, record):
        if record is not None:
            self._show(self.window.support_dock, len(record.pairs))
            self.window.status_text.setText(
                f"Resampling done: {record.resamples} {record.method} resamples; "
                f"{len(record.consensus)} edges with support ≥ {record.cutoff:g}")

    def _show(self, dock, rows):
        """Bring the panel to the front, tall enough for its rows (within reason)."""
        dock.show()
        dock.raise_()
        w = self.window
        want = min(max(200, 90 + 20 * rows), w.height() // 3)
        if dock.height() < want:
            w.resizeDocks([dock], [want], Qt.Vertical)


def sweep(window) -> bool:
    """Start a sweep: over α by default; over δ (around the current margin) with the
    equivalence rule."""
    settings = window.session.settings
    options = {}
    if settings.unrelated == "equivalence" and settings.margin is not None:
        m = settings.margin
        options["margins"] = sorted({round(v, 4) for v in
                                     (m / 4, m / 2, m, min(2 * m, 0.9), min(4 * m, 0.95))
                                     if 0 < v < 1})
    return window.runner.start_analysis("sweep", **options)


def resample(window) -> bool:
    """Start a resampling run with the Support panel's options."""
    return window.runner.start_analysis("support", **window.support_panel.options())
