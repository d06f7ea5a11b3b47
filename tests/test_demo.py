"""The demo campaign: regenerating it gives the committed sample project, and the survey of its
rendered micrographs recovers the layer numbers they were rendered with."""

from __future__ import annotations

import hashlib
import math
from pathlib import Path

import pytest

from flakebook import demo
from flakebook.store import Project

SAMPLE = Path(__file__).resolve().parent.parent / "sample_project"


def _hashes(folder: Path) -> dict[str, str]:
    out = {}
    for sub in ("images", "spectra"):
        for f in sorted((folder / sub).iterdir()):
            out[f"{sub}/{f.name}"] = hashlib.sha256(f.read_bytes()).hexdigest()
    return out


def _close(a, b, path="") -> None:
    """Equal structures, floats to a relative 1e-9 (the same code on another BLAS build)."""
    if isinstance(a, float) and isinstance(b, float):
        assert math.isclose(a, b, rel_tol=1e-9, abs_tol=1e-12), f"{path}: {a} != {b}"
    elif isinstance(a, dict) and isinstance(b, dict):
        assert a.keys() == b.keys(), path
        for k in a:
            _close(a[k], b[k], f"{path}.{k}")
    elif isinstance(a, list) and isinstance(b, list):
        assert len(a) == len(b), f"{path}: {len(a)} rows != {len(b)}"
        for i, (x, y) in enumerate(zip(a, b)):
            _close(x, y, f"{path}[{i}]")
    else:
        assert a == b, f"{path}: {a!r} != {b!r}"


@pytest.fixture(scope="module")
def fresh(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("demo")
    demo.build_demo(folder)
    return folder


def test_regenerating_gives_the_committed_sample_project(fresh):
    """Common practice, no source: the demo is deterministic (canonical rows and file hashes,
    not SQLite bytes)."""
    committed = SAMPLE / demo.PROJECT_NAME
    assert committed.exists(), "sample_project/ is missing; run: flakebook demo sample_project"
    with (
        Project.open(committed, read_only=True) as a,
        Project.open(fresh / demo.PROJECT_NAME, read_only=True) as b,
    ):
        dump_a, dump_b = a.canonical_dump(), b.canonical_dump()
    # Which flakebook wrote the rows is not content.
    for d in (dump_a, dump_b):
        d["tables"]["meta"]["rows"] = [
            r for r in d["tables"]["meta"]["rows"] if r[0] != "created_with"
        ]
    _close(dump_a, dump_b)
    assert _hashes(SAMPLE) == _hashes(fresh)


def test_survey_recovers_rendered_layer_numbers(fresh):
    """The demo's micrographs are rendered from the contrast model with known N; the survey of
    those images must give every flake's rendered N back as the most likely, with probability above 0.6
    (the published n,k sets disagree beyond 4 layers, so thick flakes stay uncertain; a closed loop through
    rendering, 8-bit sRGB encoding, noise, vignetting and the dark offset). The contrast evidence
    of the primary terrace alone is checked (the assignment combines it with the spectra)."""
    from flakebook.evidence import combine
    from flakebook.pipeline import CONTRAST_METHOD

    with Project.open(fresh / demo.PROJECT_NAME, read_only=True) as p:
        for f in demo.FLAKES:
            flake = p.find_flake(f.label)
            primary = p.primary_terrace_id(flake)
            contrast = [
                e
                for e in p.evidence_of(flake, primary)
                if e.method == CONTRAST_METHOD and e.parameters.get("objective") == "50x"
            ]
            assert contrast, f.label
            post = combine([contrast[0].likelihood])
            assert post.layers == f.rendered_layers, (f.label, post)
            assert post.probability > 0.6, (f.label, post)


def test_spectra_are_fitted_and_combined_with_an_honest_conflict(fresh):
    """Every flake's assignment combines its contrast, Raman and PL evidence and gives the N
    the flake was drawn with; the flake on the residue (contrast 3L) shows the conflict with
    its low-frequency spectrum (2L), and the manual assignment records the bilayer. The drawn
    lines are invented; the rule table is the published one (resources/raman_rules)."""
    from flakebook.pipeline_spectra import category, flake_report

    with Project.open(fresh / demo.PROJECT_NAME, read_only=True) as p:
        assert not p.stale_records()
        for f in demo.FLAKES:
            flake = p.find_flake(f.label)
            report, recs = flake_report(p, flake)
            assert {"contrast", "Raman", "PL"} <= {category(r) for r in recs}, f.label
            assert p.spectrum_fits_of_flake(flake), f.label
            if f.looks_like is None:
                assert report.posterior.layers == f.layers, (f.label, report.posterior)
                assert not report.conflicts, (f.label, report.conflicts)
        flake = p.find_flake("K7N-02")
        report, _ = flake_report(p, flake)
        assert any(c.a == "contrast" for c in report.conflicts)
        modes = {c.method.split(": ")[1].split(" (")[0] for c in report.contributions[1:]}
        assert {"shear mode", "breathing mode"} <= modes
        latest = p.latest_assignment(flake)
        assert latest.manual and latest.layers == 2 and "shear mode" in latest.reason


def test_demo_has_every_kind_of_record(fresh):
    """Issue 2: the demo holds every kind of record."""
    with Project.open(fresh / demo.PROJECT_NAME, read_only=True) as p:
        counts = p.info()["counts"]
    for kind, n in counts.items():
        assert n > 0, f"the demo has no {kind} records"


def test_raman_map_reads_the_layers_of_the_terraces_it_covers(fresh):
    """The demo's Raman map over K7N-01 is stored on its 50x micrograph, and the program's fits
    read the layer numbers its spectra were drawn with: the flake's monolayer (B2g(1) absent in
    1L, Tonndorf et al., Opt. Express 21, 4908 (2013)) and its thicker terrace, and the bare
    substrate around stays empty. The truth is the demo's own terrace layer numbers
    (demo.terrace_layers_at, given to the spectrum drawing); the layer numbers are the fits'.
    Interior pixels only (all 3 x 3 neighbours of one class): at an edge the laser spot sees
    both sides."""
    import cv2
    import numpy as np

    from flakebook.pipeline_maps import empty_mask, find_image

    flake = next(f for f in demo.FLAKES if f.label == demo.MAP_FLAKE)
    with Project.open(fresh / demo.PROJECT_NAME, read_only=True) as p:
        (rec,) = p.raman_maps_of()
        image = find_image(p, f"{demo.MAP_FLAKE}_50x")
        assert rec.image_id == image.id and rec.flakebook_version and rec.settings["laser_nm"]
        layers, empty = rec.quantity("layers"), empty_mask(rec)
        # placed by the image's stage position: the map's chip coordinates land on the pixels
        # where the micrograph was rendered (demo.View.to_px)
        view = next(v for v in [demo.View("v", flake.sample, "50x", flake.center_um, 800, 600)])
        px = view.to_px(np.array([[rec.x_um[0], rec.y_um[0]]]))[0]
        s = image.pixel_size_um
        assert (rec.offset_x_um + rec.x_um[0]) / s == pytest.approx(px[0], abs=1e-6)
        assert (rec.offset_y_um + rec.y_um[0]) / s == pytest.approx(px[1], abs=1e-6)
    gx, gy = np.meshgrid(rec.x_um, rec.y_um)
    truth = demo.terrace_layers_at(flake, np.column_stack([gx.ravel(), gy.ravel()]))
    truth = truth.reshape(layers.shape)
    kernel = np.ones((3, 3), np.uint8)
    for n in (0, flake.layers, flake.step_layers):
        inner = cv2.erode((truth == n).astype(np.uint8), kernel) > 0
        assert inner.sum() >= 20, f"the map covers too little of {n}L"
        if n == 0:
            assert np.all(empty[inner]), "bare substrate is empty, never a layer number"
        else:
            read = np.where(empty, 0, layers)[inner]
            assert np.mean(read == n) >= 0.97, (n, np.unique(read, return_counts=True))
