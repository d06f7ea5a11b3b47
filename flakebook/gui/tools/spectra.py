"""Spectra on flakes: attach spectrum files to a flake (dropped on it in the browser, the catalogue
or the canvas) and refit a stored spectrum with other settings, both undoable.

A menu-less tool: the session's edits (``SessionEdits``) record through
:mod:`flakebook.pipeline` (fit, Raman/PL evidence, the flake's combined assignment), the window's
commands (``WindowCommands``) put them on the undo stack. What the spectra view reads is here too
(:meth:`SessionEdits.spectra_of_flake`, :meth:`SessionEdits.spectrum_plot`).
"""

from __future__ import annotations

import re
from pathlib import Path

from flakebook.errors import InputError
from flakebook.gui.commands import Undo
from flakebook.store import Assignment, Evidence, Spectrum, SpectrumFit

#: File name endings taken as spectra when dropped.
SPECTRUM_SUFFIXES = (".txt", ".csv", ".tsv", ".dat", ".asc", ".dx", ".jdx", ".jcamp")
_PL_NAME = re.compile(r"(^|[^a-z])(pl|photolum\w*)([^a-z]|$)", re.IGNORECASE)


def is_spectrum_file(path: str | Path) -> bool:
    """True for a file name ending as a spectrum file does."""
    return Path(path).suffix.lower() in SPECTRUM_SUFFIXES


def read_dropped(path: Path):
    """A dropped file as a spectrum: PL when its name says so (``..._pl_...``), else Raman; a
    Raman file whose axis is clearly a wavelength is read as PL."""
    from flakebook.spectra.io import read_spectrum

    kind = "pl" if _PL_NAME.search(path.stem) else "raman"
    try:
        return read_spectrum(path, kind=kind)
    except InputError as exc:
        if kind == "raman" and "nm" in str(exc):
            return read_spectrum(path, kind="pl")
        raise


class SessionEdits:
    """Attach spectra to a flake, refit a spectrum; what the spectra view shows."""

    def attach_spectra(self, flake_id: int, paths, spot=None) -> Undo:
        """Read, fit and store each file on the flake (one transaction; a bad file stores
        nothing); the undo deletes what was stored and recombines the flake."""
        from flakebook.pipeline import assign_flake, attach_spectrum

        p = self.project
        fid = self._r("flake", flake_id)
        spectra = [(Path(path), read_dropped(Path(path))) for path in paths]
        if not spectra:
            raise InputError("No spectrum to add: drop text, CSV or JCAMP-DX spectrum files.")
        made: list[tuple[type, int]] = []
        had = {a.id for a in p.assignments_of(fid)}
        with p.transaction():
            for path, spec in spectra:
                got = attach_spectrum(p, fid, spec, source_path=path, spot=spot)
                made += [(Evidence, e) for e in got.evidence]
                made += [(SpectrumFit, got.fit), (Spectrum, got.spectrum)]
            # an assignment the flake did not have before (it had no evidence) goes with undo
            made += [(Assignment, a.id) for a in p.assignments_of(fid) if a.id not in had]
        delete = self._undo_made(made)

        def undo():
            with p.transaction():
                delete()
                assign_flake(p, self._r("flake", fid))

        return undo

    def refit_spectrum(self, fit_id: int, **changes) -> Undo:
        """Refit with other settings (baseline, peak_model, polarization, auto_calibrate); the
        undo refits with the settings before."""
        from flakebook.pipeline import refit

        p = self.project
        fit = p.get(SpectrumFit, self._r("spectrum_fit", fit_id))
        before = {k: fit.settings.get(k) for k in changes}
        refit(p, fit, **changes)

        def undo():
            refit(p, self._r("spectrum_fit", fit.id), **before)

        return undo

    def spectra_of_flake(self, flake_id: int) -> list[dict]:
        """The flake's stored spectra with their latest fit: id, fit id, name, kind, settings,
        peaks, warnings and the evidence read from it."""
        p = self.project
        fid = self._r("flake", flake_id)
        evidence = p.evidence_of(fid)
        out = []
        for spec in p.spectra_of(fid):
            if spec.series_id is not None:
                continue
            fits = p.fits_of(spec)
            fit = fits[-1] if fits else None
            name = Path(spec.source_path).name if spec.source_path else f"spectrum {spec.id}"
            out.append(
                {
                    "id": spec.id,
                    "fit_id": fit.id if fit else None,
                    "name": name,
                    "kind": spec.kind,
                    "settings": dict(fit.settings) if fit else {},
                    "peaks": list(fit.peaks) if fit else [],
                    "warnings": list(fit.warnings) if fit else [],
                    "stale": bool(fit and fit.stale),
                    "evidence": [
                        {"feature": e.parameters.get("feature"), "reason": e.reason}
                        for e in evidence
                        if fit is not None and e.parameters.get("spectrum_fit_id") == fit.id
                    ],
                }
            )
        return out

    def spectrum_plot(self, spectrum_id: int, settings: dict | None = None):
        """The analysis to draw (flakebook.spectra.analyse.SpectrumAnalysis) of a stored
        spectrum with its fit's settings; reads the project, computes nothing stored."""
        from flakebook.pipeline_spectra import analyse_stored

        spec = self.project.get(Spectrum, self._r("spectrum", spectrum_id))
        return analyse_stored(self.project, spec, settings)[0]


class WindowCommands:
    """Undoable commands: attach dropped spectra to a flake; refit a spectrum."""

    def attach_spectrum_files(self, flake_id: int, paths, spot=None) -> None:
        s = self._need_session(write=True)
        paths = [Path(p) for p in paths]
        label = s.flake_label(flake_id)
        what = paths[0].name if len(paths) == 1 else f"{len(paths)} spectra"
        self.edit(f"Add {what} to {label}", lambda: s.attach_spectra(flake_id, paths, spot))
        if self.current_flake != flake_id:
            self.select_flake(flake_id)

    def refit_spectrum(self, fit_id: int, **changes) -> None:
        s = self._need_session(write=True)
        text = ", ".join(f"{k.replace('_', ' ')} {v}" for k, v in changes.items())
        self.edit(f"Refit ({text})", lambda: s.refit_spectrum(fit_id, **changes))
