"""Coverage of holes by flakes in surveyed images, small holes, suspended parts in monochrome
images and the acceptance of a hole lattice.

The scenes are drawn with the optics model (tests/imaging/scenes.py); the coverage truths come
from the drawn geometry, rasterised on a fine grid (tests/imaging/synth.py: 8 x 8 supersampled
disk, 4 x 4 supersampled polygon) or from the distance of a hole's centre to a straight edge,
never from the code under test (common practice, no source).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from flakebook.imaging.holes import detect_holes, fit_lattice
from flakebook.imaging.io import from_array
from flakebook.imaging.survey import survey_image

from .scenes import micrograph, model
from .synth import disk_coverage, polygon_coverage

UM_PER_PX = 0.1
# Bare holes in the corners (each with bare substrate around it), irregularly placed.
CORNER_HOLES = [(330.0, 30.0, 16.0), (330.0, 270.0, 16.0), (30.0, 270.0, 16.0)]


def _u16(lin):
    if lin.shape[-1] == 1:
        lin = lin[..., 0]
    return from_array(np.clip(np.round(lin * 65535), 0, 65535).astype(np.uint16))


def _survey(img, mono_nm=None, **kw):
    mat, sub, mic, _, _ = model(mono_nm=mono_nm)
    return survey_image(
        img,
        material=mat,
        substrate=sub,
        microscope=mic,
        scale_um_per_px=UM_PER_PX,
        min_area_um2=20,
        dark_offset=0.02,
        **kw,
    )


def _true_fraction(shape, poly, hole):
    """Covered fraction of a disk by a polygon on a fine grid (drawn geometry)."""
    d = disk_coverage(shape, *hole, ss=8)
    p = polygon_coverage(shape, poly, ss=4)
    return float((d * p).sum() / d.sum())


def _pair(res, near):
    (flake,) = res.flakes
    pairs = [c for c in res.coverage if c.flake_id == flake.id]
    hx, hy = near
    hits = [
        c
        for c in pairs
        if math.hypot(
            res.holes[c.hole_index].center_px[0] - hx, res.holes[c.hole_index].center_px[1] - hy
        )
        < 3
    ]
    assert hits, f"no coverage pair for the hole at {near}: {[c.to_dict() for c in pairs]}"
    return hits[0].coverage


@pytest.mark.parametrize("mono_nm", [None, 550.0])
def test_flake_edge_through_a_hole_covers_about_half(mono_nm):
    """A slanted flake edge running through a hole's centre: the pair is reported, about half
    covered, not fully covered, and the margin (how far the flake falls short) is about minus
    the distance from the edge to the hole's far side: -(r - s) with s the signed distance of
    the centre to the edge (here s ~ 0, so about -r)."""
    shape = (300, 360)
    hole = (150.0, 150.0, 16.0)
    # Edge through (150, 150) inclined by atan(0.2); the flake lies to its right.
    poly = [[150.0 - 0.2 * 110, 40.0], [320.0, 40.0], [320.0, 260.0], [150.0 + 0.2 * 110, 260.0]]
    lin = micrograph(
        shape,
        [(polygon_coverage(shape, poly), 2)],
        holes=[hole, *CORNER_HOLES],
        noise=0.01,
        seed=4,
        mono_nm=mono_nm,
        # A bare hole is about 3.7 times brighter than the substrate at 550 nm: exposed so
        # that it does not saturate.
        substrate=None if mono_nm is None else (0.2,),
    )
    res = _survey(_u16(lin), mono_nm=mono_nm, hole_radius_um=1.6)
    cov = _pair(res, hole[:2])
    truth = _true_fraction(shape, poly, hole)
    assert truth == pytest.approx(0.5, abs=0.01)
    assert cov.covered_fraction == pytest.approx(truth, abs=0.1)
    assert not cov.fully_covered
    # The centre lies on the edge: the flake falls short by about one radius.
    assert cov.margin_um == pytest.approx(-hole[2] * UM_PER_PX, abs=0.3)
    # The suspended part is a terrace of its own, over the hole.
    over = [r for r in res.regions if r.geometry == "suspended"]
    assert over, "the suspended part of the flake was not segmented"


@pytest.mark.parametrize("mono_nm", [None, 550.0])
def test_flake_over_a_hole_with_a_wide_margin(mono_nm):
    """A rectangle whose nearest edge lies 61 px from a 16 px hole's centre: margin 4.5 um
    (distance to the nearest side minus the radius), fully covered; the suspended part is
    segmented in colour and in a monochrome (550 nm bandpass) image alike."""
    shape = (300, 360)
    hole = (120.0, 150.0, 16.0)
    poly = [[59.0, 60.0], [300.0, 60.0], [300.0, 250.0], [59.0, 250.0]]
    margin_um = (min(120 - 59, 300 - 120, 150 - 60, 250 - 150) - 16) * UM_PER_PX
    assert margin_um == pytest.approx(4.5)
    lin = micrograph(
        shape,
        [(polygon_coverage(shape, poly), 3)],
        holes=[hole, *CORNER_HOLES],
        noise=0.01,
        seed=5,
        mono_nm=mono_nm,
        # A bare hole is about 3.7 times brighter than the substrate at 550 nm: exposed so
        # that it does not saturate.
        substrate=None if mono_nm is None else (0.2,),
    )
    res = _survey(_u16(lin), mono_nm=mono_nm)
    cov = _pair(res, hole[:2])
    assert cov.fully_covered and cov.covered_fraction == pytest.approx(1.0)
    assert cov.margin_um == pytest.approx(4.5, abs=0.3)
    over = [r for r in res.regions if r.geometry == "suspended"]
    assert len(over) == 1, "the suspended part of the flake was not segmented"
    x, y = over[0].region.centroid_px
    assert math.hypot(x - hole[0], y - hole[1]) < 2
    assert over[0].layers == 3 or 3 in over[0].ambiguous_with


def _jittered_square(n_side, pitch, jitter_rel, seed):
    rng = np.random.default_rng(seed)
    pts = []
    for i in range(n_side[0]):
        for j in range(n_side[1]):
            a = rng.uniform(0, 2 * math.pi)
            pts.append(
                [
                    100 + j * pitch + jitter_rel * pitch * math.cos(a),
                    80 + i * pitch + jitter_rel * pitch * math.sin(a),
                ]
            )
    return np.array(pts)


@pytest.mark.parametrize("seed", range(5))
def test_lattice_needs_six_holes_within_five_percent_of_the_pitch(seed):
    """Eight holes (2 x 4 square) each displaced by 10% of the pitch in a random direction give
    no lattice (the rms residual, about 7% of the pitch, would predict holes that are not
    there); displaced by 2% they give one with the drawn pitch; five holes give none."""
    pitch = 60.0
    assert fit_lattice(_jittered_square((2, 4), pitch, 0.10, seed)) is None
    lat = fit_lattice(_jittered_square((2, 4), pitch, 0.02, seed))
    assert lat is not None and lat.kind == "square"
    assert lat.pitch_px == pytest.approx(pitch, rel=0.02)
    assert lat.residual_px < 0.05 * pitch
    assert fit_lattice(_jittered_square((1, 5), pitch, 0.0, seed)) is None


def test_four_irregular_holes_give_no_lattice_and_say_so():
    """Four holes at irregular places: no lattice, no predicted holes, and a warning saying
    why."""
    shape = (300, 360)
    poly = [[60.0, 60.0], [300.0, 70.0], [290.0, 240.0], [70.0, 230.0]]
    holes = [(110.0, 110.0, 16.0), *CORNER_HOLES]
    lin = micrograph(shape, [(polygon_coverage(shape, poly), 2)], holes=holes, noise=0.01, seed=9)
    res = _survey(_u16(lin), hole_radius_um=1.6)
    assert res.lattice is None
    assert all(h.detected for h in res.holes)
    assert any("lattice" in w for w in res.warnings)


@pytest.mark.parametrize("radius_px", [6.0, 15.0])
def test_small_holes_found_by_the_default_search_on_a_coarse_working_grid(radius_px):
    """Holes of 6 and 15 px radius (0.6 and 1.5 um at 0.1 um/px) found without a radius hint
    when the survey's working grid is 6 times coarser than the image (a 20 MP image), with the
    radius within 5%."""
    from flakebook.imaging import _grid

    shape = (480, 720)
    centres = [(120.3, 110.6), (400.2, 130.9), (610.7, 360.4), (250.5, 380.1)]
    img = np.full(shape, 0.8)
    for cx, cy in centres:
        frac = disk_coverage(shape, cx, cy, radius_px)
        img = img * (1 - frac) + 0.35 * frac
    img = img * (1 + 0.01 * np.random.default_rng(2).standard_normal(shape))
    m = from_array(np.round(np.stack([img] * 3, axis=-1) * 50000).astype(np.uint16))
    holes = detect_holes(m, um_per_px=UM_PER_PX, work=m.working(6), factor=6)
    assert len(holes) == len(centres)
    for cx, cy in centres:
        h = min(holes, key=lambda h: math.hypot(h.center_px[0] - cx, h.center_px[1] - cy))
        assert math.hypot(h.center_px[0] - cx, h.center_px[1] - cy) < 0.5
        assert h.radius_px == pytest.approx(radius_px, rel=0.05)
    assert _grid.choose_factor((3648, 5472)) == 6
