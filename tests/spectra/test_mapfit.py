"""The batched map fitter against lmfit's own per-spectrum fits."""

from __future__ import annotations

import numpy as np
import pytest

from flakebook.errors import InputError
from flakebook.spectra.mapfit import fit_map
from flakebook.spectra.peaks import PeakSpec, fit_peaks
from flakebook.spectra.processing import modpoly_batch


def _lorentz(x, c, w, h):
    return h / (1 + ((x - c) / (w / 2)) ** 2)


def _map(rng, ny=12, nx=10, n=1024):
    x = np.linspace(150.0, 550.0, n)
    c1 = 241.0 + rng.normal(0, 0.5, (ny, nx, 1))
    c2 = 287.0 + rng.normal(0, 0.5, (ny, nx, 1))
    h1 = rng.uniform(20, 80, (ny, nx, 1))
    y = (
        _lorentz(x, c1, 4.0, h1)
        + _lorentz(x, c2, 5.0, 0.4 * h1)
        + 20
        + 0.05 * (x - 150)
        + 3e-4 * (x - 300) ** 2
        + rng.normal(0, 1.0, (ny, nx, n))
    )
    return x, y, c1[..., 0], c2[..., 0]


SPECS = [PeakSpec("A1g", 241.0, 4.0, 4.0), PeakSpec("E2g", 287.0, 4.0, 5.0)]


def test_map_fitter_agrees_with_lmfit():
    """lmfit (general-purpose reference, via fit_peaks) on the same baseline-corrected spectra:
    centres agree to 0.01 cm^-1, their standard errors to 1 %, on a sample of 25 spectra."""
    rng = np.random.default_rng(21)
    x, y, c1, c2 = _map(rng)
    fit = fit_map(x, y, SPECS)
    assert fit.center.shape == (12, 10, 2) and fit.converged.all() and fit.found.all()
    corrected = y - modpoly_batch(x, y)
    for k in rng.choice(y.shape[0] * y.shape[1], 25, replace=False):
        r, c = divmod(int(k), y.shape[1])
        ref = fit_peaks(x, corrected[r, c], SPECS)
        for m, p in enumerate(ref.peaks):
            assert abs(fit.center[r, c, m] - p.center) <= 0.01
            assert fit.center_err[r, c, m] == pytest.approx(p.center_err, rel=0.01)
            assert fit.fwhm[r, c, m] == pytest.approx(p.fwhm, abs=0.01)
            assert fit.height[r, c, m] == pytest.approx(p.height, rel=1e-3)
    # and the truth, drawn outside the code, is covered within 4 standard errors
    pos, err = fit.position("A1g")
    assert np.all(np.abs(pos - c1) < 4 * err + 1e-9)
    sep, sep_err = fit.separation("A1g", "E2g")
    assert np.all(np.abs(sep - (c2 - c1)) < 5 * sep_err)


def test_weak_mode_not_found_in_part_of_the_map():
    """Where a mode is absent its map is NaN and found False; the other mode is still fitted."""
    rng = np.random.default_rng(22)
    x, y, c1, _ = _map(rng, ny=4, nx=5)
    y = y.copy()
    # the first two rows hold the A1g line alone: no E2g at all
    y[:2] = _lorentz(x, c1[:2, :, None], 4.0, 50.0) + 20 + rng.normal(0, 1.0, y[:2].shape)
    fit = fit_map(x, y, SPECS)
    assert not fit.found[:2, :, 1].any() and fit.found[2:, :, 1].all()
    assert np.isnan(fit.center[:2, :, 1]).all()
    assert fit.found[..., 0].all()
    np.testing.assert_allclose(fit.center[:2, :, 0], c1[:2], atol=0.1)


def test_map_input_refused():
    x = np.linspace(150.0, 550.0, 100)
    with pytest.raises(InputError, match="accepted"):
        fit_map(x, np.ones((3, 99)), SPECS)
    with pytest.raises(InputError, match="doublets"):
        fit_map(x, np.ones((3, 100)), [PeakSpec("A1g", 241, 3, 2, min_separation_cm1=1)])
