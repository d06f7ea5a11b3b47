"""Measure distance: two points' distance in pixels and µm (changes nothing)."""

from __future__ import annotations

import logging
import math

from flakebook.gui.tools.base import LineTool

log = logging.getLogger("flakebook.gui")


class MeasureTool(LineTool):
    """Two clicks: their distance in pixels (and µm when the image has a scale)."""

    def line(self, canvas, x0: float, y0: float, x1: float, y1: float) -> None:
        d_px = math.hypot(x1 - x0, y1 - y0)
        text = f"{d_px:.1f} px"
        if canvas.um_per_px:
            text += f" = {d_px * canvas.um_per_px:.2f} \u00b5m"
        canvas._rubber.setData([x0, x1], [y0, y1])
        canvas._measure_text.setText(text)
        canvas._measure_text.setPos(x1, y1)
        canvas._measure_text.setVisible(True)
        canvas.distanceMeasured.emit(x0, y0, x1, y1)

    def connect(self, window) -> None:
        window.canvas.distanceMeasured.connect(window._on_measured)


TOOL = MeasureTool(
    "measure",
    "&Measure distance",
    "M",
    "Click two points to measure their distance.",
    read_only=True,
)


class WindowCommands:
    """The measured distance in the status bar and the session log."""

    def _on_measured(self, x0: float, y0: float, x1: float, y1: float) -> None:
        d = math.hypot(x1 - x0, y1 - y0)
        um = self.canvas.um_per_px
        text = f"Distance {d:.1f} px" + (f" = {d * um:.2f} µm" if um else " (no scale set)")
        self.hint_label.setText(text)
        log.info("%s", text)
