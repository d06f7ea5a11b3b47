"""Long work on an image or a sample (surveys, hole detection, the contrast model, calibration)
as functions a worker runs, and the storing of their results with its undo.

Layer numbers, contrast, holes and coverage come from the core (``flakebook.imaging``,
``flakebook.optics``, ``flakebook.evidence``) through :mod:`flakebook.pipeline`; nothing here
computes physics of its own.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from flakebook.errors import InputError, check_cancel
from flakebook.gui.commands import Undo
from flakebook.pipeline import (
    CONTRAST_METHOD,
    calibration_values,
    contrast_likelihood,
    optics_inputs,
    record_hole,
)
from flakebook.store import Appearance, Assignment, Evidence, Flake, Hole, Image, Sample, Terrace

#: A surveyed outline is a flake already on the image when their intersection over union
#: exceeds this (common practice for matching regions, no source).
REFIND_MIN_IOU = 0.5


class Analysis:
    """Work for the worker thread and the recording of its results."""

    def _survey_inputs(self, image_id: int):
        img = self._get(Image, image_id)
        sample = self.project.get(Sample, img.sample_id)
        if not img.pixel_size_um:
            raise InputError(
                f"{Path(img.path).name} has no pixel size; set it from the objective (Image settings) "
                "or draw a scale line (S) first."
            )
        return img, sample

    def survey_job(self, image_id: int, target_layers=(1, 2, 3)):
        """Work finding flakes, terraces and holes with their layer evidence
        (flakebook.imaging.survey.survey_image)."""
        from flakebook.imaging.survey import survey_image
        from flakebook.pipeline import survey_options

        img, sample = self._survey_inputs(image_id)
        micro = self._micro_fn(image_id)
        # The same settings the command line and the demo use (calibration, scale error, hole).
        kw = dict(
            survey_options(self.project, sample, img),
            target_layers=tuple(target_layers or (1, 2, 3)),
            max_layers=self.project.max_layers,
        )

        def run(progress=None, cancel=None):
            return survey_image(micro(), progress=progress, cancel=cancel, **kw)

        return run

    def store_survey(self, image_id: int, result) -> Undo:
        """Write a survey's flakes, terraces, evidence, assignments, holes and coverage
        (``flakebook.pipeline.store_survey``: the same records the command line writes).

        A surveyed flake whose outline overlaps a flake already outlined on this image (
        intersection over union above :data:`REFIND_MIN_IOU`) is that flake seen again: it keeps
        its label, tags, notes and manual assignments, and its outline, terraces and contrast
        evidence on this image are replaced by the survey's (other evidence and manual
        assignments move to the new terrace that best overlaps their old one). Others become
        new flakes. :attr:`last_survey` counts both.
        """
        from flakebook.gui.geometry import match_outlines, outline_iou
        from flakebook.pipeline import store_survey

        p = self.project
        img = self._get(Image, image_id)
        sample = p.get(Sample, img.sample_id)
        old_apps = {a.id: a for a in p.records(Appearance, image_id=img.id)}
        matched = match_outlines(
            [np.asarray(sf.outline_px, float) for sf in result.flakes],
            {k: np.asarray(a.outline_px, float) for k, a in old_apps.items()},
            REFIND_MIN_IOU,
        )
        seen_again = {
            result.flakes[i].id: old_apps[k] for i, k in matched.items()
        }  # survey flake id -> its earlier appearance here
        moved: list[tuple[type, int, int | None]] = []  # (record class, id, old terrace id)
        primary: list[tuple[int, int | None]] = []  # (flake id, old primary terrace id)
        deleted = []
        copies: list[tuple[type, int]] = []
        with p.transaction():
            # Each new flake is stored before the next label is drawn, so labels never repeat.
            stored = store_survey(
                p,
                img,
                result,
                flake_for=lambda sf: (
                    p.get(Flake, seen_again[sf.id].flake_id) if sf.id in seen_again else None
                ),
                new_label=lambda: self.next_label(sample),
            )
            for old in seen_again.values():
                new_app = next(
                    a
                    for a in p.records(Appearance, image_id=img.id, flake_id=old.flake_id)
                    if a.id in stored.appearances
                )
                new_terraces = p.records(Terrace, appearance_id=new_app.id)

                def best(old_tid, new_terraces=new_terraces):
                    if old_tid is None or not new_terraces:
                        return None
                    o = p.get(Terrace, old_tid).outline_px
                    overlaps = [outline_iou(o, ter.outline_px) for ter in new_terraces]
                    return new_terraces[int(np.argmax(overlaps))].id

                old_tids = {ter.id for ter in p.records(Terrace, appearance_id=old.id)}
                flake = p.get(Flake, old.flake_id)
                for rec in p.evidence_of(flake):  # spectra, AFM, ...: to the new terrace
                    if rec.method != CONTRAST_METHOD and rec.terrace_id in old_tids:
                        moved.append((Evidence, rec.id, rec.terrace_id))
                        p.update(rec, terrace_id=best(rec.terrace_id))
                # manual assignments are stored again after the survey's (the latest counts)
                manual = [
                    (a, best(a.terrace_id))
                    for a in p.assignments_of(flake)
                    if a.manual and (a.terrace_id in old_tids or a.terrace_id is None)
                ]
                if flake.primary_terrace_id in old_tids:
                    primary.append((flake.id, flake.primary_terrace_id))
                    p.update(flake, primary_terrace_id=best(flake.primary_terrace_id))
                deleted.append(p.delete(Appearance, old.id))
                for a, tid in manual:
                    if a.terrace_id is None:
                        continue  # the flake's own: untouched, but newer than the survey's
                    again = p.assign(
                        flake.id, a.layers, reason=a.reason, terrace=tid, who=a.who or None
                    )
                    copies.append((Assignment, again.id))
        for fid in stored.new_flakes:
            self._born("flake", fid)
        self.last_survey = {"updated": len(seen_again), "new": len(stored.new_flakes)}
        made = (
            copies
            + [(Flake, fid) for fid in stored.new_flakes]
            + [(Appearance, aid) for aid in stored.appearances]
            + [(Hole, hid) for hid in stored.holes]
        )
        remove = self._undo_made(made)

        def undo():
            with p.transaction():
                for d in reversed(deleted):
                    p.restore(d)
                for cls, rid, tid in reversed(moved):
                    p.update(p.get(cls, rid), terrace_id=tid)
                for fid, tid in primary:
                    p.update(p.get(Flake, fid), primary_terrace_id=tid)
                remove()

        return undo

    def holes_job(self, image_id: int):
        """Work detecting holes, fitting their lattice and predicting those hidden under flakes
        (flakebook.imaging.holes)."""
        from flakebook.imaging.holes import detect_holes, fit_lattice, predict_hidden_holes

        img, sample = self._survey_inputs(image_id)
        hp = sample.hole_pattern
        micro = self._micro_fn(image_id)
        um = img.pixel_size_um
        outlines = [a.outline_px for a in self.project.records(Appearance, image_id=img.id)]

        def run(progress=None, cancel=None):
            m = micro()
            if progress:
                progress(0.1, "detecting holes")
            holes = detect_holes(
                np.asarray(m.intensity),
                um_per_px=um,
                radius_um=0.5 * hp.diameter_um if hp else None,
                cancel=cancel,
            )
            check_cancel(cancel)
            lattice, hidden = None, ()
            if len(holes) >= 3:
                if progress:
                    progress(0.7, "fitting the lattice")
                lattice = fit_lattice(
                    np.array([h.center_px for h in holes]), kind=hp.lattice if hp else "auto"
                )
                if lattice is not None:
                    hidden = tuple(predict_hidden_holes(tuple(holes), lattice, m.shape, outlines))
            return HoleResult(tuple(holes) + tuple(hidden), lattice)

        return run

    def store_holes(self, image_id: int, result: HoleResult) -> Undo:
        p = self.project
        img = self._get(Image, image_id)
        made = []
        with p.transaction():
            existing = p.holes_of(img)
            for h in result.holes:
                rec, new = record_hole(p, img, h, existing)
                if not new:
                    continue
                made.append((Hole, rec.id))
                self._update_coverage_for_hole(rec)
        return self._undo_made(made)

    def model_job(self, details: dict):
        """Work giving the model contrast versus N per channel for the flake's measurement
        (flakebook.optics.layers.layer_likelihood) and its note on what would decide
        (key ``"_decider"``). The optics objects are built in the worker (the material data
        loads slowly the first time)."""
        sample = self.project.get(Sample, details["sample_id"])
        img = self.project.get(Image, details["image_id"])
        suspended = details.get("geometry") == "suspended"
        contrast = dict(details["contrast"])
        err = dict(details.get("contrast_err") or {}) or None
        nmax = int(details.get("max_layers") or 15)
        cal = calibration_values(self.project, sample)

        def run(progress=None, cancel=None):
            check_cancel(cancel)
            lk, _note = contrast_likelihood(
                sample,
                img,
                cal,
                contrast,
                err,
                geometry="suspended" if suspended else "supported",
                max_layers=nmax,
            )
            out = {
                ch: np.asarray(lk.model_contrast[:, j], float) for j, ch in enumerate(lk.channels)
            }
            out["_decider"] = lk.decider
            return out

        return run

    def calibration_observations(self, sample_id: int) -> list:
        """Flakes of known layer number (a manual assignment) on the sample, with the region
        mean and substrate level their contrast evidence recorded, as calibration observations
        (flakebook.optics.camera). Levels are linear intensity (1 = full scale)."""
        from flakebook.optics.camera import CalibrationObservation

        p = self.project
        obs = []
        for f in p.flakes_of(self._r("sample", sample_id)):
            latest = p.latest_assignment(f)
            if latest is None or not latest.manual:
                continue
            for e in p.evidence_of(f):
                prm = e.parameters
                ref = prm.get("substrate_level")
                if e.method != CONTRAST_METHOD or not ref or prm.get("geometry") != "supported":
                    continue
                c = prm.get("contrast") or {}
                err = prm.get("contrast_err") or {}
                obs.append(
                    CalibrationObservation(
                        layers=int(latest.layers),
                        flake={ch: ref[ch] * (1.0 - c[ch]) for ch in c if ch in ref},
                        reference={ch: ref[ch] for ch in c if ch in ref},
                        flake_err={ch: ref[ch] * err.get(ch, 0.0) for ch in c if ch in ref},
                    )
                )
                break
        return obs

    def calibration_job(
        self, sample_id: int, dark_frame: dict[str, float], dark_frame_err: dict[str, float]
    ):
        """Work fitting oxide, dark offsets and contrast scale (flakebook.optics.camera.calibrate)
        from the sample's flakes of known layer number."""
        from flakebook.optics.camera import calibrate

        sample = self._get(Sample, sample_id)
        obs = self.calibration_observations(sample.id)
        if not obs:
            raise InputError(
                "No flake of known layer number with a measured contrast on this sample: record a "
                "manual assignment (with its reason) on flakes found by Find flakes first."
            )
        imgs = self.project.images_of(sample)
        img = imgs[0] if imgs else None

        def run(progress=None, cancel=None):
            material, substrate, microscope = optics_inputs(sample, img)
            check_cancel(cancel)
            return calibrate(
                obs,
                material=material,
                substrate=substrate,
                microscope=microscope,
                dark_frame=dark_frame,
                dark_frame_err=dark_frame_err,
            )

        return run, len(obs)

    def store_calibration(self, sample_id: int, cal) -> Undo:
        """Keep a calibration and mark the sample's contrast evidence stale (recompute uses it)."""
        p = self.project
        sample = self._get(Sample, sample_id)
        with p.transaction():
            rec = p.add_calibration(
                sample,
                oxide_nm=cal.oxide_nm,
                oxide_err_nm=cal.oxide_err_nm,
                dark_offset=cal.dark_offset,
                dark_offset_err=cal.dark_offset_err,
                contrast_scale={c: cal.contrast_scale for c in cal.channels},
                contrast_scale_err={c: cal.contrast_scale_err for c in cal.channels},
                method=cal.method,
                notes=f"chi2 {cal.chi2:.3g} on {cal.dof} degrees of freedom",
            )
            marked = []
            for f in p.flakes_of(sample):
                for e in p.evidence_of(f):
                    if e.method == CONTRAST_METHOD and not e.stale:
                        p.update(e, stale=True)
                        marked.append(e.id)

        def undo():
            with p.transaction():
                p.delete("calibration", rec.id)

        return undo

    def recompute_stale(self, progress=None, cancel=None):
        """Bring stale records up to date (on the window's thread: it writes the project)."""
        return self.project.recompute_stale(progress=progress, cancel=cancel)


@dataclass(frozen=True)
class HoleResult:
    """Holes found on an image (detected and predicted under flakes) and their lattice."""

    holes: tuple
    lattice: object | None
