"""Outline from click: the flake under a click outlined from the image (flakebook.imaging.segment)."""

from __future__ import annotations

import numpy as np

from flakebook.gui.tools.base import CanvasTool
from flakebook.gui.worker import Job


class SegmentTool(CanvasTool):
    """A click inside a flake asks for its outline from the image."""

    def click(self, canvas, x: float, y: float, double: bool = False) -> None:
        canvas.segmentRequested.emit(x, y)

    def connect(self, window) -> None:
        window.canvas.segmentRequested.connect(
            lambda x, y: window._guard(lambda: window.segment_at(x, y), "Outline from click")
        )


TOOL = SegmentTool(
    "segment", "Outline from &click", "G", "Click inside a flake to outline it from the image."
)


class SessionEdits:
    """The work finding the outline under a point."""

    def segment_job(self, image_id: int, x: float, y: float):
        """Work giving the outline of the flake under (x, y) (flakebook.imaging.segment), or None."""
        from flakebook.imaging.segment import segment

        img, _sample = self._survey_inputs(image_id)
        micro = self._micro_fn(image_id)
        um = img.pixel_size_um

        def run(progress=None, cancel=None):
            seg = segment(micro(), um_per_px=um, min_area_um2=1.0, progress=progress, cancel=cancel)
            f = seg.factor
            r, c = int(round(y)) // f, int(round(x)) // f
            if not (0 <= r < seg.flake_labels.shape[0] and 0 <= c < seg.flake_labels.shape[1]):
                return None
            fid = int(seg.flake_labels[r, c])
            for fl in seg.flakes:
                if fl.id == fid:
                    return np.asarray(fl.outline_px, float)
            return None

        return run


class WindowCommands:
    """Run the segmentation in a worker; its outline becomes a new flake (undoable)."""

    def segment_at(self, x: float, y: float) -> Job | None:
        s = self._need_session()
        image = self._need_image()
        job = Job("Outline from click", s.segment_job(image, x, y))

        def done(points):
            if points is None:
                self.hint_label.setText("No flake found at that point.")
                return
            self._guard(lambda: self.add_outline(points), "Outline from click")

        self.jobs.start(
            job, on_done=done, on_error=lambda e: self.report_error(e, "Outline from click")
        )
        return job
