"""Background: dark offset once, polynomial flat field, blank reference."""

from __future__ import annotations

import numpy as np
import pytest

from flakebook.errors import InputError
from flakebook.imaging.background import apply_background, fit_background
from flakebook.imaging.io import from_array

from .synth import polygon_coverage, render, vignetting


def _image(dark=0.0, seed=0):
    shape = (200, 260)
    masks = [(polygon_coverage(shape, [[30, 30], [110, 40], [100, 120], [40, 110]]), [0.3, 0.4])]
    lin = render(
        shape,
        [0.6, 0.5],
        masks,
        noise=0.01,
        vignette=0.25,
        dark=dark,
        rng=np.random.default_rng(seed),
        blur_px=0,
    )
    return from_array(lin.astype(np.float32), channels=("a", "b")), shape


def test_polynomial_flat_field_removes_vignetting():
    """A quadratic illumination (degree-2 surface) is flattened to < 0.3% rms on bare substrate,
    with a flake covering part of the image (fit robust to it). Common practice, no source."""
    img, shape = _image(dark=0.05)
    bg = fit_background(img, dark_offset=0.05, degree=2)
    out = apply_background(img, bg)
    sub = polygon_coverage(shape, [[20, 20], [120, 30], [110, 130], [30, 120]]) == 0
    for c in range(2):
        v = out.intensity[..., c][sub]
        # noise is 1%; the residual systematic must be much smaller: compare block means
        blocks = [v.reshape(-1)[i::7].mean() for i in range(7)]
        assert np.std(blocks) / np.mean(v) < 0.003
        assert np.mean(v) == pytest.approx(bg.level[c], rel=0.01)
    assert "dark offset" in out.corrections[0]
    assert "polynomial" in bg.describe()


def test_dark_offset_subtracted_only_once():
    img, _ = _image(dark=0.05)
    bg = fit_background(img, dark_offset=0.05)
    out = apply_background(img, bg)
    with pytest.raises(InputError, match="already subtracted"):
        fit_background(out, dark_offset=0.05)
    with pytest.raises(InputError, match="already subtracted"):
        apply_background(out, bg)
    with pytest.raises(InputError, match="per channel"):
        fit_background(img, dark_offset={"a": 0.01})


def test_blank_reference_division():
    """Dividing by a blank image of the same illumination flattens it exactly (up to noise)."""
    img, shape = _image(seed=1)
    blank = from_array(
        (np.array([0.6, 0.5]) * vignetting(shape, 0.25)[..., None]).astype(np.float32),
        channels=("a", "b"),
    )
    bg = fit_background(img, method="reference", reference=blank, reference_smooth_px=0)
    out = apply_background(img, bg)
    assert out.intensity[5, 5, 0] == pytest.approx(out.intensity[190, 250, 0], rel=0.05)
    corner = out.intensity[150:195, 150:255, 0]
    assert np.std(corner.mean(axis=0)) < 0.003
    with pytest.raises(InputError, match="same size"):
        fit_background(
            img,
            method="reference",
            reference=from_array(np.ones((5, 5, 2), np.float32), channels=("a", "b")),
        )
