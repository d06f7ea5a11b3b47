"""The chip map's drawing, from the sample project (read-only).

Truth: the demo scenario's own chip coordinates of each flake (flakebook.demo.PIECES, from which
the micrographs were rendered); the map reaches the chip only through the images' stage
positions, and the picture is read back with OpenCV (cv2.imread) and the SVG with the standard
library's xml.etree, neither of them part of the drawing.
"""

from __future__ import annotations

import xml.etree.ElementTree as ET
from pathlib import Path

import cv2
import numpy as np
import pytest

from flakebook import demo
from flakebook.errors import InputError
from flakebook.render.chipmap import (
    chip_map_image,
    figure_size,
    flake_at,
    flake_text,
    paint_chip_map,
    position_rows,
    unplaced_text,
    write_chip_map,
)
from flakebook.render.palette import layer_hex
from flakebook.report.chipmap import chip_map
from flakebook.store import Project

SAMPLE = Path(__file__).resolve().parents[2] / "sample_project" / "k7-campaign.flakebook"
SAMPLES = ("K7-north", "K7-south")


@pytest.fixture(scope="module")
def maps(qapp):
    with Project.open(SAMPLE, read_only=True) as p:
        yield {s: (chip_map(p, s), p.sample_by_name(s).hole_pattern, p.max_layers) for s in SAMPLES}


def _frame(m, pattern):
    """Draw on a throw-away image to learn the frame (um -> px) the figure uses."""
    from PySide6.QtGui import QImage, QPainter

    size = figure_size(m, 900, pattern)
    img = QImage(size, QImage.Format.Format_RGB32)
    p = QPainter(img)
    frame = paint_chip_map(p, m, size.width(), size.height(), pattern=pattern)
    p.end()
    return frame


@pytest.mark.parametrize("sample", SAMPLES)
def test_png_puts_each_flake_in_its_colour_where_the_scenario_put_it(maps, sample, tmp_path):
    m, pattern, _ = maps[sample]
    out = write_chip_map(m, tmp_path / "map.png", pattern=pattern)
    img = cv2.imread(str(out))
    assert img is not None and img.shape[1] == 900
    assert img.std() > 20 and len(np.unique(img[::3, ::3].reshape(-1, 3), axis=0)) > 50
    frame = _frame(m, pattern)
    assert frame is not None
    truth = {f.label: f for f in demo.PIECES if f.sample == sample}  # bulk pieces too
    widths = {im.image_id: im.width_um for im in m.images}
    assert {f.label for f in m.flakes} == set(truth)
    for f in m.flakes:
        # the flake's centroid read back from the picture's pixels lies within one image width
        # (and within the flake's size) of the scenario's centre ...
        tx, ty = truth[f.label].center_um
        back = frame.to_um(*frame.to_px(*f.centroid_um))
        assert np.hypot(back[0] - tx, back[1] - ty) < widths[f.image_id]
        assert np.hypot(back[0] - tx, back[1] - ty) < 2 * truth[f.label].radius_um
        # ... and the scenario's centre, put on the picture, is painted in the flake's layer
        # colour (blended 225/255 over the chip's ground; a hole's thin ring may cross it, so
        # most, not all, of the pixels around it)
        px, py = (int(round(v)) for v in frame.to_px(tx, ty))
        want = np.array([int(layer_hex(f.layers)[i : i + 2], 16) for i in (5, 3, 1)])  # BGR
        patch = img[py - 3 : py + 4, px - 3 : px + 4].reshape(-1, 3).astype(int)
        near = (np.abs(patch - want).max(axis=1) < 30).mean()
        assert near > 0.6, (f.label, patch.mean(axis=0), want)


def test_the_same_scale_on_both_axes(maps):
    """A chip map is a map: one um is as long across as down (common practice, no source)."""
    m, pattern, _ = maps["K7-north"]
    frame = _frame(m, pattern)
    a = frame.to_px(0.0, 0.0)
    b = frame.to_px(100.0, 100.0)
    assert b[0] - a[0] == pytest.approx(b[1] - a[1])
    assert frame.to_um(*frame.to_px(12.5, -40.0)) == pytest.approx((12.5, -40.0))


@pytest.mark.parametrize("sample", SAMPLES)
def test_svg_parses_and_holds_every_label(maps, sample, tmp_path):
    m, pattern, nmax = maps[sample]
    out = write_chip_map(m, tmp_path / "map.svg", pattern=pattern)
    root = ET.parse(out).getroot()
    assert root.tag.endswith("svg")
    texts = {"".join(e.itertext()).strip() for e in root.iter() if e.tag.endswith("text")}
    for f in m.flakes:
        assert flake_text(f, nmax) in texts
    assert any("origin at the stage" in t for t in texts)  # the axes say what they are
    # one outline per flake and one ring per distinct hole: many shapes, not a blank page
    assert sum(1 for e in root.iter() if e.tag.endswith(("path", "polygon", "polyline"))) >= len(
        m.flakes
    )


def test_the_flake_under_its_centroid_is_found(maps):
    m, pattern, _ = maps["K7-south"]
    frame = _frame(m, pattern)
    for f in m.flakes:
        assert flake_at(frame, m, *frame.to_px(*f.centroid_um)).flake_id == f.flake_id
    # the chip's corner is no flake
    assert flake_at(frame, m, frame.plot.left() + 2, frame.plot.top() + 2) is None


def test_positions_listed_for_the_microscope(maps):
    m, _, nmax = maps["K7-north"]
    rows = position_rows(m, nmax)
    assert [r[0] for r in rows] == sorted(f.label for f in m.flakes)
    by = {f.label: f for f in m.flakes}
    for label, _n, x, y, _img in rows:
        assert float(x) == pytest.approx(by[label].centroid_um[0], abs=0.05)
        assert float(y) == pytest.approx(by[label].centroid_um[1], abs=0.05)


def test_unplaced_said_in_words(maps):
    from dataclasses import replace

    m, _, _ = maps["K7-north"]
    assert "nothing is left off the map" in unplaced_text(m)
    gone = replace(m, unplaced_images=("extra_100x.png",), unplaced_flakes=("K7N-99",))
    text = unplaced_text(gone)
    assert "extra_100x.png" in text and "K7N-99" in text
    empty = replace(m, images=(), flakes=(), holes=())
    img = chip_map_image(empty)  # nothing placed: drawn with a sentence, no failure
    assert not img.isNull()


def test_export_refuses_other_suffixes(maps, tmp_path):
    m, _, _ = maps["K7-north"]
    with pytest.raises(InputError, match=r"\.png or \.svg"):
        write_chip_map(m, tmp_path / "map.jpg")
