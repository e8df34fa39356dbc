"""A small Qt-free event system: one emitter per model field.

An :class:`Emitter` keeps weak references to bound-method callbacks (a view that is deleted
stops listening without disconnecting) and strong references to plain functions. It refuses
to re-enter itself: a callback that sets the same field again while its own event is being
delivered would start an endless echo, so the nested emission is dropped and counted in
:attr:`Emitter.loops` (the model's equality check normally stops such echoes earlier).

This is the pattern of napari's evented models (``napari/utils/events``), reduced to what the
session needs.
"""

from __future__ import annotations

import sys
import weakref
from typing import Callable

__all__ = ["Emitter", "EventGroup"]


class _Ref:
    __slots__ = ("_ref", "_strong")

    def __init__(self, callback: Callable):
        if hasattr(callback, "__self__") and hasattr(callback, "__func__"):
            self._ref = weakref.WeakMethod(callback)
            self._strong = None
        else:
            self._ref = None
            self._strong = callback

    def get(self):
        return self._strong if self._ref is None else self._ref()


class Emitter:
    """Deliver a value to every connected callback, in connection order.

    Parameters
    ----------
    name : str
        The field the emitter belongs to (used in messages).
    """

    def __init__(self, name: str):
        self.name = name
        self._refs: list[_Ref] = []
        self._emitting = False
        self._blocked = 0
        self.loops = 0

    def connect(self, callback: Callable) -> Callable:
        """Call ``callback(value)`` on every emission; returns the callback (decorator use)."""
        self._refs.append(_Ref(callback))
        return callback

    def disconnect(self, callback: Callable) -> None:
        """Stop calling ``callback``; unknown callbacks are ignored."""
        self._refs = [r for r in self._refs if r.get() not in (None, callback)]

    @property
    def callbacks(self) -> list[Callable]:
        """The live callbacks."""
        return [cb for cb in (r.get() for r in self._refs) if cb is not None]

    def emit(self, value=None) -> None:
        """Deliver ``value``; a nested emission of the same emitter is dropped."""
        if self._blocked:
            return
        if self._emitting:
            self.loops += 1
            return
        self._emitting = True
        try:
            dead = False
            for ref in list(self._refs):
                callback = ref.get()
                if callback is None:
                    dead = True
                    continue
                try:
                    callback(value)
                except Exception:  # one broken view must not break the model or the others
                    sys.excepthook(*sys.exc_info())
            if dead:
                self._refs = [r for r in self._refs if r.get() is not None]
        finally:
            self._emitting = False

    def block(self):
        """Context manager: emissions inside are dropped."""
        emitter = self

        class _Blocker:
            def __enter__(self):
                emitter._blocked += 1

            def __exit__(self, *exc):
                emitter._blocked -= 1

        return _Blocker()


class EventGroup:
    """A namespace of emitters, one per field name (``events.result.connect(...)``)."""

    def __init__(self, names):
        self._names = tuple(names)
        for name in self._names:
            setattr(self, name, Emitter(name))

    def __iter__(self):
        return (getattr(self, n) for n in self._names)

    def __repr__(self) -> str:
        return f"EventGroup({', '.join(self._names)})"
