"""Scale line: the pixel size of an image from a line of known length."""

from __future__ import annotations

import logging
import math

from PySide6.QtWidgets import QInputDialog

from flakebook.errors import InputError
from flakebook.gui.tools.base import LineTool
from flakebook.store import Appearance, Image

log = logging.getLogger("flakebook.gui")


class ScaleTool(LineTool):
    """Two clicks along a length known in µm give the image's pixel size."""

    signal = "scaleLineDrawn"

    def connect(self, window) -> None:
        window.canvas.scaleLineDrawn.connect(
            lambda *p: window._guard(lambda: window.scale_line(*p), "Set scale")
        )


TOOL = ScaleTool(
    "scale",
    "&Scale line",
    "S",
    "Click the two ends of a line of known length (a scale bar or a hole pitch).",
)


class SessionEdits:
    """An image's pixel size (coverage margins follow it)."""

    def set_pixel_size(self, image_id: int, um_per_px: float | None, method: str = "") -> None:
        p = self.project
        img = self._get(Image, image_id)
        with p.transaction():
            camera = dict(img.camera)
            if method:
                camera["scale_method"] = method
            img = p.update(img, pixel_size_um=um_per_px, camera=camera)
            for a in p.records(Appearance, image_id=img.id):
                self._update_coverage_for_appearance(a)
                break


class WindowCommands:
    """Ask the line's length in µm and set the pixel size (undoable)."""

    def scale_line(
        self, x0: float, y0: float, x1: float, y1: float, length_um: float | None = None
    ) -> None:
        s = self._need_session()
        image = self._need_image()
        d = math.hypot(x1 - x0, y1 - y0)
        if d < 2:
            raise InputError(
                f"The scale line is {d:.1f} px long; draw a line of at least a few pixels."
            )
        if length_um is None:
            length_um, ok = QInputDialog.getDouble(
                self,
                "Scale line",
                f"The line is {d:.1f} px long. Its length in µm:",
                10.0,
                1e-3,
                1e6,
                3,
            )
            if not ok:
                return
        um_per_px = float(length_um) / d
        before = s.image_info(image).get("um_per_px")

        def do():
            s.set_pixel_size(image, um_per_px, method=f"scale line {d:.1f} px = {length_um:g} um")
            return lambda: s.set_pixel_size(image, before, method="undo")

        self.edit(f"Scale {um_per_px:.4g} µm/px", do)
