"""The Raman map view (pytest-qt, offscreen): a map stored over the test micrograph is shown
over it with the layer number's colours, bare substrate left empty; choosing another quantity
changes the image and the colour bar's unit; hovering a pixel shows its values with their
errors; exports write the shown arrays; closing the project leaves nothing of it on screen.

The map is drawn with MoSe2 lines at stated centres: A1g near 241 cm^-1, E2g(1) near
287 cm^-1, and B2g(1) near 353 cm^-1 present from two layers on and absent in a monolayer
(Tonndorf et al., Opt. Express 21, 4908 (2013); values from memory, as in the rule table). Each
pixel's truth is the conftest flake its point lies in (1L Q3W-001, 2L Q3W-002, else bare); the
layer numbers are the program's fits.
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest
from conftest import FLAKES, UM_PER_PX
from PySide6.QtCore import QPointF

from flakebook.render.palette import layer_hex
from flakebook.spectra.io import SpectrumMap

OFFSET_UM = (4.0, 4.0)  # the map origin, in um from the image's top-left pixel centre


def lorentz(x, c, fwhm, h):
    return h / (1 + ((x - c) / (fwhm / 2)) ** 2)


def truth_at(x_um: float, y_um: float) -> int:
    """The conftest flake's layer number at a point of the image (um from its pixel origin)."""
    for layers, poly in FLAKES.values():
        inside = cv2.pointPolygonTest(
            np.asarray(poly, np.float32), (x_um / UM_PER_PX, y_um / UM_PER_PX), False
        )
        if inside >= 0:
            return layers
    return 0


def drawn_map() -> tuple[SpectrumMap, np.ndarray]:
    rng = np.random.default_rng(11)
    x = np.linspace(200.0, 560.0, 500)
    xs, ys = np.arange(0.0, 27.0, 1.0), np.arange(0.0, 21.0, 1.0)
    cube = np.empty((ys.size, xs.size, x.size))
    truth = np.zeros((ys.size, xs.size), int)
    for r, yv in enumerate(ys):
        for c, xv in enumerate(xs):
            n = truth_at(OFFSET_UM[0] + xv, OFFSET_UM[1] + yv)
            truth[r, c] = n
            y = 120 + 0.05 * x + lorentz(x, 520.7, 3.5, 900)
            if n:
                y = y + lorentz(x, 241.6 - 0.6 * (n == 1), 3.5, 900) + lorentz(x, 287.0, 4, 120)
            if n >= 2:
                y = y + lorentz(x, 353.0, 4, 90)
            cube[r, c] = y + rng.normal(0, 4, x.size)
    return SpectrumMap(x, cube, xs, ys, "cm1", "raman", {"laser_nm": 532.0}), truth


@pytest.fixture
def stored(window):
    from flakebook.pipeline_maps import store_map

    m, truth = drawn_map()
    p = window.session.project
    got = store_map(p, 1, m, image=1, offset_um=OFFSET_UM, name="Q3W map")
    assert not got.warnings, got.warnings
    return got.record, truth


def _scene_pos(view, x_um, y_um):
    return view.plots[0].vb.mapViewToScene(QPointF(x_um, y_um))


def test_view_shows_the_map_over_its_micrograph_and_follows_the_quantity(window, stored, tmp_path):
    rec, truth = stored
    window.show_view("map")
    view = window.map_view
    assert view.record is not None and view.record.id == rec.id
    assert view.photo_items, "the micrograph is shown under the map"
    assert view.current_quantity() == "layers"
    rgba = view.map_item.image
    assert rgba.shape[:2] == truth.shape
    assert np.all(rgba[truth == 0, 3] == 0), "bare substrate is empty, not a layer number"
    one = np.array([int(layer_hex(1)[i : i + 2], 16) for i in (1, 3, 5)])
    inner = cv2.erode((truth == 1).astype(np.uint8), np.ones((3, 3), np.uint8)) > 0
    assert inner.sum() > 20
    got = view.values
    # A noise line now and then passes the fitter's S/N threshold of 3 as a B2g line (one
    # spectrum in about a hundred here): the interior reads 1L at 97% or more.
    assert np.mean(got[inner] == 1) >= 0.97, np.argwhere(inner & (got != 1))
    read_1l = inner & (got == 1)
    assert np.all(rgba[read_1l, :3] == one) and np.all(rgba[read_1l, 3] == 255)
    # the map's frame lies where its placement puts it on the image (um from the pixel origin)
    r = view.map_item.mapRectToParent(view.map_item.boundingRect())
    assert r.left() == pytest.approx(OFFSET_UM[0] - 0.5) and r.top() == pytest.approx(3.5)

    before = rgba.copy()
    view.quantity.setCurrentIndex(view.quantity.findData("A1g_center_cm1"))
    after = view.map_item.image
    assert not np.array_equal(before, after), "another quantity, another image"
    assert "cm⁻¹" in view.colour_bar.getAxis("left").labelText

    # hover: a monolayer pixel's values with errors, a bare pixel is said to be bare
    r1, c1 = np.argwhere(inner)[len(np.argwhere(inner)) // 2]
    view._on_mouse(_scene_pos(view, OFFSET_UM[0] + rec.x_um[c1], OFFSET_UM[1] + rec.y_um[r1]))
    text = view.hover.text()
    assert "N = 1" in text and "A1g" in text and "±" in text and "cm⁻¹" in text, text
    r0, c0 = np.argwhere(truth == 0)[0]
    view._on_mouse(_scene_pos(view, OFFSET_UM[0] + rec.x_um[c0], OFFSET_UM[1] + rec.y_um[r0]))
    assert "bare substrate" in view.hover.text()

    # export of the shown map
    png = view.export_png(tmp_path / "shown.png")
    assert cv2.imread(str(png)) is not None
    npy, csv = view.export_arrays(tmp_path / "shown")
    saved = np.load(npy)
    assert np.array_equal(saved, view.values, equal_nan=True) and np.isnan(saved[truth == 0]).all()
    assert csv.read_text().startswith("y_um\\x_um,0,1,2")

    # beside the micrograph: two linked plots, the same map
    view.over.setChecked(False)
    assert len(view.plots) == 2 and view.photo_items


def test_bilayer_pixels_are_not_monolayers(window, stored):
    """B2g(1) present (Tonndorf et al. 2013: absent in 1L): the 2L pixels read N >= 2."""
    rec, truth = stored
    window.show_view("map")
    layers = window.map_view.values
    assert (truth == 2).sum() > 5
    inner2 = truth == 2
    assert np.all(layers[inner2] >= 2), layers[inner2]


def test_closing_the_project_keeps_no_old_image(window, stored):
    window.show_view("map")
    view = window.map_view
    assert view.record is not None
    window.close_project()
    assert view.record is None and view.micrograph is None and not view.photo_items
    assert view.map_item is None and view.chooser.count() == 0 and view.quantity.count() == 0
    assert not view.hover.text().strip() and not view.notes.text()


def test_snapshot_show_map(qapp, project_path, tmp_path):
    from flakebook.cli import main
    from flakebook.pipeline_maps import store_map
    from flakebook.store import Project

    m, _ = drawn_map()
    with Project.open(project_path) as p:
        store_map(p, 1, m, image=1, offset_um=OFFSET_UM, name="Q3W map")
    out = tmp_path / "map.png"
    assert main(["open", str(project_path), "--snapshot", str(out), "--show", "map:Q3W map"]) == 0
    assert cv2.imread(str(out)).std() > 20
    code = main(["open", str(project_path), "--snapshot", str(out), "--show", "map:99"])
    assert code == 2


def test_switching_to_an_unplaced_map_drops_the_micrograph(window, stored):
    from flakebook.pipeline_maps import store_map

    m, _ = drawn_map()
    other = store_map(window.session.project, 1, m, name="loose map").record
    window.show_view("map")
    view = window.map_view
    assert view.photo_items and view.chooser.count() == 2
    view.chooser.setCurrentIndex(view.chooser.findData(other.id))
    assert view.record.id == other.id and view.image is None and view.micrograph is None
    assert not view.photo_items and "not placed" in view.title.text()
    assert not view.over.isEnabled(), "nothing to lay the map over"
    view.chooser.setCurrentIndex(view.chooser.findData(stored[0].id))
    assert view.photo_items and view.image is not None


def _write_map_file(path, smap, origin_um):
    """The map in flakebook's map text format (docs/spectrum-map-format.md), its positions as
    chip coordinates (``origin_um`` added)."""
    rows = ["# laser: 532 nm", "#flakebook-map x_unit=cm1 kind=raman"]
    rows.append("spectral_axis " + " ".join(f"{v:.4f}" for v in smap.x))
    for r, yv in enumerate(smap.y_um):
        for c, xv in enumerate(smap.x_um):
            vals = " ".join(f"{v:.2f}" for v in smap.spectra[r, c])
            rows.append(f"{xv + origin_um[0]:.3f} {yv + origin_um[1]:.3f} {vals}")
    path.write_text("\n".join(rows) + "\n")
    return path


def test_import_a_map_file_from_the_view_fits_it_in_a_worker_and_undo_removes_it(
    qtbot, window, tmp_path
):
    """The view's import lays the map on the micrograph shown by its stage position; the
    stored layer map reads the flakes it was drawn over."""
    from flakebook.pipeline_maps import empty_mask, find_map
    from flakebook.store import Image

    p = window.session.project
    img = p.get(Image, 1)
    # the image's centre at chip (100, 50) um: pixel origin at chip (100, 50) - half the frame
    p.update(img, stage_x_um=100.0, stage_y_um=50.0)
    img = p.get(Image, 1)
    half = ((img.width_px - 1) / 2 * img.pixel_size_um, (img.height_px - 1) / 2 * img.pixel_size_um)
    origin = (100.0 - half[0] + OFFSET_UM[0], 50.0 - half[1] + OFFSET_UM[1])
    smap, truth = drawn_map()
    path = _write_map_file(tmp_path / "q3w_map.txt", smap, origin)
    window.show_image(1)
    job = window.import_map(path, 1)
    qtbot.waitUntil(lambda: not window.jobs.busy, timeout=60000)
    assert job is not None
    maps = p.raman_maps_of()
    assert len(maps) == 1 and maps[0].image_id == 1
    rec = find_map(p, maps[0].id)
    layers = rec.maps[list(rec.quantities).index("layers")]
    on_flake = ~empty_mask(rec) & (truth > 0)
    assert on_flake.sum() > 50
    assert np.mean(layers[on_flake] == truth[on_flake]) > 0.9
    assert not np.any(~empty_mask(rec) & (truth == 0))  # bare substrate stays empty
    # laid where it was drawn: its first point OFFSET_UM from the image's pixel origin (the
    # stored offset places the map's chip origin on the image)
    first = (rec.offset_x_um + smap.x_um[0] + origin[0], rec.offset_y_um + smap.y_um[0] + origin[1])
    assert first == pytest.approx(OFFSET_UM, abs=1e-6)
    assert window.tabs.currentWidget() is window.views["map"]
    window.undo_stack.undo()
    assert not p.raman_maps_of()


def test_weak_pixels_are_not_shown_as_a_layer_number():
    """A posterior barely above flat (a weak spectrum at a flake's edge) is "not determined":
    common practice, no source; the threshold is twice the flat value 1/(N_max + 1)."""
    from flakebook.gui.views.map import undetermined

    flat = 1.0 / 16
    got = undetermined(np.array([flat * 1.5, flat * 2.5, np.nan]), 15)
    assert got.tolist() == [True, False, True]
