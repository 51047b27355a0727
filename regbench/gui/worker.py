"""Long work off the GUI thread.

A :class:`Job` runs one core function in the global QThreadPool with
``progress`` and ``cancel`` callables and reports back through Qt signals,
which are delivered on the GUI thread.  The core function must not touch the
session; its result is applied by the ``done`` handler on the GUI thread.
"""

from __future__ import annotations

import threading
import traceback
from typing import Callable, Optional

from PySide6 import QtCore

from regbench.errors import Cancelled, RegbenchError


class _Signals(QtCore.QObject):
    # Each carries the job so the Runner (a QObject on the GUI thread) receives
    # them through queued connections, on the GUI thread.
    progress = QtCore.Signal(int, int, str)
    done = QtCore.Signal(object, object)
    failed = QtCore.Signal(object, object)
    cancelled = QtCore.Signal(object)
    finished = QtCore.Signal(object)  # always last, whatever the outcome


class Job(QtCore.QRunnable):
    """Run ``fn(progress=..., cancel=...)`` in a pool thread.

    Parameters
    ----------
    fn : callable
        Called with keyword arguments ``progress`` and ``cancel``.
    label : str
        What the status bar says while it runs.
    """

    def __init__(self, fn: Callable, label: str = "Working"):
        super().__init__()
        self.fn = fn
        self.label = label
        self.signals = _Signals()
        self._stop = threading.Event()
        self.setAutoDelete(False)
        self.slot = "main"
        self.on_done = None
        self.on_failed = None
        self.on_cancelled = None

    def cancel(self) -> None:
        self._stop.set()

    @property
    def cancel_requested(self) -> bool:
        return self._stop.is_set()

    def _progress(self, done: int, total: int, message: str) -> None:
        self.signals.progress.emit(int(done), int(total), str(message))

    def run(self) -> None:  # pool thread
        try:
            result = self.fn(progress=self._progress, cancel=self._stop.is_set)
        except Cancelled:
            self.signals.cancelled.emit(self)
        except RegbenchError as exc:
            self.signals.failed.emit(self, exc)
        except Exception as exc:  # a defect: keep the window alive and show it
            exc.regbench_traceback = traceback.format_exc()
            self.signals.failed.emit(self, exc)
        else:
            if self._stop.is_set():
                self.signals.cancelled.emit(self)
            else:
                self.signals.done.emit(self, result)
        finally:
            self.signals.finished.emit(self)


class Runner(QtCore.QObject):
    """Starts jobs (one per slot) and delivers their outcome on the GUI thread."""

    started = QtCore.Signal(object)   # Job
    progress = QtCore.Signal(int, int, str)
    stopped = QtCore.Signal(object)   # Job

    def __init__(self, parent=None):
        super().__init__(parent)
        self.pool = QtCore.QThreadPool.globalInstance()
        self._jobs: dict = {}
        self._alive: set = set()

    def start(self, fn: Callable, *, label: str, done: Callable, failed: Optional[Callable] = None,
              cancelled: Optional[Callable] = None, slot: str = "main") -> Job:
        """Start ``fn`` in the pool; a running job in the same slot is cancelled first."""
        old = self._jobs.get(slot)
        if old is not None:
            old.cancel()
        job = Job(fn, label)
        job.slot, job.on_done, job.on_failed, job.on_cancelled = slot, done, failed, cancelled
        sig = job.signals
        sig.progress.connect(self.progress)
        sig.done.connect(self._on_done)
        sig.failed.connect(self._on_failed)
        sig.cancelled.connect(self._on_cancelled)
        sig.finished.connect(self._on_finished)
        self._jobs[slot] = job
        self._alive.add(job)
        self.started.emit(job)
        self.pool.start(job)
        return job

    def _current(self, job: Job) -> bool:
        # A superseded or cancelled job must not change the document.
        return not job.cancel_requested and self._jobs.get(job.slot) is job

    @QtCore.Slot(object, object)
    def _on_done(self, job, result):
        if self._current(job):
            if job.on_done is not None:
                job.on_done(result)
        elif job.on_cancelled is not None:  # cancelled after it finished: its result is dropped
            job.on_cancelled()

    @QtCore.Slot(object, object)
    def _on_failed(self, job, exc):
        if self._current(job):
            if job.on_failed is not None:
                job.on_failed(exc)
        elif job.on_cancelled is not None:
            job.on_cancelled()

    @QtCore.Slot(object)
    def _on_cancelled(self, job):
        if job.on_cancelled is not None:
            job.on_cancelled()

    @QtCore.Slot(object)
    def _on_finished(self, job):
        if self._jobs.get(job.slot) is job:
            del self._jobs[job.slot]
        self._alive.discard(job)
        self.stopped.emit(job)

    def running(self) -> list:
        return list(self._jobs.values())

    def busy(self) -> bool:
        return bool(self._alive)

    def cancel_all(self) -> None:
        for job in list(self._alive):
            job.cancel()

    def wait(self, msecs: int = 30000) -> bool:
        return self.pool.waitForDone(msecs)
