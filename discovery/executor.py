"""Where spreadable work runs: a level's tests, sweep rungs, resamples.

One small interface, three back-ends, chosen by :func:`make_executor`:

- :class:`InProcessExecutor` runs everything in the calling process (the choice for cheap,
  vectorised tests such as Fisher's z, and for debugging);
- :class:`ProcessExecutor` spreads work over local worker processes (``jobs``);
- :class:`DaskExecutor` spreads it over a Dask distributed cluster given by its scheduler's
  address (``cluster="tcp://host:port"``; needs the ``edgewise[cluster]`` extra).

Every back-end offers ``map(fn, items) -> list`` (results in the items' order, any picklable
``fn``) and ``chunks(items)``, plus :meth:`Executor.map_rows` for the search's test batches.

Why parallel work used to be slower, and what this module does about it
    Sending a test object with every batch re-sent its data and threw away the worker's
    caches (kernel features, residual makers) each time; multi-threaded BLAS in every process
    fought for the same cores; and small batches cost more to ship than to compute. Here:

    * **the data go to each worker once**: a *shared* object (the test, with its data) is
      pickled once and sent to each worker the first time that worker needs it (a Dask
      cluster receives it by ``scatter(..., broadcast=True)``); the worker keeps it, with its
      caches, for later batches, and batches carry only integer index rows;
    * **chunks are sized by measured cost**: the first rows of a new kind of batch are timed
      in-process (:data:`PROBE_SECONDS`), or, while workers run, the last batch's rows stand
      in for them; then the workers' own timings update a running estimate; chunks aim at a
      few tens of milliseconds each, at least two per process;
    * **workers are fed while the caller computes**: a feeding thread hands them pieces from
      the front of a batch and reads their answers while the caller computes pieces from the
      back; rows are ordered so that a conditioning set goes to the same side in every batch
      (where its cached features are);
    * **small batches stay in-process**: when a batch's estimated cost is below
      ``min_seconds`` (default 0.1 s) shipping it cannot pay, and it runs where it is;
    * **spreading must pay**: each spread batch measures how many cores the computing
      processes got together (each piece's CPU time over its own wall time, times the
      processes); below :data:`SPREAD_CORES`
      (other work keeps the cores busy), the extra work of spreading cannot pay, and
      batches stay in-process, every fourth one being spread anyway to notice free cores;
    * **BLAS runs one thread while workers run**, set once before the first fork and never
      per piece (see :meth:`ProcessExecutor._ready_workers`).

Faults
    An exception raised by ``fn`` in a worker reaches the caller as one error: the original
    exception when it is one of Edgewise's own (:class:`~discovery.exceptions.DiscoveryError`),
    otherwise a :class:`~discovery.exceptions.WorkerError` naming it (its ``remote_traceback``
    holds the worker's traceback). A local worker that dies (killed, out of memory) raises
    :class:`~discovery.exceptions.WorkerError` at once instead of hanging; the next call starts
    a fresh worker. Dask re-runs the tasks of a lost worker on another one (up to its
    ``allowed-failures`` setting) and reports a worker lost too often. ``cancel`` (a callable
    or an event) stops the work within about a tenth of a second: pending work is dropped,
    running local workers are ended, cluster tasks cancelled, and
    :class:`~discovery.exceptions.SearchCancelled` is raised, so no partial result is returned.
    Warnings raised in workers are raised again in the caller.

Determinism
    Results never depend on the back-end or the split, provided ``fn`` itself depends only on
    its input (the tests draw their random numbers from their seed and the triple).
"""

from __future__ import annotations

import contextlib
import itertools
import multiprocessing
import os
import pickle
import queue
import signal
import threading
import time
import traceback
import uuid
import warnings
from collections import OrderedDict, deque
from multiprocessing.connection import wait as _wait_ready
from multiprocessing.reduction import ForkingPickler
from typing import Callable, Sequence

import numpy as np

from .exceptions import ClusterError, DiscoveryError, SearchCancelled, WorkerError

__all__ = ["Executor", "InProcessExecutor", "ProcessExecutor", "DaskExecutor", "blas_threads",
           "make_executor"]

#: Batches whose estimated in-process cost is below this many seconds stay in-process (a
#: batch of this cost may also start the first local worker: with fork, starting one and
#: sending it the test takes a few tens of milliseconds).
MIN_SECONDS = 0.1
#: Seconds of rows a batch of a new kind runs in-process first, to estimate the rest's cost.
PROBE_SECONDS = 0.03
#: Seconds of work a chunk aims at (more chunks than workers keep the workers evenly busy).
CHUNK_SECONDS = 0.1
#: Spread batches only while the workers together get at least this many cores of CPU.
SPREAD_CORES = 1.25
#: Shared objects a worker keeps (the most recent ones).
_KEEP_SHARED = 2
#: Seconds to wait for a cluster's scheduler before giving up.
CLUSTER_TIMEOUT = 10.0
_POLL = 0.1
#: Pieces sent to each local worker at once (a second only when its message is small).
_IN_FLIGHT = 2
_PIPE_BYTES = 65536  # the smallest pipe buffer of the systems we run on (Linux, macOS)


def _cancel_check(cancel):
    if cancel is None:
        return None
    return cancel.is_set if hasattr(cancel, "is_set") else cancel


def _stopped():
    return SearchCancelled("the work was stopped before it finished")


class Executor:
    """Interface: run ``fn`` over items, keeping their order.

    Attributes
    ----------
    jobs : int
        How many pieces of work run at once (1 in-process).
    """

    jobs: int = 1

    def map(self, fn: Callable, items: Sequence, *, shared=None, cancel=None,
            progress: Callable | None = None) -> list:
        """Return ``[fn(item) for item in items]`` (``fn(shared, item)`` when ``shared`` is
        given), in the items' order.

        Parameters
        ----------
        fn : callable
            A picklable function (a module-level function or a partial of one) for the
            process and cluster back-ends.
        items : sequence
            Picklable inputs.
        shared : object, optional
            Sent to each worker once and passed as ``fn``'s first argument (large data that
            every item needs).
        cancel : callable or threading.Event, optional
            Stops the work when it returns True (or is set).
        progress : callable, optional
            Called as ``progress(done, total)`` as items finish.

        Raises
        ------
        SearchCancelled
            ``cancel`` fired; nothing is returned.
        WorkerError
            ``fn`` raised in a worker, or a worker was lost.
        """
        raise NotImplementedError

    def map_rows(self, fn: Callable, shared, rows: np.ndarray, *, cancel=None,
                 groups=None) -> np.ndarray:
        """Return ``fn(shared, rows)``, possibly computed in chunks of rows on workers.

        ``fn(shared, part)`` must return one value per row of ``part`` (a 1-D array) and
        depend on each row alone; the chunks' outputs are concatenated in order. ``groups``
        (one label per row, equal labels adjacent) asks that chunks be cut between groups
        where that costs little balance: rows of a group share cached work in a worker.
        """
        check = _cancel_check(cancel)
        if check is not None and check():
            raise _stopped()
        return np.asarray(fn(shared, rows))

    def chunks(self, items: Sequence, *, per_job: int = 4) -> list[list]:
        """Split ``items`` into about ``jobs * per_job`` contiguous chunks."""
        items = list(items)
        count = max(1, min(len(items), self.jobs * per_job))
        size = -(-len(items) // count)
        return [items[i:i + size] for i in range(0, len(items), size)]

    def watching(self, cancel) -> "Executor":
        """A view of this executor whose calls all watch ``cancel`` (for the search)."""
        return self if cancel is None else _Watching(self, cancel)

    def close(self) -> None:
        """Release workers (no-op where there are none)."""

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


class _Watching(Executor):
    def __init__(self, inner: Executor, cancel):
        self.inner = inner
        self.cancel = cancel
        self.jobs = inner.jobs

    def map(self, fn, items, *, shared=None, cancel=None, progress=None):
        return self.inner.map(fn, items, shared=shared, cancel=cancel or self.cancel,
                              progress=progress)

    def map_rows(self, fn, shared, rows, *, cancel=None, groups=None):
        return self.inner.map_rows(fn, shared, rows, cancel=cancel or self.cancel,
                                   groups=groups)

    def __repr__(self):
        return f"{self.inner!r} (watching a cancel flag)"


class InProcessExecutor(Executor):
    """Run everything in the calling process."""

    jobs = 1

    def map(self, fn, items, *, shared=None, cancel=None, progress=None):
        check = _cancel_check(cancel)
        items = list(items)
        out = []
        for item in items:
            if check is not None and check():
                raise _stopped()
            out.append(fn(item) if shared is None else fn(shared, item))
            if progress is not None:
                progress(len(out), len(items))
        return out

    def __repr__(self):
        return "InProcessExecutor()"


# ------------------------------------------------------------------------------ spreading

def _run_piece(fn, shared, part, mode):
    """What a worker does with one piece: (output, (wall, CPU seconds), warnings raised).

    CPU is this thread's (the caller may compute a piece while other threads run)."""
    started, cpu = time.perf_counter(), time.thread_time()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        with blas_threads(1):
            if mode == "rows":
                out = fn(shared, part)
            elif shared is None:
                out = [fn(item) for item in part]
            else:
                out = [fn(shared, item) for item in part]
    spent = (time.perf_counter() - started, time.thread_time() - cpu)
    return out, spent, [(w.category, str(w.message)) for w in caught]


def _rewarn(caught, stacklevel=4):
    for category, message in caught:
        warnings.warn(message, category, stacklevel=stacklevel)


def _fault(err: BaseException, remote_traceback: str, where: str) -> DiscoveryError:
    """The one error a caller sees for an exception raised in a worker."""
    if isinstance(err, DiscoveryError):
        return err
    text = str(err).strip().splitlines()[0] if str(err).strip() else "(no message)"
    out = WorkerError(f"{where} failed: {type(err).__name__}: {text}; nothing was kept — "
                      "run again without --jobs/--cluster to see it in-process, and report "
                      "it if it is not about memory or your data")
    out.remote_traceback = remote_traceback
    return out


class _Spreading(Executor):
    """Shared logic of the back-ends with workers: cost estimates, chunking, fallback."""

    min_seconds: float = MIN_SECONDS
    chunk_seconds: float = CHUNK_SECONDS
    chunks_per_job: int = 3
    chunks_min_per_job: int = 1
    _local = True  # map() may run one item, or one worker's work, in the caller instead

    def _init_costs(self, min_seconds):
        self.min_seconds = MIN_SECONDS if min_seconds is None else float(min_seconds)
        self._cores = None  # CPU the workers got together, in cores (running estimate)
        self._held_back = 0
        self._cost: dict = {}  # (id of shared, row width) -> _Rates
        self._last_rate: dict = {}  # id of shared -> seconds a row of its latest batch took
        self._cost_lock = threading.Lock()

    def map(self, fn, items, *, shared=None, cancel=None, progress=None):
        items = list(items)
        check = _cancel_check(cancel)
        if check is not None and check():
            raise _stopped()
        if not items:
            return []
        if self._local and (self.jobs < 2 or len(items) < 2):
            return InProcessExecutor().map(fn, items, shared=shared, cancel=cancel,
                                           progress=progress)
        parts = self.chunks(items, per_job=self.chunks_per_job)
        done = [0]

        def tick(part_index):
            done[0] += len(parts[part_index])
            if progress is not None:
                progress(done[0], len(items))

        outs, _ = self._dispatch(fn, shared, parts, "items", check, tick)
        return [value for out in outs for value in out]

    def map_rows(self, fn, shared, rows, *, cancel=None, groups=None):
        rows = np.asarray(rows)
        check = _cancel_check(cancel)
        if check is not None and check():
            raise _stopped()
        key = (id(shared), rows.shape[1] if rows.ndim > 1 else 0)
        with self._cost_lock:
            rate = self._cost.setdefault(key, _Rates())
            while len(self._cost) > 64:  # estimates of tests long gone
                self._cost.pop(next(iter(self._cost)))
        probed: list = []  # (positions, outputs) of rows the probe ran here
        guessed = False
        if rate.here is None or self.jobs < 2 or len(rows) < 2:
            # A new kind of batch (a deeper level) is timed here first, while the workers
            # wait; when workers run and the last batch of this test says this one is
            # worth spreading (its rows cost at least as much with one more variable
            # given), it is spread at once and its cost learned from the workers.
            last = self._last_rate.get(id(shared))
            if last is not None and self.jobs >= 2 and len(rows) >= 2 * self.jobs \
                    and self._started() and last * len(rows) >= self.min_seconds:
                rate.here, guessed = last, True
            else:
                rate.here = self._probe(fn, shared, rows, probed)
        if probed:
            left = np.ones(len(rows), dtype=bool)
            for positions, _ in probed:
                left[positions] = False
            at = np.flatnonzero(left)
            rest = rows[at]
        else:
            at, rest = None, rows

        def whole(outs):  # every row's output, in the rows' order
            if not probed:
                return np.concatenate(outs)
            values = np.concatenate([o for _, o in probed] + outs)
            out = np.empty_like(values)
            out[np.concatenate([p for p, _ in probed] + [at])] = values
            return out

        if not len(rest):
            return whole([])
        if self.jobs < 2 or len(rest) < 2 or rate.here * len(rest) < self.min_seconds \
                or not self._spreading_pays():
            started = time.perf_counter()
            out = np.asarray(fn(shared, rest))
            rate.learn("here", time.perf_counter() - started, len(rest))
            self._remember(shared, rate.here)
            return whole([out])
        # Chunks of about chunk_seconds each, between one and chunks_per_job per worker:
        # enough to even out the workers' loads, few enough that rows sharing a conditioning
        # set (and the test's cached pieces for it) mostly stay together.
        cost = rate.work if rate.work is not None else rate.here
        count = min(self.chunks_per_job * self.jobs, len(rest),
                    max(self.chunks_min_per_job * self.jobs,
                        int(np.ceil(cost * len(rest) / self.chunk_seconds))))
        cuts = _cuts(len(rest), count, None if groups is None
                     else np.asarray(groups)[at if at is not None else slice(None)])
        parts = [rest[a:b] for a, b in zip(cuts[:-1], cuts[1:])]
        self._prepare()  # start workers before the first piece goes out
        outs, (seconds, cpu) = self._dispatch(fn, shared, parts, "rows", check, None)
        rate.learn("work", seconds, len(rest))
        if guessed:
            rate.here = rate.work  # a piece's rows cost about the same in any process
        self._remember(shared, rate.work)
        if seconds > 0.02:
            # The cores the computing processes got together: each piece's CPU over its own
            # wall time says whether its process had a core while it ran (start-up, pipes
            # and the wait for the last piece are not the machine's load).
            cores = min(self.jobs, len(parts)) * cpu / seconds
            self._cores = cores if self._cores is None else 0.5 * (self._cores + cores)
        return whole([np.asarray(o) for o in outs])

    def _remember(self, shared, per_row: float) -> None:
        """Keep the seconds a row of the latest batch of this shared object took."""
        with self._cost_lock:
            self._last_rate.pop(id(shared), None)
            self._last_rate[id(shared)] = per_row
            while len(self._last_rate) > 64:
                self._last_rate.pop(next(iter(self._last_rate)))

    @staticmethod
    def _probe(fn, shared, rows, probed: list) -> float:
        """Run some rows here and return the seconds a row took; ``(positions, outputs)`` of
        the rows run go to ``probed``.

        Rows spread over the batch (positions in bit-reversed order: the first, the middle,
        the quarters, ...), in pieces of 1, 1, 2, 4, ... rows until they took
        :data:`PROBE_SECONDS`, leaving at least two rows (a batch of three or fewer: one row).
        A batch is sorted, and its rows' costs often change along it (a mixed-data batch has
        its fast tests of continuous columns first): the first rows alone misjudged such
        batches. The first row of a new kind often pays one-off costs (a first call, a cache
        filled), so it is left out of the estimate when there are others."""
        picks = _spread_order(len(rows))
        done, size, first, rest_seconds = 0, 1, 0.0, 0.0
        while done == 0 or (len(rows) - done > 2
                            and (done < 2 or first + rest_seconds < PROBE_SECONDS)):
            take = min(size, len(rows) - done - 2) if done else 1
            positions = np.sort(picks[done:done + take])
            started = time.perf_counter()
            probed.append((positions, np.asarray(fn(shared, rows[positions]))))
            seconds = time.perf_counter() - started
            if done == 0:
                first = seconds
            else:
                rest_seconds += seconds
                size *= 2
            done += take
        return rest_seconds / (done - 1) if done > 1 else first

    def _prepare(self) -> None:
        """Get workers ready (a no-op where they are always ready)."""

    def _started(self) -> bool:
        """Whether workers are running (a cluster's always are)."""
        return True

    def _spreading_pays(self) -> bool:
        """Whether the processes together get more CPU than the caller would alone.

        Spreading costs extra work (a worker builds its own caches and starts cold), so it
        pays only when the processes together get clearly more than one core; while other
        work keeps the cores busy they do not, and batches stay in-process. Every fourth
        batch held back is spread anyway, to notice when cores come free.
        """
        if self._cores is None or self._cores >= SPREAD_CORES:
            return True
        self._held_back += 1
        return self._held_back % 4 == 0

    def _dispatch(self, fn, shared, parts, mode, cancelled, tick):
        """Run every part; return (outputs in order, (wall, CPU) seconds of the workers)."""
        raise NotImplementedError


class _Rates:
    """Running estimates, in seconds per row, for one kind of batch: ``here`` in the caller
    (decides whether a batch is too small to ship), ``work`` in the workers (sizes chunks)."""

    def __init__(self):
        self.here = self.work = None

    def learn(self, which: str, seconds: float, count: int) -> None:
        per_row = seconds / max(count, 1)
        old = getattr(self, which)
        setattr(self, which, per_row if old is None else 0.5 * (old + per_row))


def _spread_order(m: int) -> np.ndarray:
    """The positions 0..m-1, those spread evenly over the range first (bit-reversed order)."""
    bits = max(1, int(m - 1).bit_length())
    codes = np.arange(1 << bits, dtype=np.int64)
    reversed_codes = np.zeros_like(codes)
    for b in range(bits):
        reversed_codes |= ((codes >> b) & 1) << (bits - 1 - b)
    return reversed_codes[reversed_codes < m]


def _cuts(m: int, count: int, groups) -> list[int]:
    """Boundaries of ``count`` chunks of ``m`` rows, moved to group changes when near."""
    size = m / count
    ideal = [round(size * k) for k in range(1, count)]
    if groups is not None and len(groups) == m and m > 1:
        changes = np.flatnonzero(groups[1:] != groups[:-1]) + 1
        if len(changes):
            at = np.clip(np.searchsorted(changes, ideal), 1, len(changes)) if len(changes) > 1 \
                else np.zeros(len(ideal), dtype=int)
            moved = []
            for cut, k in zip(ideal, np.atleast_1d(at)):
                near = min((changes[j] for j in (k - 1, k) if 0 <= j < len(changes)),
                           key=lambda c: abs(c - cut))
                moved.append(int(near) if abs(near - cut) <= size / 2 else cut)
            ideal = moved
    return sorted(set([0, *[c for c in ideal if 0 < c < m], m]))


# ------------------------------------------------------------------------------ processes

def _worker_main(conn):
    """Loop of a local worker process: keep shared objects, run pieces, answer."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C is the parent's to handle
    # one BLAS thread for the worker's life (inherited from a forking parent: nothing to do)
    blas_threads(1).__enter__()
    parent = os.getppid()
    shared: OrderedDict = OrderedDict()
    while True:
        try:
            if not conn.poll(1.0):
                if os.getppid() != parent:  # the parent is gone: nobody will ask again
                    return
                continue
            message = conn.recv()
        except (EOFError, OSError):
            return
        kind = message[0]
        if kind == "stop":
            return
        if kind == "share":
            token = message[1]
            try:
                shared[token] = pickle.loads(conn.recv_bytes())
            except BaseException as err:  # noqa: BLE001 - reported with the next run
                shared[token] = _Broken(err, traceback.format_exc())
            while len(shared) > _KEEP_SHARED:
                shared.popitem(last=False)
            continue
        _, task, token, fn, part, mode = message
        try:
            obj = shared[token] if token is not None else None
            if isinstance(obj, _Broken):
                raise obj.err
            reply = ("ok", task, *_run_piece(fn, obj, part, mode))
            payload = pickle.dumps(reply, protocol=pickle.HIGHEST_PROTOCOL)
        except BaseException as err:  # noqa: BLE001 - everything goes back to the parent
            text = traceback.format_exc()
            try:
                payload = pickle.dumps(("error", task, err, text))
                pickle.loads(payload)
            except BaseException:  # noqa: BLE001 - an exception that cannot travel
                payload = pickle.dumps(("error", task, RuntimeError(
                    f"{type(err).__name__}: {err}"), text))
        try:
            conn.send_bytes(payload)
        except (EOFError, OSError):
            return


class _Broken:
    def __init__(self, err, text):
        self.err = err
        self.text = text


class _Worker:
    def __init__(self, context):
        self.conn, child = context.Pipe(duplex=True)
        self.process = context.Process(target=_worker_main, args=(child,), daemon=True,
                                       name="edgewise-worker")
        self.process.start()
        child.close()
        self.tokens: set = set()
        self.tasks: deque = deque()  # pieces sent and not yet answered, in order

    def alive(self) -> bool:
        return self.process.is_alive()

    def end(self):
        with contextlib.suppress(Exception):
            self.process.terminate()
        self.process.join(2)
        if self.process.is_alive():
            with contextlib.suppress(Exception):
                self.process.kill()
            self.process.join(2)
        with contextlib.suppress(Exception):
            self.conn.close()


def _start_method() -> str:
    methods = multiprocessing.get_all_start_methods()
    # fork is the cheapest start, but only safe while this process runs a single thread
    if "fork" in methods and threading.active_count() == 1:
        return "fork"
    return "forkserver" if "forkserver" in methods else "spawn"


def _exit_text(code) -> str:
    if code is None:
        return "it stopped answering"
    if code < 0:
        try:
            name = signal.Signals(-code).name
        except ValueError:
            name = f"signal {-code}"
        return f"it was ended by {name}" + (" (killed, perhaps out of memory)"
                                            if -code == signal.SIGKILL else "")
    return f"it exited with status {code}"


def _lost(w: _Worker, parts) -> WorkerError:
    w.process.join(1)
    return WorkerError(
        f"a worker process was lost while working on "
        f"{sum(len(parts[i]) for i in w.tasks)} item(s): {_exit_text(w.process.exitcode)}; "
        "nothing was kept — run again, with fewer jobs if memory is short")


class _Batch:
    """One spread batch, shared by the caller's thread and the feeding thread: the pieces
    not yet taken (the caller takes from the back, the workers' feeder from the front),
    outputs, the news the feeder reports, and the flag that stops it."""

    def __init__(self, parts):
        self.parts = parts
        self.outs: list = [None] * len(parts)
        self.seconds = np.zeros(2)  # wall and CPU seconds of the workers' pieces
        self.busy: dict = {}  # conn -> worker with pieces in flight (the feeder's, until it ends)
        self.news: queue.SimpleQueue = queue.SimpleQueue()
        self.ended = self.stopped = False
        self._todo = deque(range(len(parts)))
        self._lock = threading.Lock()
        self.wake, self._wake_w = os.pipe()  # written to end the feeder's wait at once

    def take_last(self):
        with self._lock:
            return self._todo.pop() if self._todo else None

    def take_first(self, more_than: int = 0):
        with self._lock:
            return self._todo.popleft() if len(self._todo) > more_than else None

    def put_back_first(self, i) -> None:
        with self._lock:
            self._todo.appendleft(i)

    def stop(self) -> None:
        self.stopped = True
        with contextlib.suppress(OSError):
            os.write(self._wake_w, b"x")

    def close(self) -> None:
        for fd in (self.wake, self._wake_w):
            with contextlib.suppress(OSError):
                os.close(fd)


class ProcessExecutor(_Spreading):
    """Spread work over ``jobs`` processes: the calling one and ``jobs - 1`` local workers
    (default: as many as CPU cores).

    The caller works too: while the workers compute, it takes pieces from the other end of
    the queue, with its own warm caches (kernel features, residual makers), so that no core
    waits and a worker's cold start is paid once fewer. Workers start on first use and stay
    until :meth:`close`; each keeps the shared objects it received (see the module
    docstring).

    Parameters
    ----------
    jobs : int, optional
        Processes that compute, the caller included (default: the number of CPU cores).
    min_seconds : float, optional
        Batches of rows estimated to take less than this stay in-process (default
        :data:`MIN_SECONDS`; 0 always spreads).
    """

    # The caller takes pieces from the back of the queue and the workers from the front, so
    # neighbouring pieces (rows sharing a conditioning set) stay on one side whatever their
    # size: small pieces cost a pipe round trip each, and keep every process busy to the end
    # of a batch.
    chunk_seconds = 0.02
    chunks_per_job = 16
    caller_works = True
    chunks_min_per_job = 2  # a worker holds two pieces at once; the caller needs its own

    def __init__(self, jobs: int | None = None, *, min_seconds: float | None = None):
        self.jobs = int(jobs) if jobs else (os.cpu_count() or 1)
        self._workers: list[_Worker] = []
        self._blas = contextlib.ExitStack()  # the one-thread BLAS limit held while workers run
        self._blas_held = False
        self._shared: dict = {}  # id(obj) -> (obj, token, payload bytes or None)
        self._tokens = itertools.count()
        self._lock = threading.Lock()
        self._init_costs(min_seconds)

    # -- workers ----------------------------------------------------------------------------
    def _ready_workers(self) -> list[_Worker]:
        for w in self._workers:
            if not w.alive():
                w.end()
        self._workers = [w for w in self._workers if w.alive()]
        if len(self._workers) < self.jobs - self.caller_works:
            # One BLAS thread here from before the first fork until close(): the processes
            # fill the cores, and OpenBLAS restarts its thread pool on the first setting
            # after a fork, its new threads spinning for about 0.1 s. Set once before the
            # fork, the workers inherit it and no piece sets it again (blas_threads leaves
            # an unchanged limit alone); set per piece, it made the first pieces of each
            # process take 2-3 times their CPU time.
            if not self._blas_held:
                self._blas.enter_context(blas_threads(1))
                self._blas_held = True
            method = _start_method()
            context = multiprocessing.get_context(method)
            if method == "forkserver":  # workers fork from a server that imported these once
                context.set_forkserver_preload(["discovery.independence", "discovery.search"])
            while len(self._workers) < self.jobs - self.caller_works:  # the caller works too
                self._workers.append(_Worker(context))
        return self._workers

    def _prepare(self):
        with self._lock:
            self._ready_workers()

    def _started(self) -> bool:
        return bool(self._workers) or self.jobs < 2

    def _token_of(self, obj):
        if obj is None:
            return None, None
        entry = self._shared.get(id(obj))
        if entry is None or entry[0] is not obj:
            payload = pickle.dumps(obj, protocol=pickle.HIGHEST_PROTOCOL)
            entry = (obj, next(self._tokens), payload)
            self._shared[id(obj)] = entry
            while len(self._shared) > _KEEP_SHARED:  # workers keep as many
                self._shared.pop(next(iter(self._shared)))
        return entry[1], entry[2]

    def _dispatch(self, fn, shared, parts, mode, cancelled, tick):
        with self._lock:  # one batch at a time per executor
            return self._dispatch_locked(fn, shared, parts, mode, cancelled, tick)

    def _dispatch_locked(self, fn, shared, parts, mode, cancelled, tick):
        """The caller computes pieces from the back of the queue in this thread while a
        feeding thread keeps the workers supplied from the front: a worker's answer is read
        and its next piece sent at once (within Python's thread switch interval, 5 ms),
        not after the caller's own piece (when the caller fed them between its pieces, the
        workers stood idle for a quarter of a batch)."""
        workers = self._ready_workers()
        token, payload = self._token_of(shared)
        batch = _Batch(parts)
        feeder = threading.Thread(target=self._feed, name="edgewise-feeder", daemon=True,
                                  args=(batch, workers, token, payload, fn, mode))
        outs, seconds = batch.outs, np.zeros(2)
        feeder.start()
        try:
            while not batch.ended:
                if cancelled is not None and cancelled():
                    raise _stopped()
                i = batch.take_last() if self.caller_works else None
                if i is not None:
                    outs[i], spent = self._run_here(fn, shared, parts[i], mode)
                    seconds = seconds + spent
                    if tick is not None:
                        tick(i)
                    self._take_news(batch, tick, wait=False)
                else:
                    self._take_news(batch, tick, wait=True)
        except BaseException:
            # stopped, failed or interrupted: end the workers still busy (a fresh one starts
            # on next use), so that nothing half-done is ever read back
            batch.stop()
            feeder.join()
            for w in batch.busy.values():
                w.end()
                w.tasks.clear()
            self._workers = [w for w in self._workers if w.alive()]
            raise
        finally:
            feeder.join()
            batch.close()
        return outs, seconds + batch.seconds

    @staticmethod
    def _take_news(batch, tick, *, wait: bool) -> None:
        """Handle what the feeding thread reported: pieces done (progress, their warnings
        raised again here), its end, or the error that ended it."""
        while True:
            try:
                news = batch.news.get(timeout=_POLL) if wait else batch.news.get_nowait()
            except queue.Empty:
                return
            wait = False  # one wait at most: the caller looks at the queue and Stop again
            if news[0] == "done":
                _, i, caught = news
                _rewarn(caught, stacklevel=5)
                if tick is not None:
                    tick(i)
            elif news[0] == "error":
                raise news[1]
            else:  # "end": every piece sent to a worker has been answered
                batch.ended = True

    @staticmethod
    def _feed(batch, workers, token, payload, fn, mode):
        """The feeding thread: send pieces from the front of the queue, read answers."""
        parts, busy = batch.parts, batch.busy
        messages: dict = {}  # piece -> its pickled "run" message, until sent
        try:
            while not batch.stopped:
                for w in workers:
                    # Two pieces in flight: a worker never waits for this thread to read
                    # its last answer before it can start the next piece. A second piece
                    # goes only while more remain (so that the caller never waits at the
                    # end of a batch for a piece it could have taken) and only when its
                    # message is small: it then fits the pipe's buffer, so sending it
                    # never blocks while the worker writes a long answer.
                    while len(w.tasks) < _IN_FLIGHT:
                        i = batch.take_first(more_than=2 if w.tasks else 0)
                        if i is None:
                            break
                        if i not in messages:  # pickled once, however often it waits
                            messages[i] = ForkingPickler.dumps(
                                ("run", i, token, fn, parts[i], mode))
                        if w.tasks and len(messages[i]) >= _PIPE_BYTES // 4:
                            batch.put_back_first(i)
                            break
                        message = messages.pop(i)
                        w.tasks.append(i)
                        busy[w.conn] = w
                        try:
                            if token is not None and token not in w.tokens:
                                w.conn.send(("share", token))
                                w.conn.send_bytes(payload)
                                w.tokens.add(token)
                            w.conn.send_bytes(message)
                        except OSError:  # the worker is gone (killed while we sent)
                            raise _lost(w, parts) from None
                if not busy:
                    break  # nothing left for the workers: the caller takes the rest
                ready = _wait_ready(list(busy) + [w.process.sentinel for w in busy.values()]
                                    + [batch.wake], timeout=_POLL)
                for w in list(busy.values()):
                    if w.conn in ready or (w.process.sentinel in ready and w.conn.poll()):
                        try:
                            reply = pickle.loads(w.conn.recv_bytes())
                        except (EOFError, OSError):
                            reply = None
                        if reply is not None and reply[0] == "ok":
                            _, i, out, spent, caught = reply
                            batch.outs[i] = out
                            batch.seconds += spent
                            w.tasks.remove(i)
                            if not w.tasks:
                                del busy[w.conn]
                            batch.news.put(("done", i, caught))
                            continue
                        if reply is not None:
                            _, i, err, text = reply
                            raise _fault(err, text, "work in a worker process")
                    if w.process.sentinel in ready or not w.alive():
                        raise _lost(w, parts)
        except BaseException as err:  # noqa: BLE001 - raised again in the caller's thread
            batch.news.put(("error", err))
        batch.news.put(("end",))

    @staticmethod
    def _run_here(fn, shared, part, mode):
        """One piece in the calling process, failing as a worker's piece would."""
        try:
            out, spent, caught = _run_piece(fn, shared, part, mode)
        except DiscoveryError:
            raise
        except Exception as err:  # noqa: BLE001 - the same one error as from a worker
            raise _fault(err, traceback.format_exc(), "work in the calling process") from err
        _rewarn(caught, stacklevel=5)
        return out, np.asarray(spent)

    def close(self):
        for w in self._workers:
            with contextlib.suppress(Exception):
                w.conn.send(("stop",))
        for w in self._workers:
            w.process.join(1)
            w.end()
        self._workers = []
        self._shared.clear()
        self._blas.close()  # BLAS threads as they were before the workers started
        self._blas_held = False

    def __repr__(self):
        return f"ProcessExecutor(jobs={self.jobs})"


# ------------------------------------------------------------------------------ cluster

class _Box:
    """Holds a shared object, so that Dask scatters it whole (a dict or list it would split)."""

    def __init__(self, value):
        self.value = value


def _dask_piece(fn, shared, part, mode):
    return _run_piece(fn, None if shared is None else shared.value, part, mode)


def _worker_check() -> str:
    """Run on each cluster worker when connecting: can it import the engine?"""
    from . import __version__
    return __version__


class DaskExecutor(_Spreading):
    """Spread work over a Dask distributed cluster.

    Parameters
    ----------
    address : str
        The scheduler's address, e.g. ``"tcp://SCHEDULER-HOST:8786"``.
    timeout : float
        Seconds to wait for the scheduler (default :data:`CLUSTER_TIMEOUT`).
    min_seconds : float, optional
        As for :class:`ProcessExecutor`.

    Raises
    ------
    ClusterError
        ``distributed`` is not installed, the scheduler cannot be reached in time, it has no
        workers, or its workers cannot import Edgewise.

    Notes
    -----
    Every worker needs Edgewise installed (the same version). Shared objects are sent once
    with ``scatter(..., broadcast=True)``; ``jobs`` is the cluster's total worker threads.
    """

    _local = False  # work given to a cluster runs there, however small

    def __init__(self, address: str, *, timeout: float = CLUSTER_TIMEOUT,
                 min_seconds: float | None = None):
        self.address = str(address)
        try:
            from distributed import Client
        except ImportError:
            raise ClusterError("a cluster needs the 'distributed' package; install it with "
                               "pip install 'edgewise[cluster]'") from None
        if "://" not in self.address or not self.address.split("://", 1)[1]:
            raise ClusterError(f"cluster address {self.address!r}: write it as "
                               "tcp://HOST:PORT (the Dask scheduler's address)")
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                self._client = Client(self.address, timeout=f"{timeout}s",
                                      set_as_default=False)
        except Exception as err:  # noqa: BLE001 - any failure to connect gets one line
            reason = str(err).strip().splitlines()[0] if str(err).strip() \
                else type(err).__name__
            raise ClusterError(f"cannot reach the cluster at {self.address} within "
                               f"{timeout:g} s ({reason}); check the address and that the "
                               "Dask scheduler is running") from None
        try:
            threads = self._client.nthreads()
            if not threads:
                self._client.wait_for_workers(1, timeout=timeout)
                threads = self._client.nthreads()
        except Exception:  # noqa: BLE001
            self.close()
            raise ClusterError(f"the cluster at {self.address} has no workers; start "
                               "some (dask worker " + self.address + ")") from None
        try:
            versions = self._client.run(_worker_check)
        except Exception as err:  # noqa: BLE001
            self.close()
            raise ClusterError(f"the workers of the cluster at {self.address} cannot import "
                               f"Edgewise ({type(err).__name__}: {err}); install it on every "
                               "worker") from None
        from . import __version__
        odd = sorted(w for w, v in versions.items() if v != __version__)
        if odd:
            self.close()
            raise ClusterError(f"{len(odd)} worker(s) of the cluster at {self.address} run "
                               f"another Edgewise version than {__version__} (e.g. {odd[0]}); "
                               "install the same version everywhere")
        self.jobs = max(1, sum(threads.values()))
        self._scattered: dict = {}
        self._init_costs(min_seconds)

    def _scatter(self, obj):
        entry = self._scattered.get(id(obj))
        if entry is None or entry[0] is not obj:
            future = self._client.scatter(_Box(obj), broadcast=True, hash=False)
            entry = self._scattered[id(obj)] = (obj, future)
            while len(self._scattered) > _KEEP_SHARED:
                old = self._scattered.pop(next(iter(self._scattered)))
                with contextlib.suppress(Exception):
                    old[1].release()
        return entry[1]

    def _dispatch(self, fn, shared, parts, mode, cancelled, tick):
        from distributed import wait as dask_wait
        handle = self._scatter(shared) if shared is not None else None
        batch = uuid.uuid4().hex[:12]
        futures = [self._client.submit(_dask_piece, fn, handle, part, mode, pure=False,
                                       key=f"edgewise-{batch}-{i}")
                   for i, part in enumerate(parts)]
        seen = set()
        try:
            while len(seen) < len(futures):
                if cancelled is not None and cancelled():
                    raise _stopped()
                with contextlib.suppress(Exception):  # a timeout: check the flag again
                    dask_wait(futures, timeout=_POLL, return_when="FIRST_COMPLETED")
                for i, f in enumerate(futures):
                    if i in seen or not f.done():
                        continue
                    if f.status != "finished":
                        raise self._lost_or_failed(f, parts[i])
                    seen.add(i)
                    if tick is not None:
                        tick(i)
            results = self._client.gather(futures)
        except BaseException:
            with contextlib.suppress(Exception):
                self._client.cancel(futures)
            raise
        outs = []
        seconds = np.zeros(2)
        for out, spent, caught in results:
            outs.append(out)
            seconds = seconds + spent
            _rewarn(caught)
        return outs, seconds

    def _lost_or_failed(self, future, part) -> DiscoveryError:
        try:
            err = future.exception()
        except Exception as other:  # noqa: BLE001 - e.g. the future was cancelled
            err = other
        if type(err).__name__ == "KilledWorker":
            return WorkerError(f"cluster workers at {self.address} were lost repeatedly while "
                               f"working on {len(part)} item(s) (Dask retried them); nothing "
                               "was kept — check the workers' memory and logs, then run again")
        try:
            text = "".join(traceback.format_tb(future.traceback()))
        except Exception:  # noqa: BLE001
            text = ""
        return _fault(err, text, f"work on the cluster at {self.address}")

    def close(self):
        client = getattr(self, "_client", None)
        if client is not None:
            with contextlib.suppress(Exception):
                client.close(timeout=5)
            self._client = None
        self._scattered = {}

    def __repr__(self):
        return f"DaskExecutor({self.address!r}, jobs={self.jobs})"


def make_executor(jobs: int | None = None, cluster: str | None = None, *,
                  timeout: float | None = None) -> Executor:
    """Choose where work runs.

    Parameters
    ----------
    jobs : int, optional
        1 (or 0/None): in-process; more: that many processes compute, the caller and
        ``jobs - 1`` local workers; negative: one per CPU core. Ignored when ``cluster`` is
        given.
    cluster : str, optional
        A Dask scheduler's address (``"tcp://host:port"``): run on that cluster.
    timeout : float, optional
        Seconds to wait for the cluster (default :data:`CLUSTER_TIMEOUT`).

    Raises
    ------
    SettingsError
        ``jobs`` is not an integer.
    ClusterError
        The cluster cannot be used (see :class:`DaskExecutor`).
    """
    from .exceptions import SettingsError
    if cluster:
        return DaskExecutor(cluster, timeout=CLUSTER_TIMEOUT if timeout is None else timeout)
    if jobs is not None and (isinstance(jobs, bool) or not isinstance(jobs, (int, np.integer))):
        raise SettingsError(f"The 'jobs' parameter must be an integer. Got {jobs!r} instead.")
    if not jobs or jobs == 1:
        return InProcessExecutor()
    if jobs < 0:
        return ProcessExecutor(None)
    return ProcessExecutor(int(jobs))


def blas_threads(limit: int | None):
    """A context that limits BLAS threads to ``limit`` (None: leave them), when threadpoolctl
    is installed; without it, it does nothing.

    Work on many small arrays gains nothing from BLAS threads, and threads left spinning after
    a large product compete with it for the cores: on a busy 2-core machine, multi-threaded
    BLAS made a 2-process kernel search 14 times slower (43 s against 3 s), and a Fisher's z
    search about a quarter slower after its correlation matrix.

    When every BLAS library already runs ``limit`` threads, nothing is set: after a fork,
    OpenBLAS (0.3.30 measured) restarts its thread pool on the next setting, even an unchanged
    one, and the new threads spin for about a tenth of a second, taking the cores from the
    processes that compute (see :meth:`ProcessExecutor._ready_workers`).
    """
    if limit is None:
        return contextlib.nullcontext()
    controller = _blas_controller()
    if controller is None or all(lib.num_threads == limit
                                 for lib in controller.lib_controllers):
        return contextlib.nullcontext()
    return controller.limit(limits=limit)


def _blas_controller():
    """threadpoolctl's controller of the loaded BLAS libraries (None without threadpoolctl)."""
    global _BLAS_CONTROLLER
    if _BLAS_CONTROLLER is None:
        try:
            from threadpoolctl import ThreadpoolController
        except ImportError:
            return None
        # finding the loaded libraries reads the process's memory map (milliseconds): once
        _BLAS_CONTROLLER = ThreadpoolController().select(user_api="blas")
    return _BLAS_CONTROLLER


_BLAS_CONTROLLER = None
