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

    def cancel(self) -> None:
        """Ask the job to stop (the function sees its ``cancel`` event set)."""
        self.cancel_event.set()

    def _progress(self, fraction: float, text: str = "") -> None:
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
            if self.cancel_event.is_set():
                self.signals.cancelled.emit()
            else:
                self.signals.finished.emit(result)
        finally:
            self.done.set()
            self.signals.ended.emit()


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
        self.hide()

    def start(
        self,
        job: Job,
        on_done: Callable[[Any], None] | None = None,
        on_error: Callable[[BaseException], None] | None = None,
        on_cancel: Callable[[], None] | None = None,
    ) -> Job:
        """Start ``job`` in the thread pool and show its progress here."""
        self.jobs.append(job)
        s = job.signals
        s.progress.connect(lambda f, t, j=job: self._on_progress(j, f, t))
        if on_done is not None:
            s.finished.connect(on_done)
        if on_error is not None:
            s.failed.connect(on_error)
        s.cancelled.connect(lambda j=job: log.info("%s: cancelled", j.title))
        if on_cancel is not None:
            s.cancelled.connect(on_cancel)
        s.ended.connect(lambda j=job: self._on_ended(j))
        self.label.setText(job.title)
        self.bar.setValue(0)
        self.show()
        log.info("%s: started", job.title)
        QThreadPool.globalInstance().start(job)
        return job

    def _on_progress(self, job: Job, fraction: float, text: str) -> None:
        if job is self.jobs[-1] if self.jobs else False:
            self.bar.setValue(int(1000 * max(0.0, min(1.0, fraction))))
            self.label.setText(f"{job.title}: {text}" if text else job.title)

    def _on_ended(self, job: Job) -> None:
        if job in self.jobs:
            self.jobs.remove(job)
        if not self.jobs:
            self.hide()
        else:
            self.label.setText(self.jobs[-1].title)

    def cancel_all(self) -> None:
        """Set the cancel event of every running job."""
        for job in list(self.jobs):
            job.cancel()

    @property
    def busy(self) -> bool:
        """Whether a job is running."""
        return bool(self.jobs)
