"""Segmentation on synthetic contrast images: substrate, flakes, terraces, contrast and errors."""

from __future__ import annotations

import math

import cv2
import numpy as np
import pytest

from flakebook.errors import InputError
from flakebook.imaging.io import from_array
from flakebook.imaging.segment import correlation_area, segment

from .synth import polygon_coverage, render

SUB = [0.55, 0.5, 0.42]


def _scene(noise=0.02, seed=0):
    shape = (300, 400)
    a = [[40, 40], [150, 50], [140, 150], [50, 140]]
    b = [[220, 60], [360, 70], [350, 240], [230, 230]]
    b_inner = [[290, 60], [360, 70], [350, 240], [290, 235]]
    masks = [
        (polygon_coverage(shape, a), [0.10, 0.20, 0.05]),
        (polygon_coverage(shape, b), [0.20, 0.35, 0.10]),
        (polygon_coverage(shape, b_inner), [0.30, 0.50, 0.15]),
    ]
    lin = render(shape, SUB, masks, noise=noise, rng=np.random.default_rng(seed))
    return from_array(lin.astype(np.float32)), masks


def test_flakes_terraces_and_contrast_found():
    """Three terraces in two flakes; each terrace's contrast within 4 standard errors of truth and
    within 0.005 absolute (common practice, no source: the synthetic truth is drawn here)."""
    img, masks = _scene()
    seg = segment(img, um_per_px=0.1, min_area_um2=20)
    assert len(seg.flakes) == 2
    assert len(seg.regions) == 3
    truths = [m[1] for m in masks]
    for reg in seg.regions:
        errs = [max(abs(reg.contrast[c] - t[i]) for i, c in enumerate("rgb")) for t in truths]
        k = int(np.argmin(errs))
        assert errs[k] < 0.005
        for i, c in enumerate("rgb"):
            assert abs(reg.contrast[c] - truths[k][i]) < 4 * reg.contrast_err[c] + 5e-4
    areas = sorted(r.area_um2 for r in seg.regions)
    expect = sorted(float(m[0].sum()) * 0.01 for m in masks[:1]) + [None]
    assert areas[0] == pytest.approx(expect[0], rel=0.08)
    assert seg.substrate_fraction > 0.5


def test_outline_uses_pixel_centre_convention():
    """INTERFACE.md: origin at the top-left pixel's centre. A flake filling pixels x = 20..59,
    y = 30..79 has its outline on those pixel centres and its centroid at (39.5, 54.5)."""
    a = np.full((120, 100, 1), 0.5, np.float32)
    a[30:80, 20:60] = 0.3
    seg = segment(from_array(a), um_per_px=1.0, min_area_um2=10)
    (fl,) = seg.flakes
    xs, ys = fl.outline_px[:, 0], fl.outline_px[:, 1]
    assert (xs.min(), xs.max(), ys.min(), ys.max()) == (20, 59, 30, 79)
    assert fl.centroid_px == pytest.approx((39.5, 54.5))
    assert fl.bbox_px == (20, 30, 59, 79)
    assert fl.area_um2 == pytest.approx(40 * 50)


def test_small_flakes_below_min_area_left_out():
    a = np.full((100, 100, 1), 0.5, np.float32)
    a[10:14, 10:14] = 0.3  # 16 um^2
    a[50:60, 50:60] = 0.3  # 100 um^2
    seg = segment(from_array(a), um_per_px=1.0, min_area_um2=20)
    assert [f.area_px for f in seg.flakes] == [100]


def test_correlation_area_of_blurred_white_noise():
    """White noise blurred by a Gaussian of s.d. s has a Gaussian autocorrelation of variance 2 s^2,
    whose integral is 4 pi s^2 (standard result for filtered white noise)."""
    rng = np.random.default_rng(5)
    s = 1.5
    patches = []
    for _ in range(6):
        p = cv2.GaussianBlur(rng.standard_normal((256, 256)), (0, 0), s)
        patches.append(p[16:-16, 16:-16])
    assert correlation_area(patches, max_lag=10) == pytest.approx(4 * math.pi * s**2, rel=0.12)
    white = [rng.standard_normal((64, 64)) for _ in range(4)]
    assert 1.0 <= correlation_area(white) < 1.3


def test_error_allows_for_correlated_noise():
    """With spatially correlated noise the reported standard error follows the real scatter of the
    mean over repeated images (within a factor 1.45 over 16 images), not the white-noise sqrt(n)
    law; it includes the uncertainty of the flat-field surface under a large central flake
    (common practice, no source: Monte Carlo against the known truth)."""
    shape = (200, 200)
    rng = np.random.default_rng(7)
    means, errs = [], []
    for _ in range(16):
        base = np.full((*shape, 1), 0.5)
        base[60:140, 60:140] *= 1 - 0.2
        noise = cv2.GaussianBlur(rng.standard_normal(shape), (0, 0), 2.0)
        noise /= noise.std()
        img = from_array((base * (1 + 0.02 * noise[..., None])).astype(np.float32))
        seg = segment(img, um_per_px=0.1, min_area_um2=5)
        (reg,) = seg.regions
        means.append(reg.contrast["mono"])
        errs.append(reg.contrast_err["mono"])
        assert seg.correlation_area_px["mono"] > 10
    ratio = np.std(means, ddof=1) / np.mean(errs)
    assert 1 / 1.45 < ratio < 1.45


def test_no_substrate_visible_is_refused():
    rng = np.random.default_rng(2)
    a = rng.uniform(0.1, 0.9, (80, 80, 3)).astype(np.float32)
    with pytest.raises(InputError, match="no bare substrate"):
        segment(from_array(a), um_per_px=0.1)


def test_constant_16bit_image_gives_no_flakes_and_a_warning():
    a = np.full((64, 64), 30000, np.uint16)
    seg = segment(from_array(a), um_per_px=0.1)
    assert seg.regions == () and seg.flakes == ()
    assert any("uniform" in w for w in seg.warnings)


def test_saturated_and_black_images_refused():
    with pytest.raises(InputError, match="saturated"):
        segment(from_array(np.full((32, 32), 65535, np.uint16)), um_per_px=0.1)
    with pytest.raises(InputError, match="black"):
        segment(from_array(np.zeros((32, 32), np.uint16)), um_per_px=0.1)
