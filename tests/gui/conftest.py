"""GUI tests run offscreen; the session model's tests need no Qt at all."""

import os

# before any Qt import: no display is needed or used
os.environ["QT_QPA_PLATFORM"] = "offscreen"
os.environ.setdefault("EDGEWISE_SKIP_QT_PROBE", "1")

from pathlib import Path  # noqa: E402

import pytest  # noqa: E402

from gui_data import EXAMPLE, collider_frame, latent_frame  # noqa: E402


@pytest.fixture
def collider_csv(tmp_path) -> Path:
    path = tmp_path / "collider.csv"
    collider_frame().to_csv(path, index=False)
    return path


@pytest.fixture
def latent_csv(tmp_path) -> Path:
    path = tmp_path / "latent.csv"
    latent_frame().to_csv(path, index=False)
    return path


@pytest.fixture
def example_csv(tmp_path) -> Path:
    """The bundled example when present, else a generated table of the same shape."""
    data = EXAMPLE / "data.csv"
    if data.exists():
        return data
    path = tmp_path / "example.csv"
    collider_frame(2000).to_csv(path, index=False)
    return path


# -- the window, shared by the window's test files (Qt is imported only when asked for) ------
@pytest.fixture
def dialogs(monkeypatch):
    """Capture message boxes instead of showing them: a list of (title, text)."""
    from PySide6.QtWidgets import QMessageBox
    shown = []
    monkeypatch.setattr(QMessageBox, "warning",
                        staticmethod(lambda parent, title, text, *a: shown.append((title, text))))
    # questions (load the knowledge beside the data?) are answered No unless a test says
    monkeypatch.setattr(QMessageBox, "question",
                        staticmethod(lambda *a, **k: QMessageBox.No))
    return shown


@pytest.fixture
def window(qtbot, tmp_path, dialogs):
    """A shown main window with its own settings and autosave file, auto re-run off."""
    from PySide6.QtCore import QSettings

    from gui._qt.window import MainWindow
    settings = QSettings(str(tmp_path / "settings.ini"), QSettings.IniFormat)
    w = MainWindow(settings=settings, autosave_path=tmp_path / "autosave.edgewise")
    w.ask_before_closing = False
    w.act_auto.setChecked(False)
    qtbot.addWidget(w)
    w.resize(1300, 850)
    w.show()
    yield w
    w.runner.shutdown()
    arranger = getattr(w, "arranger", None)
    if arranger is not None:
        arranger.wait()
