"""Raman maps in a project (flakebook.pipeline_maps): a stale map is refitted from its file by
``recompute``, a changed file keeps it stale, and the placement convention puts the map's
chip coordinates on the pixels flakebook.imaging.linking.to_chip_um gives (common practice, no
source; the map is drawn with MoSe2 lines near the values of Tonndorf et al., Opt. Express 21,
4908 (2013), values from memory as in the rule table)."""

from __future__ import annotations

import cv2
import numpy as np
import pytest

from flakebook import pipeline_maps as pm
from flakebook.imaging.linking import to_chip_um
from flakebook.spectra.io import read_map
from flakebook.store import Project


def lorentz(x, c, fwhm, h):
    return h / (1 + ((x - c) / (fwhm / 2)) ** 2)


def write_map(path, seed=3):
    rng = np.random.default_rng(seed)
    x = np.linspace(200.0, 560.0, 600)
    lines = ["# laser: 532 nm", "#flakebook-map x_unit=cm1 kind=raman"]
    lines.append("spectral_axis " + " ".join(f"{v:.3f}" for v in x))
    for j in range(3):
        for i in range(4):
            y = 120 + lorentz(x, 520.7, 3.5, 900) + rng.normal(0, 4, x.size)
            if i:
                y = y + lorentz(x, 241.0, 3.5, 900) + lorentz(x, 287.0, 4, 120)
            lines.append(f"{10 + i} {-5 + j} " + " ".join(f"{v:.2f}" for v in y))
    path.write_text("\n".join(lines) + "\n")
    return path


@pytest.fixture
def project(tmp_path):
    img = tmp_path / "a.png"
    cv2.imwrite(str(img), np.full((60, 80, 3), 128, np.uint8))
    path = tmp_path / "p.flakebook"
    with Project.create(path) as p:
        s = p.add_sample("K9", "MoSe2", oxide_nm=285)
        p.add_image(s, img, pixel_size_um=0.5, width_px=80, height_px=60, stage_x_um=12.0,
                    stage_y_um=-3.0)  # fmt: skip
    return path


def test_stale_map_is_refitted_from_its_file(tmp_path, project):
    file = write_map(tmp_path / "m.txt")
    with Project.open(project) as p:
        got = pm.store_map(p, 1, read_map(file), image=1, source_path=file)
        first = got.record
        p.update(first, stale=True)
        report = p.recompute_stale()
        again = p.get("raman_map", first.id)
        assert not again.stale and ("raman_map", first.id) in report.recomputed
        assert np.array_equal(again.maps, first.maps, equal_nan=True)
        assert np.all(again.quantity("layers")[:, 1:] == 1)
        file.write_text(file.read_text().replace("0.00 ", "1.00 ", 1))
        p.update(again, stale=True)
        report = p.recompute_stale()
        assert p.get("raman_map", first.id).stale, "a changed file is not silently refitted"
        assert any("changed" in why for _, _, why in report.failed)


def test_placement_by_stage_matches_the_chip_frame(tmp_path, project):
    """Without an offset the map's positions are chip coordinates: pixel (px, py) of a map
    point, turned back by to_chip_um, gives the point."""
    file = write_map(tmp_path / "m.txt")
    with Project.open(project) as p:
        rec = pm.store_map(p, 1, read_map(file), image=1).record
        image = p.get("image", 1)
    s = image.pixel_size_um
    pts = np.array([[rec.x_um[0], rec.y_um[0]], [rec.x_um[-1], rec.y_um[-1]]])
    px = (pts + [rec.offset_x_um, rec.offset_y_um]) / s
    back = to_chip_um(px, um_per_px=s, stage_um=(12.0, -3.0), shape=(60, 80))
    assert np.allclose(back, pts)
    assert pm.placement_warnings(rec, image) == []
