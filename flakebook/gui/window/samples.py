"""The dialogs of samples and images (settings, new sample, adding images, watching a folder),
exports of the catalogue and pictures, the session log and About.
"""

from __future__ import annotations

import logging
from pathlib import Path

from PySide6.QtWidgets import QFileDialog, QInputDialog, QMessageBox

from flakebook import __version__
from flakebook.gui import palette
from flakebook.gui.feedback import SessionLogWindow
from flakebook.wording import count_text

log = logging.getLogger("flakebook.gui")


class SettingsDialogs:
    """Sample and image dialogs, adding images, watching the camera folder."""

    def import_images_dialog(self) -> None:
        self._need_session()
        paths, _ = QFileDialog.getOpenFileNames(
            self, "Add images", "", "Images (*.png *.jpg *.jpeg *.tif *.tiff *.bmp)"
        )
        if paths:
            self.import_images([Path(p) for p in paths])

    def import_images(
        self, paths: list[Path], sample_id: int | None = None, settings: dict | None = None
    ) -> list[int]:
        """Add micrographs to a sample; ``settings`` (objective, pixel size, ...) default to
        those of the image shown (the same microscope session)."""
        s = self._need_session()
        sample_id = sample_id if sample_id is not None else s.current_sample(self.current_image)
        if settings is None:
            settings = s.microscope_settings(self.current_image)
        added: list[int] = []

        def do():
            added[:] = s.add_images(sample_id, paths, settings)
            return lambda: s.delete_images(added)

        self.edit(f"Add {count_text(len(paths), 'image')}", do)
        if added:
            self.show_image(added[0])
        return added

    def watch_folder_dialog(self) -> None:
        s = self._need_session()
        folder = QFileDialog.getExistingDirectory(self, "Watch the camera's folder")
        if not folder:
            return
        settings = s.microscope_settings(self.current_image)
        if not settings.get("pixel_size_um"):
            from flakebook.imaging.scale import load_objectives

            presets = load_objectives()
            name, ok = QInputDialog.getItem(
                self,
                "Watch the camera's folder",
                "Objective of the new images:",
                list(presets),
                0,
                False,
            )
            if not ok:
                return
            o = presets[name]
            settings = {"objective": o.name, "pixel_size_um": o.um_per_px, "na_objective": o.na}
        self.candidates.watch(Path(folder), s, self, settings)

    def sample_dialog(self, sample_id: int | None = None) -> None:
        from flakebook.gui.dialogs import SampleDialog

        s = self._need_session()
        sample_id = sample_id if sample_id is not None else s.current_sample(self.current_image)
        dlg = SampleDialog(self, s.sample_values(sample_id))
        if dlg.exec() != SampleDialog.DialogCode.Accepted:
            return
        values = dlg.values()
        self.edit("Sample settings", lambda: s.update_sample(sample_id, values))

    def new_sample_dialog(self) -> None:
        from flakebook.gui.dialogs import SampleDialog

        s = self._need_session()
        dlg = SampleDialog(self, None)
        if dlg.exec() != SampleDialog.DialogCode.Accepted:
            return
        values = dlg.values()
        state: dict = {}

        def do():
            state["id"] = s.add_sample(values)
            return lambda: s.delete_sample(state["id"])

        self.edit(f"New sample {values['name']}", do)

    def image_dialog(self) -> None:
        from flakebook.gui.dialogs import ImageDialog

        s = self._need_session()
        image = self._need_image()
        dlg = ImageDialog(self, s.image_values(image))
        if dlg.exec() != ImageDialog.DialogCode.Accepted:
            return
        values = dlg.values()
        self.edit("Image settings", lambda: s.update_image(image, values))


class Exports:
    """CSV and picture exports, the session log, About."""

    def export_csv_dialog(self) -> None:
        self._need_session(write=False)
        path, _ = QFileDialog.getSaveFileName(
            self, "Export catalogue", str(self.session.path.with_suffix(".csv")), "CSV (*.csv)"
        )
        if path:
            self.catalogue.export_csv(path)
            log.info("Exported the catalogue to %s", path)

    def export_picture_dialog(self) -> None:
        self._need_session(write=False)
        path, _ = QFileDialog.getSaveFileName(
            self, "Export picture", "", "PNG (*.png);;SVG (*.svg)"
        )
        if path:
            self.export_picture(path)

    def export_widget_dialog(self, widget) -> None:
        path, _ = QFileDialog.getSaveFileName(self, "Export plot", "", "PNG (*.png);;SVG (*.svg)")
        if path:
            from flakebook.render.export import widget_picture

            out = widget_picture(widget, path, scale=2.0 if path.lower().endswith(".png") else 1.0)
            log.info("Exported a plot to %s", out)

    def export_picture(self, path: str | Path) -> Path:
        """The current tab as PNG or SVG: the catalogue table, or the image view with overlays."""
        from flakebook.render.export import widget_picture

        if self.tabs.currentWidget() is self.catalogue:
            out = self.catalogue.export_picture(path)
        else:
            out = widget_picture(self.canvas, path)
        log.info("Exported a picture to %s", out)
        return out

    def show_log(self) -> None:
        if self.log_window is None:
            self.log_window = SessionLogWindow(self.log_handler, self)
        self.log_window.show()
        self.log_window.raise_()

    def about(self) -> None:
        QMessageBox.about(
            self,
            "About flakebook",
            f"<b>flakebook {__version__}</b><p>A notebook for atomically thin flakes: layer number "
            "from optical contrast, Raman and PL; suspended membranes; Raman thermometry.</p>"
            f"<p>Layer colours: Okabe–Ito colour-blind-safe palette ({', '.join(t for t, _ in palette.legend_entries()[:3])}, …).</p>"
            "<p>Laser safety: follow your institution's laser-safety rules and local regulations.</p>",
        )
