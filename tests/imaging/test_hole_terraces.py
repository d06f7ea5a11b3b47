"""A demo-like flake over holes keeps its drawn layer number, over a hole as around it.

The scene is the demo's flake K7S-02 (drawn with 2 layers and a 4-layer step, over one hole
fully, over a second in part (about 18% by its drawn polygon), and with its edge running 2.6 px
outside a third hole's rim), rendered by the demo's own thin-film renderer. Truth comes from the
drawing (the layer number and the polygon put into it), not from the survey. Invented data (the
demo's scenario); the covered fractions are checked against a fine-grid rasterisation of the
drawn polygon (common practice, no source).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from flakebook import demo
from flakebook.imaging.survey import survey_image
from flakebook.imaging.terraces import terrace_groups
from flakebook.optics.microscope import Microscope
from flakebook.optics.substrate import Hole as OpticsHole

from .synth import disk_coverage, polygon_coverage


@pytest.fixture(scope="module")
def scene():
    fl = next(f for f in demo.FLAKES if f.label == "K7S-02")
    view = demo.View("t", fl.sample, "50x", fl.center_um, 800, 600)
    img = demo.render_view(view, (fl,), np.random.default_rng(7))
    res = survey_image(
        img,
        material=demo.MATERIAL,
        substrate=f"SiO2:{demo.OXIDE_NM:g},Si",
        microscope=Microscope(na_illumination=demo.NA_ILLUMINATION),
        scale_um_per_px=view.um_per_px,
        hole_radius_um=demo.HOLE_DIAMETER_UM / 2,
        hole=OpticsHole("au", demo.HOLE_DEPTH_NM),
        dark_offset=demo.DARK_OFFSET,
    )
    poly_px = view.to_px(demo.flake_polygon_um(fl))
    centre = view.to_px(np.array([fl.center_um]))[0]
    return fl, view, res, poly_px, centre


def _main_flake(res, centre):
    fid = int(res.segmentation.flake_labels[int(round(centre[1])), int(round(centre[0]))])
    assert fid > 0, "the demo flake was not found"
    return fid


def test_suspended_parts_join_the_terrace_around_them_and_keep_its_layer_number(scene):
    fl, _, res, _, centre = scene
    fid = _main_flake(res, centre)
    by_id = {r.region.id: r for r in res.regions}
    groups = [[by_id[i] for i in g] for g in terrace_groups(res)]
    mine = [g for g in groups if g[0].region.flake_id == fid]
    suspended = [r for g in mine for r in g if r.geometry == "suspended"]
    assert len(suspended) >= 2, "the full and the partly covered hole should both be suspended"
    for g in mine:
        if any(r.geometry == "suspended" for r in g):
            # No lone suspended sliver: each joins a supported region of the drawn N.
            assert g[0].geometry == "supported"
            assert g[0].layers == fl.layers
    # The flake's largest terrace, which carries the suspended parts, has the drawn N.
    largest = max(mine, key=lambda g: g[0].region.area_um2)
    assert largest[0].layers == fl.layers
    assert any(r.geometry == "suspended" for r in largest)


def test_coverage_only_where_the_drawn_flake_reaches_into_a_hole(scene):
    _, view, res, poly_px, centre = scene
    fid = _main_flake(res, centre)
    shape = (view.height_px, view.width_px)
    flake = polygon_coverage(shape, poly_px, ss=8)
    found = {c.hole_index: c.coverage for c in res.coverage if c.flake_id == fid}
    r_px = demo.HOLE_DIAMETER_UM / 2 / view.um_per_px
    for k, h in enumerate(res.holes):
        disk = disk_coverage(shape, h.center_px[0], h.center_px[1], r_px, ss=8)
        truth = float((disk * flake).sum() / (math.pi * r_px**2))
        got = found[k].covered_fraction if k in found else 0.0
        # Within 0.02 of the drawn fraction; a hole the flake does not reach is not covered.
        assert got == pytest.approx(truth, abs=0.02), (k, h.center_px, truth, got)
        if truth == 0.0:
            assert k not in found, (k, h.center_px)
