"""Edgewise's desktop window: PySide6 views over a pure, Qt-free session model.

- :mod:`gui._session` — the evented session model (no Qt): data, settings, knowledge, result,
  selection, layout, undo/redo, ``.edgewise`` files, autosave.
- :mod:`gui._qt` — the views (canvas, Variables, stages, Inspector, toolbar, run log).
- :func:`gui.app.main` — start the window (``edgewise gui [DATA | SESSION]``).

Importing :mod:`gui` does not import Qt; :class:`Session` is available headless.
"""

from ._notifications import Notification, NotificationChannel
from ._session import FORMAT, SearchJob, Session

__all__ = ["Session", "SearchJob", "Notification", "NotificationChannel", "FORMAT"]
