"""Place hole: holes placed, moved, resized and removed by hand, with their coverage."""

from __future__ import annotations

from flakebook.gui.commands import Undo
from flakebook.gui.tools.base import CanvasTool
from flakebook.store import Hole, Image


class HoleTool(CanvasTool):
    """A click places a hole of the chip's hole radius; picked holes move and resize."""

    def click(self, canvas, x: float, y: float, double: bool = False) -> None:
        canvas.holePlaced.emit(x, y, float(canvas.default_hole_radius_px))

    def connect(self, window) -> None:
        c, guard = window.canvas, window._guard
        c.holePlaced.connect(lambda x, y, r: guard(lambda: window.add_hole(x, y, r), "Place hole"))
        c.holeChanged.connect(
            lambda h, x, y, r: guard(lambda: window.move_hole(h, x, y, r), "Move hole")
        )
        c.holeRemoveRequested.connect(lambda h: guard(lambda: window.delete_hole(h), "Remove hole"))


TOOL = HoleTool(
    "hole",
    "Place &hole",
    "H",
    "Click the centre of a hole to place it (radius from the chip's hole pattern).",
)


class SessionEdits:
    """Holes placed by hand; each edit updates the coverage of the flakes of that image."""

    def hole_geometry(self, hole_id: int) -> tuple[float, float, float]:
        h = self._get(Hole, hole_id)
        return h.center_x_px, h.center_y_px, h.radius_px

    def add_hole(
        self, image_id: int, x: float, y: float, r: float, hole_id: int | None = None
    ) -> int:
        p = self.project
        iid = self._r("image", image_id)
        with p.transaction():
            hole = p.add_hole(iid, (x, y), r, source="manual")
            self._born("hole", hole.id)
            self._update_coverage_for_hole(hole)
        if hole_id is not None:
            self._alias_to("hole", hole_id, hole.id)
        return hole.id

    def update_hole(self, hole_id: int, x: float, y: float, r: float) -> None:
        p = self.project
        with p.transaction():
            hole = self._get(Hole, hole_id)
            size = p.get(Image, hole.image_id).pixel_size_um
            hole = p.update(
                hole,
                center_x_px=float(x),
                center_y_px=float(y),
                radius_px=float(r),
                radius_um=None if size is None else float(r) * size,
            )
            self._update_coverage_for_hole(hole)

    def delete_hole(self, hole_id: int) -> Undo:
        """Delete a hole (and its flake links); the undo puts back exactly the same rows."""
        p = self.project
        deleted = p.delete(self._get(Hole, hole_id))
        return lambda: p.restore(deleted)


class WindowCommands:
    """Place, move and remove a hole (undoable)."""

    def add_hole(self, x: float, y: float, r: float) -> None:
        s = self._need_session()
        image = self._need_image()
        state: dict = {}

        def do():
            state["id"] = s.add_hole(image, x, y, r, hole_id=state.get("id"))
            return lambda: s.delete_hole(state["id"])

        self.edit(f"Place hole at ({x:.0f}, {y:.0f}) px", do, self.refresh_holes)

    def move_hole(self, hole_id: int, x: float, y: float, r: float) -> None:
        s = self._need_session()
        before = s.hole_geometry(hole_id)

        def do():
            s.update_hole(hole_id, x, y, r)
            return lambda: s.update_hole(hole_id, *before)

        self.edit("Move hole", do, self.refresh_holes)

    def delete_hole(self, hole_id: int) -> None:
        s = self._need_session()

        def do():
            restore = s.delete_hole(hole_id)
            return restore

        self.edit("Remove hole", do, self.refresh_holes)
