"""Select: click a flake to select it or a hole to pick it up; deleting the selection."""

from __future__ import annotations

from flakebook.errors import InputError
from flakebook.gui.tools.base import CanvasTool


class SelectTool(CanvasTool):
    """Select a flake by clicking it; pick a hole up to drag it or its handle."""

    def click(self, canvas, x: float, y: float, double: bool = False) -> None:
        hole = canvas.hole_at(x, y)
        if hole is not None:
            canvas.pick_hole(hole)
            return
        canvas.release_hole()
        canvas.flakeClicked.emit(canvas.flake_at(x, y))

    def connect(self, window) -> None:
        window.canvas.flakeClicked.connect(
            lambda fid: window.select_flake(fid if fid >= 0 else None, from_canvas=True)
        )


TOOL = SelectTool(
    "select",
    "&Select",
    "V",
    "Click a flake to select it; click a hole to pick it up, then drag it or its handle "
    "(Delete removes it).",
    read_only=True,
    cross_cursor=False,
)


class WindowCommands:
    """Deleting what is selected: the picked hole, else the flake."""

    def delete_selected(self) -> None:
        """Delete the picked hole, else the selected flake."""
        s = self._need_session()
        roi = self.canvas._hole_roi
        if roi is not None:
            hid = roi.hole_id
            self.canvas.release_hole()
            self.delete_hole(hid)
            return
        if self.current_flake is None:
            raise InputError("Select a flake to delete first.")
        fid = self.current_flake
        label = s.flake_label(fid)

        def do():
            return s.delete_flake(fid)

        self.current_flake = None
        self.edit(f"Delete {label}", do)
