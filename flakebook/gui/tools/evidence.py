"""Evidence measured elsewhere: an AFM step height, or the Si Raman line under the flake against
the bare substrate (entered as a ratio, or measured from the flake's spectrum and a
bare-substrate spectrum file), recorded on the selected flake and undoable.

A menu-less tool: the spectra view's "AFM / Si line…" button opens :class:`MeasuredDialog`; the
session's edit (``SessionEdits.add_measured``) records through flakebook.pipeline and
flakebook.pipeline_si, the window's command (``WindowCommands.add_measured_dialog``) puts it on
the undo stack.
"""

from __future__ import annotations

from pathlib import Path

from PySide6.QtWidgets import (
    QButtonGroup,
    QDialog,
    QDialogButtonBox,
    QDoubleSpinBox,
    QFileDialog,
    QFormLayout,
    QGroupBox,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QPushButton,
    QRadioButton,
    QVBoxLayout,
    QWidget,
)

from flakebook.errors import InputError
from flakebook.gui.commands import Undo
from flakebook.store import Assignment, Evidence, Flake, Spectrum


def _spin(lo: float, hi: float, decimals: int, step: float, suffix: str = "") -> QDoubleSpinBox:
    w = QDoubleSpinBox()
    w.setRange(lo, hi)
    w.setDecimals(decimals)
    w.setSingleStep(step)
    if suffix:
        w.setSuffix(suffix)
    return w


class MeasuredDialog(QDialog):
    """What was measured: an AFM step height with its error (and nothing else is needed), and
    the Si-line ratio entered or measured from spectra. ``values()`` gives the choice."""

    def __init__(self, label: str, has_reference: bool, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setWindowTitle(f"AFM height and Si line of {label}")
        self.setObjectName("measuredDialog")
        self.afm_box = QGroupBox("AFM step height", self)
        self.afm_box.setCheckable(True)
        self.afm_box.setChecked(False)
        self.height = _spin(0.1, 500.0, 2, 0.1, " nm")
        self.height.setValue(1.5)
        self.height_err = _spin(0.01, 50.0, 2, 0.05, " nm")
        self.height_err.setValue(0.3)
        form = QFormLayout(self.afm_box)
        form.addRow("Height", self.height)
        form.addRow("± (1σ)", self.height_err)
        from flakebook.spectra.layer_evidence import AFM_OFFSET_ERR_NM, AFM_OFFSET_NM

        form.addRow(
            QLabel(
                f"The step from substrate to flake; an offset of {AFM_OFFSET_NM:g} ± "
                f"{AFM_OFFSET_ERR_NM:g} nm (residue, adsorbed water) is allowed for."
            )
        )

        self.si_box = QGroupBox("Si Raman line under the flake / on bare substrate", self)
        self.si_box.setCheckable(True)
        self.si_box.setChecked(False)
        self.entered = QRadioButton("Entered ratio", self.si_box)
        self.from_file = QRadioButton("Measured: the flake's spectrum against a bare-substrate "
                                      "spectrum file", self.si_box)  # fmt: skip
        self.from_stored = QRadioButton("Measured: against the sample's stored bare-substrate "
                                        "spectrum", self.si_box)  # fmt: skip
        self.from_stored.setEnabled(has_reference)
        if not has_reference:
            self.from_stored.setToolTip("This sample has no bare-substrate spectrum stored yet.")
        group = QButtonGroup(self)
        for b in (self.entered, self.from_file, self.from_stored):
            group.addButton(b)
        (self.from_stored if has_reference else self.entered).setChecked(True)
        self.ratio = _spin(0.01, 2.0, 3, 0.01)
        self.ratio.setValue(0.5)
        self.ratio_err = _spin(0.001, 1.0, 3, 0.005)
        self.ratio_err.setValue(0.03)
        self.laser = _spin(200.0, 2000.0, 1, 1.0, " nm")
        self.laser.setValue(532.0)
        self.path = QLineEdit(self.si_box)
        self.path.setPlaceholderText("bare-substrate Raman spectrum (text, CSV, JCAMP-DX)")
        browse = QPushButton("Choose…", self.si_box)
        browse.clicked.connect(self._browse)
        row = QHBoxLayout()
        row.addWidget(self.path, 1)
        row.addWidget(browse)
        sform = QFormLayout(self.si_box)
        sform.addRow(self.entered)
        sform.addRow("Ratio", self.ratio)
        sform.addRow("± (1σ)", self.ratio_err)
        sform.addRow("Laser line", self.laser)
        sform.addRow(self.from_file)
        sform.addRow(row)
        sform.addRow(self.from_stored)
        sform.addRow(QLabel("Measured ratios divide by power × integration time where both "
                            "spectra record them, and carry 3% for two spots."))  # fmt: skip
        buttons = QDialogButtonBox(
            QDialogButtonBox.StandardButton.Ok | QDialogButtonBox.StandardButton.Cancel, self
        )
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        lay = QVBoxLayout(self)
        lay.addWidget(self.afm_box)
        lay.addWidget(self.si_box)
        lay.addWidget(buttons)

    def _browse(self) -> None:
        path, _ = QFileDialog.getOpenFileName(self, "Bare-substrate spectrum", "",
                                              "Spectra (*.txt *.csv *.tsv *.dat *.asc *.dx *.jdx)")  # fmt: skip
        if path:
            self.path.setText(path)
            self.from_file.setChecked(True)

    def values(self) -> dict:
        """``afm``: (height, err) or None; ``si``: None, ("ratio", r, err, laser_nm),
        ("file", path) or ("stored",)."""
        afm = (self.height.value(), self.height_err.value()) if self.afm_box.isChecked() else None
        si = None
        if self.si_box.isChecked():
            if self.entered.isChecked():
                si = ("ratio", self.ratio.value(), self.ratio_err.value(), self.laser.value())
            elif self.from_file.isChecked():
                if not self.path.text().strip():
                    raise InputError("Choose the bare-substrate spectrum file (or enter a ratio).")
                si = ("file", self.path.text().strip())
            else:
                si = ("stored",)
        return {"afm": afm, "si": si}


class SessionEdits:
    """Record an AFM height and the Si-line ratio on a flake; the undo removes them."""

    def has_bare_reference(self, flake_id: int) -> bool:
        from flakebook.pipeline_si import is_bare_reference

        flake = self.project.get(Flake, self._r("flake", flake_id))
        return any(is_bare_reference(s) for s in self.project.spectra_of_sample(flake.sample_id))

    def add_measured(self, flake_id: int, afm=None, si=None) -> Undo:
        """Record what :meth:`MeasuredDialog.values` gives (one transaction; a refused input
        stores nothing), recombine the flake. Returns the undo and, as ``self.last_si``, the
        measured Si ratio (or None)."""
        from flakebook import pipeline
        from flakebook.pipeline_si import add_si_from_spectra

        p = self.project
        fid = self._r("flake", flake_id)
        if afm is None and si is None:
            raise InputError("Nothing to record: tick the AFM height or the Si line.")
        bare = None
        if si is not None and si[0] == "file":
            from flakebook.spectra.io import read_spectrum

            bare = read_spectrum(Path(si[1]), kind="raman")
        made: list[tuple[type, int]] = []
        had = {a.id for a in p.assignments_of(fid)}
        contrast_before = [e for e in p.evidence_of(fid) if e.method == pipeline.CONTRAST_METHOD]
        self.last_si = None
        with p.transaction():
            flake = p.get(Flake, fid)
            if afm is not None:
                made.append((Evidence, pipeline.add_afm_evidence(p, flake, *afm).id))
            if si is not None and si[0] == "ratio":
                ev = pipeline.add_si_evidence(p, flake, si[1], si[2], laser_nm=si[3])
                made.append((Evidence, ev.id))
            elif si is not None:
                before = {x.id for x in p.spectra_of_sample(flake.sample_id)}
                ev, self.last_si = add_si_from_spectra(
                    p, flake, bare=bare, bare_path=si[1] if bare is not None else None
                )
                made.append((Evidence, ev.id))
                made += [
                    (Spectrum, x.id) for x in p.spectra_of_sample(flake.sample_id)
                    if x.id not in before
                ]  # fmt: skip
            pipeline.assign_flake(p, flake)
            made += [(Assignment, a.id) for a in p.assignments_of(fid) if a.id not in had]
        delete = self._undo_made(made)

        def undo():
            with p.transaction():
                delete()
                for rec in contrast_before:  # off the shared oxide grid again
                    if p.records(Evidence, id=rec.id):
                        p.update(rec)
                pipeline.assign_flake(p, self._r("flake", fid))

        return undo


class WindowCommands:
    """The undoable command behind the spectra view's "AFM / Si line…" button."""

    def add_measured_dialog(self, flake_id: int | None = None) -> None:
        s = self._need_session(write=True)
        fid = self.current_flake if flake_id is None else flake_id
        if fid is None:
            raise InputError("Select a flake first: the AFM height and Si line belong to one.")
        label = s.flake_label(fid)
        dialog = MeasuredDialog(label, s.has_bare_reference(fid), self)
        if dialog.exec() != QDialog.DialogCode.Accepted:
            return
        self.add_measured(fid, **dialog.values())

    def add_measured(self, flake_id: int, afm=None, si=None) -> None:
        s = self._need_session(write=True)
        label = s.flake_label(flake_id)
        what = " and ".join(x for x, v in (("AFM height", afm), ("Si line", si)) if v)
        self.edit(f"Add {what} to {label}", lambda: s.add_measured(flake_id, afm, si))
        ratio = getattr(s, "last_si", None)
        if ratio is not None:
            self.statusBar().showMessage(
                f"Si line under {label}: {ratio.ratio:.3f} ± {ratio.ratio_err:.3f} of the bare "
                f"substrate ({ratio.dose_note})",
                10000,
            )
