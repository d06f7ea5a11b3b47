"""Long work started from the window (find flakes, detect holes, calibrate optics, recompute):
it runs in a :class:`~flakebook.gui.worker.Job` with the status bar's progress bar and cancel
button, and each result is stored as one undoable edit.
"""

from __future__ import annotations

import logging

from flakebook.gui.worker import Job

log = logging.getLogger("flakebook.gui")


class Analysis:
    """Find flakes, detect holes, calibrate the optics, recompute stale results."""

    def find_flakes(self, images: list[int] | None = None) -> Job | None:
        """Find flakes on the images selected in the browser (else the one shown), one after
        the other in a worker; each image's result is one undoable edit."""
        s = self._need_session()
        if images is None:
            images = self.browser.selected_images() or [self._need_image()]
        queue = list(images)
        target = self.candidates.target_layers()
        image = queue.pop(0)
        job = Job(f"Find flakes on {s.image_info(image)['name']}", s.survey_job(image, target))

        def done(result):
            def do():
                return s.store_survey(image, result)

            name = s.image_info(image)["name"]

            def store():
                undo = do()  # first run here, to say what it did in the undo text
                n = s.last_survey
                words = f"{n['updated']} updated, {n['new']} new"
                first = {"undo": undo}

                def again():  # the edit's first do() is the run above; redo runs it anew
                    return first.pop("undo") if first else do()

                self.edit(f"Find flakes on {name} ({words})", again)
                text = f"Find flakes on {name}: {words} (flakes already there matched by outline)"
                self.hint_label.setText(text)
                log.info("%s", text)

            self._guard(store, "Find flakes")
            for w in result.warnings:
                log.warning("Find flakes on %s: %s", name, w)
            if queue:
                self._guard(lambda: self.find_flakes(queue), "Find flakes")

        def failed(exc):
            self.report_error(exc, "Find flakes")
            if queue:
                self._guard(lambda: self.find_flakes(queue), "Find flakes")

        self.jobs.start(job, on_done=done, on_error=failed)
        return job

    def detect_holes(self) -> Job | None:
        s = self._need_session()
        image = self._need_image()
        job = Job("Detect holes", s.holes_job(image))

        def done(result):
            self._guard(
                lambda: self.edit(
                    f"Detect holes ({len(result.holes)})", lambda: s.store_holes(image, result)
                ),
                "Detect holes",
            )

        self.jobs.start(job, on_done=done, on_error=lambda e: self.report_error(e, "Detect holes"))
        return job

    def recompute_stale(self):
        """Recompute every stale record. It writes the project, so it runs on the window's
        thread; the progress bar and its cancel button stay live (events are processed between
        records), and a cancelled run leaves the project as it was (one store transaction)."""
        s = self._need_session()
        cancel = self.jobs.begin_inline("Recompute stale")
        try:
            report = s.recompute_stale(progress=self.jobs.inline_progress, cancel=cancel)
        finally:
            self.jobs.end_inline()
        self.undo_stack.clear()  # recomputed results are not undone one by one
        self.refresh()
        text = f"Recomputed {len(report.recomputed)}"
        if report.unregistered:
            text += f"; {len(report.unregistered)} without a way to recompute them (left stale)"
        if report.failed:
            text += f"; {len(report.failed)} failed (left stale): " + "; ".join(
                str(f[2]) for f in report.failed[:3]
            )
        log.info("Recompute stale: %s", text)
        self.hint_label.setText(text)
        return report

    def calibrate_dialog(self, *, show: bool = True):
        """The layer-calibration dialog of the current sample: pick its flakes of known N, then
        :meth:`calibrate` fits them in a worker. Returns the dialog (``show=False``: not run,
        for tests)."""
        from flakebook.gui.calibration_dialog import CalibrationDialog
        from flakebook.pipeline import calibration_record
        from flakebook.pipeline_calibration import calibration_summary, known_flakes
        from flakebook.store import Sample

        s = self._need_session()
        sample = s.project.get(Sample, s.current_sample(self.current_image))
        dialog = CalibrationDialog(
            sample.name,
            known_flakes(s.project, sample),
            calibration_summary(calibration_record(s.project, sample)),
            self,
        )
        if show and dialog.exec():
            self.calibrate(sample.id, dialog.chosen())
        return dialog

    def calibrate(self, sample_id: int, labels: list[str] | None = None) -> Job:
        """Fit the sample's layer calibration (flakebook.pipeline_calibration, as
        ``flakebook calibrate PROJECT`` does) from the flakes ``labels`` (None: every usable
        flake of known N) in a worker; the result is stored as one undoable edit."""
        from flakebook.pipeline_calibration import calibration_job, store_layer_calibration
        from flakebook.store import Sample

        s = self._need_session()
        p = s.project
        sample = p.get(Sample, sample_id)
        run, chosen = calibration_job(p, sample, labels)
        job = Job(f"Calibrate layer numbers ({len(chosen)} flakes)", run)

        def done(cal):
            def do():
                rec, _marked = store_layer_calibration(p, sample, cal)

                def undo():
                    with p.transaction():
                        p.delete("calibration", rec.id)

                return undo

            self._guard(lambda: self.edit("Layer calibration", do), "Calibrate layer numbers")
            msg = (
                f"Oxide {cal.oxide_nm:.1f} ± {cal.oxide_err_nm:.1f} nm, contrast scale "
                f"{cal.contrast_scale:.3f} ± {cal.contrast_scale_err:.3f} from "
                f"{len(cal.flakes_used)} flakes of known N. The sample's contrast evidence is "
                "marked stale: Recompute stale (Ctrl+R) re-reads it with the calibration."
            )
            for w in cal.warnings:
                log.warning("Calibrate layer numbers: %s", w)
            log.info("Calibrate layer numbers: %s", msg)
            self.hint_label.setText(msg)
            self.refresh()

        self.jobs.start(
            job, on_done=done, on_error=lambda e: self.report_error(e, "Calibrate layer numbers")
        )
        return job
