"""Raman maps from the window: a map file (flakebook map text format) laid on the micrograph
shown, fitted in a worker, stored through flakebook.pipeline_maps, undoable.

A menu-less tool: the Raman map view's "Import map…" button calls
``WindowCommands.import_map_dialog``; the session's parts (``SessionEdits``) read the sample's
rule table on the window's thread, give the worker only the fitting, and store the result back
on the window's thread.
"""

from __future__ import annotations

from pathlib import Path

from PySide6.QtWidgets import QFileDialog

from flakebook.errors import InputError
from flakebook.gui.commands import Undo
from flakebook.gui.worker import Job
from flakebook.store import Image, RamanMap, Sample


class SessionEdits:
    """Fit a map file (in a worker) and store it on an image of the project."""

    def map_job(self, path: str | Path, image_id: int):
        """Work fitting the map at ``path`` with the rule table of the image's sample; reads the
        project here (the window's thread), not in the worker."""
        from flakebook.pipeline_maps import analyse
        from flakebook.pipeline_spectra import rule_table_for
        from flakebook.spectra.io import read_map

        img = self.project.get(Image, self._r("image", image_id))
        sample = self.project.get(Sample, img.sample_id)
        if img.pixel_size_um is None:
            raise InputError(
                f"{Path(img.path).name} has no pixel size, so a map cannot be laid on it; set it "
                "from the objective (Image settings) or draw a scale line (S) first."
            )
        smap = read_map(Path(path))
        laser = float(smap.metadata.get("laser_nm", 532.0))
        table, _ = rule_table_for(self.project, sample, laser)
        max_layers = self.project.max_layers

        def run(progress=None, cancel=None):
            return analyse(
                smap,
                sample.material,
                laser_nm=laser,
                table=table,
                max_layers=max_layers,
                progress=progress,
                cancel=cancel,
            ), smap

        return run

    def store_map_result(self, path: str | Path, image_id: int, done) -> Undo:
        """Store a map fitted by :meth:`map_job` (``done``: its result); the undo deletes it."""
        from flakebook.pipeline_maps import store_map

        analysed, smap = done
        img = self.project.get(Image, self._r("image", image_id))
        got = store_map(
            self.project,
            img.sample_id,
            smap,
            image=img,
            source_path=Path(path),
            analysed=analysed,
        )
        self.last_map = got
        return self._undo_made([(RamanMap, got.record.id)])


class WindowCommands:
    """The Raman map view's import: a map file onto the micrograph shown."""

    def import_map_dialog(self) -> Job | None:
        self._need_session(write=True)
        if self.current_image is None:
            raise InputError(
                "Show the micrograph the map was taken over first (the map is laid on it by the "
                "image's stage position)."
            )
        path, _ = QFileDialog.getOpenFileName(
            self, "Raman map", "", "Raman maps (*.txt *.map *.csv);;All files (*)"
        )
        return self.import_map(path, self.current_image) if path else None

    def import_map(self, path: str | Path, image_id: int) -> Job:
        s = self._need_session(write=True)
        name = Path(path).name
        job = Job(f"Fit the Raman map {name}", s.map_job(path, image_id))

        def done(result):
            def do():
                return s.store_map_result(path, image_id, result)

            stored = self._guard(lambda: (self.edit(f"Add Raman map {name}", do), True)[1],
                                 "Raman map")  # fmt: skip
            if stored:
                got = getattr(s, "last_map", None)
                if got is not None:
                    for w in got.warnings[:3]:
                        self.statusBar().showMessage(f"{name}: {w}", 10000)
                    view = self.views.get("map")
                    if view is not None:
                        self.tabs.setCurrentWidget(view)
                        view.show_map(s, got.record.id)

        self.jobs.start(job, on_done=done, on_error=lambda e: self.report_error(e, "Raman map"))
        return job
