"""Outlines drawn by hand (the outline tool) and edited corner by corner (Edit outline)."""

from __future__ import annotations

import numpy as np

from flakebook.errors import InputError
from flakebook.gui.tools.base import CanvasTool
from flakebook.store import Appearance, Image, Sample


class OutlineTool(CanvasTool):
    """Click corners; a double click or Enter closes the outline (three corners at least)."""

    def click(self, canvas, x: float, y: float, double: bool = False) -> None:
        if double:
            canvas.finish_outline()
            return
        canvas._points.append((x, y))
        pts = np.array(canvas._points + [canvas._points[0]])
        canvas._rubber.setData(pts[:, 0], pts[:, 1])

    def move(self, canvas, x: float, y: float) -> None:
        if canvas._points:
            pts = np.array(canvas._points + [(x, y), canvas._points[0]])
            canvas._rubber.setData(pts[:, 0], pts[:, 1])

    def enter(self, canvas) -> None:
        canvas.finish_outline()

    def connect(self, window) -> None:
        c = window.canvas
        c.outlineDrawn.connect(
            lambda pts: window._guard(lambda: window.add_outline(pts), "New outline")
        )
        c.outlineEdited.connect(
            lambda a, pts: window._guard(lambda: window.change_outline(a, pts), "Edit outline")
        )


TOOL = OutlineTool(
    "outline",
    "Draw &outline",
    "O",
    "Click the corners of a new outline; double-click or Enter closes it, Esc drops it.",
)


class SessionEdits:
    """A new flake from a drawn outline; an outline changed."""

    def add_flake(self, image_id: int, points: np.ndarray, label: str | None = None) -> int:
        """A new flake with its outline in this image (drawn by hand)."""
        p = self.project
        img = self._get(Image, image_id)
        sample = p.get(Sample, img.sample_id)
        with p.transaction():
            flake = p.add_flake(sample, label or self.next_label(sample))
            app = p.add_appearance(flake, img, np.asarray(points, float))
            self._born("flake", flake.id)
            self._born("appearance", app.id)
            self._update_coverage_for_appearance(app)
        return flake.id

    def outline(self, appearance_id: int) -> np.ndarray:
        return self._get(Appearance, appearance_id).outline_px.copy()

    def set_outline(self, appearance_id: int, points: np.ndarray) -> None:
        p = self.project
        with p.transaction():
            app = p.update(
                self._get(Appearance, appearance_id),
                outline_px=np.asarray(points, float),
                outline_um=None,
            )
            self._update_coverage_for_appearance(app)


class WindowCommands:
    """New outline, edited outline (undoable)."""

    def add_outline(self, points: np.ndarray, *, label: str | None = None) -> None:
        s = self._need_session()
        image = self._need_image()
        state: dict = {}

        def do():
            state["flake"] = s.add_flake(image, points, label=label or state.get("label"))
            state["label"] = s.flake_label(state["flake"])
            return lambda: s.delete_flake(state["flake"])

        self.edit("New outline", do)
        self.select_flake(state["flake"], from_canvas=True)

    def change_outline(self, appearance_id: int, points: np.ndarray) -> None:
        s = self._need_session()
        before = s.outline(appearance_id)

        def do():
            s.set_outline(appearance_id, points)
            return lambda: s.set_outline(appearance_id, before)

        self.edit("Edit outline", do)

    def edit_outline(self) -> None:
        self._need_session()
        if self.current_flake is None:
            raise InputError("Select a flake first; its outline in this image becomes editable.")
        for app_id, item in self.canvas.outlines.items():
            if item.shape_data.flake_id == self.current_flake:
                self.canvas.set_tool("select")
                self.canvas.begin_edit_outline(app_id)
                self.canvas.setFocus()
                self.hint_label.setText(
                    "Editing: drag corners, click an edge to add a corner, right-click a corner to "
                    "remove it. Enter keeps the change, Esc drops it."
                )
                return
        raise InputError("The selected flake has no outline in this image.")
