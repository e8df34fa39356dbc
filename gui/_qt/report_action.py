"""The window's "Report…" action: the current result as a self-contained HTML file or a PDF
(:mod:`discovery.report`), the same as ``edgewise report``."""

from __future__ import annotations

from pathlib import Path

from PySide6.QtGui import QAction
from PySide6.QtWidgets import QFileDialog, QMessageBox

from discovery.exceptions import DiscoveryError

__all__ = ["install", "make_report"]


def install(window) -> QAction:
    """Add "Report…" (objectName ``actionReport``) to the window's export menu and return it."""
    act = QAction("Report (HTML or PDF)…", window)
    act.setObjectName("actionReport")
    act.setStatusTip("A self-contained report: diagram, evidence, assumptions and the "
                     "command that reproduces the search")
    act.triggered.connect(lambda _=False: make_report(window))
    window.addAction(act)
    menu = getattr(window, "export_menu", None)
    if menu is not None:
        menu.addSeparator()
        menu.addAction(act)
    window.act_report = act
    return act


def make_report(window, path=None) -> Path | None:
    """Write the report of the window's current result to ``path`` (asked for when None).

    Returns the path written, or None when there is no result, the dialog was cancelled or
    the report could not be written (the user is told in a dialog).
    """
    from discovery.report import build_report, write_report
    result = window.session.result
    if result is None:
        QMessageBox.information(window, "Report", "Run a search first: the report describes "
                                                  "a result.")
        return None
    if path is None:
        path, _ = QFileDialog.getSaveFileName(window, "Write a report", "report.html",
                                              "HTML report (*.html);;PDF report (*.pdf)")
        if not path:
            return None
    path = Path(path)
    if path.suffix.lower() not in (".html", ".htm", ".pdf"):
        path = path.with_suffix(".html")
    try:
        write_report(build_report(result), path)
    except DiscoveryError as err:
        QMessageBox.warning(window, "Report", str(err))
        return None
    window.statusBar().showMessage(f"Wrote the report {path}", 5000)
    return path
