"""Running a search off the GUI thread.

:class:`SearchRunner` takes a :class:`~gui._session.SearchJob` from the session, runs it on a
worker :class:`QThread`, throttles the engine's progress callback to about 20 updates a second
and hands the outcome back to the session on the GUI thread. Stop sets the job's cancel event;
the engine and the session's chunked cache check it between batches, so a run ends within a
fraction of a second and no partial result is ever passed on as final.
"""

from __future__ import annotations

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
        job = self.session.start_run()
        if job is None:
            return False
        thread = QThread(self)
        thread.setObjectName(f"search-{job.run_id}")
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
