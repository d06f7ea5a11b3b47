"""Dialogs and the things that go wrong (walkthrough 7), in the window, offscreen.

Checks of the program's own behaviour: common practice, no source.
"""

from __future__ import annotations

import sqlite3

import pytest
from PySide6.QtWidgets import QDialog

from flakebook.store import Project


def test_new_project_dialog_refuses_bad_values_then_creates(qtbot, tmp_path):
    from flakebook.gui.dialogs import NewProjectDialog
    from flakebook.gui.mainwindow import MainWindow

    dlg = NewProjectDialog()
    qtbot.addWidget(dlg)
    dlg.path.setText(str(tmp_path / "campaign"))
    dlg.form.name.setText("R2-east")
    dlg.form.substrate.setText("SiO2:285")  # no base: refused by the optics parser
    dlg.accept()
    assert dlg.result() != QDialog.DialogCode.Accepted
    assert dlg.error.isVisibleTo(dlg) and "SiO2:285" in dlg.error.text()
    dlg.form.substrate.setText("SiO2:90,Si")
    dlg.form.holes.setChecked(True)
    dlg.form.diameter.setValue(5.0)
    dlg.form.pitch.setValue(4.0)  # pitch below the diameter
    dlg.accept()
    assert "pitch" in dlg.error.text().lower()
    dlg.form.pitch.setValue(15.0)
    dlg.accept()
    assert dlg.result() == QDialog.DialogCode.Accepted
    values = dlg.values()
    assert values["path"].name == "campaign.flakebook"
    w = MainWindow()
    qtbot.addWidget(w)
    w.create_project(**values)
    s = w.session.project.samples()[0]
    assert s.name == "R2-east" and s.oxide_nm == 90
    assert s.hole_pattern.pitch_um == 15.0 and s.hole_pattern.diameter_um == 5.0
    w.close()


def test_sample_dialog_edit_is_undoable(qtbot, window, monkeypatch):
    from flakebook.gui import dialogs

    def fake_exec(self):
        self.form.substrate.setText("SiO2:290,Si")
        self.accept()
        return QDialog.DialogCode.Accepted

    monkeypatch.setattr(dialogs.SampleDialog, "exec", fake_exec)
    window.sample_dialog()
    p = window.session.project
    assert p.samples()[0].oxide_nm == 290
    assert all(r["stale"] for r in window.catalogue.model.rows)  # evidence used the old stack
    window.a_undo.trigger()
    assert p.samples()[0].oxide_nm == 285


def test_image_dialog_objective_preset_sets_pixel_size(qtbot, window, monkeypatch):
    from flakebook.gui import dialogs
    from flakebook.imaging.scale import load_objectives

    preset = load_objectives()["100x"]

    def fake_exec(self):
        self.objective.setCurrentIndex(self.objective.findData("100x"))
        self.accept()
        return QDialog.DialogCode.Accepted

    monkeypatch.setattr(dialogs.ImageDialog, "exec", fake_exec)
    window.image_dialog()
    img = window.session.project.get("image", window.current_image)
    assert img.objective == "100x"
    assert img.pixel_size_um == pytest.approx(preset.um_per_px)
    assert img.na_objective == pytest.approx(preset.na)
    assert window.canvas.um_per_px == pytest.approx(preset.um_per_px)


def test_newer_project_is_refused_and_left_alone(qtbot, project_path):
    from flakebook.gui.mainwindow import MainWindow

    con = sqlite3.connect(project_path)
    con.execute("PRAGMA user_version = 999")
    con.commit()
    con.close()
    before = project_path.read_bytes()
    w = MainWindow()
    qtbot.addWidget(w)
    w._guard(lambda: w.open_project(project_path), "Open project")
    assert w.session is None
    assert w.errors and "newer" in str(w.errors[-1][1]).lower()
    assert project_path.read_bytes() == before
    w.close()


def test_missing_image_is_reported_project_still_opens(qtbot, project_path):
    from flakebook.gui.mainwindow import MainWindow

    (project_path.parent / "q3w_50x_001.png").rename(project_path.parent / "moved.png")
    w = MainWindow()
    qtbot.addWidget(w)
    w.open_project(project_path)
    assert w.session is not None
    assert w.errors and "missing" in str(w.errors[-1][1])
    assert w.catalogue.model.rowCount() == 3  # the catalogue is still there
    # the canvas says why no micrograph is shown, not that the project has none
    text = w.canvas.empty_label.text()
    assert "cannot be shown" in text and "missing" in text and "no micrograph yet" not in text
    w.close()


def test_watch_folder_adds_and_surveys_new_image(qtbot, window, tmp_path):
    import shutil

    folder = tmp_path / "camera"
    folder.mkdir()
    p = window.session.project
    n_img, n_flakes = len(p.images_of(1)), len(p.flakes_of(1))
    watch = window.candidates.watch(folder, window.session, window)
    shutil.copy(window.session.path.parent / "q3w_50x_001.png", folder / "tile_002.png")
    watch.scan()
    qtbot.waitUntil(lambda: len(p.images_of(1)) == n_img + 1, timeout=20000)
    qtbot.waitUntil(lambda: not window.jobs.busy, timeout=30000)
    assert len(p.flakes_of(1)) > n_flakes
    window.candidates.stop_watch()
    Project  # noqa: B018


def test_internal_error_dialog_has_no_traceback(qtbot, window, monkeypatch):
    """An unexpected failure shows a plain message with details on demand, never a traceback."""
    from PySide6.QtWidgets import QMessageBox

    def boom(*a, **k):
        raise RuntimeError("disk quota exceeded")

    monkeypatch.setattr(window.session, "add_hole", boom)
    window._guard(lambda: window.add_hole(10.0, 10.0, 5.0), "Place hole")
    box = [b for b in window.findChildren(QMessageBox) if b.objectName() == "errorDialog"][-1]
    assert "internal problem" in box.text()
    assert "Traceback" not in box.detailedText() and "File " not in box.detailedText()
    assert "RuntimeError" in box.detailedText() and "disk quota" in box.detailedText()
    assert window.undo_stack.count() == 0


def test_new_project_offers_usual_stacks_and_a_tmd(qtbot):
    """The new project's form defaults to a TMD (MoSe2) and offers the usual substrate stacks
    as choices with thicknesses; the code string is the advanced choice."""
    from flakebook.gui.dialogs import NewProjectDialog, check_substrate

    dlg = NewProjectDialog()
    qtbot.addWidget(dlg)
    form = dlg.form
    assert form.material.currentText() == "MoSe2"
    dlg.form.name.setText("R2-east")
    names = [form.stack.itemText(i) for i in range(form.stack.count())]
    assert any("SiO2 on Si" in n for n in names) and any("gold" in n.lower() for n in names)
    assert any("code" in n.lower() for n in names)
    assert form.values()["substrate"] == check_substrate("SiO2:285,Si")
    form.oxide.setValue(90)
    assert form.values()["substrate"] == check_substrate("SiO2:90,Si")
    form.stack.setCurrentIndex(form.stack.findData("gold"))
    assert form.values()["substrate"].startswith("Au:")
    assert form.substrate.text() == form.values()["substrate"]  # the code shown follows
    # holes with gold at the bottom are a choice of the hole pattern, in words
    bottoms = [form.bottom.itemText(i) for i in range(form.bottom.count())]
    assert not any("(" in b and b.endswith(")") and len(b.split("(")[-1]) <= 6 for b in bottoms)
    # an existing sample's code is recognised as its stack
    from flakebook.gui.dialogs import SampleForm

    other = SampleForm({"name": "x", "material": "WS2", "substrate": "SiO2:90,Si"})
    qtbot.addWidget(other)
    assert other.stack.currentData() == "oxide" and other.oxide.value() == 90


def test_sample_form_keeps_the_hole_depth_error(qtbot):
    """The hole depth's measured error is entered with the pattern and comes back when the
    form is opened again; with no depth there is no error to enter."""
    from flakebook.gui.dialogs import SampleForm

    hp = {"bottom": "au", "diameter_um": 5.0, "depth_nm": 250.0, "depth_err_nm": 4.0}
    form = SampleForm({"name": "Z1", "material": "MoSe2", "hole_pattern": hp})
    qtbot.addWidget(form)
    assert form.depth_err.value() == 4.0 and form.depth_err.isEnabled()
    assert form.values()["hole_pattern"]["depth_err_nm"] == 4.0
    form.depth.setValue(0.0)
    assert not form.depth_err.isEnabled()
    assert "depth_err_nm" not in form.values()["hole_pattern"]
