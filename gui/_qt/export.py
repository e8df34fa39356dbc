"""Export: the diagram as drawn (PNG, SVG, PDF), and the result as DOT, GraphML or JSON.

Pictures are rendered from the canvas scene itself, so they keep the user's layout and the
visual language. DOT and GraphML come from the engine's writers (:mod:`discovery.io`); JSON is
:meth:`discovery.SearchResult.to_json`.
"""

from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import QMarginsF, QRectF, QSize, QSizeF, Qt
from PySide6.QtGui import QImage, QPageSize, QPainter, QPdfWriter

from discovery.exceptions import DiscoveryError

from . import style

#: label, file filter, suffix, kind
FORMATS = {
    "png": ("Diagram as PNG image", "PNG image (*.png)", ".png"),
    "svg": ("Diagram as SVG drawing", "SVG drawing (*.svg)", ".svg"),
    "pdf": ("Diagram as PDF", "PDF document (*.pdf)", ".pdf"),
    "dot": ("Result as DOT (Graphviz)", "DOT graph (*.dot *.gv)", ".dot"),
    "graphml": ("Result as GraphML", "GraphML (*.graphml)", ".graphml"),
    "json": ("Result as JSON", "Edgewise result (*.json)", ".json"),
}


def _diagram_rect(canvas) -> QRectF:
    rect = QRectF()
    for item in list(canvas.nodes.values()) + canvas.bands:
        rect = rect.united(item.sceneBoundingRect())
    return rect.adjusted(-30, -30, 30, 30)


def _render(canvas, painter: QPainter, target: QRectF, source: QRectF):
    painter.setRenderHint(QPainter.Antialiasing)
    painter.setRenderHint(QPainter.TextAntialiasing)
    painter.fillRect(target, style.CANVAS)
    canvas.scene().render(painter, target, source, Qt.KeepAspectRatio)


def export(session, canvas, kind: str, path) -> Path:
    """Write the export ``kind`` (a key of :data:`FORMATS`) to ``path``; return the path.

    Raises
    ------
    DiscoveryError
        Nothing to export, or the file cannot be written (one-line message).
    """
    path = Path(path)
    suffix = FORMATS[kind][2]
    if path.suffix.lower() != suffix and not (kind == "dot" and path.suffix == ".gv"):
        path = path.with_name(path.name + suffix)
    if kind in ("dot", "graphml", "json") and session.result is None:
        raise DiscoveryError("no result to export yet; run a search first")
    if kind in ("png", "svg", "pdf") and not canvas.nodes:
        raise DiscoveryError("the diagram is empty; open data and run a search first")
    try:
        if kind == "png":
            source = _diagram_rect(canvas)
            scale = 2.0
            image = QImage(QSize(int(source.width() * scale), int(source.height() * scale)),
                           QImage.Format_ARGB32)
            # paint at the screen's 96 dpi: fonts are sized in points, so an image that
            # said 192 dpi while painting would draw every label twice too large (and cut
            # it off at its box); the painter's scale alone doubles the resolution
            image.setDotsPerMeterX(round(96 / 0.0254))
            image.setDotsPerMeterY(round(96 / 0.0254))
            painter = QPainter(image)
            _render(canvas, painter, QRectF(0, 0, image.width(), image.height()), source)
            painter.end()
            image.setDotsPerMeterX(round(96 * scale / 0.0254))  # what the file says
            image.setDotsPerMeterY(round(96 * scale / 0.0254))
            if not image.save(str(path)):
                raise OSError("the image could not be written")
        elif kind == "svg":
            from PySide6.QtSvg import QSvgGenerator
            source = _diagram_rect(canvas)
            gen = QSvgGenerator()
            gen.setFileName(str(path))
            gen.setSize(QSize(int(source.width()), int(source.height())))
            gen.setViewBox(QRectF(0, 0, source.width(), source.height()))
            gen.setTitle("Edgewise diagram")
            painter = QPainter(gen)
            _render(canvas, painter, QRectF(0, 0, source.width(), source.height()), source)
            painter.end()
        elif kind == "pdf":
            source = _diagram_rect(canvas)
            writer = QPdfWriter(str(path))
            writer.setResolution(96)
            writer.setPageSize(QPageSize(QSizeF(source.width(), source.height()),
                                         QPageSize.Point))
            writer.setPageMargins(QMarginsF(0, 0, 0, 0))
            painter = QPainter(writer)
            page = QRectF(0, 0, writer.width(), writer.height())
            _render(canvas, painter, page, source)
            painter.end()
        elif kind == "json":
            session.result.write_json(path)
        else:
            try:
                from discovery import io as engine_io
            except ImportError:
                raise DiscoveryError(f"{kind.upper()} export needs discovery.io, which this "
                                     "installation lacks; export JSON instead") from None
            writer = engine_io.write_dot if kind == "dot" else engine_io.write_graphml
            writer(session.result, path)
    except OSError as err:
        raise DiscoveryError(f"{path}: cannot write ({getattr(err, 'strerror', None) or err}); "
                             "choose another folder") from None
    if not path.exists():
        raise DiscoveryError(f"{path}: nothing was written; choose another folder")
    return path
