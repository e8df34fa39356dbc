"""A painted chart with one row per pair of variables, shared by the Survival and Support
panels: rows laid out from the top, a click on a row selects its pair, and a quiet message
when there is nothing to show."""

from __future__ import annotations

from PySide6.QtCore import QSize, Qt, Signal
from PySide6.QtGui import QFont, QPainter
from PySide6.QtWidgets import QWidget

from . import style

__all__ = ["PairRowsChart"]


class PairRowsChart(QWidget):
    """Subclasses give :meth:`rows` (records with ``a`` and ``b``) and :meth:`empty_text`,
    and paint their rows after :meth:`begin_paint`."""

    pair_clicked = Signal(str, str)
    ROW = 20  # height of a row
    TOP = 24  # y of the first row (room for the axis labels above)
    BOTTOM = 10  # room below the last row

    def __init__(self, name: str, parent=None):
        super().__init__(parent)
        self.setObjectName(name)
        self.record = None
        self.selected = None
        self.setMinimumHeight(80)

    def rows(self) -> tuple:
        return ()

    def empty_text(self) -> str:
        return ""

    def fit_rows(self) -> None:
        """Grow to show every row (the panel scrolls), after a new record."""
        self.setMinimumHeight(self.TOP + self.ROW * len(self.rows()) + self.BOTTOM)
        self.updateGeometry()
        self.update()

    def sizeHint(self):
        return QSize(520, self.TOP + self.ROW * len(self.rows()) + self.BOTTOM)

    def row_at(self, y: float) -> int | None:
        if self.record is None:
            return None
        row = int((y - self.TOP) // self.ROW)
        return row if 0 <= row < len(self.rows()) else None

    def mousePressEvent(self, event):
        row = self.row_at(event.position().y())
        if row is not None and event.button() == Qt.LeftButton:
            pair = self.rows()[row]
            self.pair_clicked.emit(pair.a, pair.b)
            event.accept()
            return
        super().mousePressEvent(event)

    def begin_paint(self, p: QPainter) -> bool:
        """Clear to the canvas colour; with no rows, say why and return False; else set the
        chart's font and return True."""
        p.setRenderHint(QPainter.Antialiasing)
        p.fillRect(self.rect(), style.CANVAS)
        if self.record is None or not self.rows():
            p.setPen(style.MUTED)
            p.drawText(self.rect(), Qt.AlignCenter, self.empty_text())
            return False
        font = QFont(self.font())
        font.setPointSizeF(8.5)
        p.setFont(font)
        return True
