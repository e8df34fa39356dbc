"""The window's "Report…" action, offscreen: it writes the same report as ``edgewise report``
(HTML read back with the standard library's html.parser)."""

from html.parser import HTMLParser

import pytest

pytest.importorskip("pytestqt")

import gui._qt  # noqa: E402,F401
from PySide6.QtCore import QSettings  # noqa: E402
from PySide6.QtWidgets import QMessageBox  # noqa: E402

from discovery import ASSUMPTIONS  # noqa: E402
from gui._qt.report_action import make_report  # noqa: E402
from gui._qt.window import MainWindow  # noqa: E402


@pytest.fixture
def window(window, monkeypatch):
    from PySide6.QtWidgets import QMessageBox
    shown = []
    monkeypatch.setattr(QMessageBox, "information",
                        staticmethod(lambda parent, title, text, *a: shown.append(text)))
    window.shown = shown
    return window


def test_report_action_writes_the_report(qtbot, window, collider_csv, tmp_path):
    act = window.findChild(type(window.act_report), "actionReport")
    assert act is window.act_report and act in window.export_menu.actions()
    assert make_report(window, tmp_path / "r.html") is None  # nothing to report yet
    assert window.shown and "Run a search first" in window.shown[0]
    assert window.open_path(collider_csv)
    assert window.run()
    qtbot.waitUntil(lambda: window.session.status not in ("running", "stopping"),
                    timeout=120_000)
    path = make_report(window, tmp_path / "r.html")
    text = path.read_text(encoding="utf-8")
    parser = HTMLParser()
    parser.feed(text)
    assert ASSUMPTIONS[1] in text and 'id="reproduce"' in text
    assert make_report(window, tmp_path / "r.pdf").read_bytes()[:5] == b"%PDF-"
