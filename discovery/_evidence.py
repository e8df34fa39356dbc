"""The evidence of a search (every test it ran) kept within a memory budget.

A search on a large table runs hundreds of millions of tests, and the evidence keeps each one:
its variables and its p-value, about 30 bytes a test. Held in memory, that alone outgrows
an ordinary machine (1,000 variables of 50,000 rows: 199 million tests, about 5 GiB). So the
evidence is kept as blocks, in the order the tests ran, and once the blocks held in memory
reach a budget the later ones are written to a temporary file and read back one block at a
time whenever the evidence is read (per-edge tallies, ``edgewise explain``, the JSON). The
values are the same bytes either way: spilling changes where the evidence lives, never what
it says.

The file is an unnamed temporary file (``tempfile.TemporaryFile``, in ``TMPDIR``): it is
removed when the evidence is no longer used, and by the system if the process ends.
"""

from __future__ import annotations

import shutil
import tempfile
import threading

import numpy as np

from .exceptions import ResourceLimitError

__all__ = ["EVIDENCE_MEMORY_CAP", "EVIDENCE_MEMORY_SHARE", "EvidenceLog",
           "evidence_memory_budget", "free_disk_space"]

#: At most this many bytes of evidence stay in memory (the rest goes to a temporary file).
EVIDENCE_MEMORY_CAP = 1 << 30
#: ... and at most this share of the memory available when the search starts.
EVIDENCE_MEMORY_SHARE = 0.25


def evidence_memory_budget(available: int) -> int:
    """Bytes of evidence a search keeps in memory, given the bytes of memory available."""
    return int(min(EVIDENCE_MEMORY_CAP, EVIDENCE_MEMORY_SHARE * max(available, 0)))


def free_disk_space(folder: str | None = None) -> int:
    """Free bytes where temporary files go (``TMPDIR``); 0 when that cannot be told."""
    try:
        return int(shutil.disk_usage(folder or tempfile.gettempdir()).free)
    except OSError:
        return 0


class _OnDisk:
    """Where one spilled block lives in the file: index rows, then p-values."""

    __slots__ = ("offset", "shape", "dtype", "rows")

    def __init__(self, offset: int, shape: tuple[int, int], dtype: np.dtype):
        self.offset, self.shape, self.dtype = offset, shape, dtype
        self.rows = shape[0]

    @property
    def index_bytes(self) -> int:
        """Bytes of the index rows, padded to a multiple of 8 (the p-values stay aligned)."""
        return -(-self.shape[0] * self.shape[1] * self.dtype.itemsize // 8) * 8

    @property
    def nbytes(self) -> int:
        return self.index_bytes + 8 * self.rows


class EvidenceLog:
    """Blocks ``(idx, p)`` of index rows ``[x, y, s1..sk]`` and float64 p-values, in the order
    the tests ran; iterating yields them as read-only arrays.

    Parameters
    ----------
    budget : int or None
        Bytes of blocks kept in memory; later blocks are written to a temporary file. None:
        no limit (everything stays in memory).

    Attributes
    ----------
    tests : int
        Number of tests (rows over all blocks).
    nbytes_in_memory, nbytes_on_disk : int
        Bytes of blocks held in memory and in the temporary file.
    """

    def __init__(self, blocks=(), *, budget: int | None = None):
        self.budget = budget
        self._blocks: list = []
        self._file = None
        self._lock = threading.Lock()
        self.tests = 0
        self.nbytes_in_memory = 0
        self.nbytes_on_disk = 0
        self.extend(blocks)

    # -- writing ---------------------------------------------------------------------------
    def append(self, block) -> None:
        """Add one block ``(idx, p)`` (an integer array of rows and their p-values)."""
        idx, p = block
        idx = np.asarray(idx)
        if idx.dtype.kind not in "iu":
            idx = idx.astype(np.intp)
        p = np.asarray(p, dtype=float)
        size = idx.nbytes + p.nbytes
        self.tests += len(p)
        if self.budget is None or self.nbytes_in_memory + size <= self.budget:
            self._blocks.append((idx, p))
            self.nbytes_in_memory += size
            return
        self._blocks.append(self._write(idx, p))

    def extend(self, blocks) -> None:
        for block in blocks:
            self.append(block)

    def _write(self, idx: np.ndarray, p: np.ndarray) -> _OnDisk:
        idx = np.ascontiguousarray(idx)
        p = np.ascontiguousarray(p)
        with self._lock:
            if self._file is None:
                self._file = tempfile.TemporaryFile(prefix="edgewise-evidence-")
            where = _OnDisk(self.nbytes_on_disk, idx.shape, idx.dtype)
            try:
                _write_at(self._file, idx, where.offset)
                _write_at(self._file, p, where.offset + where.index_bytes)
            except OSError as error:
                raise ResourceLimitError(
                    f"the search's evidence could not be written to a temporary file in "
                    f"{tempfile.gettempdir()} ({error.strerror or error}); free disk space "
                    "there or point TMPDIR to a larger disk, or set a depth") from None
            self.nbytes_on_disk += where.nbytes
        return where

    def transform_pvalues(self, function) -> None:
        """Replace every block's p-values ``p`` by ``function(p)`` (same length)."""
        for b, block in enumerate(self._blocks):
            if isinstance(block, _OnDisk):
                idx, p = self._read(block)
                fresh = np.ascontiguousarray(np.asarray(function(p), dtype=float))
                with self._lock:
                    _write_at(self._file, fresh, block.offset + block.index_bytes)
            else:
                self._blocks[b] = (block[0], np.asarray(function(block[1]), dtype=float))

    def freeze(self) -> None:
        """Make the blocks held in memory read-only (a result's evidence never changes)."""
        for block in self._blocks:
            if not isinstance(block, _OnDisk):
                block[0].setflags(write=False)
                block[1].setflags(write=False)

    # -- reading ---------------------------------------------------------------------------
    def _read(self, where: _OnDisk) -> tuple[np.ndarray, np.ndarray]:
        data = np.empty(where.nbytes, dtype=np.uint8)
        with self._lock:
            self._file.seek(where.offset)
            got = self._file.readinto(memoryview(data))
        if got != where.nbytes:
            raise OSError(f"the evidence file ended early at byte {where.offset + got}")
        idx = data[:where.shape[0] * where.shape[1] * where.dtype.itemsize].view(where.dtype)
        p = data[where.index_bytes:].view(np.float64)
        idx.setflags(write=False)
        p.setflags(write=False)
        return idx.reshape(where.shape), p

    def __iter__(self):
        for block in self._blocks:
            yield self._read(block) if isinstance(block, _OnDisk) else block

    def shapes(self) -> list[tuple[int, int]]:
        """``(rows, width)`` of every block, without reading spilled blocks back."""
        return [block.shape if isinstance(block, _OnDisk) else block[0].shape
                for block in self._blocks]

    def __len__(self) -> int:
        """Number of blocks."""
        return len(self._blocks)

    @property
    def spilled(self) -> bool:
        """True when some blocks live in the temporary file."""
        return self.nbytes_on_disk > 0

    def __repr__(self) -> str:
        return (f"EvidenceLog({self.tests:,} tests in {len(self._blocks)} blocks; "
                f"{self.nbytes_in_memory:,} bytes in memory, {self.nbytes_on_disk:,} on disk)")

    # a copy sent to another process (a worker, a pickle) carries the blocks themselves
    def __getstate__(self):
        return {"budget": self.budget, "blocks": [(np.array(i), np.array(p)) for i, p in self]}

    def __setstate__(self, state):
        self.__init__(state["blocks"], budget=state["budget"])

    def close(self) -> None:
        """Forget the blocks and remove the temporary file."""
        with self._lock:
            if self._file is not None:
                self._file.close()
                self._file = None
            self._blocks = []
            self.tests = self.nbytes_in_memory = self.nbytes_on_disk = 0


def _write_at(handle, array: np.ndarray, offset: int) -> None:
    handle.seek(offset)
    handle.write(memoryview(array).cast("B"))
