"""Writing files so that a user's work is never lost.

Every file Edgewise writes goes through :func:`atomic_write` (or :func:`write_text_atomic` /
:func:`write_bytes_atomic`): the content goes to a temporary file in the same folder, is
flushed and synced to disk, and only then renamed over the destination. A writer that is
killed half-way leaves the previous file intact (and at most a hidden temporary file named
``.NAME.*.tmp.SUFFIX`` beside it); it never leaves a truncated result where a good one was.

Reading is guarded the same way: :func:`read_text_checked` refuses what is not a regular file
(a device such as ``/dev/zero``, a folder, a symbolic-link loop) and files over a size limit
before reading them, and :func:`parse_json_checked` / :func:`parse_toml_checked` check nesting
depth and the length of integers *before* handing the text to the parser, so a hostile file
gets one clear line instead of a RecursionError or MemoryError.

:func:`write_all_or_nothing` extends this to a command's several outputs: each is rendered to
its temporary file first, and the renames happen only once every output was rendered.
"""

from __future__ import annotations

import contextlib
import errno
import json
import os
import re
import stat
import tempfile
import tomllib
from pathlib import Path
from typing import Callable, Iterator

__all__ = ["atomic_write", "write_text_atomic", "write_bytes_atomic", "write_all_or_nothing",
           "same_file", "read_text_checked", "parse_json_checked", "parse_toml_checked",
           "MAX_DOCUMENT_BYTES", "MAX_NESTING"]

#: The largest JSON/TOML document (knowledge, result, session, sweep ...) read, in bytes.
MAX_DOCUMENT_BYTES = 512 * 2**20
#: The deepest nesting of lists and tables accepted in a JSON/TOML document.
MAX_NESTING = 64
#: The most digits an integer in a document may have.
MAX_INT_DIGITS = 40


def _temporary_beside(path: Path) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    # the temporary name ends in the destination's suffix, for writers that read the format
    # from it (matplotlib's savefig, pandas' to_parquet)
    fd, name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=f".tmp{path.suffix}",
                                dir=path.parent)
    os.close(fd)
    # mkstemp makes the file private (0600); give it the mode a plain open() would (or the
    # mode of the file it replaces), so a shared report stays readable by others
    try:
        mode = stat.S_IMODE(os.stat(path).st_mode)
    except OSError:
        umask = os.umask(0)
        os.umask(umask)
        mode = 0o666 & ~umask
    os.chmod(name, mode)
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


def read_text_checked(path, *, what: str, error: type[Exception],
                      max_bytes: int = MAX_DOCUMENT_BYTES) -> str:
    """Read a UTF-8 text file, refusing non-regular files and files over ``max_bytes``.

    Raises
    ------
    error
        With one line naming the file, what is wrong and what to do: not found, not a
        regular file, a symbolic-link loop, too large, unreadable, or not UTF-8 text.
    """
    path = Path(path)
    try:
        info = os.stat(path)
    except FileNotFoundError:
        raise error(f"{path}: {what} not found; check the path") from None
    except OSError as err:
        if err.errno == errno.ELOOP:
            raise error(f"{path}: a loop of symbolic links; point to the real {what}") from None
        raise error(f"{path}: cannot read the {what} ({err.strerror or err})") from None
    if stat.S_ISDIR(info.st_mode):
        raise error(f"{path}: is a folder; give the {what} inside it")
    if not stat.S_ISREG(info.st_mode):
        raise error(f"{path}: is not a regular file (a device or pipe); give a saved {what}")
    if info.st_size > max_bytes:
        raise error(f"{path}: {info.st_size / 2**20:,.0f} MiB is larger than a {what} can be "
                    f"({max_bytes / 2**20:,.0f} MiB); is this the right file?")
    try:
        with open(path, "rb") as handle:
            raw = handle.read(max_bytes + 1)
    except OSError as err:
        raise error(f"{path}: cannot read the {what} ({err.strerror or err})") from None
    if len(raw) > max_bytes:
        raise error(f"{path}: larger than a {what} can be ({max_bytes / 2**20:,.0f} MiB); "
                    "is this the right file?")
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as err:
        raise error(f"{path}: not UTF-8 text (byte {err.start}); is this a {what}?") from None


_JSON_STRING = re.compile(r'"(?:[^"\\\n]|\\.)*"')
_TOML_STRING = re.compile(r'"""[\s\S]*?"""|\'\'\'[\s\S]*?\'\'\'|"(?:[^"\\\n]|\\.)*"|\'[^\'\n]*\'')
_LONG_NUMBER = re.compile(r"[0-9_]{%d,}" % (MAX_INT_DIGITS + 1))


def _nesting(text: str) -> int:
    """The deepest nesting of ``[`` / ``{`` in ``text`` (strings already blanked)."""
    import numpy as np
    codes = np.frombuffer(text.encode("utf-8", "replace"), dtype=np.uint8)
    steps = (np.isin(codes, (91, 123)).astype(np.int64)
             - np.isin(codes, (93, 125)).astype(np.int64))
    return int(np.cumsum(steps).max(initial=0))


def _check_structure(bare: str, source: str, error, *, dotted: bool = False) -> None:
    depth = _nesting(bare)
    if dotted:  # TOML: a.b.c = 1 nests as deeply as three tables
        keys = re.findall(r"^[ \t]*\[*[ \t]*([^=\n\]]*)", bare, flags=re.M)
        depth = max([depth] + [k.count(".") + 1 for k in keys])
    if depth > MAX_NESTING:
        raise error(f"{source}: nested {depth} levels deep (at most {MAX_NESTING}); "
                    "this is not a file Edgewise wrote or documents")
    if _LONG_NUMBER.search(bare):
        raise error(f"{source}: holds a number with more than {MAX_INT_DIGITS} digits; "
                    "check the file")


def _refuse_long_int(text: str) -> int:
    raise ValueError(f"integer of {len(text)} digits")


def parse_json_checked(text: str, *, source: str, error: type[Exception]):
    """Parse JSON after checking its nesting depth and number lengths.

    Raises
    ------
    error
        When the text is nested deeper than ``MAX_NESTING``, holds an over-long number, or is
        not valid JSON.
    """
    _check_structure(_JSON_STRING.sub('""', text), source, error)
    try:
        return json.loads(text, parse_int=lambda s: int(s) if len(s) <= MAX_INT_DIGITS
                          else _refuse_long_int(s))
    except (json.JSONDecodeError, ValueError, RecursionError) as err:
        raise error(f"{source}: not valid JSON ({str(err).splitlines()[0][:200]})") from None


def parse_toml_checked(text: str, *, source: str, error: type[Exception]):
    """Parse TOML after checking its nesting depth (brackets and dotted keys) and numbers.

    Raises
    ------
    error
        When the text is nested deeper than ``MAX_NESTING``, holds an over-long number, or is
        not valid TOML.
    """
    _check_structure(_TOML_STRING.sub('""', text), source, error, dotted=True)
    try:
        return tomllib.loads(text)
    except (tomllib.TOMLDecodeError, ValueError, RecursionError, MemoryError) as err:
        raise error(f"{source}: not valid TOML ({str(err).splitlines()[0][:200]})") from None
