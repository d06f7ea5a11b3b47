"""Spectra in the window (pytest-qt, offscreen): a spectrum file dropped on a flake in the
browser, the catalogue or the canvas is fitted and changes the flake's combined probability;
undo takes it away; the spectra view refits with another line shape (undoable).

The dropped spectra are drawn with lines at stated centres: the shear and breathing modes of
the linear chain at N layers with the rule table's bulk frequencies (Zhao et al., Nano Lett.
13, 1007 (2013); values from memory, resources/raman_rules/MoSe2.json). The project is the
invented one of conftest.py.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from PySide6.QtCore import QEvent, QMimeData, QPointF, Qt, QUrl
from PySide6.QtGui import QDropEvent

from flakebook.spectra.rules import load_rule_table
from flakebook.store import Spectrum, SpectrumFit


def lorentz(x, c, fwhm, h):
    return h / (1 + ((x - c) / (fwhm / 2)) ** 2)


def low_frequency_file(folder: Path, layers: int, seed: int = 2) -> Path:
    t = load_rule_table("MoSe2")
    n = np.array([layers])
    sh = float(t.rule("shear mode").center(n)[0])
    br = float(t.rule("breathing mode").center(n)[0])
    rng = np.random.default_rng(seed)
    x = np.linspace(5, 60, 600)
    y = 50 + lorentz(x, sh, 1.5, 300) + lorentz(x, br, 1.5, 200) + rng.normal(0, 5, x.size)
    path = folder / f"lowfreq_{layers}L.txt"
    rows = ["# Laser wavelength: 532 nm", "Raman shift (cm-1)\tcounts"]
    rows += [f"{a:.4f}\t{b:.3f}" for a, b in zip(x, y, strict=True)]
    path.write_text("\n".join(rows) + "\n")
    return path


def drop(widget, pos: QPointF, paths, window=None) -> None:
    """A drop of files at ``pos`` on ``widget`` (a viewport), handed to the spectrum-drop filter
    installed on it as Qt would (Qt delivers no synthetic drop without a drag in progress)."""
    from PySide6.QtWidgets import QWidget

    top = widget.window()
    filters = [d for d in top._spectrum_drops if d.parent() is widget]
    assert filters, "no spectrum drop on this widget"
    mime = QMimeData()
    mime.setUrls([QUrl.fromLocalFile(str(p)) for p in paths])
    ev = QDropEvent(
        pos, Qt.DropAction.CopyAction, mime, Qt.MouseButton.LeftButton, Qt.KeyboardModifier.NoModifier,
        QEvent.Type.Drop,
    )  # fmt: skip
    ev.setAccepted(False)
    assert filters[0].eventFilter(widget, ev)
    assert isinstance(widget, QWidget)


def browser_pos(window, fid: int) -> QPointF:
    tree = window.browser.tree
    item = window.browser._flake_items[fid]
    tree.scrollToItem(item)
    return QPointF(tree.visualItemRect(item).center())


def combined(window, fid: int) -> dict:
    return window.session.flake_details(fid)["combined"]


def test_drop_on_flake_in_browser_fits_and_undo_removes(qtbot, window, tmp_path):
    p = window.session.project
    fid = p.flake_by_label("Q3W-002").id
    before = combined(window, fid)
    assert before["layers"] == 2
    drop(
        window.browser.tree.viewport(), browser_pos(window, fid), [low_frequency_file(tmp_path, 2)]
    )
    assert len(p.spectra_of(fid)) == 1 and p.spectrum_fits_of_flake(fid)
    after = combined(window, fid)
    # the contrast alone already says 2L; the bilayer's interlayer modes leave far less doubt
    assert after["layers"] == 2 and 1 - after["probability"] < (1 - before["probability"]) / 10
    assert window.current_flake == fid
    rows = window.session.flake_details(fid)["evidence"]
    assert {"contrast", "Raman"} <= {r["category"] for r in rows}
    assert "Combined" in window.inspector.evidence.text()
    window.undo_stack.undo()
    assert not p.spectra_of(fid) and not p.records(SpectrumFit)
    assert combined(window, fid)["probability"] == pytest.approx(before["probability"], rel=1e-9)
    window.undo_stack.redo()
    assert len(p.spectra_of(fid)) == 1


def test_conflicting_spectrum_shows_the_conflict_mark(qtbot, window, tmp_path):
    """A drawn 2L low-frequency spectrum on the 3L flake: the inspector marks the conflict."""
    p = window.session.project
    fid = p.flake_by_label("Q3W-003").id
    window.select_flake(fid)
    table = window.catalogue.table
    window.show_view("catalogue")
    row = next(
        r for r in range(window.catalogue.proxy.rowCount())
        if window.catalogue.proxy.index(r, 0).data(Qt.ItemDataRole.UserRole + 10) == fid
    )  # fmt: skip
    pos = QPointF(table.visualRect(window.catalogue.proxy.index(row, 1)).center())
    drop(table.viewport(), pos, [low_frequency_file(tmp_path, 2)])
    details = window.session.flake_details(fid)
    assert details["combined"]["conflicts"]
    assert any(r["conflict"] for r in details["evidence"])
    assert "conflict" in window.inspector.evidence.text()


def test_drop_on_canvas_records_the_spot(qtbot, window, tmp_path):
    p = window.session.project
    fid = p.flake_by_label("Q3W-001").id
    canvas = window.canvas
    view_pt = canvas.mapFromScene(canvas.view.mapViewToScene(QPointF(130, 110)))
    drop(canvas.viewport(), QPointF(view_pt), [low_frequency_file(tmp_path, 2)])
    specs = p.spectra_of(fid)
    assert len(specs) == 1
    assert abs(specs[0].spot_x_px - 130) < 2 and abs(specs[0].spot_y_px - 110) < 2


def test_spectra_view_refits_with_another_peak_model(qtbot, window, tmp_path):
    p = window.session.project
    fid = p.flake_by_label("Q3W-002").id
    drop(
        window.browser.tree.viewport(), browser_pos(window, fid), [low_frequency_file(tmp_path, 2)]
    )
    window.show_view("spectra")
    view = window.spectra_view
    qtbot.waitUntil(lambda: view.chooser.count() == 1, timeout=5000)
    assert view.table.rowCount() == 2
    assert view.table.item(0, 0).text() == "shear"
    assert view.analysis is not None and view.analysis.fit.model == "lorentzian"
    view.model.setCurrentText("voigt")
    qtbot.mouseClick(view.refit_button, Qt.MouseButton.LeftButton)
    fit = p.records(SpectrumFit)[0]
    assert fit.settings["peak_model"] == "voigt" and not fit.stale
    qtbot.waitUntil(lambda: view.analysis is not None and view.analysis.fit.model == "voigt")
    window.undo_stack.undo()
    assert p.records(SpectrumFit)[0].settings["peak_model"] == "lorentzian"
    assert len(p.records(Spectrum)) == 1


def test_snapshot_shows_the_spectra_view(qapp, project_path, tmp_path):
    """``open --snapshot --show spectra:ID`` renders the flake's spectra with their fit."""
    from flakebook import pipeline
    from flakebook.cli import main
    from flakebook.spectra.io import read_spectrum
    from flakebook.store import Project

    f = low_frequency_file(tmp_path, 2)
    with Project.open(project_path) as p:
        pipeline.attach_spectrum(p, p.find_flake("Q3W-002"), read_spectrum(f), source_path=f)
    out = tmp_path / "spectra.png"
    assert (
        main(["open", str(project_path), "--snapshot", str(out), "--show", "spectra:Q3W-002"]) == 0
    )
    from PySide6.QtGui import QImage

    img = QImage(str(out))
    assert img.width() > 600 and img.height() > 400
    # the fit's curve colour (#1f77b4) is drawn
    blue = sum(
        1
        for x in range(0, img.width(), 3)
        for y in range(0, img.height(), 3)
        if abs(img.pixelColor(x, y).red() - 0x1F) < 25
        and abs(img.pixelColor(x, y).green() - 0x77) < 25
        and abs(img.pixelColor(x, y).blue() - 0xB4) < 25
    )
    assert blue > 50
    assert main(["open", str(project_path), "--snapshot", str(out), "--show", "spectra:NOPE"]) == 2
