"""Running a search off the GUI thread.

:class:`SearchRunner` takes a :class:`~gui._session.SearchJob` from the session, runs it on a
worker :class:`QThread`, throttles the engine's progress callback to about 20 updates a second
and hands the outcome back to the session on the GUI thread. Stop sets the job's cancel event;
the engine and the session's chunked cache check it between batches, so a run ends within a
fraction of a second and no partial result is ever passed on as final. An error the search
did not expect reaches the user as one line (what, and where it happened), never a traceback.

:class:`ArrangeRunner` does the same for Arrange: a dense diagram's layout is computed on a
worker thread and applied on the GUI thread, only if it is still the latest request.
"""

from __future__ import annotations

import threading
import time
import traceback
from pathlib import Path

from PySide6.QtCore import QObject, QThread, Signal, Slot

from discovery.exceptions import DiscoveryError, SearchCancelled

_MIN_INTERVAL = 0.05


def unexpected_line(err: BaseException) -> str:
    """One line for an error the search did not expect: what it was and where it happened
    (the innermost frame), for the user to report; never a traceback."""
    where = ""
    frames = traceback.extract_tb(err.__traceback__)
    if frames:
        last = frames[-1]
        where = f" at {Path(last.filename).name}:{last.lineno} in {last.name}"
    what = " ".join(str(err).split())[:200]
    return (f"unexpected error in the search ({type(err).__name__}: {what}{where}); "
            "nothing was changed — please report this line with the run log")


class _Worker(QObject):
    # every signal carries the job, so the receiving slots (on the GUI thread) know the run
    progressed = Signal(object, object)
    finished = Signal(object, object, object)
    failed = Signal(object, str)
    stopped = Signal(object)

    def __init__(self, job):
        super().__init__()
        self.job = job
        self._last = 0.0

    def _progress(self, info):
        now = time.perf_counter()
        final = info.get("planned") and info.get("done") == info.get("planned")
        if now - self._last >= _MIN_INTERVAL or final:
            self._last = now
            self.progressed.emit(self.job, dict(info))

    @Slot()
    def run(self):
        try:
            result, seen = self.job.run(self._progress)
        except SearchCancelled:
            self.stopped.emit(self.job)
        except DiscoveryError as err:
            self.failed.emit(self.job, str(err))
        except MemoryError:
            self.failed.emit(self.job, "the search ran out of memory; untick variables in "
                             "the Variables panel or set the Depth box lower, then run again")
        except Exception as err:  # a bug: one line for the user, where it happened in the log
            self.failed.emit(self.job, unexpected_line(err))
        else:
            self.finished.emit(self.job, result, seen)


class SearchRunner(QObject):
    """Start, stop and collect searches for one session."""

    def __init__(self, session, parent=None):
        super().__init__(parent)
        self.session = session
        self._threads: list[tuple[QThread, _Worker]] = []

    @property
    def busy(self) -> bool:
        return any(t.isRunning() for t, _ in self._threads)

    def start(self) -> bool:
        return self._launch(self.session.start_run())

    def start_analysis(self, kind: str, **options) -> bool:
        """Start a survival sweep or a resampling run (see ``Session.start_analysis``) on a
        worker thread, with the same progress and Stop as a search."""
        return self._launch(self.session.start_analysis(kind, **options))

    def _launch(self, job) -> bool:
        if job is None:
            return False
        thread = QThread(self)
        thread.setObjectName(f"{getattr(job, 'kind', 'search')}-{job.run_id}")
        worker = _Worker(job)
        worker.moveToThread(thread)
        thread.started.connect(worker.run)
        # bound slots of this GUI-thread object: Qt queues the calls to the GUI thread
        worker.progressed.connect(self._on_progress)
        worker.finished.connect(self._on_finished)
        worker.failed.connect(self._on_failed)
        worker.stopped.connect(self._on_stopped)
        for signal in (worker.finished, worker.failed, worker.stopped):
            signal.connect(thread.quit)
        thread.finished.connect(self._reap)
        self._threads.append((thread, worker))
        thread.start()
        return True

    @Slot(object, object)
    def _on_progress(self, job, info):
        self.session.report_progress(job, info)

    @Slot(object, object, object)
    def _on_finished(self, job, result, seen):
        self.session.finish_run(job, result, seen)

    @Slot(object, str)
    def _on_failed(self, job, message):
        self.session.fail_run(job, message)

    @Slot(object)
    def _on_stopped(self, job):
        self.session.run_stopped(job)

    @Slot()
    def _reap(self):
        for pair in [p for p in self._threads if p[0].isFinished()]:
            self._threads.remove(pair)
            pair[1].deleteLater()
            pair[0].deleteLater()

    def stop(self) -> bool:
        return self.session.stop_run()

    def shutdown(self, timeout_ms: int = 3000) -> None:
        """Stop every run and wait for the threads (window closing)."""
        self.session.stop_run()
        for thread, worker in list(self._threads):
            worker.job.cancel.set()
            thread.quit()
            thread.wait(timeout_ms)


class ArrangeRunner(QObject):
    """Lay the diagram out on a worker thread, so that the window keeps answering while a
    dense diagram's force-directed layout is computed (seconds for a hundred variables).

    :meth:`start` takes a :class:`~gui._session.ArrangePlan` from the session; the layout is
    computed on a Python thread and handed back to the session on the GUI thread, where
    only the latest request is applied (an Arrange asked for twice applies once; a layout
    of a diagram that changed meanwhile is dropped).
    """

    _done = Signal(object, object)
    _failed = Signal(object, str)

    def __init__(self, session, parent=None):
        super().__init__(parent)
        self.session = session
        self._threads: list[threading.Thread] = []
        # emitted from the worker thread, received here on the GUI thread (queued)
        self._done.connect(self._on_done)
        self._failed.connect(self._on_failed)

    @property
    def busy(self) -> bool:
        self._threads = [t for t in self._threads if t.is_alive()]
        return bool(self._threads)

    def start(self, style: str | None = None) -> bool:
        plan = self.session.plan_arrange(style)
        if plan is None:
            return False
        thread = threading.Thread(target=self._work, args=(plan,), daemon=True,
                                  name=f"arrange-{plan.token}")
        self._threads.append(thread)
        thread.start()
        return True

    def _work(self, plan):
        try:
            positions = plan.compute()
        except Exception as err:  # a bug in a layout: one line, the layout stays as it was
            outcome = (self._failed, (plan, f"the layout failed ({type(err).__name__}: "
                                            f"{' '.join(str(err).split())[:160]}); the "
                                            "diagram keeps its places"))
        else:
            outcome = (self._done, (plan, positions))
        try:
            outcome[0].emit(*outcome[1])
        except RuntimeError:  # the window closed meanwhile
            pass

    @Slot(object, object)
    def _on_done(self, plan, positions):
        self.session.apply_arrange(plan, positions)

    @Slot(object, str)
    def _on_failed(self, plan, message):
        self.session.notifications.error(message, title="Arrange")

    def wait(self, timeout: float = 10.0) -> None:
        """Wait for the layouts still being computed (window closing, tests)."""
        for thread in list(self._threads):
            thread.join(timeout)
