"""The window as a new user meets it: exports, fitting, layout, stale sessions, plain words,
the marks on the canvas (offscreen, pytest-qt)."""

import numpy as np
import pandas as pd
import pytest

pytest.importorskip("pytestqt")

import gui._qt  # noqa: E402,F401  (applies the binding guard before Qt work)
from PySide6.QtCore import QRectF, QSettings  # noqa: E402
from PySide6.QtGui import QFontMetricsF, QImage  # noqa: E402
from PySide6.QtWidgets import QMessageBox  # noqa: E402

from gui._qt.window import MainWindow  # noqa: E402

RUN_TIMEOUT = 120_000  # ms; generous, the machine is shared (not a speed check)


@pytest.fixture
def dialogs(monkeypatch):
    shown = []
    monkeypatch.setattr(QMessageBox, "warning",
                        staticmethod(lambda parent, title, text, *a: shown.append((title, text))))
    return shown


@pytest.fixture
def window(qtbot, tmp_path, dialogs):
    settings = QSettings(str(tmp_path / "settings.ini"), QSettings.IniFormat)
    w = MainWindow(settings=settings, autosave_path=tmp_path / "autosave.edgewise")
    w.ask_before_closing = False
    w.act_auto.setChecked(False)
    qtbot.addWidget(w)
    w.resize(1300, 850)
    w.show()
    yield w
    w.runner.shutdown()


def run_and_wait(qtbot, w):
    assert w.run()
    qtbot.waitUntil(lambda: w.session.status not in ("running", "stopping"),
                    timeout=RUN_TIMEOUT)


def _ink_box(image: QImage, rect: QRectF):
    """The bounding box (x0, y0, x1, y1) of dark text pixels inside ``rect`` of ``image``."""
    arr = image.convertToFormat(QImage.Format_RGB32)
    w, h = arr.width(), arr.height()
    buf = np.frombuffer(arr.constBits(), dtype=np.uint8).reshape(h, arr.bytesPerLine())
    buf = buf[:, :4 * w].reshape(h, w, 4)[..., :3].astype(int)
    x0, y0 = max(0, int(rect.left())), max(0, int(rect.top()))
    x1, y1 = min(w, int(rect.right())), min(h, int(rect.bottom()))
    dark = buf[y0:y1, x0:x1].sum(axis=2) < 3 * 110  # label text #1B232B, not the glyph
    ys, xs = np.nonzero(dark)
    return x0 + xs.min(), y0 + ys.min(), x0 + xs.max() + 1, y0 + ys.max() + 1


# -- item 9: PNG labels at the export resolution ----------------------------------------------

def test_png_export_draws_labels_at_its_resolution(qtbot, tmp_path, window):
    """The rendered label is as wide and tall as the font says (times the export scale) and
    ends inside its box: no label cut off at 192 dpi."""
    rng = np.random.default_rng(1)
    frame = pd.DataFrame({"soil_moisture_percent": rng.normal(size=60),
                          "b": rng.normal(size=60)})
    frame.to_csv(tmp_path / "t.csv", index=False)
    assert window.open_path(tmp_path / "t.csv")
    path = window.export("png", tmp_path / "out.png")
    image = QImage(str(path))
    assert round(image.dotsPerMeterX() * 0.0254) == 192  # the file says 192 dpi
    from gui._qt.export import _diagram_rect
    source = _diagram_rect(window.canvas)
    scale = image.width() / source.width()
    assert scale == pytest.approx(2.0, rel=0.01)
    node = window.canvas.nodes["soil_moisture_percent"]
    box = node.mapRectToScene(node.rect)
    box_px = QRectF((box.left() - source.left()) * scale, (box.top() - source.top()) * scale,
                    box.width() * scale, box.height() * scale)
    # the text area: right of the kind glyph, inside the border
    inner = box_px.adjusted(26 * scale, 4 * scale, -3 * scale, -4 * scale)
    x0, y0, x1, y1 = _ink_box(image, inner)
    ink = QFontMetricsF(window.canvas.node_font).tightBoundingRect("soil_moisture_percent")
    assert (x1 - x0) == pytest.approx(ink.width() * scale, rel=0.12)
    assert (y1 - y0) == pytest.approx(ink.height() * scale, rel=0.2)
    assert x1 < inner.right() - 2  # ends before the box does
