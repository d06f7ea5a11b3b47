"""Catalogue queries, the primary terrace rule (DESIGN.md), export rows (INTERFACE.md) and the
canonical dump."""

from __future__ import annotations

import json

import pytest
from store_helpers import FIXED_CLOCK, populate, write_image

from flakebook.store import LAYER_SPACING_NM, Project


@pytest.fixture
def chip(project, tmp_path):
    s = project.add_sample("K7-north", "MoSe2", oxide_nm=285)
    i50 = project.add_image(s, write_image(tmp_path / "50x.png", 1), pixel_size_um=0.2)
    i100 = project.add_image(s, write_image(tmp_path / "100x.png", 2), pixel_size_um=0.1)
    return project, s, i50, i100


def _square(x0, y0, w):
    return [[x0, y0], [x0 + w, y0], [x0 + w, y0 + w], [x0, y0 + w]]


def test_area_comes_from_the_finest_image(chip):
    p, s, i50, i100 = chip
    f = p.add_flake(s, "K7N-001")
    p.add_appearance(f, i50, _square(0, 0, 50))  # 10 um x 10 um
    p.add_appearance(f, i100, _square(0, 0, 99))  # 9.9 um x 9.9 um
    row = p.catalogue(s)[0]
    assert row.area_um2 == pytest.approx(9.9**2)
    assert row.layers is None and row.primary_terrace_id is None
    assert len(p.appearances_of(f)) == 2


def test_primary_terrace_rule_and_latest_assignment(chip):
    """Primary terrace: the user's choice, else the one over a hole, else the largest."""
    p, s, i50, i100 = chip
    f = p.add_flake(s, "K7N-002")
    a = p.add_appearance(f, i100, _square(0, 0, 200))
    big = p.add_terrace(a, _square(0, 0, 150))
    small = p.add_terrace(a, _square(150, 150, 40))
    assert p.primary_terrace_id(f) == big.id
    p.assign(f, 5, reason="largest terrace", terrace=big)
    p.assign(f, 2, reason="membrane terrace", terrace=small)
    assert p.catalogue()[0].layers == 5
    h = p.add_hole(i100, (170, 170), 10)
    p.link_flake_hole(
        f, h, covered_fraction=1.0, fully_covered=True, margin_um=0.9, terrace_id=small.id
    )
    assert p.primary_terrace_id(f) == small.id
    row = p.catalogue()[0]
    assert (row.layers, row.manual, row.holes_covered, row.margin_um) == (2, True, 1, 0.9)
    assert [(link.margin_um, hole.id) for link, hole in p.holes_covered_by(f)] == [(0.9, h.id)]
    p.update(p.get("flake", f.id), primary_terrace_id=big.id)
    assert p.catalogue()[0].layers == 5
    assert p.latest_assignment(f).reason == "largest terrace"


def test_export_rows_follow_the_interface(chip):
    """thickness_nm = layers x layer spacing; the spacings are values from memory
    (shared REFERENCES.md: MoSe2 0.646 nm)."""
    p, s, i50, i100 = chip
    f1 = p.add_flake(s, "K7N-010")
    p.add_appearance(f1, i100, _square(0, 0, 100))
    p.add_assignment(f1, 3, probability=0.88, method="combined-posterior")
    f2 = p.add_flake(s, "K7N-011")
    p.assign(f2, 2, reason="shear mode")
    p.add_thermometry_result(
        f2,
        layers=2,
        thickness_nm=1.25,
        kappa_w_mk=35.0,
        kappa_p16_w_mk=30.0,
        kappa_p84_w_mk=41.0,
        method="t",
    )
    f3 = p.add_flake(s, "K7N-012")
    p.add_external_result(f3, kappa_w_mk=20.0, kappa_p16_w_mk=18.0, kappa_p84_w_mk=23.0)
    rows = {r["flake_id"]: r for r in p.export_rows()}
    assert list(rows["K7N-010"]) == [
        "flake_id",
        "sample",
        "area_um2",
        "layers",
        "probability",
        "holes_covered",
        "thickness_nm",
        "kappa_w_mk",
        "kappa_p16_w_mk",
        "kappa_p84_w_mk",
        "stale",
    ]
    assert rows["K7N-010"]["thickness_nm"] == pytest.approx(3 * 0.646)
    assert rows["K7N-010"]["area_um2"] == pytest.approx(100.0)
    assert rows["K7N-010"]["probability"] == 0.88 and rows["K7N-010"]["kappa_w_mk"] is None
    assert rows["K7N-011"]["thickness_nm"] == 1.25, "the result's own thickness wins"
    assert (rows["K7N-011"]["kappa_p16_w_mk"], rows["K7N-011"]["kappa_p84_w_mk"]) == (30.0, 41.0)
    assert rows["K7N-012"]["kappa_w_mk"] == 20.0 and rows["K7N-012"]["layers"] is None
    assert LAYER_SPACING_NM["MoS2"] == 0.615


def test_queries_of_a_flake(tmp_path):
    p = Project.create(tmp_path / "q", clock=lambda: FIXED_CLOCK)
    made = populate(p, tmp_path)
    f = made["flake"]
    assert [s.id for s in p.spectra_of(f)] == [made["spectrum"].id]
    assert p.spectra_of(f, "pl") == []
    assert [e.id for e in p.evidence_of(f, made["terrace"])] == [made["evidence"].id]
    assert len(p.assignments_of(f)) == 2 and p.latest_assignment(f).manual
    series, results = p.thermometry_of(f)
    assert [s.id for s in p.spectra_of_series(series[0])] == [made["spectrum"].id]
    assert results[0].kappa_w_mk == 42.0
    assert p.find_flake("K7N-α01").id == f.id and p.find_flake(str(f.id)).id == f.id
    bundle = p.handoff_bundle(["K7N-α01"])
    json.dumps(bundle)
    assert bundle["flakes"][0]["holes"][0]["radius_err_um"] == 0.05
    p.close()


def test_canonical_dump_is_deterministic(tmp_path):
    """Two projects built the same way with a fixed clock in different folders dump equal."""
    dumps = []
    for name in ("one", "two"):
        folder = tmp_path / name
        folder.mkdir()
        p = Project.create(folder / "c", clock=lambda: FIXED_CLOCK, user="demo")
        populate(p, folder)
        dumps.append(json.dumps(p.canonical_dump(), sort_keys=True))
        p.close()
    assert dumps[0] == dumps[1]
    one = json.loads(dumps[0])
    assert one["tables"]["spectra"]["rows"][0][-1]["bytes"] == 8 + 8 + 1600 * 8
    p = Project.create(tmp_path / "clock", user="demo")
    no_ts = p.canonical_dump(include_timestamps=False)
    assert "created_at" not in json.dumps(no_ts["tables"]["meta"])
    p.close()


def test_polygon_area_of_a_regular_polygon():
    """Shoelace area of a regular n-gon of circumradius r equals (n/2) r^2 sin(2 pi / n)
    (elementary geometry, common practice, no source)."""
    import numpy as np

    from flakebook.store.records import polygon_area

    n, r = 24, 3.7
    a = np.linspace(0, 2 * np.pi, n, endpoint=False)
    pts = np.c_[r * np.cos(a) + 5, r * np.sin(a) - 2]
    assert polygon_area(pts) == pytest.approx(n / 2 * r**2 * np.sin(2 * np.pi / n), rel=1e-12)
    assert polygon_area(pts[::-1]) == pytest.approx(polygon_area(pts), rel=1e-12)
