"""The Survival panel: each pair found by the last sweep against the ladder of α (or δ).

One row per pair, most-present first: a pale band over each survival range and the edge's
mark at each rung where it is present (→, ←, — read from the left name to the right one; a
brick-red "?" where it is contested). A teal line marks the session's current α. A click on a
row selects the pair in the session (the canvas and the inspector follow).
"""

from __future__ import annotations

import math

from PySide6.QtCore import QPointF, QRectF, Qt, Signal
from PySide6.QtGui import QPainter, QPen
from PySide6.QtWidgets import (QHBoxLayout, QLabel, QPushButton, QScrollArea, QVBoxLayout,
                               QWidget)

from . import style
from .pair_rows import PairRowsChart

__all__ = ["SurvivalPanel", "SurvivalChart"]

_ROW = 20
_TOP = 26
_LEFT = 150
_RIGHT = 18


def _glyph(mark: str, a: str, b: str) -> str:
    if mark is None:
        return ""
    if "contested" in mark:
        return "?"
    middle = mark[len(a) + 1:len(mark) - len(b) - 1] if mark.endswith(b) else mark
    return middle.strip()


class SurvivalChart(PairRowsChart):
    """The painted chart (rows of pairs against the ladder); clicks select pairs."""

    TOP = _TOP
    BOTTOM = 28  # room for the ladder's name under the rows

    def __init__(self, parent=None):
        super().__init__("survivalChart", parent)
        self.current = None
        self.setMouseTracking(True)

    def rows(self):
        return self.record.edges if self.record is not None else ()

    def empty_text(self):
        return ("No sweep yet: Sweep in the toolbar runs the search over a ladder of α"
                if self.record is None else "The sweep found no edge at any rung")

    def set_record(self, record, current=None, selected=None):
        self.record, self.current, self.selected = record, current, selected
        self.fit_rows()

    def _x(self, value) -> float:
        ladder = self.record.ladder
        lo, hi = math.log(ladder[0]), math.log(ladder[-1])
        width = max(1.0, self.width() - _LEFT - _RIGHT)
        if hi == lo:
            return _LEFT + width / 2
        return _LEFT + (math.log(value) - lo) / (hi - lo) * width

    def paintEvent(self, event):
        p = QPainter(self)
        if not self.begin_paint(p):
            return
        record = self.record
        ladder = record.ladder
        # ladder ticks
        p.setPen(QPen(style.MUTED, 1))
        for v in ladder:
            x = self._x(v)
            p.drawLine(QPointF(x, _TOP - 4), QPointF(x, _TOP + _ROW * len(record.edges)))
        p.setPen(style.SLATE)
        name = "δ" if record.parameter == "margin" else "α"
        p.drawText(QRectF(4, 2, _LEFT - 8, 18), Qt.AlignLeft | Qt.AlignVCenter, name)
        step = max(1, len(ladder) // 6)
        for v in ladder[::step]:
            x = self._x(v)
            p.drawText(QRectF(x - 30, 4, 60, 16), Qt.AlignCenter, f"{v:.2g}")
        for row, e in enumerate(record.edges):
            y = _TOP + row * _ROW + _ROW / 2
            if self.selected == frozenset((e.a, e.b)):
                p.fillRect(QRectF(0, y - _ROW / 2, self.width(), _ROW), style.SELECTED_HALO)
            p.setPen(style.SLATE)
            p.drawText(QRectF(6, y - _ROW / 2, _LEFT - 12, _ROW), Qt.AlignRight |
                       Qt.AlignVCenter, f"{e.a} · {e.b}")
            band = QPen(style.BAND_FILLS[0].darker(108), 9, Qt.SolidLine, Qt.RoundCap)
            p.setPen(band)
            for low, high in e.survival:
                p.drawLine(QPointF(self._x(low), y), QPointF(self._x(high), y))
            for v, mark in zip(ladder, e.marks):
                glyph = _glyph(mark, e.a, e.b)
                if not glyph:
                    continue
                p.setPen(style.CONTESTED if glyph == "?" else style.SLATE)
                p.drawText(QRectF(self._x(v) - 10, y - _ROW / 2, 20, _ROW), Qt.AlignCenter,
                           glyph)
        if self.current is not None and ladder[0] <= self.current <= ladder[-1]:
            x = self._x(self.current)
            p.setPen(QPen(style.TEAL, 1.6))
            p.drawLine(QPointF(x, _TOP - 6), QPointF(x, _TOP + _ROW * len(record.edges)))


class SurvivalPanel(QWidget):
    """The Survival panel over ``session.sweep`` (a view: clicks go to the session)."""

    sweep_requested = Signal()

    def __init__(self, session, parent=None):
        super().__init__(parent)
        self.session = session
        self.setObjectName("survivalPanel")
        layout = QVBoxLayout(self)
        layout.setContentsMargins(4, 4, 4, 4)
        top = QHBoxLayout()
        self.summary = QLabel()
        self.summary.setObjectName("survivalSummary")
        self.summary.setWordWrap(True)
        top.addWidget(self.summary, 1)
        self.sweep_button = QPushButton("Sweep α")
        self.sweep_button.setObjectName("survivalSweepButton")
        self.sweep_button.setToolTip("Run the search over 12 log-spaced α from 1e-4 to 0.2")
        self.sweep_button.clicked.connect(self.sweep_requested)
        top.addWidget(self.sweep_button)
        layout.addLayout(top)
        self.chart = SurvivalChart()
        self.chart.pair_clicked.connect(self.session.select_pair)
        scroll = QScrollArea()
        scroll.setObjectName("survivalScroll")
        scroll.setWidgetResizable(True)
        scroll.setWidget(self.chart)
        layout.addWidget(scroll, 1)
        caution = QLabel("Each rung is a separate search under the same assumptions; a long "
                         "survival range says the edge does not hang on α, not that it is "
                         "causal.")
        caution.setObjectName("survivalCaution")
        caution.setWordWrap(True)
        caution.setStyleSheet("color: #8A8F94; font-size: 11px;")
        layout.addWidget(caution)
        ev = session.events
        ev.sweep.connect(self._refresh)
        ev.settings.connect(self._refresh)
        ev.selection.connect(self._refresh)
        ev.status.connect(self._on_status)
        self._refresh()
        self._on_status(session.status)

    def _on_status(self, status):
        self.sweep_button.setEnabled(status not in ("running", "stopping"))

    def _refresh(self, _=None):
        s = self.session
        record = s.sweep
        selected = frozenset(s.selection) if len(s.selection) == 2 else None
        current = None
        if record is not None:
            current = s.settings.margin if record.parameter == "margin" else s.settings.alpha
        self.chart.set_record(record, current, selected)
        if record is None:
            self.summary.setText("Which edges survive other thresholds?")
        else:
            whole = sum(all(e.present) for e in record.edges)
            name = "δ" if record.parameter == "margin" else "α"
            self.summary.setText(
                f"{len(record.ladder)} rungs of {name} from {record.ladder[0]:g} to "
                f"{record.ladder[-1]:g}: {whole} of {len(record.edges)} pairs present at "
                "every rung")
