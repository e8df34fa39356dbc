"""The canvas: the diagram drawn in the product's own visual language (DESIGN.md §6).

:class:`GraphCanvas` observes the session (result, positions, knowledge, overlay, selection,
included variables) and sends clicks, drags and context-menu actions back to it. Nodes are
white rounded rectangles with a slate border and a kind glyph; edges are slate and their ends
are drawn from the edge's marks (``Edge.from_mark`` / ``Edge.to_mark``): an arrow is a filled
head, a circle a small open ring, a tail nothing — so directed is solid with one filled head,
undirected has no heads, bidirected (hidden-causes mode) has filled heads at both ends.
Contested is our own mark: dashed brick red with a small break and a "?" badge in the middle,
no heads (never open heads at both ends, which the field reads as bidirected). The knowledge
overlay puts a deep-teal double bar across locked edges and shows forbidden pairs as faint
dotted lines with a small cross. Stages are soft bands behind their nodes.
"""

from __future__ import annotations

import math

import numpy as np

from PySide6.QtCore import QPointF, QRectF, Qt, Signal
from PySide6.QtGui import (QAction, QBrush, QColor, QFont, QFontMetricsF, QPainter,
                           QPainterPath, QPainterPathStroker, QPen, QPolygonF)
from PySide6.QtWidgets import (QCompleter, QGraphicsItem, QGraphicsScene, QGraphicsView,
                               QLabel, QLineEdit, QMenu, QToolButton, QWidget)

from . import controls_panel, style

NODE_H = 34.0
ARROW_LEN = 11.0
ARROW_HALF = 5.0


# ----------------------------------------------------------------------------- drawing helpers

def _unit(a: QPointF, b: QPointF):
    dx, dy = b.x() - a.x(), b.y() - a.y()
    length = math.hypot(dx, dy) or 1.0
    return dx / length, dy / length, length


def _head(painter: QPainter, tip: QPointF, ux: float, uy: float, *, filled: bool,
          color: QColor, scale: float):
    """An arrowhead with its tip at ``tip`` pointing along (ux, uy)."""
    length, half = ARROW_LEN * scale, ARROW_HALF * scale
    base = QPointF(tip.x() - ux * length, tip.y() - uy * length)
    left = QPointF(base.x() - uy * half, base.y() + ux * half)
    right = QPointF(base.x() + uy * half, base.y() - ux * half)
    painter.save()
    painter.setPen(QPen(color, 1.3 * scale, Qt.SolidLine, Qt.RoundCap, Qt.RoundJoin))
    painter.setBrush(color if filled else style.CANVAS)
    painter.drawPolygon(QPolygonF([tip, left, right]))
    painter.restore()


def _double_bar(painter: QPainter, a: QPointF, b: QPointF, scale: float):
    ux, uy, length = _unit(a, b)
    mid = QPointF((a.x() + b.x()) / 2, (a.y() + b.y()) / 2)
    painter.save()
    painter.setPen(QPen(style.TEAL, 2.2 * scale, Qt.SolidLine, Qt.FlatCap))
    half = 7.0 * scale
    for off in (-3.0 * scale, 3.0 * scale):
        c = QPointF(mid.x() + ux * off, mid.y() + uy * off)
        painter.drawLine(QPointF(c.x() - uy * half, c.y() + ux * half),
                         QPointF(c.x() + uy * half, c.y() - ux * half))
    painter.restore()


def _cross(painter: QPainter, at: QPointF, color: QColor, scale: float, size: float = 4.5):
    painter.save()
    painter.setPen(QPen(color, 1.6 * scale, Qt.SolidLine, Qt.RoundCap))
    s = size * scale
    painter.drawLine(QPointF(at.x() - s, at.y() - s), QPointF(at.x() + s, at.y() + s))
    painter.drawLine(QPointF(at.x() - s, at.y() + s), QPointF(at.x() + s, at.y() - s))
    painter.restore()


#: The end marks (at a, at b) of each edge kind, for callers that give a kind only. Drawing
#: always goes by marks, so kinds a later search mode adds draw without a new code path.
KIND_MARKS = {
    "directed": ("tail", "arrow"), "undirected": ("tail", "tail"),
    "contested": ("tail", "tail"), "locked": ("tail", "tail"),
    "bidirected": ("arrow", "arrow"), "partially-directed": ("circle", "arrow"),
    "nondirected": ("circle", "circle"), "partially-undirected": ("circle", "tail"),
}
#: The kinds of the hidden-causes mode and their marks (drawn by the same code as the rest).
PAG_MARKS = {k: KIND_MARKS[k] for k in ("bidirected", "partially-directed", "nondirected",
                                          "partially-undirected")}
RING_R = 4.0
BADGE_R = 7.0


def edge_text(edge) -> str:
    """The edge in words, from its kind and marks: ``a → b``, ``a — b``,
    ``a ?– b (contested)``, ``a ↔ b (bidirected)``, ``a o→ b`` …"""
    a, b = edge.source, edge.target
    if edge.kind == "contested":
        return f"{a} ?– {b} (contested)"
    middle = {("tail", "tail"): "—", ("tail", "arrow"): "→", ("arrow", "tail"): "←",
              ("arrow", "arrow"): "↔", ("circle", "arrow"): "o→", ("arrow", "circle"): "←o",
              ("circle", "circle"): "o–o", ("circle", "tail"): "o–",
              ("tail", "circle"): "–o"}[_marks_of(edge)]
    return f"{a} {middle} {b}" + (" (bidirected)" if middle == "↔" else "")


def _marks_of(edge) -> tuple[str, str]:
    from_mark = getattr(edge, "from_mark", None)
    to_mark = getattr(edge, "to_mark", None)
    if from_mark in ("tail", "arrow", "circle") and to_mark in ("tail", "arrow", "circle"):
        return from_mark, to_mark
    return KIND_MARKS.get(edge.kind, ("tail", "tail"))


def _ring(painter: QPainter, tip: QPointF, ux: float, uy: float, *, color: QColor,
          scale: float):
    """A small open ring touching ``tip``, on the line coming along (ux, uy)."""
    r = RING_R * scale
    centre = QPointF(tip.x() - ux * r, tip.y() - uy * r)
    painter.save()
    painter.setPen(QPen(color, 1.3 * scale))
    painter.setBrush(style.CANVAS)
    painter.drawEllipse(centre, r, r)
    painter.restore()


def _badge(painter: QPainter, at: QPointF, scale: float):
    """The contested badge: a "?" in a small ring of brick red at the edge's middle."""
    r = BADGE_R * scale
    painter.save()
    painter.setOpacity(painter.opacity())
    painter.setPen(QPen(style.CONTESTED, 1.2 * scale))
    painter.setBrush(style.NODE_FILL)
    painter.drawEllipse(at, r, r)
    font = QFont(painter.font())
    font.setPixelSize(max(6, round(11 * scale)))
    font.setBold(True)
    painter.setFont(font)
    painter.drawText(QRectF(at.x() - r, at.y() - r, 2 * r, 2 * r), Qt.AlignCenter, "?")
    painter.restore()


def _end(painter, mark, tip, ux, uy, *, color, scale):
    if mark == "arrow":
        _head(painter, tip, ux, uy, filled=True, color=color, scale=scale)
    elif mark == "circle":
        _ring(painter, tip, ux, uy, color=color, scale=scale)


def draw_edge(painter: QPainter, a: QPointF, b: QPointF, kind: str, *, marks=None,
              locked: bool = False, forbidden_heads=(), hover: bool = False,
              selected: bool = False, scale: float = 1.0, faded: bool = False,
              control: QPointF | None = None, badge_t: float = 0.5, weight: float = 1.0):
    """Draw one mark from a to b (``weight`` scales the line width, e.g. by support).

    ``kind`` is an edge kind (``directed``, ``undirected``, ``contested``, and the
    hidden-causes kinds ``bidirected``, ``partially-directed``, ``nondirected``,
    ``partially-undirected``), ``forbidden`` (overlay), ``pending-lock`` (a locked pair the
    current diagram does not have yet) or ``locked`` (legend sample: an undirected edge with
    the lock bar). ``marks`` is the pair of end marks (at a, at b), each ``tail`` (nothing),
    ``arrow`` (a filled head) or ``circle`` (a small open ring); by default they follow
    ``kind`` (:data:`KIND_MARKS`). A contested edge is dashed brick red with a small break
    and a "?" badge in its middle and never has heads (open heads at both ends would read as
    a bidirected edge, a hidden common cause). ``forbidden_heads`` lists the ends ("a" or
    "b") whose arrowhead is forbidden; each gets a small cross. With ``control``, the edge is
    a quadratic curve through that control point (used to bend around a node). ``badge_t``
    places the contested badge along the edge (0.5: the middle; moved when two badges would
    touch).
    """
    path = QPainterPath(a)
    if control is None:
        path.lineTo(b)
    else:
        path.quadTo(control, b)
    if control is None:
        ua = _unit(b, a)[:2]
        ub = _unit(a, b)[:2]
    else:
        ua = _unit(control, a)[:2]
        ub = _unit(control, b)[:2]
    mid = path.pointAtPercent(0.5)
    width = (2.6 if selected else 1.9 if hover else 1.5) * scale * weight
    painter.save()
    painter.setRenderHint(QPainter.Antialiasing)
    painter.setBrush(Qt.NoBrush)
    if faded:
        painter.setOpacity(0.45)
    if kind == "forbidden":
        painter.setPen(QPen(style.FORBIDDEN, 1.2 * scale, Qt.DotLine, Qt.RoundCap))
        painter.drawPath(path)
        _cross(painter, mid, style.FORBIDDEN, scale)
    elif kind == "pending-lock":
        painter.setPen(QPen(style.TEAL, 1.3 * scale, Qt.DotLine, Qt.RoundCap))
        painter.drawPath(path)
        _double_bar(painter, *_span(path, mid), scale)
    else:
        contested = kind == "contested"
        color = style.CONTESTED if contested else style.SLATE
        end_a, end_b = ("tail", "tail") if contested else (marks or KIND_MARKS.get(
            kind, ("tail", "tail")))
        if contested:  # a small break in the middle, where the badge sits
            length = max(path.length(), 1.0)
            gap = min(0.2, (BADGE_R + 4) * scale / length)
            badge_t = min(max(badge_t, gap + 0.05), 0.95 - gap)
            pieces = [_sub_path(path, 0.0, badge_t - gap), _sub_path(path, badge_t + gap, 1.0)]
        else:
            pieces = [path]
        if selected:
            painter.setPen(QPen(style.SELECTED_HALO, width + 6 * scale, Qt.SolidLine,
                                Qt.RoundCap))
            painter.drawPath(path)
        pen = QPen(color, width, Qt.DashLine if contested else Qt.SolidLine, Qt.FlatCap)
        if contested:
            pen.setDashPattern([5, 3])
        painter.setPen(pen)
        for piece in pieces:
            painter.drawPath(piece)
        _end(painter, end_a, a, ua[0], ua[1], color=color, scale=scale)
        _end(painter, end_b, b, ub[0], ub[1], color=color, scale=scale)
        if contested:
            _badge(painter, path.pointAtPercent(badge_t), scale)
        if locked or kind == "locked":
            _double_bar(painter, *_span(path, mid, 0.12 if contested else 0.0), scale)
    for end in forbidden_heads:
        t = _percent_at_distance(path, 20 * scale, from_end=end == "b")
        _cross(painter, path.pointAtPercent(t), style.TEAL, scale, 3.5)
    painter.restore()


def _sub_path(path: QPainterPath, t0: float, t1: float, steps: int = 24) -> QPainterPath:
    """The part of ``path`` between percents t0 and t1, as a polyline."""
    out = QPainterPath(path.pointAtPercent(t0))
    for i in range(1, steps + 1):
        out.lineTo(path.pointAtPercent(t0 + (t1 - t0) * i / steps))
    return out


def _span(path: QPainterPath, mid: QPointF, shift: float = 0.0):
    """A short stretch of the path around its middle (where the lock bar goes), moved by
    ``shift`` of the length (so that the bar clears the contested badge)."""
    lo, hi = 0.45 + shift, 0.55 + shift
    return path.pointAtPercent(lo), path.pointAtPercent(hi)


def _percent_at_distance(path: QPainterPath, distance: float, *, from_end: bool) -> float:
    length = max(path.length(), 1.0)
    t = min(0.45, distance / length)
    return 1.0 - t if from_end else t


def _crosses_box(p: QPointF, q: QPointF, box: QRectF) -> bool:
    """Whether the segment p–q passes through ``box`` (Liang–Barsky clipping)."""
    dx, dy = q.x() - p.x(), q.y() - p.y()
    t0, t1 = 0.0, 1.0
    for edge_p, edge_q in ((-dx, p.x() - box.left()), (dx, box.right() - p.x()),
                           (-dy, p.y() - box.top()), (dy, box.bottom() - p.y())):
        if edge_p == 0:
            if edge_q < 0:
                return False
            continue
        t = edge_q / edge_p
        if edge_p < 0:
            t0 = max(t0, t)
        else:
            t1 = min(t1, t)
        if t0 > t1:
            return False
    return True


def _bend(canvas, a: "NodeItem", b: "NodeItem") -> QPointF | None:
    """A control point that takes the edge a–b around the nodes its straight line crosses
    (segment-box tests for every node at once, Liang–Barsky clipping in numpy)."""
    ca, cb = a.pos(), b.pos()
    ux, uy, length = _unit(ca, cb)
    if length < 1:
        return None
    names, centres, halves = canvas.node_arrays()
    px, py = ca.x(), ca.y()
    dx, dy = cb.x() - px, cb.y() - py
    lo = centres - halves - 6.0
    hi = centres + halves + 6.0
    with np.errstate(divide="ignore", invalid="ignore"):
        tx1, tx2 = (lo[:, 0] - px) / dx, (hi[:, 0] - px) / dx
        ty1, ty2 = (lo[:, 1] - py) / dy, (hi[:, 1] - py) / dy
    if dx == 0:
        inside = (px >= lo[:, 0]) & (px <= hi[:, 0])
        tx1 = np.where(inside, -np.inf, np.inf)
        tx2 = np.where(inside, np.inf, -np.inf)
    if dy == 0:
        inside = (py >= lo[:, 1]) & (py <= hi[:, 1])
        ty1 = np.where(inside, -np.inf, np.inf)
        ty2 = np.where(inside, np.inf, -np.inf)
    t_in = np.maximum(np.maximum(np.minimum(tx1, tx2), np.minimum(ty1, ty2)), 0.0)
    t_out = np.minimum(np.minimum(np.maximum(tx1, tx2), np.maximum(ty1, ty2)), 1.0)
    hit = t_in <= t_out
    hit[[canvas.node_index[a.name], canvas.node_index[b.name]]] = False
    if not hit.any():
        return None
    rel = centres[hit] - np.array([px, py])
    side = rel[:, 0] * -uy + rel[:, 1] * ux  # signed distance of each crossed node
    need = NODE_H / 2 + 14 + np.abs(side) + halves[hit, 0] * abs(uy)
    k = int(np.argmax(need))
    sign = -1.0 if side[k] > 0 else 1.0
    bulge = min(2 * float(need[k]), 0.6 * length)  # a quadratic reaches half its offset
    mid = QPointF((ca.x() + cb.x()) / 2, (ca.y() + cb.y()) / 2)
    return QPointF(mid.x() - uy * bulge * sign, mid.y() + ux * bulge * sign)


def _clip(center: QPointF, toward: QPointF, hw: float, hh: float, pad: float = 3.0) -> QPointF:
    """Where the segment center → toward leaves a box of half sizes hw, hh (plus pad)."""
    dx, dy = toward.x() - center.x(), toward.y() - center.y()
    if dx == 0 and dy == 0:
        return QPointF(center)
    hw, hh = hw + pad, hh + pad
    t = min(hw / abs(dx) if dx else math.inf, hh / abs(dy) if dy else math.inf)
    t = min(t, 1.0)
    return QPointF(center.x() + dx * t, center.y() + dy * t)


# ----------------------------------------------------------------------------- items

class NodeItem(QGraphicsItem):
    """One variable: a white rounded rectangle with its kind glyph and name."""

    def __init__(self, canvas: "GraphCanvas", name: str, kind: str, *, included: bool = True):
        super().__init__()
        self.canvas = canvas
        self.name = name
        self.kind = kind
        self.included = included
        self.selected = False
        self.edges: list = []
        font = canvas.node_font
        self.text_width = QFontMetricsF(font).horizontalAdvance(name)
        self.width = max(64.0, self.text_width + 40.0)
        self.rect = QRectF(-self.width / 2, -NODE_H / 2, self.width, NODE_H)
        self.setFlags(QGraphicsItem.ItemIsMovable | QGraphicsItem.ItemSendsGeometryChanges)
        self.setAcceptHoverEvents(True)
        self.setCursor(Qt.OpenHandCursor)
        self.setZValue(10)
        self.setToolTip(self._tooltip())

    def _tooltip(self) -> str:
        ds = self.canvas.session.dataset
        parts = [self.name, f"kind: {self.kind}"]
        if ds is not None and self.name in ds.missing_share:
            parts.append(f"missing: {100 * ds.missing_share[self.name]:.1f}%")
        if not self.included:
            parts.append("left out of the search")
        return "\n".join(parts)

    @property
    def half(self):
        return self.width / 2, NODE_H / 2

    def boundingRect(self) -> QRectF:
        return self.rect.adjusted(-5, -5, 5, 5)

    def paint(self, painter: QPainter, option, widget=None):
        painter.setRenderHint(QPainter.Antialiasing)
        if self.selected:
            painter.setPen(Qt.NoPen)
            painter.setBrush(style.SELECTED_HALO)
            painter.drawRoundedRect(self.rect.adjusted(-4, -4, 4, 4), 11, 11)
        pen = QPen(style.SELECTED_BORDER if self.selected else style.SLATE,
                   2.2 if self.selected else 1.4)
        if not self.included:
            pen = QPen(style.MUTED, 1.2, Qt.DashLine)
        painter.setPen(pen)
        fill, in_set = controls_panel.node_role(self.canvas.session, self.name)
        painter.setBrush(fill or style.NODE_FILL)
        painter.drawRoundedRect(self.rect, 8, 8)
        if in_set:
            controls_panel.paint_set_outline(painter, self.rect)
        glyph = QRectF(self.rect.left() + 9, -5.5, 13, 11)
        style.paint_kind_glyph(painter, glyph, self.kind,
                               style.SLATE if self.included else style.MUTED)
        painter.setFont(self.canvas.node_font)
        painter.setPen(QColor("#1B232B") if self.included else style.MUTED)
        painter.drawText(QRectF(self.rect.left() + 28, self.rect.top(), self.width - 34,
                                NODE_H), Qt.AlignVCenter | Qt.AlignLeft, self.name)

    def itemChange(self, change, value):
        if change == QGraphicsItem.ItemPositionHasChanged:
            self.canvas._arrays = None
            for edge in self.edges:
                edge.update_geometry()
            self.canvas._node_moved(self)
        return super().itemChange(change, value)

    def mousePressEvent(self, event):
        if event.button() == Qt.LeftButton:
            self.canvas._node_pressed(self, event.modifiers())
            self.setCursor(Qt.ClosedHandCursor)
        super().mousePressEvent(event)

    def mouseReleaseEvent(self, event):
        super().mouseReleaseEvent(event)
        self.setCursor(Qt.OpenHandCursor)
        self.canvas._node_released(self)


class EdgeItem(QGraphicsItem):
    """One edge of the result between two node items.

    Attributes
    ----------
    kind : str
        ``directed`` (source → target), ``undirected`` or ``contested``.
    locked : bool
        The pair is locked by the current knowledge (drawn with the teal bar while the
        overlay is on).
    """

    def __init__(self, canvas: "GraphCanvas", edge, a: NodeItem, b: NodeItem, *,
                 locked: bool, forbidden_heads=(), faded: bool = False):
        super().__init__()
        self.canvas = canvas
        self.edge = edge
        self.source, self.target = edge.source, edge.target
        self.kind = edge.kind
        self.marks = _marks_of(edge)
        self.badge_t = 0.5
        self.locked = locked
        self.forbidden_heads = tuple(forbidden_heads)
        self.faded = faded
        self.a, self.b = a, b
        self.hover = False
        self.selected = False
        self.p1 = QPointF()
        self.p2 = QPointF()
        self.control = None
        self._shape = QPainterPath()
        self.setAcceptHoverEvents(True)
        self.setZValue(5)
        self.setCursor(Qt.PointingHandCursor)
        a.edges.append(self)
        b.edges.append(self)
        self.setToolTip(self._tooltip())
        self.update_geometry()

    def _tooltip(self) -> str:
        e = self.edge
        p = e.max_pvalue
        decisive = ("no test ran on this pair" if p != p
                    else f"decisive p-value {p:.3g} (largest of {e.tests} tests; "
                         f"kept because below α)")
        why = e.reason or "direction not determined by the data"
        lines = [edge_text(e), decisive, why]
        if self.locked:
            lines.append("locked by knowledge")
        return "\n".join(lines)

    def update_geometry(self):
        self.prepareGeometryChange()
        ca, cb = self.a.pos(), self.b.pos()
        self.control = _bend(self.canvas, self.a, self.b)
        toward_a = self.control if self.control is not None else cb
        toward_b = self.control if self.control is not None else ca
        self.p1 = _clip(ca, toward_a, *self.a.half)
        self.p2 = _clip(cb, toward_b, *self.b.half)
        path = QPainterPath(self.p1)
        if self.control is None:
            path.lineTo(self.p2)
        else:
            path.quadTo(self.control, self.p2)
        stroker = QPainterPathStroker()
        stroker.setWidth(12)
        self._shape = stroker.createStroke(path)

    def boundingRect(self) -> QRectF:
        rect = QRectF(self.p1, self.p2).normalized()
        if self.control is not None:
            rect = rect.united(QRectF(self.control, self.control))
        return rect.adjusted(-14, -14, 14, 14)

    def shape(self) -> QPainterPath:
        return self._shape

    def paint(self, painter: QPainter, option, widget=None):
        overlay = self.canvas.session.overlay
        if frozenset((self.source, self.target)) in self.canvas.path_pairs:
            controls_panel.paint_path_halo(painter, self.p1, self.p2, self.control)
        draw_edge(painter, self.p1, self.p2, self.kind, marks=self.marks,
                  locked=self.locked and overlay,
                  forbidden_heads=self.forbidden_heads if overlay else (),
                  hover=self.hover, selected=self.selected, faded=self.faded,
                  control=self.control, badge_t=self.badge_t,
                  weight=support_weight(self.canvas.session, self.source, self.target))

    def hoverEnterEvent(self, event):
        self.hover = True
        self.update()

    def hoverLeaveEvent(self, event):
        self.hover = False
        self.update()

    def mousePressEvent(self, event):
        if event.button() == Qt.LeftButton:
            self.canvas.session.select_pair(self.source, self.target)
            event.accept()
        else:
            super().mousePressEvent(event)


def support_weight(session, a: str, b: str) -> float:
    """Line-width factor from resampling support: 1 without a support run; else from 0.5
    (never adjacent in a resample) to 2 (adjacent in every one)."""
    record = getattr(session, "support", None)
    if record is None:
        return 1.0
    pair = record.pair(a, b)
    return 0.5 + 1.5 * (pair.adjacent if pair is not None else 0.0)


class OverlayItem(QGraphicsItem):
    """A knowledge mark with no edge in the diagram: a forbidden pair, or a locked pair the
    current diagram does not have (yet)."""

    def __init__(self, canvas, kind: str, a: NodeItem, b: NodeItem):
        super().__init__()
        self.canvas = canvas
        self.kind = kind
        self.source, self.target = a.name, b.name
        self.a, self.b = a, b
        self.p1 = QPointF()
        self.p2 = QPointF()
        self.setZValue(2)
        a.edges.append(self)
        b.edges.append(self)
        self.setToolTip(f"{a.name} — {b.name}: "
                        + ("forbidden by knowledge" if kind == "forbidden"
                           else "locked by knowledge; run again to see it in the diagram"))
        self.update_geometry()

    def update_geometry(self):
        self.prepareGeometryChange()
        ca, cb = self.a.pos(), self.b.pos()
        self.p1 = _clip(ca, cb, *self.a.half)
        self.p2 = _clip(cb, ca, *self.b.half)

    def boundingRect(self) -> QRectF:
        return QRectF(self.p1, self.p2).normalized().adjusted(-10, -10, 10, 10)

    def shape(self) -> QPainterPath:
        path = QPainterPath(self.p1)
        path.lineTo(self.p2)
        stroker = QPainterPathStroker()
        stroker.setWidth(8)
        return stroker.createStroke(path)

    def paint(self, painter, option, widget=None):
        draw_edge(painter, self.p1, self.p2, self.kind)

    def mousePressEvent(self, event):
        if event.button() == Qt.LeftButton:
            self.canvas.session.select_pair(self.source, self.target)
            event.accept()


class StageBand(QGraphicsItem):
    """A soft band behind the nodes of one stage."""

    def __init__(self, index: int, font: QFont):
        super().__init__()
        self.index = index
        self.font = font
        self.rect = QRectF()
        self.setZValue(-10)
        self.setAcceptedMouseButtons(Qt.NoButton)

    def set_rect(self, rect: QRectF):
        self.prepareGeometryChange()
        self.rect = rect

    def boundingRect(self):
        return self.rect

    def paint(self, painter, option, widget=None):
        painter.setRenderHint(QPainter.Antialiasing)
        painter.setPen(Qt.NoPen)
        painter.setBrush(style.BAND_FILLS[self.index % 2])
        painter.drawRoundedRect(self.rect, 14, 14)
        painter.setFont(self.font)
        painter.setPen(style.BAND_TEXT)
        painter.drawText(self.rect.adjusted(12, 8, -8, -8), Qt.AlignTop | Qt.AlignLeft,
                         f"Stage {self.index + 1}")


# ----------------------------------------------------------------------------- legend

class Legend(QWidget):
    """A small key of the marks in the canvas corner; a click on it folds it to its title
    (and back).

    The first rows are always there; the marks of the hidden-causes mode (bidirected,
    circle ends) get a row when the diagram has them (:meth:`set_kinds`).
    """

    ROWS = (("directed", "directed"), ("undirected", "undirected"),
            ("contested", "contested (?)"), ("locked", "locked (knowledge)"),
            ("forbidden", "forbidden (knowledge)"))
    EXTRA_ROWS = (("bidirected", "bidirected (hidden cause)"),
                  ("partially-directed", "circle: mark undecided"),
                  ("nondirected", "circle at both ends"),
                  ("partially-undirected", "circle and tail"))
    ROW_H = 18
    TITLE_H = 20

    def __init__(self, parent):
        super().__init__(parent)
        self.setObjectName("canvasLegend")
        self.setCursor(Qt.PointingHandCursor)
        self.collapsed = False
        self.rows = list(self.ROWS)
        self._resize()

    def set_kinds(self, kinds) -> None:
        """Show a row for each extra kind in ``kinds``."""
        rows = list(self.ROWS) + [r for r in self.EXTRA_ROWS if r[0] in set(kinds)]
        if rows != self.rows:
            self.rows = rows
            self._resize()

    def set_collapsed(self, collapsed: bool) -> None:
        self.collapsed = bool(collapsed)
        self._resize()

    def _resize(self):
        rows = 0 if self.collapsed else len(self.rows)
        self.setFixedSize(self.collapsed and 70 or 200,
                          self.TITLE_H + self.ROW_H * rows + (6 if rows else 0))
        self.setToolTip("Click to unfold the key" if self.collapsed
                        else "Click to fold the key away")
        self.update()
        parent = self.parent()
        if parent is not None and getattr(parent, "legend", None) is self:
            parent._place_overlays()

    def mousePressEvent(self, event):
        if event.button() == Qt.LeftButton:
            self.set_collapsed(not self.collapsed)
            event.accept()

    def paintEvent(self, event):
        p = QPainter(self)
        p.setRenderHint(QPainter.Antialiasing)
        p.setPen(QPen(QColor("#E2DFD8"), 1))
        p.setBrush(QColor(251, 250, 248, 230))
        p.drawRoundedRect(QRectF(0.5, 0.5, self.width() - 1, self.height() - 1), 6, 6)
        font = QFont(self.font())
        font.setPointSizeF(8.5)
        p.setFont(font)
        p.setPen(style.SLATE)
        p.drawText(QRectF(10, 0, self.width() - 14, self.TITLE_H), Qt.AlignVCenter,
                   ("▸ Key" if self.collapsed else "▾ Key"))
        if self.collapsed:
            return
        for i, (mark, text) in enumerate(self.rows):
            y = self.TITLE_H + 6 + i * self.ROW_H
            draw_edge(p, QPointF(10, y), QPointF(58, y), mark, scale=0.8)
            p.setPen(style.SLATE)
            p.drawText(QRectF(66, y - 9, self.width() - 70, 18), Qt.AlignVCenter, text)


# ----------------------------------------------------------------------------- the view

class GraphCanvas(QGraphicsView):
    """The diagram view over a session.

    Parameters
    ----------
    session : gui._session.Session
    """

    zoomed = Signal(float)
    #: the variable the view is focused on (find, Ctrl+F), or "" when the focus ends
    focused_on = Signal(str)

    def __init__(self, session, parent=None):
        super().__init__(parent)
        self.session = session
        #: what the context menu's Arrange calls (the window sets one that works off the
        #: GUI thread); the session's own by default
        self.arrange = session.arrange
        self.setObjectName("canvas")
        self.node_font = QFont(self.font())
        self.node_font.setPointSizeF(10)
        self.band_font = QFont(self.font())
        self.band_font.setPointSizeF(9)
        self.scene_ = QGraphicsScene(self)
        self.scene_.setItemIndexMethod(QGraphicsScene.NoIndex)
        self.setScene(self.scene_)
        self.setBackgroundBrush(QBrush(style.CANVAS))
        self.setRenderHints(QPainter.Antialiasing | QPainter.TextAntialiasing)
        self.setViewportUpdateMode(QGraphicsView.SmartViewportUpdate)
        self.setDragMode(QGraphicsView.ScrollHandDrag)
        self.setTransformationAnchor(QGraphicsView.AnchorUnderMouse)
        self.setResizeAnchor(QGraphicsView.AnchorViewCenter)
        self.setFrameShape(QGraphicsView.NoFrame)
        self.nodes: dict[str, NodeItem] = {}
        self.edges: dict[frozenset, EdgeItem] = {}
        self.overlays: list[OverlayItem] = []
        self.bands: list[StageBand] = []
        self._press_pos = None
        self._arrays = None
        self.node_index = {}
        self._refreshing = False
        self._fit_pending = True

        # overlays are children of the view, not of its viewport: the viewport scrolls its
        # children along with the scene
        self.banner = QLabel(self)
        self.banner.setObjectName("staleBanner")
        self.banner.setWordWrap(True)
        self.banner.hide()
        self.hint = QLabel(self)
        self.hint.setObjectName("canvasHint")
        self.hint.setAlignment(Qt.AlignCenter)
        self.legend = Legend(self)
        self.focused = None
        self.find_box = QLineEdit(self)
        self.find_box.setObjectName("findBox")
        self.find_box.setPlaceholderText("Find a variable… (Enter: focus, Esc: close)")
        self.find_box.setClearButtonEnabled(True)
        for button in self.find_box.findChildren(QToolButton):
            button.setObjectName("findClear")
        self.find_box.setFixedWidth(280)
        self.find_box.returnPressed.connect(self._find_entered)
        self.find_box.installEventFilter(self)
        self.find_box.hide()
        self.find_message = ""

        ev = session.events
        ev.result.connect(self._on_structure)
        ev.dataset.connect(self._on_structure)
        ev.included.connect(self._on_structure)
        ev.knowledge.connect(self._on_knowledge)
        ev.overlay.connect(self._on_overlay)
        ev.positions.connect(self._on_positions)
        ev.layouts.connect(lambda _: self.request_fit())
        ev.selection.connect(self._on_selection)
        ev.stale.connect(self._on_banner)
        ev.status.connect(self._on_banner)
        self.path_pairs: set = set()
        for name in ("treatment", "outcome", "planned", "controls"):
            getattr(ev, name).connect(self._on_roles)
        ev.support.connect(self._on_support)
        self._rebuild()

    def node_arrays(self):
        """Names, centres and half sizes of the nodes as arrays (cached until a node moves)."""
        if self._arrays is None:
            names = list(self.nodes)
            centres = np.array([(n.pos().x(), n.pos().y()) for n in self.nodes.values()],
                               dtype=float).reshape(-1, 2)
            halves = np.array([n.half for n in self.nodes.values()],
                              dtype=float).reshape(-1, 2)
            self.node_index = {name: i for i, name in enumerate(names)}
            self._arrays = (names, centres, halves)
        return self._arrays

    # -- test and export helpers -------------------------------------------------------------
    def edge_marks(self) -> dict:
        """``{frozenset(pair): (source, target, kind, locked)}`` of the drawn edges."""
        return {k: (e.source, e.target, e.kind, e.locked) for k, e in self.edges.items()}

    def overlay_marks(self) -> set:
        return {(o.kind, frozenset((o.source, o.target))) for o in self.overlays}

    # -- building ----------------------------------------------------------------------------
    def _on_structure(self, _=None):
        self._rebuild()
        self._place_overlays()

    def _on_support(self, _=None):
        """Edge widths follow resampling support: repaint."""
        self.viewport().update()

    def _rebuild(self):
        s = self.session
        self._refreshing = True
        try:
            self.scene_.clear()
            self.nodes, self.edges, self.overlays, self.bands = {}, {}, [], []
            self._arrays = None
            kinds = dict(s.dataset.kinds) if s.dataset is not None else {}
            included = set(s.included) if s.dataset is not None else set(s.variables)
            for name in s.variables:
                node = NodeItem(self, name, kinds.get(name, "continuous"),
                                included=name in included)
                xy = s.positions.get(name, (0.0, 0.0))
                node.setPos(QPointF(*xy))
                self.scene_.addItem(node)
                self.nodes[name] = node
            # the layouts use the sizes as drawn (the session is Qt-free and cannot measure)
            s.node_sizes = {name: (n.width, NODE_H) for name, n in self.nodes.items()}
            self._build_edges()
            self._build_overlay()
            self._update_bands()
            self._on_selection(s.selection)
        finally:
            self._refreshing = False
        self._on_banner()
        self._update_scene_rect()
        names = list(s.variables)
        completer = QCompleter(names, self.find_box)
        completer.setCaseSensitivity(Qt.CaseInsensitive)
        completer.setFilterMode(Qt.MatchContains)
        self.find_box.setCompleter(completer)
        if self.focused is not None:
            if self.focused in self.nodes:
                self._dim_around(self.focused)
            else:
                self.clear_focus()
        if self._fit_pending and self.nodes:
            self.fit()

    def _forbidden_heads(self, edge) -> tuple:
        k = self.session.knowledge
        heads = []
        if (edge.source, edge.target) in k.forbidden_directions:
            heads.append("b")
        if (edge.target, edge.source) in k.forbidden_directions:
            heads.append("a")
        return tuple(heads)

    def _build_edges(self):
        s = self.session
        for item in self.edges.values():
            for node in (item.a, item.b):
                if item in node.edges:
                    node.edges.remove(item)
            self.scene_.removeItem(item)
        self.edges = {}
        if s.result is None:
            return
        locked = s.knowledge.required_adjacent()
        for e in s.result.edges:
            a, b = self.nodes.get(e.source), self.nodes.get(e.target)
            if a is None or b is None:
                continue
            item = EdgeItem(self, e, a, b, locked=e.pair in locked,
                            forbidden_heads=self._forbidden_heads(e), faded=s.stale)
            self.scene_.addItem(item)
            self.edges[e.pair] = item
        self.legend.set_kinds({e.kind for e in s.result.edges})
        self._place_badges()

    def _build_overlay(self):
        s = self.session
        for item in self.overlays:
            for node in (item.a, item.b):
                if item in node.edges:
                    node.edges.remove(item)
            self.scene_.removeItem(item)
        self.overlays = []
        if not s.overlay:
            return
        k = s.knowledge
        marks = [("forbidden", p) for p in k.forbidden]
        marks += [("pending-lock", tuple(p)) for p in k.required_adjacent()
                  if p not in self.edges]
        for kind, pair in marks:
            a, b = (self.nodes.get(v) for v in sorted(pair))
            if a is None or b is None:
                continue
            if kind == "pending-lock" and frozenset(pair) in self.edges:
                continue  # a forbidden pair still drawn is a stale diagram: mark it anyway
            item = OverlayItem(self, kind, a, b)
            self.scene_.addItem(item)
            self.overlays.append(item)

    def _on_roles(self, _=None):
        """Treatment, outcome, planned set or the highlighted path changed: repaint."""
        self.path_pairs = controls_panel.highlighted_pairs(self.session)
        for item in list(self.nodes.values()) + list(self.edges.values()):
            item.update()

    def _on_knowledge(self, _=None):
        locked = self.session.knowledge.required_adjacent()
        for pair, item in self.edges.items():
            item.locked = pair in locked
            item.forbidden_heads = self._forbidden_heads(item.edge)
            item.setToolTip(item._tooltip())
            item.update()
        self._build_overlay()
        self._update_bands()

    def _on_overlay(self, _=None):
        self._build_overlay()
        for item in self.edges.values():
            item.update()

    def _on_positions(self, positions):
        self._refreshing = True
        moved = False
        try:
            for name, node in self.nodes.items():
                xy = positions.get(name)
                if xy is not None and (node.pos().x(), node.pos().y()) != xy:
                    node.setPos(QPointF(*xy))
                    moved = True
        finally:
            self._refreshing = False
        if moved:
            for item in self.edges.values():  # bends depend on every node's place
                item.update_geometry()
            self._place_badges()
        self._update_bands()
        self._update_scene_rect()

    def _on_selection(self, selection):
        if self.focused is not None and self.focused not in selection:
            self.clear_focus()
        chosen = set(selection)
        for name, node in self.nodes.items():
            on = name in chosen and len(chosen) == 1 or (len(chosen) == 2 and name in chosen)
            if node.selected != on:
                node.selected = on
                node.update()
        pair = frozenset(selection) if len(selection) == 2 else None
        for key, item in self.edges.items():
            on = key == pair
            if item.selected != on:
                item.selected = on
                item.update()

    def _place_badges(self):
        """Move a contested badge off its edge's middle when it would touch another badge
        (two contested edges that cross near their middles). Short edges keep their
        middles; longer ones, which have room, give way."""
        paths = []
        for item in self.edges.values():
            if item.kind != "contested":
                continue
            path = QPainterPath(item.p1)
            if item.control is None:
                path.lineTo(item.p2)
            else:
                path.quadTo(item.control, item.p2)
            paths.append((path.length(), id(item), item, path))
        placed = []
        for _, _, item, path in sorted(paths, key=lambda p: p[:2]):
            def room(t):
                at = path.pointAtPercent(t)
                return min((math.hypot(at.x() - q.x(), at.y() - q.y()) for q in placed),
                           default=math.inf)
            candidates = (0.5, 0.38, 0.62, 0.28, 0.72)
            best = next((t for t in candidates if room(t) > 3 * BADGE_R),
                        max(candidates, key=room))
            placed.append(path.pointAtPercent(best))
            if item.badge_t != best:
                item.badge_t = best
                item.update()

    def _update_bands(self):
        for band in self.bands:
            self.scene_.removeItem(band)
        self.bands = []
        stages = self.session.knowledge.stages
        if not stages or not self.nodes:
            return
        tops = [n.pos().y() for n in self.nodes.values()]
        top, bottom = min(tops) - NODE_H / 2 - 36, max(tops) + NODE_H / 2 + 18
        for i, group in enumerate(stages):
            members = [self.nodes[v] for v in group if v in self.nodes]
            if not members:
                continue
            left = min(n.pos().x() - n.width / 2 for n in members) - 18
            right = max(n.pos().x() + n.width / 2 for n in members) + 18
            band = StageBand(i, self.band_font)
            band.set_rect(QRectF(left, top, max(right - left, 90), bottom - top))
            self.scene_.addItem(band)
            self.bands.append(band)

    def _update_scene_rect(self):
        rect = self.scene_.itemsBoundingRect().adjusted(-400, -300, 400, 300)
        self.scene_.setSceneRect(rect)

    def _on_banner(self, _=None):
        s = self.session
        text = ""
        if s.status in ("running", "stopping") and s.result is not None:
            text = "Searching… the diagram below is the previous result."
        elif s.data_changed:
            text = ("The data file changed since this result was saved (its fingerprint "
                    "differs): the diagram is the saved one, faded. Press Run (Ctrl+R) to "
                    "search the current data.")
        elif s.stale and s.result is not None:
            text = ("This diagram was found with other settings, knowledge or variables. "
                    "Run (Ctrl+R) to bring it up to date.")
        elif s.status == "stopped" and s.result is not None:
            text = "The last run was stopped; the diagram is the previous complete result."
        self.banner.setText(text)
        self.banner.setVisible(bool(text))
        if s.dataset is None and s.result is None:
            hint = "Open a table (Ctrl+O) or drop a CSV file here"
        elif s.result is None and s.status in ("running", "stopping"):
            hint = "Searching…"
        elif s.result is None:
            hint = ("Press Run (Ctrl+R) to search for the diagram" if s.status != "stopped"
                    else "Run stopped before it finished: no diagram. Press Run to start again")
        else:
            hint = ""
        self.hint.setText(hint)
        self.hint.setVisible(bool(hint))
        for item in self.edges.values():
            if item.faded != s.stale:
                item.faded = s.stale
                item.update()
        self._place_overlays()

    def _place_overlays(self):
        vp = self.viewport().geometry()
        self.banner.setMaximumWidth(max(200, vp.width() - 40))
        self.banner.adjustSize()
        self.banner.move(vp.x() + (vp.width() - self.banner.width()) // 2, vp.y() + 12)
        top = vp.y() + (56 if self.nodes else vp.height() // 2 + 40)
        self.hint.setGeometry(vp.x(), top, vp.width(), 30)
        self.legend.move(vp.x() + 10, vp.y() + vp.height() - self.legend.height() - 10)
        self.find_box.move(vp.x() + vp.width() - self.find_box.width() - 12, vp.y() + 12)
        for w in (self.banner, self.hint, self.legend, self.find_box):
            w.raise_()

    def resizeEvent(self, event):
        super().resizeEvent(event)
        self._place_overlays()
        vp = self.viewport()
        if vp.width() > 100 and vp.height() > 100:
            self.session.view_aspect = vp.width() / vp.height()

    def showEvent(self, event):
        super().showEvent(event)
        if self._fit_pending and self.nodes:
            self.fit()

    # -- interaction -------------------------------------------------------------------------
    def _node_pressed(self, node: NodeItem, modifiers):
        sel = self.session.selection
        if modifiers & (Qt.ControlModifier | Qt.ShiftModifier) and len(sel) >= 1 \
                and sel[-1] != node.name:
            self.session.select_pair(sel[-1], node.name)
        else:
            self.session.select_node(node.name)
        self._press_pos = (node.name, (node.pos().x(), node.pos().y()))

    def _node_moved(self, node: NodeItem):
        if self._refreshing:
            return
        if self.session.knowledge.stages:
            self._update_bands()

    def _node_released(self, node: NodeItem):
        if self._press_pos is None or self._press_pos[0] != node.name:
            return
        before = self._press_pos[1]
        self._press_pos = None
        now = (node.pos().x(), node.pos().y())
        if now != before:
            for item in self.edges.values():  # other edges may now bend, or not
                item.update_geometry()
            self._place_badges()
            self.session.move_nodes({node.name: now}, label=f"Move {node.name}")

    def mousePressEvent(self, event):
        item = self.itemAt(event.position().toPoint())
        if item is None and event.button() == Qt.LeftButton:
            self.session.clear_selection()
        super().mousePressEvent(event)

    def wheelEvent(self, event):
        factor = 1.0015 ** event.angleDelta().y()
        self.zoom(factor)

    def zoom(self, factor: float):
        current = self.transform().m11()
        factor = max(0.1 / current, min(4.0 / current, factor))
        self.scale(factor, factor)
        self.zoomed.emit(self.transform().m11())

    def fit(self):
        """Fit the whole diagram in view (never zooming in past 1.25×)."""
        if not self.nodes:
            return
        rect = QRectF()
        for item in list(self.nodes.values()) + self.bands:
            rect = rect.united(item.sceneBoundingRect())
        if self.viewport().width() < 50:
            return
        self._fit_pending = False
        self._fit_rect(rect)

    def _fit_rect(self, rect: QRectF):
        """Show ``rect`` whole (never zooming in past 1.25×), clear of the key in the
        corner: if the key would cover a node, the drawing goes above it or beside it,
        whichever keeps it larger."""
        rect = rect.adjusted(-30, -50, 30, 20)
        vp = self.viewport().rect()

        def zoom_for(left, below):
            return min(max(vp.width() - 16 - left, 40) / max(rect.width(), 1.0),
                       max(vp.height() - 8 - below, 40) / max(rect.height(), 1.0), 1.25)

        def apply(left, below):
            zoom = zoom_for(left, below)
            self.resetTransform()
            self.scale(zoom, zoom)
            centre = rect.center()
            self.centerOn(QPointF(centre.x() - left / 2 / zoom, centre.y() + below / 2 / zoom))

        apply(0, 0)
        if self._key_covers_a_node():
            def room():
                key_w, key_h = self.legend.width() + 16, self.legend.height() + 16
                return max(((key_w, 0), (0, key_h)), key=lambda lb: zoom_for(*lb))
            if zoom_for(*room()) < 0.92 * zoom_for(0, 0) and not self.legend.collapsed:
                self.legend.set_collapsed(True)  # a big diagram needs the room more
            apply(*room())
        self.zoomed.emit(self.transform().m11())

    def _key_covers_a_node(self) -> bool:
        if not self.legend.isVisible():
            return False
        key = self.legend.geometry().translated(-self.viewport().x(), -self.viewport().y())
        area = self.mapToScene(key).boundingRect()
        return any(area.intersects(n.sceneBoundingRect()) for n in self.nodes.values())

    def request_fit(self):
        self._fit_pending = True
        self.fit()

    def readability(self) -> dict:
        """How the diagram reads at the current zoom: ``zoom``, ``label_px`` (the height of a
        node label's text on screen, in pixels), ``overlapping_boxes`` (pairs of node boxes
        that overlap), ``shortest_edge_px`` (the shortest edge between the boxes it joins,
        on screen) and ``nodes_in_view`` (how many node boxes lie wholly in the view)."""
        zoom = self.transform().m11()
        metrics = QFontMetricsF(self.node_font)
        boxes = [n.mapRectToScene(n.rect) for n in self.nodes.values()]
        overlapping = sum(1 for i, a in enumerate(boxes) for b in boxes[i + 1:]
                          if a.intersects(b))
        lengths = []
        for item in self.edges.values():
            path = QPainterPath(item.p1)
            if item.control is None:
                path.lineTo(item.p2)
            else:
                path.quadTo(item.control, item.p2)
            lengths.append(path.length())
        view = self.mapToScene(self.viewport().rect()).boundingRect()
        return {"zoom": zoom, "label_px": metrics.height() * zoom,
                "overlapping_boxes": overlapping,
                "shortest_edge_px": min(lengths) * zoom if lengths else None,
                "nodes_in_view": sum(1 for b in boxes if view.contains(b)),
                "nodes": len(boxes)}

    # -- find and focus ----------------------------------------------------------------------
    def neighbours(self, name: str) -> set:
        """The variables that share an edge of the diagram with ``name``."""
        return {v for key in self.edges if name in key for v in key} - {name}

    def focus_on(self, name: str) -> bool:
        """Select ``name``, fade everything but it, its neighbours and their edges, and fit
        the view to that neighbourhood. False when there is no such variable."""
        node = self.nodes.get(name)
        if node is None:
            return False
        self.focused = name
        self.session.select_node(name)
        self._dim_around(name)
        rect = QRectF()
        for v in self.neighbours(name) | {name}:
            rect = rect.united(self.nodes[v].sceneBoundingRect())
        self._fit_rect(rect)
        self.focused_on.emit(name)
        return True

    def _dim_around(self, name: str):
        near = self.neighbours(name) | {name}
        for v, item in self.nodes.items():
            item.setOpacity(1.0 if v in near else 0.2)
        for key, item in self.edges.items():
            item.setOpacity(1.0 if name in key else 0.12)
        for item in self.overlays:
            item.setOpacity(1.0 if name in (item.source, item.target) else 0.12)

    def clear_focus(self):
        """End the focus: everything drawn at full strength again."""
        if self.focused is None:
            return
        self.focused = None
        for item in list(self.nodes.values()) + list(self.edges.values()) + self.overlays:
            item.setOpacity(1.0)
        self.focused_on.emit("")

    def show_find(self):
        """Show the find box (Ctrl+F) with the keyboard in it."""
        self._place_overlays()
        self.find_box.show()
        self.find_box.raise_()
        self.find_box.setFocus()
        self.find_box.selectAll()

    def find(self, text: str) -> str | None:
        """The variable ``text`` names: an exact name (any case), else the only name that
        contains it, else the first name that starts with it; None when none does."""
        text = text.strip()
        if not text:
            return None
        names = list(self.nodes)
        low = text.lower()
        exact = [n for n in names if n.lower() == low]
        if exact:
            return exact[0]
        contains = [n for n in names if low in n.lower()]
        if len(contains) == 1:
            return contains[0]
        starts = [n for n in names if n.lower().startswith(low)]
        return starts[0] if starts else None

    def _find_entered(self):
        text = self.find_box.text()
        name = self.find(text)
        if name is None:
            self.find_message = (f"no variable matches {text.strip()!r}; type part of a name "
                                 "(the list under the box shows the matches)")
            self.session.notifications.info(self.find_message, title="Find")
            return
        self.find_message = ""
        self.focus_on(name)

    def eventFilter(self, watched, event):
        if watched is self.find_box and event.type() == event.Type.ShortcutOverride \
                and event.key() == Qt.Key_Escape:
            event.accept()  # Esc in the box closes it, it does not stop a search
            return True
        if watched is self.find_box and event.type() == event.Type.KeyPress \
                and event.key() == Qt.Key_Escape:
            self.find_box.hide()
            self.clear_focus()
            self.setFocus()
            return True
        return super().eventFilter(watched, event)

    def contextMenuEvent(self, event):
        item = self.itemAt(event.pos())
        menu = self.build_context_menu(item)
        if menu is not None:
            menu.exec(event.globalPos())

    def build_context_menu(self, item) -> QMenu | None:
        """The context menu for a canvas item (edge, node, overlay mark) or the background."""
        s = self.session
        menu = QMenu(self)
        menu.setObjectName("canvasMenu")
        if isinstance(item, (EdgeItem, OverlayItem)):
            s.select_pair(item.source, item.target)
            add_knowledge_actions(menu, s, item.source, item.target)
        elif isinstance(item, NodeItem):
            sel = s.selection
            if len(sel) >= 1 and sel[-1] != item.name:
                other = sel[-1]
                s.select_pair(other, item.name)
                add_knowledge_actions(menu, s, other, item.name)
            else:
                s.select_node(item.name)
                hint = menu.addAction("Ctrl+click a second node to add knowledge about a pair")
                hint.setEnabled(False)
                menu.addSeparator()
                stages = menu.addMenu("Move to stage")
                stages.setObjectName("stageMenu")
                for i in range(len(s.knowledge.stages) + 1):
                    label = (f"Stage {i + 1}" if i < len(s.knowledge.stages)
                             else "New last stage")
                    act = stages.addAction(label)
                    act.triggered.connect(
                        lambda _=False, i=i, n=item.name: s.move_to_stage([n], i))
                if s.knowledge.stage_of(item.name) is not None:
                    act = menu.addAction("Take out of its stage")
                    act.triggered.connect(lambda _=False, n=item.name: s.move_to_stage([n], None))
                if s.dataset is not None and item.name in s.dataset.variables:
                    inc = item.name in s.included
                    act = menu.addAction("Leave out of the search" if inc
                                         else "Include in the search")
                    act.triggered.connect(
                        lambda _=False, n=item.name, inc=inc: s.set_included(n, not inc))
            controls_panel.add_control_actions(menu, s, item.name)
        else:
            arrange = self.arrange  # the window's: lays out off the GUI thread
            for text, slot in (("Arrange again", lambda: arrange()),
                               ("Arrange (layered by stage, else force-directed)",
                                lambda: arrange("auto")),
                               ("Arrange in layers", lambda: arrange("layered")),
                               ("Arrange force-directed", lambda: arrange("force")),
                               ("Fit to view", self.request_fit),
                               ("Find a variable… (Ctrl+F)", self.show_find)):
                menu.addAction(text).triggered.connect(lambda _=False, f=slot: f())
            act = menu.addAction("Knowledge overlay")
            act.setCheckable(True)
            act.setChecked(s.overlay)
            act.toggled.connect(lambda on: setattr(s, "overlay", on))
        return menu


def add_knowledge_actions(menu: QMenu, session, a: str, b: str) -> list[QAction]:
    """Lock / lock direction / forbid / forbid direction / clear for the pair (a, b)."""
    statements = session.pair_statements(a, b)
    title = menu.addAction(f"{a} — {b}" + (f"  ({'; '.join(statements)})" if statements
                                            else ""))
    title.setEnabled(False)
    menu.addSeparator()
    actions = []
    for text, name, slot in (
            (f"Lock edge {a} — {b}", "lockEdge", lambda: session.lock(a, b)),
            (f"Lock direction {a} → {b}", "lockForward", lambda: session.lock_direction(a, b)),
            (f"Lock direction {b} → {a}", "lockBackward", lambda: session.lock_direction(b, a)),
            (f"Forbid edge {a} — {b}", "forbidEdge", lambda: session.forbid(a, b)),
            (f"Forbid direction {a} → {b}", "forbidForward",
             lambda: session.forbid_direction(a, b)),
            (f"Forbid direction {b} → {a}", "forbidBackward",
             lambda: session.forbid_direction(b, a)),
            ("Clear knowledge on this pair", "clearPair", lambda: session.clear_pair(a, b))):
        act = menu.addAction(text)
        act.setObjectName(name)
        act.triggered.connect(lambda _=False, slot=slot: slot())
        actions.append(act)
    actions[-1].setEnabled(any(not t.startswith("stage order") for t in statements))
    return actions
