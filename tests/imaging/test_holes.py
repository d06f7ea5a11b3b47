"""Holes: sub-pixel centres and radii, lattice, hidden holes and coverage against analytic cases."""

from __future__ import annotations

import math

import numpy as np
import pytest

from flakebook.imaging.holes import (
    circle_polygon_area,
    detect_holes,
    fit_circle,
    fit_lattice,
    hole_coverage,
    lattice_sites,
    predict_hidden_holes,
    signed_distance,
)

from .synth import disk_coverage


def _lattice_image(shape, centres, r, inside=0.25, outside=0.8, noise=0.01, seed=0):
    img = np.full(shape, outside)
    for cx, cy in centres:
        frac = disk_coverage(shape, cx, cy, r, ss=8)
        img = img * (1 - frac) + inside * frac
    rng = np.random.default_rng(seed)
    return (img * (1 + noise * rng.standard_normal(shape))).astype(np.float32)


def _grid(origin, pitch, angle_deg, kind, shape, margin):
    a = math.radians(angle_deg)
    a1 = pitch * np.array([math.cos(a), math.sin(a)])
    b = a + (math.pi / 2 if kind == "square" else math.pi / 3)
    a2 = pitch * np.array([math.cos(b), math.sin(b)])
    pts = [np.asarray(origin) + i * a1 + j * a2 for i in range(-12, 13) for j in range(-12, 13)]
    rows, cols = shape
    return [
        p for p in pts if margin < p[0] < cols - 1 - margin and margin < p[1] < rows - 1 - margin
    ]


@pytest.mark.parametrize("as_image", [False, True])
def test_subpixel_centre_and_radius_of_antialiased_holes(as_image):
    """Holes drawn anti-aliased (8 x 8 supersampling, then averaged) at known sub-pixel centres and
    radii, 1% noise: centre within 0.3 px, radius within 1% (the issue's check); from a float
    array and from a 16-bit Micrograph (edges sampled from the decoded pixels)."""
    shape = (240, 320)
    rng = np.random.default_rng(3)
    truth = []
    for k in range(6):
        cx = 45 + 110 * (k % 3) + rng.uniform(-0.5, 0.5)
        cy = 60 + 120 * (k // 3) + rng.uniform(-0.5, 0.5)
        truth.append((cx, cy, rng.uniform(8.0, 16.0)))
    img = np.full(shape, 0.8)
    for cx, cy, r in truth:
        frac = disk_coverage(shape, cx, cy, r)
        img = img * (1 - frac) + 0.3 * frac
    img = img * (1 + 0.01 * np.random.default_rng(1).standard_normal(shape))
    src = img.astype(np.float32)
    if as_image:
        from flakebook.imaging.io import from_array

        src = from_array(np.round(np.stack([img] * 3, axis=-1) * 50000).astype(np.uint16))
    holes = detect_holes(src, um_per_px=0.1, radius_range_um=(0.6, 2.0))
    assert len(holes) == len(truth)
    for cx, cy, r in truth:
        h = min(holes, key=lambda h: math.hypot(h.center_px[0] - cx, h.center_px[1] - cy))
        assert math.hypot(h.center_px[0] - cx, h.center_px[1] - cy) < 0.3
        assert abs(h.radius_px - r) / r < 0.01
        assert h.radius_um == pytest.approx(h.radius_px * 0.1)
        assert 0 < h.radius_err_um < 0.01


def test_circle_fit_exact_points():
    th = np.linspace(0, 2 * math.pi, 17, endpoint=False)
    cx, cy, r, res = fit_circle(3.2 + 7.5 * np.cos(th), -1.1 + 7.5 * np.sin(th))
    assert (cx, cy, r) == pytest.approx((3.2, -1.1, 7.5), abs=1e-9)


@pytest.mark.parametrize("kind,angle", [("square", 12.0), ("hexagonal", 47.0)])
def test_lattice_pitch_and_angle_recovered(kind, angle):
    """A square and a hexagonal lattice of holes: pitch within 0.1%, angle within 0.1 degree."""
    shape = (300, 400)
    pitch = 42.0
    pts = _grid((200.3, 150.6), pitch, angle, kind, shape, 14)
    img = _lattice_image(shape, pts, 9.0)
    holes = detect_holes(img, um_per_px=0.1, radius_um=0.9)
    assert len(holes) == len(pts)
    lat = fit_lattice(np.array([h.center_px for h in holes]))
    assert lat.kind == kind
    assert lat.pitch_px == pytest.approx(pitch, rel=1e-3)
    period = 90.0 if kind == "square" else 60.0
    assert abs((lat.angle_deg - angle + period / 2) % period - period / 2) < 0.1


def test_hidden_holes_predicted_under_a_flake():
    shape = (300, 400)
    pts = _grid((200.0, 150.0), 40.0, 0.0, "square", shape, 14)
    hidden = [p for p in pts if 150 < p[0] < 260 and 100 < p[1] < 210]
    seen = [p for p in pts if not (150 < p[0] < 260 and 100 < p[1] < 210)]
    img = _lattice_image(shape, seen, 9.0)
    holes = detect_holes(img, um_per_px=0.1, radius_um=0.9)
    lat = fit_lattice(np.array([h.center_px for h in holes]))
    flake = np.array([[145.0, 95.0], [265.0, 95.0], [265.0, 215.0], [145.0, 215.0]])
    pred = predict_hidden_holes(holes, lat, shape, [flake])
    assert len(pred) == len(hidden)
    for p in hidden:
        assert min(math.hypot(h.center_px[0] - p[0], h.center_px[1] - p[1]) for h in pred) < 0.3
    assert all(not h.detected for h in pred)
    assert len(lattice_sites(lat, shape, 9.0)) == len(pts)


def test_coverage_straight_edge_through_centre_is_half():
    """A straight flake edge through a hole's centre covers exactly half of it (geometry)."""
    r = 5.0
    poly = np.array([[10.0, -50.0], [100.0, -50.0], [100.0, 50.0], [10.0, 50.0]])
    cov = hole_coverage(poly, ((10.0, 0.0), r), um_per_px=0.2)
    assert cov.covered_fraction == pytest.approx(0.5, abs=1e-12)
    assert not cov.fully_covered
    assert cov.margin_px == pytest.approx(-r)
    assert cov.margin_um == pytest.approx(-1.0)


def test_coverage_analytic_cases():
    """Circular segment area r^2 acos(d/r) - d sqrt(r^2 - d^2) for a chord at distance d;
    a hole wholly inside with margin = distance to the nearest edge minus r; disjoint: 0."""
    r = 4.0
    big = np.array([[0.0, 0.0], [40.0, 0.0], [40.0, 30.0], [0.0, 30.0]])
    cov = hole_coverage(big, ((10.0, 12.0), r), um_per_px=0.5)
    assert cov.covered_fraction == pytest.approx(1.0, abs=1e-12)
    assert cov.fully_covered and cov.margin_px == pytest.approx(10.0 - r)
    for d in (0.7, 2.0, 3.5):
        # flake occupies x >= 20 + d; hole centred at x = 20: the covered part is the segment
        poly = np.array([[20 + d, -20.0], [60.0, -20.0], [60.0, 20.0], [20 + d, 20.0]])
        seg = r * r * math.acos(d / r) - d * math.sqrt(r * r - d * d)
        assert circle_polygon_area(poly, (20.0, 0.0), r) == pytest.approx(seg, rel=1e-12)
        # reversed orientation gives the same area
        assert circle_polygon_area(poly[::-1], (20.0, 0.0), r) == pytest.approx(seg, rel=1e-12)
    far = big + 100.0
    assert hole_coverage(far, ((10.0, 12.0), r), um_per_px=1.0).covered_fraction == 0.0
    # A triangle wholly inside the disk: its own area.
    tri = np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]])
    assert circle_polygon_area(tri, (0.2, 0.2), 10.0) == pytest.approx(0.5, rel=1e-12)


def test_signed_distance():
    sq = np.array([[0.0, 0.0], [10.0, 0.0], [10.0, 10.0], [0.0, 10.0]])
    assert signed_distance(sq, (3.0, 5.0)) == pytest.approx(3.0)
    assert signed_distance(sq, (13.0, 5.0)) == pytest.approx(-3.0)


def test_no_holes_in_a_plain_image():
    img = np.full((100, 120), 0.5, np.float32)
    img += 0.005 * np.random.default_rng(0).standard_normal(img.shape).astype(np.float32)
    assert detect_holes(img, um_per_px=0.1) == ()


def test_manual_hole_editing_and_coverage_table():
    """Holes added, moved, resized and deleted by hand; the coverage table follows."""
    from flakebook.imaging.holes import coverage_pairs, edit_holes, manual_hole

    a = manual_hole((10.0, 10.0), 3.0, um_per_px=0.1)
    b = manual_hole((50.0, 10.0), 3.0, um_per_px=0.1)
    holes = edit_holes((a,), add=(b,))
    assert len(holes) == 2 and holes[1].center_px == (50.0, 10.0)
    holes2 = edit_holes(holes, move={0: (20.0, 20.0)}, resize={1: 4.0})
    assert holes2[0].center_px == (20.0, 20.0) and holes2[1].radius_px == 4.0
    assert holes[0].center_px == (10.0, 10.0)  # input unchanged
    assert len(edit_holes(holes2, delete=(0,))) == 1
    flake = np.array([[0.0, 0.0], [40.0, 0.0], [40.0, 40.0], [0.0, 40.0]])
    pairs = coverage_pairs({7: flake}, holes2, 0.1)
    assert [(f, k) for f, k, _ in pairs] == [(7, 0)]
    assert pairs[0][2].fully_covered and pairs[0][2].margin_um == pytest.approx(1.7)
    with pytest.raises(Exception, match="hole index"):
        edit_holes(holes2, delete=(5,))
