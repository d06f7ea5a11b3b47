"""Faults of the window found by trying it as a new user would (issue 12), each driven with
pytest-qt on the small project of conftest.py. Checks of the program's own behaviour: common
practice for GUI testing, no source.
"""

from __future__ import annotations

import numpy as np
from PySide6.QtCore import Qt


def _fid(window, label):
    return window.session.project.flake_by_label(label).id


def _bar_items(inspector):
    import pyqtgraph as pg

    return [i for i in inspector.post_plot.getPlotItem().items if isinstance(i, pg.BarGraphItem)]


def test_posterior_chart_shows_only_the_selected_flake(window):
    """After viewing three flakes the chart holds one set of bars: the fourth flake's."""
    for label in ("Q3W-001", "Q3W-002", "Q3W-003", "Q3W-001"):
        window.select_flake(_fid(window, label))
    bars = _bar_items(window.inspector)
    assert len(bars) == 1
    heights = np.asarray(bars[0].opts["height"])
    assert int(np.argmax(heights)) + 1 == 1
    # nothing drawn for a flake without evidence
    window.select_flake(None)
    assert not any(b.isVisible() for b in _bar_items(window.inspector))


def test_notes_in_progress_are_kept_on_selection_change(qtbot, window):
    """Notes typed but not saved reach the project when another flake is selected."""
    a, b = _fid(window, "Q3W-001"), _fid(window, "Q3W-002")
    window.select_flake(a)
    window.inspector.notes.setFocus()
    qtbot.keyClicks(window.inspector.notes, "edge torn at the top")
    window.select_flake(b)
    assert window.session.project.get("flake", a).notes == "edge torn at the top"
    window.select_flake(a)
    assert window.inspector.notes.toPlainText() == "edge torn at the top"
    # tags typed without Enter likewise
    window.inspector.tags.setText("raman-next")
    window.select_flake(b)
    assert tuple(window.session.project.get("flake", a).tags) == ("raman-next",)


def test_notes_in_progress_are_kept_on_close(qtbot, project_path):
    """Closing the project (or quitting) saves notes being typed."""
    from flakebook.gui.mainwindow import MainWindow
    from flakebook.store import Project

    w = MainWindow()
    qtbot.addWidget(w)
    w.show()
    w.open_project(project_path)
    qtbot.waitUntil(lambda: not w.jobs.busy, timeout=10000)
    fid = w.session.project.flake_by_label("Q3W-003").id
    w.select_flake(fid)
    w.inspector.notes.setPlainText("check for bubbles")
    w.close()
    with Project.open(project_path, read_only=True) as p:
        assert p.get("flake", fid).notes == "check for bubbles"


def test_catalogue_row_selects_flake_everywhere(qtbot, window):
    """Clicking a catalogue row selects that flake in inspector, browser and canvas, also the
    row that was current before the selection was cleared on the canvas."""
    window.show_view("catalogue")
    table = window.catalogue.table
    fid = _fid(window, "Q3W-002")

    def click_row_of(flake_id):
        proxy = window.catalogue.proxy
        for i in range(proxy.rowCount()):
            idx = proxy.index(i, 1)
            if window.catalogue.model.rows[proxy.mapToSource(idx).row()]["id"] == flake_id:
                qtbot.mouseClick(
                    table.viewport(), Qt.MouseButton.LeftButton, pos=table.visualRect(idx).center()
                )
                return
        raise AssertionError(flake_id)

    click_row_of(fid)
    assert window.current_flake == fid
    assert window.inspector.title.text() == "Q3W-002"
    # the selection cleared elsewhere (an empty spot on the image), then the same row again
    window.select_flake(None)
    assert window.inspector.title.text() == "No flake selected"
    window.show_view("catalogue")
    click_row_of(fid)
    assert window.current_flake == fid
    assert window.inspector.title.text() == "Q3W-002"
    assert window.browser.tree.currentItem().text(0) == "Q3W-002"
    assert window.canvas.selected_flake == fid


def test_browser_flake_selects_again_after_clearing(qtbot, window):
    """The browser's flake item selects its flake again after the selection was cleared."""
    fid = _fid(window, "Q3W-001")
    item = window.browser._flake_items[fid]
    window.browser.tree.setCurrentItem(item)
    assert window.current_flake == fid
    window.select_flake(None)
    window.browser.tree.setCurrentItem(window.browser._flake_items[fid])
    assert window.current_flake == fid
    assert window.inspector.title.text() == "Q3W-001"


def _click_image(qtbot, window, x, y):
    from PySide6.QtCore import QPointF

    canvas = window.canvas
    view_pt = canvas.mapFromScene(canvas.view.mapViewToScene(QPointF(x, y)))
    qtbot.mouseClick(canvas.viewport(), Qt.MouseButton.LeftButton, pos=view_pt)


def test_overlays_and_status_end_with_their_tool(qtbot, window):
    """The distance label goes with the measure tool; "Editing" goes when editing ends."""
    window.tool_actions["measure"].trigger()
    _click_image(qtbot, window, 100, 100)
    _click_image(qtbot, window, 300, 300)
    assert window.canvas._measure_text.isVisible()
    window.tool_actions["select"].trigger()
    assert not window.canvas._measure_text.isVisible()
    assert not window.hint_label.text().startswith("Distance")
    # editing an outline: the status says so while it lasts, and no longer after Esc or Enter
    for key in (Qt.Key.Key_Escape, Qt.Key.Key_Return):
        window.select_flake(_fid(window, "Q3W-001"))
        window.a_edit_outline.trigger()
        assert window.hint_label.text().startswith("Editing")
        qtbot.keyClick(window.canvas, key)
        assert not window.canvas.editing
        assert "Editing" not in window.hint_label.text()


def _find(qtbot, window):
    job = window.find_flakes()
    qtbot.waitUntil(lambda: job.done.is_set() and not window.jobs.busy, timeout=30000)
    assert not window.errors, window.errors


def test_find_flakes_again_updates_the_flakes_there(qtbot, window):
    """Finding flakes on a surveyed image matches regions to the flakes already there (outline
    overlap): no duplicate, label, tags, notes and manual assignment kept, outline and evidence
    renewed; the status says how many were updated and how many are new; undo restores."""
    p = window.session.project
    labels = sorted(f.label for f in p.flakes_of(1))
    fid = _fid(window, "Q3W-002")
    window.set_notes(fid, "for thermometry")
    window.set_tags(fid, ["raman-next"])
    window.assign(fid, 2, "shear mode at 22 cm-1")
    before = p.appearances_of(fid)[0].outline_px.copy()
    depth = window.undo_stack.index()
    for _ in range(2):  # twice: still no duplicate
        _find(qtbot, window)
        assert sorted(f.label for f in p.flakes_of(1)) == labels
        for f in p.flakes_of(1):
            assert len([a for a in p.appearances_of(f) if a.image_id == 1]) == 1
        flake = p.get("flake", fid)
        assert flake.notes == "for thermometry"
        assert tuple(flake.tags) == ("raman-next",)
        manual = [a for a in p.assignments_of(fid) if a.manual]
        assert [(a.layers, a.reason) for a in manual] == [(2, "shear mode at 22 cm-1")]
        assert window.catalogue.model.rows[
            [r["id"] for r in window.catalogue.model.rows].index(fid)
        ]["manual"]
        # the outline is the survey's now, and its evidence comes from the survey
        after = p.appearances_of(fid)[0].outline_px
        assert after.shape != before.shape or not np.allclose(after, before)
        assert any("target_probability" in e.parameters for e in p.evidence_of(fid))
        assert "3 updated, 0 new" in window.undo_stack.text(window.undo_stack.count() - 1)
        assert "3 updated, 0 new" in window.hint_label.text()
    while window.undo_stack.index() > depth:
        window.a_undo.trigger()
    assert np.allclose(p.appearances_of(fid)[0].outline_px, before)
    assert not any("target_probability" in e.parameters for e in p.evidence_of(fid))
    assert [a.reason for a in p.assignments_of(fid) if a.manual] == ["shear mode at 22 cm-1"]


def _wheel(widget, steps=-3):
    from PySide6.QtCore import QPoint, QPointF
    from PySide6.QtGui import QWheelEvent
    from PySide6.QtWidgets import QApplication

    centre = QPointF(widget.width() / 2, widget.height() / 2)
    ev = QWheelEvent(
        centre,
        QPointF(widget.mapToGlobal(centre.toPoint())),
        QPoint(0, 0),
        QPoint(0, 120 * steps),
        Qt.MouseButton.NoButton,
        Qt.KeyboardModifier.NoModifier,
        Qt.ScrollPhase.NoScrollPhase,
        False,
    )
    QApplication.sendEvent(widget, ev)


def test_inspector_plot_lets_the_wheel_scroll_the_panel(qtbot, window):
    """The wheel over the contrast plot scrolls the inspector, not the plot, until the user
    clicks into it; the axes stay within meaningful limits and a double-click resets them."""
    ins = window.inspector
    window.select_flake(_fid(window, "Q3W-002"))
    qtbot.waitUntil(lambda: ins.model_curves is not None, timeout=10000)
    window.inspector_dock.resize(400, 300)
    ins.resize(380, 300)
    vb = ins.con_plot.getPlotItem().getViewBox()
    before = [list(r) for r in vb.viewRange()]
    bar = ins.verticalScrollBar()
    bar.setValue(0)
    _wheel(ins.con_plot.viewport())
    assert [list(r) for r in vb.viewRange()] == before
    assert bar.maximum() > 0, bar.maximum()
    assert bar.value() > 0  # the panel scrolled
    # zoomed far out by other means, the N axis stays within 0.5 .. N_max + 1.5
    vb.setXRange(-50, 150, padding=0)
    lo, hi = vb.viewRange()[0]
    nmax = window.session.project.max_layers
    assert lo >= 0.5 - 1e-6 and hi <= nmax + 1.5 + 1e-6
    qtbot.mouseDClick(ins.con_plot.viewport(), Qt.MouseButton.LeftButton)
    assert np.allclose(vb.viewRange()[0], before[0], atol=1e-6)
    # clicked into, the plot takes the wheel
    qtbot.mouseClick(ins.con_plot.viewport(), Qt.MouseButton.LeftButton)
    _wheel(ins.con_plot.viewport())
    assert not np.allclose(vb.viewRange()[0], before[0], atol=1e-6)


def _toolbar_buttons(window):
    from PySide6.QtWidgets import QToolBar, QToolButton

    tb = window.findChild(QToolBar, "mainToolbar")
    return tb, {
        a.objectName() or a.text(): tb.widgetForAction(a)
        for a in tb.actions()
        if not a.isSeparator() and isinstance(tb.widgetForAction(a), QToolButton)
    }


def test_toolbar_buttons_keep_their_places(qtbot, window):
    """Toolbar buttons are icons of one size with tooltips: an edit does not move them, none
    falls into the overflow menu, and undo says in its tooltip what it undoes."""
    tb, buttons = _toolbar_buttons(window)
    for name, button in buttons.items():
        assert not button.icon().isNull(), name
        assert button.toolButtonStyle() == Qt.ToolButtonStyle.ToolButtonIconOnly, name
        assert button.toolTip(), name
    geometry = {n: b.geometry() for n, b in buttons.items()}
    assert all(b.isVisible() for b in buttons.values())  # none in the overflow menu
    window.tool_actions["hole"].trigger()
    _click_image(qtbot, window, 500, 420)
    qtbot.wait(50)
    assert {n: b.geometry() for n, b in buttons.items()} == geometry
    assert "place hole" in window.a_undo.toolTip().lower() and "Ctrl+Z" in window.a_undo.toolTip()
    window.a_undo.trigger()
    assert "place hole" in window.a_redo.toolTip().lower()


def test_undo_key_works_in_a_spin_box(qtbot, window):
    """Ctrl+Z undoes the last edit while a spin box has the focus (and nothing of its own to
    undo)."""
    window.select_flake(_fid(window, "Q3W-001"))
    window.set_tags(_fid(window, "Q3W-001"), ["raman-next"])
    index = window.undo_stack.index()
    box = window.inspector.assign_n
    box.setFocus()
    qtbot.waitUntil(box.hasFocus)
    qtbot.keyClick(box, Qt.Key.Key_Z, Qt.KeyboardModifier.ControlModifier)
    assert window.undo_stack.index() == index - 1


def test_numbers_are_rounded_to_their_uncertainty():
    """Value ± error to 2 significant figures of the error, the value to the same decimal
    place; probabilities to 2 decimals, "< 0.01" below (rounding as the Particle Data Group's
    review describes it: error to one or two significant figures, value to match)."""
    from flakebook.gui.words import plural, probability, value_error

    assert value_error(0.469, 0.00015) == "0.46900 ± 0.00015"
    assert value_error(0.760209665135969, 0.012) == "0.760 ± 0.012"
    assert value_error(285.3, 2.77, "nm") == "285.3 ± 2.8 nm"
    assert value_error(1234.0, 56.0) == "1234 ± 56"
    assert value_error(9.2e-05, 3.1e-06) == "(9.20 ± 0.31) × 10⁻⁵"
    assert probability(7.56e-225) == "< 0.01"
    assert probability(0.760209665135969) == "0.76"
    assert plural(2, "sample") == "2 samples" and plural(1, "image") == "1 image"
    assert plural(24, "flake_hole") == "24 flake-hole pairs"


def test_window_words_are_for_people(qtbot, window):
    """No module paths, type names or raw floats in what the window says; headers that explain
    themselves; one notation for the thick bin; the layer filter ends at N_max."""
    import re

    from flakebook.errors import InputError
    from flakebook.gui.feedback import describe
    from flakebook.gui.views.catalogue import COLUMNS

    window.select_flake(_fid(window, "Q3W-002"))
    ins = window.inspector
    text = ins.evidence.text()
    assert "flakebook." not in text and "Hsu et al. 2019" in text
    assert not re.search(r"\d\.\d{6,}|\de-\d", text), text
    # probabilities as everywhere else ("P > 0.99", never "P = 1.00"); a long source once
    src = "thin-film model with the n,k data of MoSe2: Hsu et al. 2019"
    ev = {"name": "contrast", "layers": 3, "probability": 0.9996, "reason": "r 0.47", "source": src}
    weak = {**ev, "probability": 0.09, "name": "Raman: A1g position", "source": "lit. table"}
    ins._show_evidence({"evidence": [ev, {**ev, "reason": "over a hole"}, weak],
                        "combined": {"layers": 3, "probability": 0.99996}})  # fmt: skip
    shown = ins.evidence.text()
    assert "P = 1.00" not in shown and "P > 0.99" in shown
    assert shown.count("Hsu et al. 2019") == 1 and "source as above" in shown
    assert "P = 0.09 (weak)" in shown and "Combined: 3L, P > 0.99" in shown
    # catalogue headers
    heads = [c[1] for c in COLUMNS]
    assert "P" not in heads and "Or" not in heads and "Probability" in heads
    # candidates say what their number is
    cand = window.candidates.list.item(0).text()
    assert "P(target layers) " in cand and "(target 1" not in cand
    # errors: no Python type names
    _head, _advice, details = describe(InputError("bad"), "Notes")
    assert "InputError" not in details
    # the browser's second column is not called "Layers" when it shows materials and scales
    assert window.browser.tree.headerItem().text(1) != "Layers"
    # the thick bin is ">15L" on the chart's axis as in the labels
    ticks = ins.post_plot.getAxis("bottom")._tickLevels[0]
    assert ticks[-1][1] == ">15L"
    # the layer filter stops at N_max + 1 (the ">15L" bin), not 100
    nmax = window.session.project.max_layers
    assert window.catalogue.lmax.maximum() == nmax + 1
    assert window.catalogue.lmax.text() == f">{nmax}L"
