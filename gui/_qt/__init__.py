"""The Qt views over the session model (PySide6). Import Qt only from here down.

Importing this package first applies :func:`guard_none_refcount`.
"""

import ctypes
import sys


def guard_none_refcount() -> bool:
    """Work around a binding bug that drops references to ``None``; True when applied.

    PySide6 6.12.0 on CPython 3.11 releases one reference to ``None`` at every call of a Qt
    method that returns nothing (measured here: 5,000 calls of ``QWidget.setEnabled`` end
    the interpreter with "none_dealloc: deallocating None"). CPython 3.12 and later make
    ``None`` immortal, so the bug is harmless there. Where the bug is measured (64 calls of
    ``QObject.setObjectName`` lose 64 references), ``None`` is given a reference count that
    cannot run out, which is what CPython 3.12 does for every interpreter. Bindings without
    the bug are left alone.
    """
    if sys.implementation.name != "cpython" or sys.version_info >= (3, 12):
        return False
    from PySide6.QtCore import QObject
    probe = QObject()
    before = sys.getrefcount(None)
    for _ in range(64):
        probe.setObjectName("probe")
    lost = before - sys.getrefcount(None)
    if lost < 32:
        return False
    ctypes.c_ssize_t.from_address(id(None)).value += 1 << 40
    return True


NONE_GUARD_APPLIED = guard_none_refcount()
