"""What the window shows: redrawing from the project, the image and its overlays, the selected
flake everywhere, the inspector's model curves and the readouts under the cursor.
"""

from __future__ import annotations

import logging
import math

import numpy as np
from PySide6.QtCore import QTimer

from flakebook.gui.tools import CANVAS_TOOLS
from flakebook.gui.worker import Job

log = logging.getLogger("flakebook.gui")


class Display:
    """Refresh, show an image or a flake, the inspector's model, cursor readouts."""

    def refresh(self) -> None:
        """Redraw browser, catalogue, overlays and inspector from the project."""
        s = self.session
        if s is None:
            return
        self.browser.populate(s.browser_tree())
        self.catalogue.model.thumbnail = s.thumbnail
        self.catalogue.set_rows(s.catalogue_rows())
        if self.current_image is not None and not s.has_image(self.current_image):
            self.current_image = None
            self.canvas.set_image(None)
        if self.current_image is not None:
            self._refresh_overlays()
        if self.current_flake is not None and not s.has_flake(self.current_flake):
            self.current_flake = None
        self._show_inspector()
        self.catalogue.select_flake(self.current_flake)
        self.browser.select_flake(self.current_flake)
        self.candidates.set_candidates(s.candidates(self.candidates.target_layers()), s.thumbnail)
        self._start_thumbnails()
        self.follow_views()

    def refresh_holes(self) -> None:
        """After a hole edit: the holes drawn, the catalogue (coverage) and the inspector."""
        s = self.session
        if s is None:
            return
        if self.current_image is not None and s.has_image(self.current_image):
            self.canvas.set_holes(s.hole_shapes(self.current_image))
        self.catalogue.set_rows(s.catalogue_rows())
        self._show_inspector()

    def _start_thumbnails(self) -> None:
        """Thumbnails of flakes on images not yet decoded, made in a worker (once each)."""
        if self._thumb_job is not None and not self._thumb_job.done.is_set():
            return
        run = self.session.thumbnail_job()
        if run is None:
            return
        job = Job("Thumbnails", run)
        self._thumb_job = job
        s = self.session

        def done(crops):
            if self.session is not s:
                return
            s.add_thumbnails(crops)
            self.catalogue.model.set_rows(self.catalogue.model.rows)
            self.candidates.set_candidates(
                s.candidates(self.candidates.target_layers()), s.thumbnail
            )

        self.jobs.start(job, on_done=done, on_error=lambda e: log.warning("Thumbnails: %s", e))

    def _refresh_overlays(self) -> None:
        s = self.session
        outlines, holes = s.overlays(self.current_image)
        self.canvas.set_outlines(outlines)
        self.canvas.set_holes(holes)
        self.canvas.select_flake(self.current_flake)
        info = s.image_info(self.current_image)
        self.canvas.set_scale(info.get("um_per_px"))
        self.canvas.default_hole_radius_px = info.get("default_hole_radius_px") or 20.0
        self._show_scale(info)

    def _show_scale(self, info: dict) -> None:
        um = info.get("um_per_px")
        self.scale_label.setText(f"{um:.4g} µm/px" if um else "no scale: draw a scale line (S)")

    def show_image(self, image_id: int, *, overlays: bool = True, front: bool = True) -> None:
        """Load an image into the image view (brought to the front unless ``front`` is
        False)."""
        s = self._need_session(write=False)
        try:
            shown = s.load_image(image_id)
        except Exception as exc:
            # Say on the canvas why the micrograph is not shown (its file moved or damaged),
            # rather than leaving what it showed before or "no micrograph yet".
            self.canvas.set_image(None)
            self.current_image = None
            self.canvas.set_empty_text(
                f"This micrograph cannot be shown:\n{exc}\n\nThe project's records are unchanged."
            )
            raise
        self.current_image = image_id
        self._linear = None
        self._reference = None
        self._channels = ()
        self.canvas.set_image(shown.display, shown.um_per_px)
        for w in shown.warnings:
            log.warning("%s: %s", shown.name, w)
        if overlays:
            self._refresh_overlays()
        self.browser.select_image(image_id)
        if front:
            self.tabs.setCurrentWidget(self.canvas)
        # after the first paint: the conversion to linear intensity competes for the CPU
        QTimer.singleShot(
            300, lambda i=image_id: self._start_cursor_job(i) if self.current_image == i else None
        )
        self.hint_label.setText(
            f"{shown.name}: {shown.display.shape[1]} × {shown.display.shape[0]} px"
        )

    def _start_cursor_job(self, image_id: int) -> None:
        """Linear intensity and the substrate level for the contrast under the cursor (worker)."""
        if self._cursor_job is not None:
            self._cursor_job.cancel()
        job = Job("Reading intensities", self.session.cursor_job(image_id))
        self._cursor_job = job

        def done(res, image_id=image_id):
            if self.current_image == image_id:
                self._linear, self._reference, self._channels = res

        self.jobs.start(
            job, on_done=done, on_error=lambda e: log.warning("Contrast under the cursor: %s", e)
        )

    def show_appearance(self, flake_id: int, image_id: int) -> None:
        if image_id != self.current_image:
            self.show_image(image_id)
        self.select_flake(flake_id, centre=True)

    def select_flake(
        self,
        flake_id: int | None,
        *,
        centre: bool = False,
        from_canvas: bool = False,
        keep_view: bool = False,
    ) -> None:
        """Select a flake everywhere: canvas, browser, catalogue, inspector. The image view
        loads the flake's image; with ``keep_view`` the view in front stays there (a flake
        picked on the chip map)."""
        self.current_flake = flake_id
        if self.session is not None and flake_id is not None and not from_canvas:
            images = self.session.images_of_flake(flake_id)
            if images and self.current_image not in images:
                self._guard(lambda: self.show_image(images[0], front=not keep_view), "Show image")
        self.canvas.select_flake(
            flake_id, centre=centre and self.tabs.currentWidget() is self.canvas
        )
        self.browser.select_flake(flake_id)
        self.catalogue.select_flake(flake_id)
        self._show_inspector()
        self.follow_views()

    def follow_views(self) -> None:
        """Let the views that follow the project and the selection redraw (``follow``)."""
        from flakebook.gui import views

        for name in views.NAMES:
            follow = getattr(views.module(name), "follow", None)
            if follow is not None:
                self._guard(lambda f=follow, n=name: f(self, self.views[n]), "Show")

    def open_candidate(self, flake_id: int) -> None:
        self.select_flake(flake_id, centre=True)
        self.tabs.setCurrentWidget(self.canvas)

    def _show_inspector(self) -> None:
        # tags and notes typed in the inspector are saved before it shows anything else
        self.inspector.commit_edits()
        if self.session is None or self.current_flake is None:
            self.inspector.show_flake(None)
            return
        details = self.session.flake_details(self.current_flake)
        key = details.get("model_key")
        self.inspector.model_curves = self._model_cache.get(key)
        self.inspector.show_flake(details)
        if key is not None and key not in self._model_cache and details.get("contrast"):
            # after a short pause, so that clicking through the catalogue stays quick
            fid = details["id"]
            QTimer.singleShot(150, lambda d=details, k=key, f=fid: self._start_model(d, k, f))

    def _start_model(self, details: dict, key, fid: int) -> None:
        if self.session is None or self.current_flake != fid or key in self._model_cache:
            return
        self._model_cache[key] = None
        job = Job("Contrast model", self.session.model_job(details))
        self.jobs.start(
            job,
            on_done=lambda curves, k=key, f=fid: self._model_ready(k, f, curves),
            on_error=lambda exc, k=key: (
                self._model_cache.pop(k, None),
                log.warning("Contrast model: %s", exc),
            ),
        )

    def _model_ready(self, key, flake_id: int, curves) -> None:
        self._model_cache[key] = curves
        self.inspector.set_model(flake_id, curves) if self.current_flake == flake_id else None

    def _on_sample_activated(self, sample_id: int) -> None:
        if self.session is None:
            return
        first = self.session.first_image(sample_id)
        if first is not None and first != self.current_image:
            self._guard(lambda: self.show_image(first), "Show image")

    def _on_tool(self, name: str) -> None:
        self.hint_label.setText(CANVAS_TOOLS[name].hint if name in CANVAS_TOOLS else "")
        a = self.tool_actions.get(name)
        if a is not None and not a.isChecked():
            a.setChecked(True)

    def _on_cursor(self, x: float, y: float) -> None:
        col, row = int(round(x)), int(round(y))
        um = self.canvas.um_per_px
        text = f"x {col}, y {row} px"
        if um:
            text += f"  ·  {x * um:.2f}, {y * um:.2f} µm"
        self.pos_label.setText(text)
        lin, ref = self._linear, self._reference
        if lin is None or ref is None:
            self.contrast_label.setText("")
            return
        h, w = lin.shape[:2]
        if not (0 <= row < h and 0 <= col < w):
            return
        px = lin[row, col]
        px = np.atleast_1d(px).astype(float)
        parts = []
        for ch, value, r in zip(self._channels, px, np.atleast_1d(ref)):
            if r and math.isfinite(value):
                parts.append(f"{ch} {(r - value) / r:+.3f}")
        self.contrast_label.setText("C  " + "  ".join(parts) if parts else "")
