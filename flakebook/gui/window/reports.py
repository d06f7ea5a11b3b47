"""File > Write report: the campaign report of ``flakebook report`` written from the window.

The dialog (:mod:`flakebook.gui.report_dialog`) picks the file, the paper and the flakes; the
report is written in a :class:`~flakebook.gui.worker.Job` by the same builder the command line
calls (:func:`flakebook.render.report.write_report`), on a read-only connection to the project
opened in the worker's thread (the window's connection stays on the window's thread). The
status bar shows its progress card by card; Cancel stops it between cards and leaves no file
(the report is written whole through a temporary file, or not at all).

Raman thermometry heats the sample with a laser. Follow your institution's laser-safety rules
and local regulations.
"""

from __future__ import annotations

import logging
from pathlib import Path

from PySide6.QtCore import QUrl
from PySide6.QtGui import QDesktopServices
from PySide6.QtWidgets import QDialog, QPushButton

from flakebook.errors import InputError
from flakebook.gui.worker import Job
from flakebook.report.content import Selection
from flakebook.wording import count_text

log = logging.getLogger("flakebook.gui")

ACTION = "Write report"


def report_job(project_path: Path, out: Path, select: Selection, paper: str):
    """Work for a worker thread: open the project read-only there, write the report, close it.
    Returns write_report's summary (out, format, flakes, figures, problems)."""

    def run(progress=None, cancel=None):
        from flakebook.render.report import write_report
        from flakebook.store import Project

        with Project.open(project_path, read_only=True) as project:
            summary = write_report(
                project, out, select=select, paper=paper, progress=progress, cancel=cancel
            )
        if cancel is not None:
            cancel.clear()  # Cancel pressed while the file was being written came too late
        return summary

    return run


class Reports:
    """The report dialog, the report job and the status bar's Open button."""

    _report_job: Job | None = None
    _open_report_button: QPushButton | None = None
    last_report: Path | None = None

    def report_dialog(self, *, show: bool = True):
        """The Write report dialog for the open project; on Write, :meth:`write_report_file`.
        Returns the dialog (``show=False``: not run, for tests)."""
        from flakebook.gui.report_dialog import ReportDialog
        from flakebook.store import Flake

        s = self._need_session(write=False)
        p = s.project
        chosen = None
        if self.current_flake is not None:
            flake = p.get(Flake, self.current_flake)
            chosen = flake.label if flake is not None else None
        shown = [r["flake_id"] for r in self.catalogue.proxy.visible_rows()]
        default = self.last_report or s.path.with_name(f"{s.path.stem}-report.html")
        dialog = ReportDialog(p, default, chosen=chosen, shown=shown, parent=self)
        if show and dialog.exec() == QDialog.DialogCode.Accepted:
            v = dialog.values()
            self.write_report_file(v["out"], v["select"], v["paper"])
        return dialog

    def write_report_file(self, out: str | Path, select: Selection, paper: str = "a4") -> Job:
        """Write the report of ``select`` to ``out`` in a worker; the status bar says when it is
        done and offers to open it; an error is shown in a message box."""
        s = self._need_session(write=False)
        if self._report_job is not None and not self._report_job.done.is_set():
            raise InputError(
                "A report is being written already; wait for it, or cancel it (Ctrl+.) first."
            )
        out = Path(out).expanduser()
        if not out.is_absolute():
            out = s.path.parent / out
        self._show_open_report(None)
        job = Job(f"Write report {out.name}", report_job(s.path, out, select, paper))
        self._report_job = job
        self.hint_label.setText(f"Writing the report of {select.describe()} to {out}…")

        def done(summary: dict) -> None:
            self.last_report = Path(summary["out"])
            cards = count_text(len(summary["flakes"]), "flake card")
            text = f"Report written: {summary['out']} ({cards})"
            if summary["problems"]:
                text += f"; {count_text(len(summary['problems']), 'problem')} noted in it"
            for problem in summary["problems"]:
                log.warning("%s: %s", ACTION, problem)
            log.info("%s", text)
            self.hint_label.setText(text)
            self._show_open_report(self.last_report)

        def cancelled() -> None:
            text = f"Report cancelled; {out.name} was not written."
            log.info("%s", text)
            self.hint_label.setText(text)

        self.jobs.start(
            job,
            on_done=done,
            on_error=lambda e: self.report_error(e, ACTION),
            on_cancel=cancelled,
        )
        return job

    def _show_open_report(self, path: Path | None) -> None:
        """The status bar's Open button for the last report (hidden for None)."""
        if self._open_report_button is None:
            if path is None:
                return
            b = QPushButton("Open report", self)
            b.setObjectName("openReport")
            b.clicked.connect(lambda: self._guard(self.open_report, "Open report"))
            # before the job bar: permanent widgets come after the one normal one (the hint)
            self.statusBar().insertPermanentWidget(1, b)
            self._open_report_button = b
        b = self._open_report_button
        b.setVisible(path is not None)
        if path is not None:
            b.setToolTip(f"Open {path} in the program the system uses for it")

    def open_report(self) -> bool:
        """Open the last report with the system's program for HTML or PDF."""
        if self.last_report is None or not self.last_report.exists():
            raise InputError("No report written in this session is there to open any more.")
        return QDesktopServices.openUrl(QUrl.fromLocalFile(str(self.last_report)))
