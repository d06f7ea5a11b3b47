"""The window's footing: the error guard, the checks that a project and an image are there, and
:meth:`WindowBase.edit`, through which every undoable edit goes.

Every edit goes through :meth:`WindowBase.edit`: the session writes it to the project at once
(one store transaction), then an :class:`~flakebook.gui.commands.Edit` carrying its inverse is
pushed on the undo stack.
"""

from __future__ import annotations

from collections.abc import Callable

from PySide6.QtCore import QTimer

from flakebook.errors import InputError
from flakebook.gui.commands import Edit
from flakebook.gui.feedback import show_error
from flakebook.gui.tools import CANVAS_TOOLS


class WindowBase:
    """Guard, checks, the edit path onto the undo stack, title and enabled actions."""

    def _guard(self, fn: Callable[[], object], action: str):
        """Run ``fn``; an error becomes a dialog (never a traceback) and nothing is pushed."""
        try:
            return fn()
        except Exception as exc:  # noqa: BLE001 - the window's one catch-all
            self.report_error(exc, action)
            return None

    def report_error(self, exc: BaseException, action: str) -> None:
        self.errors.append((action, exc))
        show_error(self, exc, action)

    def _need_session(self, write: bool = True):
        if self.session is None:
            raise InputError("No project is open; open or create one first (File menu).")
        if write and self.session.read_only:
            raise InputError(
                f"{self.session.path.name} is open read-only; nothing can be changed in this window."
            )
        return self.session

    def _need_image(self) -> int:
        if self.current_image is None:
            raise InputError("No image is shown; pick one in the project browser or add images.")
        return self.current_image

    def edit(
        self,
        text: str,
        do: Callable[[], Callable[[], object]],
        refresh: Callable[[], None] | None = None,
    ) -> None:
        """Apply an edit now (``do`` writes it and returns its undo) and push it on the stack.

        ``do`` returns ``undo``; redo calls ``do`` again (and keeps the new undo it returns).
        """
        s = self._need_session(write=True)
        created = s.epoch
        state = {"undo": do(), "epoch": s.epoch}
        refresh = refresh or self.refresh

        def redo():
            with s.resolving(created):
                state["undo"] = do()
                state["epoch"] = s.epoch

        def undo():
            with s.resolving(state["epoch"]):
                state["undo"]()

        cmd = Edit(text, redo, undo, after=refresh, on_error=self._undo_failed)
        self.undo_stack.push(cmd)
        refresh()

    def _undo_failed(self, exc: BaseException, what: str) -> None:
        self.report_error(exc, what)
        QTimer.singleShot(0, self.undo_stack.clear)
        QTimer.singleShot(0, self.refresh)

    def _on_stack_changed(self, *_args) -> None:
        self._update_title()

    def _update_title(self) -> None:
        if self.session is None:
            self.setWindowTitle("flakebook")
            self.mode_label.setText("")
            return
        ro = " [read-only]" if self.session.read_only else ""
        self.setWindowTitle(f"{self.session.path.name}{ro} – flakebook")
        self.mode_label.setText("read-only" if self.session.read_only else "saved")
        self.mode_label.setToolTip(
            "Opened read-only: edits are disabled."
            if self.session.read_only
            else "Every edit is written to the project file as it happens."
        )

    def _update_enabled(self) -> None:
        has = self.session is not None
        rw = has and not self.session.read_only
        for a in (self.a_close, self.a_export_csv, self.a_export_pic, self.a_report):
            a.setEnabled(has)
        for a in (
            self.a_import,
            self.a_watch,
            self.a_find,
            self.a_holes,
            self.a_recompute,
            self.a_delete,
            self.a_edit_outline,
            self.a_sample,
            self.a_new_sample,
            self.a_image_settings,
            self.a_link,
            self.a_merge,
            self.a_calibrate,
        ):
            a.setEnabled(rw)
        for name, a in self.tool_actions.items():
            a.setEnabled(has and (rw or CANVAS_TOOLS[name].read_only))
        self.inspector.set_read_only(not rw)
