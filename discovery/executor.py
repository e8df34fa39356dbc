"""Where spreadable work runs: a level's tests, sweep rungs, resamples.

One small interface, two implementations:

- :class:`InProcessExecutor` runs everything in the calling process (the choice for cheap,
  vectorised tests such as Fisher's z, and for debugging);
- :class:`ProcessExecutor` spreads chunks over local worker processes.

Both offer ``map(fn, items) -> list`` (results in the items' order) and
``chunks(items) -> list of lists``. Functions and items sent to processes must be picklable.
"""

from __future__ import annotations

import contextlib
import os
from concurrent.futures import ProcessPoolExecutor
from typing import Callable, Sequence

__all__ = ["Executor", "InProcessExecutor", "ProcessExecutor", "blas_threads", "make_executor"]


class Executor:
    """Interface: run ``fn`` over items, keeping their order."""

    jobs: int = 1

    def map(self, fn: Callable, items: Sequence) -> list:
        raise NotImplementedError

    def chunks(self, items: Sequence, *, per_job: int = 4) -> list[list]:
        """Split ``items`` into about ``jobs * per_job`` contiguous chunks."""
        items = list(items)
        count = max(1, min(len(items), self.jobs * per_job))
        size = -(-len(items) // count)
        return [items[i:i + size] for i in range(0, len(items), size)]

    def close(self) -> None:
        """Release workers (no-op where there are none)."""

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


class InProcessExecutor(Executor):
    """Run everything in the calling process."""

    jobs = 1

    def map(self, fn, items):
        return [fn(item) for item in items]

    def __repr__(self):
        return "InProcessExecutor()"


class ProcessExecutor(Executor):
    """Spread work over ``jobs`` local processes (default: the number of CPU cores)."""

    def __init__(self, jobs: int | None = None):
        self.jobs = int(jobs) if jobs else (os.cpu_count() or 1)
        self._pool: ProcessPoolExecutor | None = None

    def map(self, fn, items):
        items = list(items)
        if self.jobs == 1 or len(items) < 2:
            return [fn(item) for item in items]
        if self._pool is None:
            self._pool = ProcessPoolExecutor(max_workers=self.jobs)
        return list(self._pool.map(fn, items))

    def close(self):
        if self._pool is not None:
            self._pool.shutdown(cancel_futures=True)
            self._pool = None

    def __repr__(self):
        return f"ProcessExecutor(jobs={self.jobs})"


def make_executor(jobs: int | None) -> Executor:
    """``jobs`` of 1 (or 0/None meaning in-process) → in-process; more → local processes."""
    if not jobs or jobs == 1:
        return InProcessExecutor()
    if jobs < 0:
        return ProcessExecutor(None)
    return ProcessExecutor(jobs)


def blas_threads(limit: int | None):
    """A context that limits BLAS threads to ``limit`` (None: leave them), when threadpoolctl
    is installed; without it, it does nothing.

    Work on many small arrays gains nothing from BLAS threads, and threads left spinning after
    a large product compete with it for the cores: on a busy 2-core machine, multi-threaded
    BLAS made a 2-process kernel search 14 times slower (43 s against 3 s), and a Fisher's z
    search about a quarter slower after its correlation matrix.
    """
    global _BLAS_CONTROLLER
    if limit is None:
        return contextlib.nullcontext()
    if _BLAS_CONTROLLER is None:
        try:
            from threadpoolctl import ThreadpoolController
        except ImportError:
            return contextlib.nullcontext()
        # finding the loaded libraries reads the process's memory map (milliseconds): once
        _BLAS_CONTROLLER = ThreadpoolController()
    return _BLAS_CONTROLLER.limit(limits=limit, user_api="blas")


_BLAS_CONTROLLER = None
