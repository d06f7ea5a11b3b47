"""Running long work off the window's thread, with progress and a cancel button.

A :class:`Job` wraps a callable that takes ``progress`` and ``cancel`` keywords (the core's
signature, INTERFACE.md "Inside the core") and runs it in the global ``QThreadPool``. Signals
arrive on the window's thread. :class:`JobBar` is the progress indicator with its cancel button
that the status bar holds.
"""

from __future__ import annotations

import logging
import threading
import time
from collections.abc import Callable
from typing import Any

from PySide6.QtCore import QObject, QRunnable, QThreadPool, Signal
from PySide6.QtWidgets import QHBoxLayout, QLabel, QProgressBar, QPushButton, QWidget

from flakebook.errors import Cancelled

log = logging.getLogger("flakebook.gui")


class JobSignals(QObject):
    """Signals of a job: progress(fraction, text), finished(result), failed(exc), cancelled()."""

    progress = Signal(float, str)
    finished = Signal(object)
    failed = Signal(object)
    cancelled = Signal()
    ended = Signal()


_RUNNING: set = set()  # jobs in a worker thread, kept alive until their run() returns


class Job(QRunnable):
    """``func(*args, progress=..., cancel=..., **kwargs)`` in a worker thread."""

    def __init__(self, title: str, func: Callable[..., Any], *args: Any, **kwargs: Any) -> None:
        super().__init__()
        self.setAutoDelete(False)
        self.title = title
        self.func = func
        self.args = args
        self.kwargs = kwargs
        self.cancel_event = threading.Event()
        self.signals = JobSignals()
        self.started_at = 0.0
        self.done = threading.Event()
        #: functions called with (fraction, text) in the worker thread at each progress report
        self.progress_hooks: list[Callable[[float, str], None]] = []

    def cancel(self) -> None:
        """Ask the job to stop (the function sees its ``cancel`` event set)."""
        self.cancel_event.set()

    def _progress(self, fraction: float, text: str = "") -> None:
        for hook in self.progress_hooks:  # called in the worker thread
            hook(float(fraction), str(text))
        self.signals.progress.emit(float(fraction), str(text))

    def run(self) -> None:  # runs in the worker thread
        self.started_at = time.perf_counter()
        try:
            result = self.func(
                *self.args, progress=self._progress, cancel=self.cancel_event, **self.kwargs
            )
        except Cancelled:
            self.signals.cancelled.emit()
        except BaseException as exc:  # noqa: BLE001 - reported through the failed signal
            self.signals.failed.emit(exc)
        else:
            try:
                if self.cancel_event.is_set():
                    self.signals.cancelled.emit()
                else:
                    self.signals.finished.emit(result)
            except RuntimeError:  # the window went away meanwhile
                pass
        finally:
            self.done.set()
            try:
                self.signals.ended.emit()
            except RuntimeError:  # the window went away meanwhile
                pass
            _RUNNING.discard(self)


class JobBar(QWidget):
    """Progress bar, message and cancel button for the running job(s), in the status bar."""

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setObjectName("jobBar")
        self.label = QLabel(self)
        self.bar = QProgressBar(self)
        self.bar.setRange(0, 1000)
        self.bar.setFixedWidth(160)
        self.bar.setTextVisible(False)
        self.cancel_button = QPushButton("Cancel", self)
        self.cancel_button.setObjectName("cancelJob")
        self.cancel_button.setToolTip("Stop the running job (Esc)")
        self.cancel_button.clicked.connect(self.cancel_all)
        lay = QHBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addWidget(self.label)
        lay.addWidget(self.bar)
        lay.addWidget(self.cancel_button)
        self.jobs: list[Job] = []
        self._by_signals: dict[int, Job] = {}
        self._inline: threading.Event | None = None
        self._inline_title = ""
        self.hide()

    def start(
        self,
        job: Job,
        on_done: Callable[[Any], None] | None = None,
        on_error: Callable[[BaseException], None] | None = None,
        on_cancel: Callable[[], None] | None = None,
    ) -> Job:
        """Start ``job`` in the thread pool and show its progress here.

        The callbacks run on the window's thread. They are dropped when the job was abandoned
        (:meth:`abandon_all`, e.g. the project was closed) or this bar no longer exists.
        """
        job.callbacks = (on_done, on_error, on_cancel)
        job.abandoned = False
        self.jobs.append(job)
        self._by_signals[id(job.signals)] = job
        s = job.signals
        s.progress.connect(self._progress_slot)
        s.finished.connect(self._finished_slot)
        s.failed.connect(self._failed_slot)
        s.cancelled.connect(self._cancelled_slot)
        s.ended.connect(self._ended_slot)
        self.label.setText(job.title)
        self.bar.setValue(0)
        self.show()
        log.info("%s: started", job.title)
        _RUNNING.add(job)
        QThreadPool.globalInstance().start(job)
        return job

    def _job(self) -> Job | None:
        sender = self.sender()
        return self._by_signals.get(id(sender)) if sender is not None else None

    def _progress_slot(self, fraction: float, text: str) -> None:
        job = self._job()
        if job is not None and self.jobs and job is self.jobs[-1]:
            self.bar.setValue(int(1000 * max(0.0, min(1.0, fraction))))
            self.label.setText(f"{job.title}: {text}" if text else job.title)

    def _finished_slot(self, result: object) -> None:
        job = self._job()
        if job is not None and not job.abandoned and job.callbacks[0] is not None:
            job.callbacks[0](result)

    def _failed_slot(self, exc: object) -> None:
        job = self._job()
        if job is not None and not job.abandoned and job.callbacks[1] is not None:
            job.callbacks[1](exc)

    def _cancelled_slot(self) -> None:
        job = self._job()
        if job is None:
            return
        log.info("%s: cancelled", job.title)
        if not job.abandoned and job.callbacks[2] is not None:
            job.callbacks[2]()

    def _ended_slot(self) -> None:
        job = self._job()
        if job is None:
            return
        self._by_signals.pop(id(job.signals), None)
        if job in self.jobs:
            self.jobs.remove(job)
        if not self.jobs and self._inline is None:
            self.hide()
        elif self.jobs:
            self.label.setText(self.jobs[-1].title)

    def abandon_all(self, wait_ms: int = 5000) -> None:
        """Cancel every job, drop their callbacks, and wait for the threads to stop."""
        for job in list(self.jobs):
            job.abandoned = True
            job.cancel()
        for job in list(self.jobs):
            job.done.wait(wait_ms / 1000.0)

    # A job that must run on the window's thread (it writes the project): the bar shows its
    # progress, events are processed between steps so the cancel button works.
    def begin_inline(self, title: str) -> threading.Event:
        self._inline = threading.Event()
        self._inline_title = title
        self.label.setText(title)
        self.bar.setValue(0)
        self.show()
        log.info("%s: started", title)
        return self._inline

    def inline_progress(self, fraction: float, text: str = "") -> None:
        from PySide6.QtWidgets import QApplication

        self.bar.setValue(int(1000 * max(0.0, min(1.0, fraction))))
        self.label.setText(f"{self._inline_title}: {text}" if text else self._inline_title)
        QApplication.processEvents()

    def end_inline(self) -> None:
        self._inline = None
        if not self.jobs:
            self.hide()

    def cancel_all(self) -> None:
        """Set the cancel event of every running job."""
        for job in list(self.jobs):
            job.cancel()
        if getattr(self, "_inline", None) is not None:
            self._inline.set()

    @property
    def busy(self) -> bool:
        """Whether a job is running."""
        return bool(self.jobs)
