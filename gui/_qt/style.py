"""The window's visual language (DESIGN.md §6) in one place: colours, pens, kind glyphs.

Warm light-grey canvas, white rounded nodes with a slate border, slate edges; contested
edges dashed brick red; knowledge in deep teal. Kind glyphs are drawn, not taken from a font:

- continuous: a small wave;
- binary: two dots, one filled;
- categorical: three small squares;
- ordinal: three rising bars.
"""

from __future__ import annotations

from contextlib import contextmanager

from PySide6.QtCore import QPointF, QRectF, Qt
from PySide6.QtGui import QColor, QIcon, QPainter, QPainterPath, QPen, QPixmap

CANVAS = QColor("#F7F6F3")
NODE_FILL = QColor("#FFFFFF")
SLATE = QColor("#44505C")
SLATE_SOFT = QColor(68, 80, 92, 150)
CONTESTED = QColor("#B5482F")
TEAL = QColor("#1F6F78")
FORBIDDEN = QColor(68, 80, 92, 110)
SELECTED_HALO = QColor("#D8E3EC")
SELECTED_BORDER = QColor("#2B3640")
BAND_FILLS = (QColor("#EEECE6"), QColor("#E8EAE4"))
BAND_TEXT = QColor("#8A8F94")
STALE = QColor("#8A6D3B")
MUTED = QColor("#8A8F94")

KIND_TEXT = {"continuous": "continuous", "binary": "binary", "categorical": "categorical",
             "ordinal": "ordinal"}

STYLE_SHEET = """
QMainWindow, QDockWidget { background: #FBFAF8; }
QDockWidget::title { padding: 4px 8px; background: #EFEDE8; color: #44505C; font-weight: 600; }
QToolBar { background: #FBFAF8; border-bottom: 1px solid #E2DFD8; spacing: 4px; padding: 3px; }
QToolBar QLabel { color: #44505C; padding: 0 2px 0 8px; }
QStatusBar { background: #EFEDE8; color: #44505C; }
QTableWidget, QListWidget, QPlainTextEdit, QTextBrowser { background: #FFFFFF;
    border: 1px solid #E2DFD8; selection-background-color: #D8E3EC;
    selection-color: #1B232B; }
QHeaderView::section { background: #F3F1EC; color: #44505C; border: none;
    border-bottom: 1px solid #E2DFD8; padding: 3px 6px; }
QPushButton { padding: 3px 10px; border: 1px solid #C9CDD1; border-radius: 4px;
    background: #FFFFFF; color: #2B3640; }
QPushButton:hover { border-color: #44505C; }
QPushButton:disabled { color: #A8ADB2; border-color: #E2DFD8; }
QPushButton#runButton { background: #44505C; color: white; border-color: #44505C;
    font-weight: 600; }
QPushButton#runButton:disabled { background: #E9E7E2; color: #A8ADB2; border-color: #DAD7D0;
    font-weight: 600; }
QPushButton#statusAssumptions { border: none; color: #1F6F78; text-decoration: underline;
    padding: 0 8px; background: transparent; }
QLabel#staleBanner { background: rgba(255, 248, 230, 235); color: #6B5226;
    border: 1px solid #E6D3A8; border-radius: 4px; padding: 6px 10px; }
QLabel#canvasHint { color: #8A8F94; font-size: 15px; }
QLabel.sectionTitle { color: #44505C; font-weight: 600; }
"""


@contextmanager
def signals_blocked(*widgets):
    """Stop widgets' own signals while the model refreshes them (no echo back)."""
    previous = [w.blockSignals(True) for w in widgets]
    try:
        yield
    finally:
        for w, was in zip(widgets, previous):
            w.blockSignals(was)


def paint_kind_glyph(painter: QPainter, rect: QRectF, kind: str, color: QColor = SLATE):
    """Draw the glyph of a column kind inside ``rect``."""
    painter.save()
    painter.setRenderHint(QPainter.Antialiasing)
    pen = QPen(color, max(1.2, rect.width() / 9))
    pen.setCapStyle(Qt.RoundCap)
    painter.setPen(pen)
    painter.setBrush(Qt.NoBrush)
    x, y, w, h = rect.x(), rect.y(), rect.width(), rect.height()
    if kind == "continuous":
        path = QPainterPath(QPointF(x, y + h * 0.6))
        path.cubicTo(QPointF(x + w * 0.25, y - h * 0.05), QPointF(x + w * 0.45, y + h * 0.2),
                     QPointF(x + w * 0.5, y + h * 0.5))
        path.cubicTo(QPointF(x + w * 0.55, y + h * 0.8), QPointF(x + w * 0.75, y + h * 1.05),
                     QPointF(x + w, y + h * 0.4))
        painter.drawPath(path)
    elif kind == "binary":
        r = w * 0.2
        painter.setBrush(color)
        painter.drawEllipse(QPointF(x + w * 0.27, y + h / 2), r, r)
        painter.setBrush(Qt.NoBrush)
        painter.drawEllipse(QPointF(x + w * 0.73, y + h / 2), r, r)
    elif kind == "categorical":
        s = w * 0.26
        painter.setPen(QPen(color, max(1.0, w / 12)))
        for i, fill in enumerate((True, False, True)):
            painter.setBrush(color if fill else Qt.NoBrush)
            painter.drawRect(QRectF(x + i * (s + w * 0.1), y + h / 2 - s / 2, s, s))
    else:  # ordinal
        painter.setPen(Qt.NoPen)
        painter.setBrush(color)
        bw = w * 0.22
        for i, frac in enumerate((0.35, 0.65, 1.0)):
            bh = h * 0.8 * frac
            painter.drawRect(QRectF(x + i * (bw + w * 0.17), y + h * 0.9 - bh, bw, bh))
    painter.restore()


def kind_icon(kind: str, size: int = 16) -> QIcon:
    pix = QPixmap(size, size)
    pix.fill(Qt.transparent)
    p = QPainter(pix)
    paint_kind_glyph(p, QRectF(2, 3, size - 4, size - 6), kind)
    p.end()
    return QIcon(pix)


def mark_icon(mark: str, size: int = 28) -> QIcon:
    """A small picture of an edge mark, for the legend and menus."""
    pix = QPixmap(size * 2, size)
    pix.fill(Qt.transparent)
    p = QPainter(pix)
    paint_mark(p, QPointF(3, size / 2), QPointF(size * 2 - 3, size / 2), mark)
    p.end()
    return QIcon(pix)


def paint_mark(painter: QPainter, a: QPointF, b: QPointF, mark: str):
    """Draw one legend sample of ``mark`` from a to b (horizontal)."""
    from .canvas import draw_edge
    draw_edge(painter, a, b, mark, locked=(mark == "locked"), scale=0.8)
