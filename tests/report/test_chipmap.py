"""The chip map of the demo campaign: flakes, holes and images where the scenario put them.

The truth is the demo scenario's own chip coordinates (flakebook.demo.PIECES centres and the
K7-south hole lattice, pitch 12 um with a hole at the origin), from which the micrographs were
rendered; the map reaches the chip only through the images' stage positions and pixel sizes.
"""

from __future__ import annotations

import numpy as np
import pytest

from flakebook import demo
from flakebook.errors import InputError
from flakebook.report.chipmap import chip_map
from flakebook.store import Project


@pytest.fixture(scope="module")
def project(tmp_path_factory):
    path = demo.build_demo(tmp_path_factory.mktemp("demo") / "k7")
    p = Project.open(path)
    yield p
    p.close()


@pytest.mark.parametrize("sample", ["K7-north", "K7-south"])
def test_every_flake_lies_where_the_scenario_put_it(project, sample):
    m = chip_map(project, sample)
    # every piece drawn on the chip, the bulk pieces beside the thin flakes too
    truth = {f.label: f.center_um for f in demo.PIECES if f.sample == sample}
    assert {f.label for f in m.flakes} == set(truth)
    widths = {im.image_id: im.width_um for im in m.images}
    for f in m.flakes:
        dist = np.hypot(*(np.subtract(f.centroid_um, truth[f.label])))
        assert dist < widths[f.image_id], f"{f.label} placed {dist:.1f} um off"
        # and closer than the flake's own size: the outline is on the flake, not just the frame
        radius = next(d.radius_um for d in demo.PIECES if d.label == f.label)
        assert dist < 2 * radius, f"{f.label} placed {dist:.1f} um off"
    layers = {d.label: d.layers for d in demo.FLAKES}
    assigned = [f for f in m.flakes if f.layers is not None and f.label in layers]
    assert assigned and sum(f.layers == layers[f.label] for f in assigned) >= len(assigned) - 1
    # a bulk piece (30 layers and more) is on the map in the "more than N_max" bin
    bulk = {d.label for d in demo.BULK_PIECES if d.sample == sample}
    for f in m.flakes:
        if f.label in bulk:
            assert f.layers is not None and f.layers > 15, (f.label, f.layers)


def test_holes_fall_on_the_lattice(project):
    m = chip_map(project, "K7-south")
    assert len(m.holes) > 10
    pitch = demo.HOLE_PITCH_UM
    for h in m.holes:
        off = np.hypot(
            h.x_um - pitch * round(h.x_um / pitch), h.y_um - pitch * round(h.y_um / pitch)
        )
        assert off < 1.5, f"hole {h.hole_id} at ({h.x_um:.1f}, {h.y_um:.1f}) is off the lattice"
        assert h.radius_um == pytest.approx(demo.HOLE_DIAMETER_UM / 2, rel=0.25)


def test_image_without_stage_position_is_listed(project, tmp_path):
    sample = project.sample_by_name("K7-north")
    first = project.images_of(sample)[0]
    with project.transaction():
        extra = project.add_image(
            sample, project.image_file(first), pixel_size_um=first.pixel_size_um,
            width_px=first.width_px, height_px=first.height_px,
        )  # fmt: skip
    try:
        m = chip_map(project, "K7-north")
        assert extra.path.rsplit("/", 1)[-1] in m.unplaced_images
        assert extra.id not in {im.image_id for im in m.images}
    finally:
        project.delete(extra)


def test_unknown_sample_names_the_accepted_ones(project):
    with pytest.raises(InputError, match="K7-north"):
        chip_map(project, "K9")
