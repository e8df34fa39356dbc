"""Running a search off the GUI thread.

:class:`SearchRunner` takes a :class:`~gui._session.SearchJob` from the session, runs it on a
worker :class:`QThread`, throttles the engine's progress callback to about 20 updates a second
and hands the outcome back to the session on the GUI thread. Stop sets the job's cancel event;
the engine and the session's chunked cache check it between batches, so a run ends within a
fraction of a second and no partial result is ever passed on as final.
"""

from __future__ import annotations

import sys
import time
import traceback

from PySide6.QtCore import QObject, QThread, Signal, Slot

from discovery.exceptions import DiscoveryError, SearchCancelled

_MIN_INTERVAL = 0.05


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
        except Exception as err:  # a bug: one line for the user, details on stderr
            traceback.print_exc(file=sys.stderr)
            self.failed.emit(self.job, f"unexpected error in the search ({type(err).__name__}: {err}); "
                             "please report it with the run log")
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
