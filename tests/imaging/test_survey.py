"""Survey of synthetic micrographs rendered from the optics model with known layer numbers.

The images are drawn with flakebook's thin-film model (flakebook.optics) with noise, vignetting,
a dark offset and JPEG compression; the truth is the layer number each flake was drawn with
(common practice, no source: a self-consistency check of the imaging chain, segmentation and
contrast measurement; the optics model itself is checked against tmm and published values in
tests/optics).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from flakebook.errors import InputError
from flakebook.imaging.io import from_array
from flakebook.imaging.survey import survey_image

from .scenes import flake_grid, jpeg_rgb, micrograph, model

SHAPE = (384, 636)
LAYERS = [1, 2, 3, 4, 5] * 4  # 20 flakes per image


def _match(result, truth):
    """Each true flake's region (the largest region near its centre), or None."""
    out = []
    for cx, cy, n in truth:
        near = [
            r
            for r in result.regions
            if math.hypot(r.region.centroid_px[0] - cx, r.region.centroid_px[1] - cy) < 15
        ]
        out.append((max(near, key=lambda r: r.region.area_um2) if near else None, n))
    return out


def _survey(img, oxide_err_nm=0.0, **kw):
    mat, sub, mic, _, _ = model()
    return survey_image(
        img,
        material=mat,
        substrate=sub,
        microscope=mic,
        scale_um_per_px=0.1,
        min_area_um2=20,
        dark_offset=0.02,
        oxide_err_nm=oxide_err_nm,
        **kw,
    )


@pytest.mark.parametrize("encoding", ["png16", "jpeg"])
def test_layers_right_in_98_percent(encoding):
    """Every 1-5 layer flake above the minimum area is found and its N is right in >= 98% of
    regions at 2% per-pixel noise, with vignetting, a dark offset and (second case) JPEG."""
    flakes, truth = flake_grid(SHAPE, LAYERS, seed=11 if encoding == "jpeg" else 5)
    lin = micrograph(SHAPE, flakes, noise=0.02, seed=2)
    if encoding == "png16":
        img = from_array(np.clip(np.round(lin * 65535), 0, 65535).astype(np.uint16))
    else:
        img = from_array(jpeg_rgb(lin))
    res = _survey(img)
    pairs = _match(res, truth)
    assert all(r is not None for r, _ in pairs), "a flake was not found"
    right = sum(r.layers == n for r, n in pairs)
    assert right >= math.ceil(0.98 * len(pairs))
    assert not any("fit no layer number" in w for w in res.warnings)
    # Ranked by the probability of 1-3 layers: every 1-3 layer flake before every 4-5 one.
    order = [r.id for r in res.regions]
    ranks = {r.id: order.index(r.id) for r, _ in pairs}
    thin = max(ranks[r.id] for r, n in pairs if n <= 3)
    thick = min(ranks[r.id] for r, n in pairs if n > 3)
    assert thin < thick


def test_mismatched_oxide_is_right_or_ambiguous():
    """Rendered on 295 nm oxide, surveyed as 285 +- 10 nm: every region is right or reported
    ambiguous (the true N among ambiguous_with), never confidently wrong."""
    flakes, truth = flake_grid(SHAPE, LAYERS, seed=8)
    lin = micrograph(SHAPE, flakes, oxide_nm=295.0, noise=0.02, seed=4)
    img = from_array(np.clip(np.round(lin * 65535), 0, 65535).astype(np.uint16))
    res = _survey(img, oxide_err_nm=10.0)
    for r, n in _match(res, truth):
        assert r is not None
        assert r.layers == n or n in r.ambiguous_with, (n, r.layers, r.probability)
    # Surveyed as exactly 285 nm (no stated uncertainty): the image as a whole is flagged,
    # either because regions fit no layer number or because their N hangs on the exact oxide.
    exact = _survey(img, oxide_err_nm=0.0)
    assert any(
        "fit no layer number" in w or "oxide thickness is taken as exact" in w
        for w in exact.warnings
    ), exact.warnings


def test_terraces_and_suspended_region_over_a_hole():
    """A flake of two terraces (2 and 4 layers) over a hole: three regions, the one over the hole
    evaluated with the suspended model and right; coverage of the hole is full."""
    shape = (300, 360)
    from .synth import polygon_coverage

    outer = [[60, 60], [300, 70], [290, 240], [70, 230]]
    right = [[180, 60], [300, 70], [290, 240], [180, 235]]
    flakes = [(polygon_coverage(shape, outer), 2), (polygon_coverage(shape, right), 4)]
    holes = [(110.0, 110.0, 16.0), (330.0, 30.0, 16.0), (330.0, 270.0, 16.0), (30.0, 270.0, 16.0)]
    lin = micrograph(shape, flakes, holes=holes, noise=0.01, seed=9)
    res = _survey(
        from_array(np.clip(np.round(lin * 65535), 0, 65535).astype(np.uint16)), hole_radius_um=1.6
    )
    assert len(res.flakes) == 1
    assert sum(h.detected for h in res.holes) == 4
    by_pos = {}
    for r in res.regions:
        x, y = r.region.centroid_px
        key = "hole" if math.hypot(x - 110, y - 110) < 8 else ("left" if x < 180 else "right")
        by_pos[key] = r
    assert by_pos["hole"].geometry == "suspended" and by_pos["hole"].layers == 2
    assert by_pos["left"].geometry == "supported" and by_pos["left"].layers == 2
    assert by_pos["right"].layers == 4
    covs = [c for c in res.coverage if c.flake_id == res.flakes[0].id]
    (cov,) = covs
    h = res.holes[cov.hole_index]
    assert math.hypot(h.center_px[0] - 110, h.center_px[1] - 110) < 0.5
    assert cov.coverage.fully_covered
    assert cov.coverage.margin_um == pytest.approx((110 - 16 - 63) * 0.1, abs=0.3)
    d = res.to_dict()
    assert {"path", "regions", "holes", "warnings"} <= set(d)
    assert {
        "id",
        "centroid_px",
        "area_um2",
        "contrast",
        "contrast_err",
        "layers",
        "probability",
        "ambiguous_with",
        "likelihood",
    } <= set(d["regions"][0])
    assert {"center_px", "radius_px", "radius_um", "radius_err_um"} <= set(d["holes"][0])
    assert len(d["regions"][0]["likelihood"]) == 16
    # DESIGN.md: the primary terrace is the one over a hole.
    assert d["flakes"][0]["primary_region_id"] == by_pos["hole"].id


def test_mono_bandpass_image():
    """A 16-bit mono image under a 550 nm bandpass, surveyed with the monochromatic model."""
    shape = (200, 330)
    flakes, truth = flake_grid(shape, [1, 2, 3], seed=3)
    lin = micrograph(shape, flakes, noise=0.02, seed=1, mono_nm=550.0)
    mat, sub, mic, _, _ = model(mono_nm=550.0)
    res = survey_image(
        from_array(np.clip(np.round(lin[..., 0] * 65535), 0, 65535).astype(np.uint16)),
        material=mat,
        substrate=sub,
        microscope=mic,
        scale_um_per_px=0.1,
        dark_offset=0.02,
        find_holes=False,
    )
    for r, n in _match(res, truth):
        assert r is not None and (r.layers == n or n in r.ambiguous_with)


def test_channel_mismatch_refused():
    mat, sub, mic, _, _ = model()
    with pytest.raises(InputError, match="channels"):
        survey_image(
            np.full((50, 50), 0.5, np.float32),
            material=mat,
            substrate=sub,
            microscope=mic,
            scale_um_per_px=0.1,
        )


def test_constant_16bit_image_surveys_to_nothing_with_a_warning():
    """A constant 16-bit image (a lens cap, a blank frame): no regions, a warning, no crash."""
    mat, sub, mic, _, _ = model()
    res = survey_image(
        np.full((80, 90, 3), 20000, np.uint16),
        material=mat,
        substrate=sub,
        microscope=mic,
        scale_um_per_px=0.1,
    )
    assert res.regions == () and res.holes == ()
    assert any("uniform" in w for w in res.warnings)


def test_coverage_margin_at_full_resolution_with_a_coarse_working_grid():
    """With a working grid 4x coarser than the image, a flake edge near a hole is traced at
    full resolution: the margin to the hole is within 0.75 px of the drawn one (the coarse
    outline alone is good to about 2 px)."""
    from flakebook.imaging.holes import hole_coverage
    from flakebook.imaging.segment import segment

    from .synth import polygon_coverage

    shape = (240, 320)
    flake = [[60.0, 51.8], [250.0, 51.8], [250.0, 190.0], [60.0, 190.0]]
    holes = [(91.0, 76.8, 14.0), (290.0, 30.0, 14.0), (30.0, 210.0, 14.0)]
    lin = micrograph(
        shape, [(polygon_coverage(shape, flake), 2)], holes=holes, noise=0.01, seed=3, dark=0.0
    )
    img = from_array(np.clip(np.round(lin * 65535), 0, 65535).astype(np.uint16))
    seg = segment(
        img, um_per_px=0.1, min_area_um2=20, holes=list(holes), factor=4, work=img.working(4)
    )
    (fl,) = seg.flakes
    cov = hole_coverage(fl.outline_px, ((91.0, 76.8), 14.0), um_per_px=0.1)
    assert cov.fully_covered
    assert cov.margin_px == pytest.approx(76.8 - 51.8 - 14.0, abs=0.75)


def test_progress_reaches_the_end_and_cancel_stops():
    """INTERFACE.md: progress(fraction, text) from 0 to 1; a set cancel event raises Cancelled."""
    import threading

    from flakebook.errors import Cancelled

    shape = (120, 160)
    flakes, _ = flake_grid(shape, [2], cell=(120, 160), seed=1)
    img = from_array(
        np.clip(np.round(micrograph(shape, flakes, seed=2) * 65535), 0, 65535).astype(np.uint16)
    )
    seen = []
    _survey(img, progress=lambda frac, text: seen.append(frac))
    assert seen[0] == 0.0 and seen[-1] == 1.0 and seen == sorted(seen)
    ev = threading.Event()
    ev.set()
    with pytest.raises(Cancelled):
        _survey(img, cancel=ev)
