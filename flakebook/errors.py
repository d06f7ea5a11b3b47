"""The one error hierarchy of flakebook.

Every error that the program expects is a :class:`FlakebookError`. Bad input raises
:class:`InputError`, whose message names the file or value, says what is wrong and what would be
accepted. The command line prints such a message (at most three lines) and exits 2; the desktop
program shows it in a dialog.
"""

from __future__ import annotations


class FlakebookError(Exception):
    """Base of every error flakebook raises on purpose."""


class InputError(FlakebookError, ValueError):
    """A file, value or option that cannot be used as given.

    The message says what (file or value), what is wrong with it, and what would be accepted.
    """


class ProjectError(FlakebookError):
    """A project file that cannot be opened, read or written as asked."""


class Cancelled(FlakebookError):
    """A long operation stopped because its cancel event was set."""


def check_cancel(cancel) -> None:
    """Raise :class:`Cancelled` when ``cancel`` (a ``threading.Event`` or None) is set."""
    if cancel is not None and cancel.is_set():
        raise Cancelled("cancelled")
