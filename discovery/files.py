"""Writing files so that a user's work is never lost.

Every file Edgewise writes goes through :func:`atomic_write` (or :func:`write_text_atomic` /
:func:`write_bytes_atomic`): the content goes to a temporary file in the same folder, is
flushed and synced to disk, and only then renamed over the destination. A writer that is
killed half-way leaves the previous file intact (and at most a hidden temporary file, which the
next write of the same path cleans up); it never leaves a truncated result where a good one was.

:func:`write_all_or_nothing` extends this to a command's several outputs: each is rendered to
its temporary file first, and the renames happen only once every output was rendered.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path
from typing import Callable, Iterator

__all__ = ["atomic_write", "write_text_atomic", "write_bytes_atomic", "write_all_or_nothing",
           "same_file"]


def _temporary_beside(path: Path) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    return Path(name)


def _sync(path: Path) -> None:
    with open(path, "rb+") as handle:
        handle.flush()
        os.fsync(handle.fileno())


@contextlib.contextmanager
def atomic_write(path) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on a clean exit it replaces ``path`` atomically.

    Write the whole content to the yielded path (with any writer that takes a path, e.g.
    ``figure.savefig(tmp)``). If the block raises, the temporary file is removed and ``path``
    is left as it was.
    """
    path = Path(path)
    tmp = _temporary_beside(path)
    try:
        yield tmp
        _sync(tmp)
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()


def write_text_atomic(path, text: str) -> None:
    """Write ``text`` (UTF-8) to ``path`` atomically."""
    with atomic_write(path) as tmp:
        tmp.write_text(text, encoding="utf-8")


def write_bytes_atomic(path, data: bytes) -> None:
    """Write ``data`` to ``path`` atomically."""
    with atomic_write(path) as tmp:
        tmp.write_bytes(data)


def write_all_or_nothing(outputs: list[tuple[Path, Callable[[Path], None]]]) -> None:
    """Render every ``(path, writer)`` to a temporary file, then put them all in place.

    ``writer(tmp_path)`` writes one output's whole content. If any writer raises, no
    destination is touched and the exception propagates.
    """
    staged: list[tuple[Path, Path]] = []
    try:
        for path, writer in outputs:
            path = Path(path)
            tmp = _temporary_beside(path)
            staged.append((tmp, path))
            writer(tmp)
            _sync(tmp)
        for tmp, path in staged:
            os.replace(tmp, path)
    finally:
        for tmp, _ in staged:
            if tmp.exists():
                tmp.unlink()


def same_file(a, b) -> bool:
    """True when ``a`` and ``b`` name the same file: the same resolved path or the same inode
    (a hard link). A path that does not exist yet equals only its own resolved path."""
    a, b = Path(a), Path(b)
    try:
        if a.resolve() == b.resolve():
            return True
    except (OSError, RuntimeError):
        return False
    try:
        return os.path.samefile(a, b)
    except OSError:
        return False
