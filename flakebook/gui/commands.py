"""Undoable edits. Each command has already written its change to the project when pushed.

The window performs an edit first (so a refused edit never reaches the stack and the project
stays as it was), then pushes an :class:`Edit` whose first ``redo`` does nothing. Undo and redo
each write to the project at once, in one transaction of the store. If an undo or redo is refused
(the record changed meanwhile, the file became read-only), the error goes to the window's error
dialog and the stack is cleared so that it never claims a state the file does not have.
"""

from __future__ import annotations

import logging
from collections.abc import Callable

from PySide6.QtGui import QUndoCommand

log = logging.getLogger("flakebook.gui")

#: What an edit returns: a function that reverts it.
Undo = Callable[[], object]


class Edit(QUndoCommand):
    """An edit already applied: ``undo_fn`` reverts it, ``redo_fn`` applies it again."""

    def __init__(
        self,
        text: str,
        redo_fn: Callable[[], object],
        undo_fn: Callable[[], object],
        *,
        after: Callable[[], None] | None = None,
        on_error: Callable[[BaseException, str], None] | None = None,
    ) -> None:
        super().__init__(text)
        self._redo_fn = redo_fn
        self._undo_fn = undo_fn
        self._after = after
        self._on_error = on_error
        self._first = True

    def redo(self) -> None:
        if self._first:
            self._first = False
            log.info("%s", self.text())
            return
        self._run(self._redo_fn, f"Redo {self.text()}")

    def undo(self) -> None:
        self._run(self._undo_fn, f"Undo {self.text()}")

    def _run(self, fn: Callable[[], object], what: str) -> None:
        try:
            fn()
        except Exception as exc:  # noqa: BLE001 - shown to the user, stack reset
            if self._on_error is not None:
                self._on_error(exc, what)
            return
        log.info("%s", what)
        if self._after is not None:
            self._after()
