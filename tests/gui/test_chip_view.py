"""The window's chip-map view, driven with pytest-qt on the small invented project of
tests/gui/conftest.py.

The truth of where a flake lies is computed here from the test scenario's own numbers (its
outline in pixels, the pixel size, and a stage position given to the image), with the convention
of INTERFACE.md (the stage position is the chip coordinate of the image's centre, pixel centres
at integer coordinates from the top-left pixel); the click is made at that point mapped to the
view's pixels. PNG exports are read back with OpenCV, SVG with the standard library's xml.etree.
"""

from __future__ import annotations

import xml.etree.ElementTree as ET

import cv2
import numpy as np
import pytest
from PySide6.QtCore import QPoint, Qt

from flakebook.cli import main
from tests.gui.conftest import FLAKES, SIZE, UM_PER_PX

STAGE_UM = (1500.0, -320.0)  # the chip coordinate of the image's centre (invented)


def _truth_um(label: str) -> tuple[float, float]:
    """The flake's outline centroid on the chip: the polygon's area centroid in pixels (the
    shoelace formula), shifted by the stage position and scaled by the pixel size."""
    poly = np.asarray(FLAKES[label][1], float)
    x, y = poly[:, 0], poly[:, 1]
    xn, yn = np.roll(x, -1), np.roll(y, -1)
    cross = x * yn - xn * y
    a = cross.sum() / 2
    cx, cy = ((x + xn) * cross).sum() / (6 * a), ((y + yn) * cross).sum() / (6 * a)
    rows, cols = SIZE
    return (
        STAGE_UM[0] + (cx - (cols - 1) / 2) * UM_PER_PX,
        STAGE_UM[1] + (cy - (rows - 1) / 2) * UM_PER_PX,
    )


@pytest.fixture
def placed_path(project_path):
    """The small project with its image given a stage position (as if read from its metadata)."""
    from flakebook.store import Image, Project

    with Project.open(project_path) as p:
        (img,) = p.records(Image)
        with p.transaction():
            p.update(img, stage_x_um=STAGE_UM[0], stage_y_um=STAGE_UM[1])
    return project_path


@pytest.fixture
def placed(window):
    """The window on the small project, its image given the stage position meanwhile (the
    map follows the project's change)."""
    from flakebook.store import Image

    p = window.session.project
    (img,) = p.records(Image)
    with p.transaction():
        p.update(img, stage_x_um=STAGE_UM[0], stage_y_um=STAGE_UM[1])
    window.show_view("chip")
    window.refresh()
    return window


def _view_point(view, label: str) -> QPoint:
    view.canvas.repaint()  # the frame (um -> px) the picture was painted with
    frame = view.canvas.frame
    assert frame is not None
    x, y = frame.to_px(*_truth_um(label))
    return QPoint(round(x), round(y))


def test_a_flake_clicked_on_the_map_is_the_one_selected(placed, qtbot):
    w = placed
    view = w.views["chip"]
    assert view.sample.currentText() == "Q3-west"
    assert {f.label for f in view.map.flakes} == set(FLAKES)
    for label in FLAKES:
        fid = w.session.project.flake_by_label(label).id
        qtbot.mouseClick(view.canvas, Qt.MouseButton.LeftButton, pos=_view_point(view, label))
        assert w.current_flake == fid, label
        assert w.catalogue.current_flake() == fid  # the catalogue follows
        assert w.inspector.title.text() == label  # and the inspector
        assert view.canvas.selected == fid  # marked on the map
        assert w.tabs.currentWidget() is view  # the map stays in front
    # a click on bare chip selects nothing new
    before = w.current_flake
    frame = view.canvas.frame
    qtbot.mouseClick(view.canvas, Qt.MouseButton.LeftButton,
                     pos=QPoint(round(frame.plot.left() + 3), round(frame.plot.top() + 3)))  # fmt: skip
    assert w.current_flake == before


def test_magnified_map_still_picks_and_a_drag_does_not(placed, qtbot):
    w = placed
    view = w.views["chip"]
    canvas = view.canvas
    fid = w.session.project.flake_by_label("Q3W-003").id
    canvas.zoom_at(_view_point(view, "Q3W-003"), 6.0)  # magnified about the flake
    assert canvas.zoom == pytest.approx(6.0) and view.fit.isEnabled()
    at = _view_point(view, "Q3W-003")
    qtbot.mouseClick(canvas, Qt.MouseButton.LeftButton, pos=at)
    assert w.current_flake == fid
    other = w.session.project.flake_by_label("Q3W-001").id
    w.select_flake(other, keep_view=True)
    # a drag that starts on the flake moves the map and selects nothing
    before = canvas.centre_um
    qtbot.mousePress(canvas, Qt.MouseButton.LeftButton, pos=at)
    qtbot.mouseMove(canvas, at + QPoint(8, 5))
    qtbot.mouseRelease(canvas, Qt.MouseButton.LeftButton, pos=at + QPoint(8, 5))
    assert w.current_flake == other
    scale = canvas.frame.scale
    assert canvas.centre_um == pytest.approx((before[0] - 8 / scale, before[1] - 5 / scale))
    view.fit.click()
    assert canvas.zoom == 1.0


def test_hover_tells_label_and_layer_number(placed, qtbot):
    view = placed.views["chip"]
    qtbot.mouseMove(view.canvas, _view_point(view, "Q3W-002"))
    qtbot.waitUntil(lambda: "Q3W-002" in view.canvas.toolTip(), timeout=2000)
    assert "N = 2L" in view.canvas.toolTip()


def test_selection_elsewhere_is_marked_and_listed(placed):
    w = placed
    fid = w.session.project.flake_by_label("Q3W-003").id
    w.catalogue.flakeActivated.emit(fid)  # chosen in the catalogue
    view = w.views["chip"]
    assert view.canvas.selected == fid
    rows = view.positions.selectedItems()
    assert [r.text(0) for r in rows] == ["Q3W-003"]
    x, y = _truth_um("Q3W-003")
    assert float(rows[0].text(2)) == pytest.approx(x, abs=0.05)
    assert float(rows[0].text(3)) == pytest.approx(y, abs=0.05)


def test_switching_sample_and_undo_redraw(placed):
    w = placed
    view = w.views["chip"]
    s = w.session
    s.add_sample({"name": "Q3-east", "material": "MoSe2", "substrate": "SiO2:285,Si"})
    w.refresh()
    assert view.sample_names() == ["Q3-west", "Q3-east"]
    view.show_sample("Q3-east")
    # nothing of the other sample's map is left: no flakes, no rows, the empty map said
    assert view.map.sample == "Q3-east" and not view.map.flakes
    assert view.positions.topLevelItemCount() == 0
    assert "No image of this sample" in view.unplaced.text()
    view.show_sample("Q3-west")
    assert view.positions.topLevelItemCount() == 3
    # a flake deleted (undoable) leaves the map; the undo brings it back
    fid = s.project.flake_by_label("Q3W-001").id
    w.select_flake(fid, keep_view=True)
    w.delete_selected()
    assert "Q3W-001" not in {f.label for f in view.map.flakes}
    w.undo_stack.undo()
    assert "Q3W-001" in {f.label for f in view.map.flakes}
    # an assignment changes the colour's N; undone, it is back
    w.assign(s.project.flake_by_label("Q3W-002").id, 4, "seen by eye (test)")
    assert {f.label: f.layers for f in view.map.flakes}["Q3W-002"] == 4
    w.undo_stack.undo()
    assert {f.label: f.layers for f in view.map.flakes}["Q3W-002"] == 2
    with pytest.raises(Exception, match="Q3-west"):
        view.show_sample("Q9")


def test_exports_decode(placed, tmp_path):
    view = placed.views["chip"]
    png = view.export_picture(tmp_path / "chip.png")
    img = cv2.imread(str(png))
    assert img is not None and img.shape[1] == 1200 and img.std() > 20
    svg = view.export_picture(tmp_path / "chip.svg")
    texts = {"".join(e.itertext()).strip() for e in ET.parse(svg).getroot().iter()
             if e.tag.endswith("text")}  # fmt: skip
    for label, (layers, _poly) in FLAKES.items():
        assert f"{label} {layers}L" in texts


def test_unplaced_images_and_flakes_are_listed(window):
    """The unchanged test project's image has no stage position: nothing can be placed."""
    window.show_view("chip")
    view = window.views["chip"]
    assert view.map is not None and not view.map.flakes
    text = view.unplaced.text()
    assert "q3w_50x_001.png" in text
    for label in FLAKES:
        assert label in text


def test_snapshot_of_the_chip_map(qapp, placed_path, tmp_path):
    out = tmp_path / "chip.png"
    assert main(["open", str(placed_path), "--snapshot", str(out), "--show", "chip:Q3-west"]) == 0
    img = cv2.imread(str(out))
    assert img is not None and img.std() > 20
    # the 1L flake's colour (Okabe-Ito sky blue #56B4E9, blended over the chip's ground) is on
    # screen
    want = np.array([0xE9, 0xB4, 0x56])  # BGR
    assert (np.abs(img.astype(int) - want).max(axis=2) < 30).sum() > 200


def test_snapshot_of_an_unknown_sample_names_the_samples(qapp, project_path, tmp_path, capsys):
    out = tmp_path / "x.png"
    assert main(["open", str(project_path), "--snapshot", str(out), "--show", "chip:NOPE"]) == 2
    err = capsys.readouterr().err
    assert "no sample 'NOPE'" in err and "chip:Q3-west" in err and "Traceback" not in err
    assert not out.exists()
