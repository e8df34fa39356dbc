"""The Controls panel: treatment, outcome, valid control sets, the planned set's verdict and
the effect range, over the session's ``treatment``, ``outcome``, ``planned``, ``controls`` and
``effects`` fields.

The canvas reads the same fields through :func:`node_role` and :func:`highlighted_pairs`:
the treatment is filled amber, the outcome lavender, members of the planned set are outlined
teal, and the path that breaks amenability (or that the planned set leaves open) gets a soft
halo.
"""

from __future__ import annotations

import io
from html import escape

from PySide6.QtCore import QPointF, Qt
from PySide6.QtGui import QColor, QPainter, QPainterPath, QPen, QPixmap
from PySide6.QtWidgets import (QComboBox, QFormLayout, QHBoxLayout, QLabel, QLineEdit,
                               QListWidget, QListWidgetItem, QMenu, QPushButton, QScrollArea,
                               QSizePolicy, QVBoxLayout, QWidget)

from . import style

__all__ = ["ControlsPanel", "node_role", "highlighted_pairs", "paint_path_halo",
           "add_control_actions", "TREATMENT_FILL", "OUTCOME_FILL", "SET_OUTLINE"]

TREATMENT_FILL = QColor("#F2B134")
OUTCOME_FILL = QColor("#B8A9D9")
SET_OUTLINE = QColor("#1F6F78")
PATH_HALO = QColor(181, 72, 47, 70)
_NONE = "—"


def node_role(session, name: str) -> tuple[QColor | None, bool]:
    """The node's fill for its role (treatment amber, outcome lavender, else None) and whether
    it is in the planned control set (outlined teal)."""
    fill = TREATMENT_FILL if name == session.treatment else \
        OUTCOME_FILL if name == session.outcome else None
    return fill, name in session.planned


def _shown_path(session):
    answer = session.controls
    if answer is None:
        return None
    if not answer.amenable:
        return answer.breaking_path
    verdict = session.planned_verdict
    return verdict.path if verdict is not None and not verdict.valid else None


def highlighted_pairs(session) -> set:
    """The adjacent pairs of the breaking path, or of the path the planned set leaves open."""
    path = _shown_path(session)
    if not path:
        return set()
    return {frozenset(p) for p in zip(path, path[1:])}


def paint_path_halo(painter: QPainter, p1: QPointF, p2: QPointF, control=None) -> None:
    """A wide translucent brick-red stroke under an edge of the highlighted path."""
    painter.save()
    painter.setRenderHint(QPainter.Antialiasing)
    pen = QPen(PATH_HALO, 9)
    pen.setCapStyle(Qt.RoundCap)
    painter.setPen(pen)
    painter.setBrush(Qt.NoBrush)
    path = QPainterPath(p1)
    if control is None:
        path.lineTo(p2)
    else:
        path.quadTo(control, p2)
    painter.drawPath(path)
    painter.restore()


def paint_set_outline(painter: QPainter, rect) -> None:
    painter.save()
    painter.setRenderHint(QPainter.Antialiasing)
    painter.setPen(QPen(SET_OUTLINE, 2.6))
    painter.setBrush(Qt.NoBrush)
    painter.drawRoundedRect(rect.adjusted(-3.5, -3.5, 3.5, 3.5), 10, 10)
    painter.restore()


def add_control_actions(menu: QMenu, session, name: str) -> list:
    """Treatment / outcome / planned-set actions for a node's context menu."""
    menu.addSeparator()
    out = []
    for text, obj, slot, on in (
            ("Set as treatment", "setTreatment", lambda: session.set_treatment(name),
             session.treatment == name),
            ("Set as outcome", "setOutcome", lambda: session.set_outcome(name),
             session.outcome == name),
            ("In the planned control set", "togglePlanned",
             lambda: session.toggle_planned(name), name in session.planned)):
        act = menu.addAction(text)
        act.setObjectName(obj)
        act.setCheckable(True)
        act.setChecked(on)
        act.triggered.connect(lambda _=False, slot=slot: slot())
        out.append(act)
    out[2].setEnabled(name not in (session.treatment, session.outcome))
    return out


def _set(names) -> str:
    return "{" + ", ".join(sorted(names)) + "}" if names else "{} (no controls)"


class ControlsPanel(QWidget):
    """The Controls dock: every widget acts through the session and refreshes from it."""

    def __init__(self, session, parent=None):
        super().__init__(parent)
        self.session = session
        self.setObjectName("controlsPanel")
        outer = QVBoxLayout(self)
        outer.setContentsMargins(0, 0, 0, 0)
        scroll = QScrollArea(self)
        scroll.setWidgetResizable(True)
        scroll.setFrameShape(QScrollArea.NoFrame)
        scroll.setHorizontalScrollBarPolicy(Qt.ScrollBarAlwaysOff)
        outer.addWidget(scroll)
        body = QWidget()
        scroll.setWidget(body)
        lay = QVBoxLayout(body)
        lay.setContentsMargins(8, 8, 8, 8)

        form = QFormLayout()
        self.treatment_box = QComboBox()
        self.treatment_box.setObjectName("treatmentBox")
        self.outcome_box = QComboBox()
        self.outcome_box.setObjectName("outcomeBox")
        form.addRow("Treatment", self.treatment_box)
        form.addRow("Outcome", self.outcome_box)
        lay.addLayout(form)

        self.status = QLabel()
        self.status.setObjectName("controlsStatus")
        self.status.setWordWrap(True)
        self.status.setTextFormat(Qt.RichText)
        lay.addWidget(self.status)

        title = QLabel("Valid control sets (click one to plan it)")
        title.setProperty("class", "sectionTitle")
        lay.addWidget(title)
        self.sets = QListWidget()
        self.sets.setObjectName("controlSetsList")
        self.sets.setMaximumHeight(150)
        lay.addWidget(self.sets)

        row = QHBoxLayout()
        self.planned_edit = QLineEdit()
        self.planned_edit.setObjectName("plannedSetEdit")
        self.planned_edit.setPlaceholderText("planned set, e.g. age, sex")
        self.check_button = QPushButton("Check")
        self.check_button.setObjectName("checkPlannedButton")
        row.addWidget(self.planned_edit, 1)
        row.addWidget(self.check_button)
        lay.addLayout(row)
        self.verdict = QLabel()
        self.verdict.setObjectName("verdictLabel")
        self.verdict.setWordWrap(True)
        self.verdict.setTextFormat(Qt.RichText)
        lay.addWidget(self.verdict)

        title = QLabel("Effect range")
        title.setProperty("class", "sectionTitle")
        lay.addWidget(title)
        self.chart = QLabel()
        self.chart.setObjectName("effectChart")
        self.chart.setAlignment(Qt.AlignCenter)
        self.chart.setMinimumWidth(1)
        self.chart.setSizePolicy(QSizePolicy.Ignored, QSizePolicy.Preferred)
        self._chart_pixmap = QPixmap()
        lay.addWidget(self.chart)
        self.effect_text = QLabel()
        self.effect_text.setObjectName("effectSummary")
        self.effect_text.setWordWrap(True)
        lay.addWidget(self.effect_text)

        self.cautions = QLabel()
        self.cautions.setObjectName("controlsCautions")
        self.cautions.setWordWrap(True)
        self.cautions.setStyleSheet("color: #6B737B; font-size: 11px;")
        lay.addWidget(self.cautions)
        lay.addStretch(1)

        self.treatment_box.currentTextChanged.connect(self._on_treatment_box)
        self.outcome_box.currentTextChanged.connect(self._on_outcome_box)
        self.sets.itemClicked.connect(self._on_set_clicked)
        self.check_button.clicked.connect(self._on_check)
        self.planned_edit.returnPressed.connect(self._on_check)
        ev = session.events
        for name in ("result", "dataset", "treatment", "outcome", "planned", "controls",
                     "effects", "controls_note"):
            getattr(ev, name).connect(self._refresh)
        self._refresh()

    # -- user actions -----------------------------------------------------------------------
    def _on_treatment_box(self, text):
        self.session.set_treatment(None if text in ("", _NONE) else text)

    def _on_outcome_box(self, text):
        self.session.set_outcome(None if text in ("", _NONE) else text)

    def _on_set_clicked(self, item: QListWidgetItem):
        names = item.data(Qt.UserRole)
        if names is not None:
            self.session.set_planned(names)

    def _on_check(self):
        if not self.session.set_planned(self.planned_edit.text()):
            self._refresh()

    # -- refresh from the model ---------------------------------------------------------------
    def _refresh(self, _=None):
        s = self.session
        names = list(s.result.variables) if s.result is not None else list(s.variables)
        with style.signals_blocked(self.treatment_box, self.outcome_box, self.planned_edit,
                                   self.sets):
            for box, value in ((self.treatment_box, s.treatment),
                               (self.outcome_box, s.outcome)):
                items = [_NONE] + names
                if [box.itemText(i) for i in range(box.count())] != items:
                    box.clear()
                    box.addItems(items)
                box.setCurrentIndex(items.index(value) if value in items else 0)
            self.planned_edit.setText(", ".join(s.planned))
            self._fill_sets()
        self._show_status()
        self._show_verdict()
        self._show_effects()

    def _fill_sets(self):
        self.sets.clear()
        answer = self.session.controls
        if answer is None or answer.canonical is None:
            return
        rows = []
        if answer.optimal is not None:
            rows.append(("optimal", answer.optimal))
        rows.append(("canonical", answer.canonical))
        rows += [("minimal", m) for m in answer.minimal]
        for label, names in rows:
            item = QListWidgetItem(f"{label}: {_set(names)}")
            item.setData(Qt.UserRole, sorted(names))
            if set(names) == set(self.session.planned):
                item.setForeground(SET_OUTLINE)
            self.sets.addItem(item)
        if not answer.minimal_complete:
            item = QListWidgetItem(f"(minimal sets listed up to the bound of "
                                   f"{answer.minimal_bound})")
            item.setFlags(Qt.NoItemFlags)
            self.sets.addItem(item)

    def _show_status(self):
        s = self.session
        answer = s.controls
        if answer is None:
            self.status.setText(escape(s.controls_note or "choose a treatment and an outcome"))
            self.cautions.setText("")
            return
        if not answer.amenable:
            text = (f"<b style='color:#B5482F'>Not identifiable by adjustment.</b> The path "
                    f"<b>{escape(answer.path_text(answer.breaking_path))}</b> (highlighted) may "
                    f"carry the effect in some diagrams of the class and confounding in others;"
                    f" no control set is valid.")
        elif answer.canonical is None:
            text = ("<b style='color:#B5482F'>No valid control set</b> among the measured "
                    "variables.")
        else:
            text = ("<b style='color:#1F6F78'>Identifiable by adjustment</b> in every diagram "
                    "of the class.")
        if answer.forbidden:
            text += f"<br>Never control for: {escape(_set(answer.forbidden))}."
        for n in answer.notes:
            text += f"<br><i>Note: {escape(n)}</i>"
        self.status.setText(text)
        self.cautions.setText("Cautions: " + " ".join(answer.cautions))

    def _show_verdict(self):
        s = self.session
        verdict = s.planned_verdict
        if verdict is None:
            self.verdict.setText("")
            return
        colour = "#1F6F78" if verdict.valid else "#B5482F"
        word = "valid" if verdict.valid else "not valid"
        self.verdict.setText(f"Planned set {escape(_set(verdict.set))}: "
                             f"<b style='color:{colour}'>{word}</b> — {escape(verdict.reason)}")

    def _scale_chart(self):
        pix = self._chart_pixmap
        if pix.isNull():
            return
        width = max(120, self.width() - 28)
        self.chart.setPixmap(pix if pix.width() <= width
                             else pix.scaledToWidth(width, Qt.SmoothTransformation))

    def resizeEvent(self, event):
        super().resizeEvent(event)
        self._scale_chart()

    def _show_effects(self):
        s = self.session
        effects = s.effects
        if effects is None:
            self._chart_pixmap = QPixmap()
            self.chart.clear()
            self.effect_text.setText(escape(s.controls_note) if s.controls is not None else "")
            return
        from discovery.effects import draw_effect_range
        fig = draw_effect_range(effects)
        width_in = max(3.2, (self.width() - 28) / 90)
        fig.set_size_inches(width_in, fig.get_size_inches()[1] * 0.85)
        fig.tight_layout(rect=(0, 0.05, 1, 1))
        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=90, facecolor=fig.get_facecolor())
        pix = QPixmap()
        pix.loadFromData(buf.getvalue(), "PNG")
        self._chart_pixmap = pix
        self._scale_chart()
        text = (f"{len(effects.effects)} possible effect(s), {effects.min:.3g} to "
                f"{effects.max:.3g}; {100 * effects.share_zero:.0f}% zero or not "
                f"distinguishable from zero.")
        if effects.chosen is not None:
            c = effects.chosen
            text += (f"\nAdjusting for {_set(c.controls)}: {c.estimate:.3g} "
                     f"(95% CI {c.ci[0]:.3g} to {c.ci[1]:.3g})"
                     + ("" if c.valid is not False else " — NOT a valid set"))
        self.effect_text.setText(text)
