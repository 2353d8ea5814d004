"""Long work off the GUI thread: one job class, one runner that owns the jobs.

A job runs a core function that takes ``progress`` and ``cancel`` keywords on its own
QThread. Progress, result and failure come back to the GUI thread through queued
signals. Each job has a slot name; a new job in a slot cancels the older one, whose
result is then dropped, so the newest request always wins.
"""

from __future__ import annotations

import sys
import threading
import traceback
import weakref
from typing import Any, Callable

from PySide6.QtCore import QObject, QThread, Signal

from rigside.core.errors import RigsideError
from rigside.core.progress import Cancelled

_JOBS: "weakref.WeakSet[Job]" = weakref.WeakSet()


def running_jobs() -> list["Job"]:
    """Jobs whose thread is still running (tests use it to catch leaked threads)."""
    return [j for j in list(_JOBS) if j.isRunning()]


class Job(QThread):
    """Runs ``fn(*args, progress=..., cancel=..., **kwargs)`` once on its own thread."""

    progressed = Signal(float, str)
    succeeded = Signal(object)
    failed = Signal(str)
    was_cancelled = Signal()

    def __init__(self, slot: str, label: str, fn: Callable, args: tuple, kwargs: dict):
        super().__init__()
        self.slot = slot
        self.label = label
        self._fn, self._args, self._kwargs = fn, args, kwargs
        self._stop = threading.Event()
        _JOBS.add(self)

    def cancel(self) -> None:
        self._stop.set()

    @property
    def cancelled(self) -> bool:
        return self._stop.is_set()

    def run(self) -> None:
        try:
            result = self._fn(*self._args, progress=self._progress, cancel=self._stop.is_set,
                              **self._kwargs)
        except Cancelled:
            self.was_cancelled.emit()
            return
        except RigsideError as exc:
            self.failed.emit(str(exc))
            return
        except MemoryError:
            self.failed.emit("not enough memory for this step")
            return
        except Exception as exc:  # an internal failure: reported as a message, logged in full
            traceback.print_exc(file=sys.stderr)
            self.failed.emit(f"internal error ({type(exc).__name__}): {exc}")
            return
        if self._stop.is_set():
            self.was_cancelled.emit()
        else:
            self.succeeded.emit(result)

    def _progress(self, fraction: float, message: str) -> None:
        self.progressed.emit(float(fraction), str(message))


class Runner(QObject):
    """Starts jobs, replaces older jobs of the same slot, and reports on the GUI thread.

    Signals: ``started(label)``, ``progressed(label, fraction, message)``,
    ``finished(label, outcome)`` with outcome "done", "failed" or "cancelled",
    ``error(label, message)`` and ``idle()`` when no job is left running.
    """

    started = Signal(str)
    progressed = Signal(str, float, str)
    finished = Signal(str, str)
    error = Signal(str, str)
    idle = Signal()

    def __init__(self, parent: QObject | None = None):
        super().__init__(parent)
        self._current: dict[str, Job] = {}
        self._running: set[Job] = set()

    def submit(self, slot: str, label: str, fn: Callable, *args: Any,
               on_done: Callable[[Any], None] | None = None, **kwargs: Any) -> Job:
        """Run ``fn`` in the background; ``on_done(result)`` runs on the GUI thread."""
        old = self._current.get(slot)
        if old is not None:
            old.cancel()
        job = Job(slot, label, fn, args, kwargs)
        self._current[slot] = job
        self._running.add(job)
        job.progressed.connect(lambda f, m, j=job: self._on_progress(j, f, m))
        job.succeeded.connect(lambda r, j=job: self._on_success(j, r, on_done))
        job.failed.connect(lambda m, j=job: self._on_failure(j, m))
        job.was_cancelled.connect(lambda j=job: self._end(j, "cancelled"))
        self.started.emit(label)
        job.start()
        return job

    def busy(self, slot: str | None = None) -> bool:
        if slot is None:
            return bool(self._running)
        job = self._current.get(slot)
        return job is not None and job in self._running

    def cancel(self, slot: str | None = None) -> None:
        """Ask the job of ``slot`` (or every job) to stop at its next check."""
        for job in list(self._running):
            if slot is None or job.slot == slot:
                job.cancel()

    def shutdown(self, timeout_ms: int = 60000) -> None:
        """Cancel every job and wait for the threads to end."""
        for job in list(self._running):
            job.cancel()
        for job in list(self._running):
            job.wait(timeout_ms)
        self._running.clear()
        self._current.clear()

    # ---- callbacks on the GUI thread ------------------------------------------------------
    def _is_current(self, job: Job) -> bool:
        return self._current.get(job.slot) is job and not job.cancelled

    def _on_progress(self, job: Job, fraction: float, message: str) -> None:
        if self._is_current(job):
            self.progressed.emit(job.label, fraction, message)

    def _on_success(self, job: Job, result: Any, on_done) -> None:
        current = self._is_current(job)
        self._end(job, "done" if current else "cancelled", notify=False)
        if current and on_done is not None:
            on_done(result)
        self._notify(job, "done" if current else "cancelled")

    def _on_failure(self, job: Job, message: str) -> None:
        current = self._is_current(job)
        self._end(job, "failed", notify=False)
        if current:
            self.error.emit(job.label, message)
        self._notify(job, "failed")

    def _end(self, job: Job, outcome: str, notify: bool = True) -> None:
        job.wait()
        self._running.discard(job)
        if self._current.get(job.slot) is job:
            del self._current[job.slot]
        if notify:
            self._notify(job, outcome)

    def _notify(self, job: Job, outcome: str) -> None:
        self.finished.emit(job.label, outcome)
        if not self._running:
            self.idle.emit()
        job.deleteLater()
