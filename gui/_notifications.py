"""A Qt-free channel for messages meant for the user: errors, warnings, information.

The session and the workers post here; the window shows errors in a dialog and the rest in the
run log and status bar. Tests can subscribe without Qt. Messages are the one-line texts the
engine raises (:mod:`discovery.exceptions`), never tracebacks.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

from ._events import Emitter

__all__ = ["Notification", "NotificationChannel", "LEVELS"]

LEVELS = ("info", "warning", "error")


@dataclass(frozen=True)
class Notification:
    """One message: ``level`` is ``info``, ``warning`` or ``error``; ``title`` names the action
    that failed ("Open data", "Run", ...)."""

    level: str
    message: str
    title: str = ""
    time: float = field(default_factory=time.time)


class NotificationChannel:
    """Post notifications and deliver them to subscribers; keeps the last 200."""

    def __init__(self):
        self.posted = Emitter("notification")
        self.history: list[Notification] = []

    def post(self, level: str, message: str, *, title: str = "") -> Notification:
        if level not in LEVELS:
            raise ValueError(f"level must be one of {LEVELS}; got {level!r}")
        note = Notification(level, _one_line(message), title)
        self.history.append(note)
        del self.history[:-200]
        self.posted.emit(note)
        return note

    def error(self, message: str, *, title: str = "") -> Notification:
        return self.post("error", message, title=title)

    def warning(self, message: str, *, title: str = "") -> Notification:
        return self.post("warning", message, title=title)

    def info(self, message: str, *, title: str = "") -> Notification:
        return self.post("info", message, title=title)


def _one_line(message) -> str:
    text = str(message).strip()
    return " ".join(text.split("\n")) if "\n" in text else text
