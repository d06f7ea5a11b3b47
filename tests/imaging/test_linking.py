"""Linking a region in a new image to a flake seen before."""

from __future__ import annotations

import math

import numpy as np
import pytest

from flakebook.imaging.linking import polygon_iou, suggest_links, to_chip_um


def _square(cx, cy, side):
    h = side / 2
    return np.array([[cx - h, cy - h], [cx + h, cy - h], [cx + h, cy + h], [cx - h, cy + h]])


def test_iou_of_shifted_squares_is_analytic():
    """Two unit squares shifted by half a side overlap 1/2 over a union of 3/2: IoU = 1/3
    (elementary geometry, no source needed)."""
    a = _square(0, 0, 10)
    b = _square(5, 0, 10)
    assert polygon_iou(a, b) == pytest.approx(1 / 3, abs=0.01)
    assert polygon_iou(a, a) == pytest.approx(1.0, abs=1e-9)
    assert polygon_iou(a, _square(50, 0, 10)) == 0.0


def test_chip_coordinates_of_the_image_centre_are_the_stage_position():
    """INTERFACE.md pixel convention: the centre of a 5 x 3 image is pixel (2, 1)."""
    pts = to_chip_um([[2, 1], [3, 1]], um_per_px=0.5, stage_um=(100.0, -20.0), shape=(3, 5))
    assert pts[0] == pytest.approx([100.0, -20.0])
    assert pts[1] == pytest.approx([100.5, -20.0])


def test_same_flake_at_two_magnifications_is_suggested_first():
    """A hexagon outlined at 10x (0.345 um/px) and again at 50x (0.069 um/px) with different
    stage positions maps to the same place on the chip and is the top suggestion."""
    ang = np.deg2rad(np.arange(6) * 60 + 10)
    hexagon = np.column_stack([30 + 8 * np.cos(ang), -12 + 8 * np.sin(ang)])  # chip um
    # Its outline in a 50x image centred at (25, -10) of 800 x 600 px:
    px50 = (hexagon - [25, -10]) / 0.069 + [(800 - 1) / 2, (600 - 1) / 2]
    chip = to_chip_um(px50, um_per_px=0.069, stage_um=(25, -10), shape=(600, 800))
    other = _square(60, 40, 12)
    near = hexagon + [3.0, 0.0]  # a neighbour partly overlapping
    got = suggest_links(chip, [("far", other), ("neighbour", near + [12, 0]), ("it", hexagon)])
    assert got[0].key == "it"
    assert got[0].iou == pytest.approx(1.0, abs=0.02)
    assert got[0].area_ratio == pytest.approx(1.0, abs=0.01)
    assert all(s.key != "far" for s in got)


def test_drifted_stage_still_matches_by_shape():
    """A stage whose origin moved by 30 um: position overlap is zero, the shape still agrees."""
    tri = np.array([[0.0, 0.0], [14.0, 0.0], [3.0, 9.0]])
    got = suggest_links(tri + [30.0, 0.0], [("it", tri)])
    assert got and got[0].iou == 0.0
    assert got[0].shape_iou == pytest.approx(1.0, abs=0.02)
    assert math.isclose(got[0].score, 0.5 * got[0].shape_iou)
