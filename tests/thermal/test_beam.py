"""Beam radius from edge scans, spot images and diffraction, against scipy's special functions."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import optimize, special

from flakebook.errors import InputError
from flakebook.thermal import beam


@pytest.mark.parametrize("direction", [1, -1])
def test_knife_edge_recovers_radius(direction):
    """A Gaussian beam's power past an edge is P0/2 erfc(sqrt(2)(x - x0)/W) (standard result);
    scans drawn with scipy.special.erfc and noise give W back within 3 sigma, either way."""
    rng = np.random.default_rng(8)
    x = np.linspace(-2.0, 2.0, 41)
    hits = 0
    for _ in range(50):
        p = 0.5 + 4.0 * 0.5 * special.erfc(math.sqrt(2) * direction * (x - 0.1) / 0.45)
        p = p + rng.normal(0, 0.02, x.size)
        res = beam.fit_knife_edge(x, p, 0.02)
        assert abs(res.radius_um - 0.45) < 4 * res.radius_err_um
        hits += abs(res.radius_um - 0.45) < res.radius_err_um
    assert 0.5 <= hits / 50 <= 0.9  # about 68% within 1 sigma


def test_knife_edge_1e2_radius_convention():
    """The 16-84% rise distance of the erfc edge is W (1/e^2 radius), i.e. 2 sigma of the
    Gaussian (DESIGN.md convention; common practice, no source)."""
    x = np.linspace(-3.0, 3.0, 601)
    p = 0.5 * special.erfc(math.sqrt(2) * x / 1.0)
    res = beam.fit_knife_edge(x, p)
    assert res.radius_um == pytest.approx(1.0, rel=1e-6)
    x84 = x[np.argmin(np.abs(p - 0.8413))]
    x16 = x[np.argmin(np.abs(p - 0.1587))]
    assert x16 - x84 == pytest.approx(1.0, abs=0.02)


def test_beam_image_recovers_radius():
    """A 2D Gaussian spot exp(-2 r^2/W^2) (DESIGN.md convention) with noise: W back, and an
    elliptical spot warned of with W = sqrt(Wx Wy)."""
    rng = np.random.default_rng(4)
    yy, xx = np.mgrid[0:48, 0:56].astype(float)
    img = 3 + 100 * np.exp(-2 * ((xx - 27.3) ** 2 + (yy - 22.6) ** 2) / 7.5**2)
    img = img + rng.normal(0, 1.0, img.shape)
    res = beam.fit_beam_image(img, 0.05)
    assert res.radius_um == pytest.approx(7.5 * 0.05, abs=4 * res.radius_err_um)
    assert res.center_um == pytest.approx((27.3 * 0.05, 22.6 * 0.05), abs=0.005)
    assert not res.warnings
    ell = 3 + 100 * np.exp(-2 * ((xx - 27) ** 2 / 9.0**2 + (yy - 22) ** 2 / 6.0**2))
    res2 = beam.fit_beam_image(ell, 0.05)
    assert res2.radius_um == pytest.approx(math.sqrt(54) * 0.05, rel=1e-4)
    assert any("elliptical" in w for w in res2.warnings)


def test_diffraction_estimates():
    """The Airy pattern (2 J1(v)/v)^2, v = 2 pi NA r / lambda (standard result, scipy.special.j1):
    its 1/e^2 radius is 0.411 lambda/NA and its first zero 0.61 lambda/NA (the first zero of J1,
    3.8317, over 2 pi); the Gaussian-focus estimate is lambda/(pi NA). Each is warned of."""
    v = optimize.brentq(lambda v: (2 * special.j1(v) / v) ** 2 - math.exp(-2), 0.5, 3.8)
    airy = beam.diffraction_beam_radius(532.0, 0.8, "airy")
    assert airy.radius_um == pytest.approx(v / (2 * math.pi) * 0.532 / 0.8, rel=1e-9)
    zero = special.jn_zeros(1, 1)[0] / (2 * math.pi)
    first = beam.diffraction_beam_radius(532.0, 0.8, "airy-first-zero")
    assert first.radius_um == pytest.approx(zero * 0.532 / 0.8, rel=1e-3)
    gauss = beam.diffraction_beam_radius(532.0, 0.8, "gaussian")
    assert gauss.radius_um == pytest.approx(0.532 / (math.pi * 0.8), rel=1e-12)
    for res in (airy, first, gauss):
        assert res.warnings and "not a measurement" in res.warnings[0]
        assert "lambda" in res.method


def test_bad_beam_inputs():
    """Clear InputErrors for unusable scans, images and diffraction inputs."""
    with pytest.raises(InputError, match="at least 6"):
        beam.fit_knife_edge([0, 1, 2], [1, 0.5, 0])
    with pytest.raises(InputError, match="does not change"):
        beam.fit_knife_edge(np.arange(10.0), np.ones(10))
    with pytest.raises(InputError, match="2D array"):
        beam.fit_beam_image(np.ones(10), 0.05)
    with pytest.raises(InputError, match="numerical aperture"):
        beam.diffraction_beam_radius(532.0, 0.0)
    with pytest.raises(InputError, match="diffraction model"):
        beam.diffraction_beam_radius(532.0, 0.8, "top-hat")
