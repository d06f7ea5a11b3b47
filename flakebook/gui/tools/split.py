"""Split flake: a line across a flake's outline makes its far side a new flake."""

from __future__ import annotations

from flakebook.errors import InputError
from flakebook.gui.commands import Undo
from flakebook.gui.tools.base import LineTool
from flakebook.store import Flake, Image, Sample


class SplitTool(LineTool):
    """Two clicks: a line across the selected flake, along which it splits in two."""

    signal = "splitLineDrawn"

    def connect(self, window) -> None:
        window.canvas.splitLineDrawn.connect(
            lambda *pts: window._guard(
                lambda: window.split_selected(pts[:2], pts[2:]), "Split flake"
            )
        )


TOOL = SplitTool(
    "split",
    "S&plit flake",
    "P",
    "Click two points of a line across the selected flake to split it in two.",
)


class SessionEdits:
    """Split an outline along a line (flakebook.gui.geometry.split_outline)."""

    def split_flake(self, flake_id: int, image_id: int, p0, p1) -> tuple[int, Undo]:
        """Split a flake's outline in this image along a line; the far side becomes a new flake.
        Returns the new flake's id and the undo."""
        from flakebook.gui.geometry import split_outline

        p = self.project
        fid = self._r("flake", flake_id)
        app = next(
            (a for a in p.appearances_of(fid) if a.image_id == self._r("image", image_id)), None
        )
        if app is None:
            raise InputError("The selected flake has no outline in this image.")
        a, b = split_outline(app.outline_px, p0, p1)
        before = app.outline_px.copy()
        img = p.get(Image, app.image_id)
        with p.transaction():
            self.set_outline(app.id, a)
            sample = p.get(Sample, img.sample_id)
            new = p.add_flake(sample, self.next_label(sample))
            new_app = p.add_appearance(new, img, b)
            self._born("flake", new.id)
            self._born("appearance", new_app.id)
            self._update_coverage_for_appearance(new_app)

        def undo():
            with p.transaction():
                rid = self._r("flake", new.id)
                if p.records(Flake, id=rid):
                    p.delete(Flake, rid)
                self.set_outline(self._r("appearance", app.id), before)

        return new.id, undo


class WindowCommands:
    """Split the selected flake, or the one under the line (undoable)."""

    def split_selected(self, p0, p1) -> None:
        """Split the selected flake (else the one under the line's middle) along a line."""
        s = self._need_session()
        image = self._need_image()
        fid = self.current_flake
        if fid is None:
            mid = (0.5 * (p0[0] + p1[0]), 0.5 * (p0[1] + p1[1]))
            fid = self.canvas.flake_at(*mid)
            if fid < 0:
                raise InputError("Select the flake to split first (or draw the line across one).")
        state: dict = {}

        def do():
            state["new"], undo = s.split_flake(fid, image, p0, p1)
            return undo

        self.edit(f"Split {s.flake_label(fid)}", do)
