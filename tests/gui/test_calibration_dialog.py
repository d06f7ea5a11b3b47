"""The window's layer-calibration dialog, driven with pytest-qt.

Round trip, common practice: the test micrograph is drawn from the optics model with 285 nm of
oxide, so the oxide fitted from the flakes found on it (their N set by hand) must come back near
285 nm. The dialog says what is missing until three flakes of known N are checked; the result is
stored through flakebook.pipeline_calibration (as the command line stores it), is undoable, and
Recompute stale re-reads the sample with it.
"""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QDialogButtonBox


def test_dialog_says_what_is_missing_then_calibrates(qtbot, window):
    p = window.session.project
    n0 = len(p.flakes_of(1))
    dialog = window.calibrate_dialog(show=False)
    qtbot.addWidget(dialog)
    ok = dialog.buttons.button(QDialogButtonBox.StandardButton.Ok)
    assert not ok.isEnabled()
    assert "Not enough flakes of known N" in dialog.status.text()
    assert "at least 3" in dialog.status.text()

    job = window.find_flakes()
    qtbot.waitUntil(lambda: job.done.is_set() and not window.jobs.busy, timeout=20000)
    # Finding again matches the flakes already there (updated, never duplicated).
    found = p.flakes_of(1)
    assert len(found) == n0 >= 3
    for f in found:
        window.assign(f.id, p.latest_assignment(f).layers, "known from its PL peak")
    dialog = window.calibrate_dialog(show=False)
    qtbot.addWidget(dialog)
    ok = dialog.buttons.button(QDialogButtonBox.StandardButton.Ok)
    usable = [k.label for k in dialog.known if k.usable]
    assert len(usable) >= 3 and ok.isEnabled()
    # Unchecking down to two says so and refuses.
    for i in range(dialog.list.count() - 2):
        dialog.list.item(i).setCheckState(Qt.CheckState.Unchecked)
    assert not ok.isEnabled() and "2 chosen" in dialog.status.text()
    for i in range(dialog.list.count()):
        dialog.list.item(i).setCheckState(Qt.CheckState.Checked)
    chosen = dialog.chosen()
    assert ok.isEnabled() and len(chosen) == len(usable)

    job = window.calibrate(1, chosen)
    qtbot.waitUntil(lambda: job.done.is_set() and not window.jobs.busy, timeout=30000)
    assert not window.errors, window.errors
    cal = p.calibrations_of(1)[-1]
    assert cal.model["flakes_used"] == chosen
    assert abs(cal.oxide_nm - 285.0) < max(3 * cal.oxide_err_nm, 2.0)
    assert any(e.stale for f in found for e in p.evidence_of(f))
    window.a_undo.trigger()
    assert p.calibrations_of(1) == [] or p.calibrations_of(1)[-1].id != cal.id
    window.a_redo.trigger()
    assert p.calibrations_of(1)[-1].model["flakes_used"] == chosen
    report = window.recompute_stale()
    assert report.ok, report
    assert not p.stale_records()
    details = window.session.flake_details(found[0].id)
    assert details["calibration"].startswith(f"oxide {p.calibrations_of(1)[-1].oxide_nm:.1f} ±")
    window.select_flake(found[0].id)
    assert "Calibration in use: oxide" in window.inspector.calibration_note.text()
