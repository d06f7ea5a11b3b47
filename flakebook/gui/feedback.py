"""How the window talks back: error dialogs with details on demand, and the session log.

No traceback reaches the user. An expected error (a :class:`~flakebook.errors.FlakebookError`)
shows its own message, which already says what is wrong and what would be accepted. An
unexpected one shows a short plain message; the traceback goes to the Python logger at debug
level only (``flakebook.gui`` logger), never into the dialog.
"""

from __future__ import annotations

import datetime as _dt
import logging
import traceback

from PySide6.QtCore import QObject, Qt, Signal
from PySide6.QtGui import QFont
from PySide6.QtWidgets import (
    QDialog,
    QHBoxLayout,
    QMessageBox,
    QPlainTextEdit,
    QPushButton,
    QVBoxLayout,
    QWidget,
)

from flakebook.errors import Cancelled, FlakebookError, InputError, ProjectError

log = logging.getLogger("flakebook.gui")

_ADVICE = {
    InputError: "Check the value or file named above and try again; nothing was saved.",
    ProjectError: "The project file was left as it was. Check the file and where it is stored.",
}


def _kind(exc: BaseException) -> str:
    """What kind of problem, in words."""
    if isinstance(exc, InputError):
        return "a value or file that was not accepted"
    if isinstance(exc, ProjectError):
        return "a problem with the project file"
    if isinstance(exc, FlakebookError):
        return "the operation could not be done"
    return f"internal problem ({type(exc).__name__}, for the report)"


def describe(exc: BaseException, action: str) -> tuple[str, str, str]:
    """(headline, advice, details) for an error raised while doing ``action``."""
    if isinstance(exc, Cancelled):
        return (f"{action}: cancelled.", "Nothing was changed.", "")
    if isinstance(exc, FlakebookError):
        headline = str(exc).strip() or _kind(exc).capitalize()
        advice = "Nothing already saved was changed."
        for kind, text in _ADVICE.items():
            if isinstance(exc, kind):
                advice = text
                break
    else:
        headline = f"{action} did not complete because of an internal problem."
        advice = (
            "Nothing already saved was changed. If it happens again, note what you were doing "
            "and report it with the details below."
        )
    details = (
        f"Action: {action}\n"
        f"Kind: {_kind(exc)}\n"
        f"Message: {str(exc).strip() or '-'}\n"
        f"Time: {_dt.datetime.now().isoformat(timespec='seconds')}"
    )
    return headline, advice, details


def show_error(parent: QWidget | None, exc: BaseException, action: str) -> QMessageBox:
    """Log ``exc`` and show it in a dialog (non-blocking; returns the box)."""
    headline, advice, details = describe(exc, action)
    level = logging.INFO if isinstance(exc, Cancelled) else logging.WARNING
    log.log(level, "%s: %s", action, headline)
    if not isinstance(exc, FlakebookError):
        log.debug("".join(traceback.format_exception(exc)))
    box = QMessageBox(parent)
    box.setIcon(
        QMessageBox.Icon.Information if isinstance(exc, Cancelled) else QMessageBox.Icon.Warning
    )
    box.setWindowTitle("flakebook")
    box.setText(headline)
    box.setInformativeText(advice)
    if details:
        box.setDetailedText(details)
    box.setStandardButtons(QMessageBox.StandardButton.Ok)
    box.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)
    box.setObjectName("errorDialog")
    box.open()
    return box


class _Relay(QObject):
    line = Signal(str)


class SessionLogHandler(logging.Handler):
    """Keeps the session's operations (INFO and above) and relays them to the log window."""

    def __init__(self) -> None:
        super().__init__(level=logging.INFO)
        self.lines: list[str] = []
        self.relay = _Relay()
        self.setFormatter(logging.Formatter("%(asctime)s  %(levelname)-7s %(message)s", "%H:%M:%S"))

    def emit(self, record: logging.LogRecord) -> None:  # noqa: D401 - logging API
        if record.levelno < logging.INFO:
            return
        try:
            text = self.format(record)
        except Exception:  # noqa: BLE001 - a log line must never break the window
            return
        self.lines.append(text)
        self.relay.line.emit(text)


class SessionLogWindow(QDialog):
    """A window listing the session's operations, opened from the View menu."""

    def __init__(self, handler: SessionLogHandler, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setObjectName("sessionLog")
        self.setWindowTitle("Session log")
        self.resize(640, 360)
        self.text = QPlainTextEdit(self)
        self.text.setReadOnly(True)
        self.text.setFont(QFont("monospace", 9))
        self.text.setPlainText("\n".join(handler.lines))
        handler.relay.line.connect(self.text.appendPlainText)
        clear = QPushButton("Clear view", self)
        clear.clicked.connect(self.text.clear)
        close = QPushButton("Close", self)
        close.clicked.connect(self.close)
        row = QHBoxLayout()
        row.addStretch(1)
        row.addWidget(clear)
        row.addWidget(close)
        lay = QVBoxLayout(self)
        lay.addWidget(self.text)
        lay.addLayout(row)
