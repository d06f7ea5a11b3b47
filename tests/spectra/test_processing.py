"""Spikes, baselines and calibration."""

from __future__ import annotations

import numpy as np
import pytest

from flakebook.errors import InputError
from flakebook.spectra.processing import (
    SI_LINE_CM1,
    calibrate,
    estimate_baseline,
    modpoly_batch,
    remove_spikes,
)


def _lorentz(x, c, w, h):
    return h / (1 + ((x - c) / (w / 2)) ** 2)


X = np.arange(300.0, 500.0, 0.5)


def test_spikes_found_and_peaks_left_alone():
    """Whitaker & Hayes, Chemom. Intell. Lab. Syst. 179, 82 (2018): modified z-score spike
    detection. Single- and two-point spikes of 15-50 noise s.d. are found; Raman lines of
    4 cm^-1 FWHM at 0.5 cm^-1 sampling, however strong (S/N up to 2500), are not touched."""
    rng = np.random.default_rng(5)
    missed = false = 0
    for _ in range(200):
        y = 300 + _lorentz(X, 384, 4, rng.uniform(50, 5000)) + _lorentz(X, 403, 4, 100)
        y = y + rng.normal(0, 2, X.size)
        away = np.flatnonzero((np.abs(X - 384) > 8) & (np.abs(X - 403) > 8))[2:-3]
        k = rng.choice(away, 2, replace=False)
        y[k] += rng.uniform(30, 100, 2)
        if rng.random() < 0.3:
            y[k[0] + 1] += 40.0  # a two-point spike
        out = remove_spikes(y)
        flagged = set(np.flatnonzero(out.mask))
        missed += sum(int(i not in flagged) for i in k)
        near_lines = np.abs(X - 384) < 6
        false += int(out.mask[near_lines].any())
        assert np.max(np.abs(out.y[~out.mask] - y[~out.mask])) == 0
    assert missed == 0
    assert false == 0


def test_count_spectra_keep_their_lines_and_lose_their_spikes():
    """Raw detector counts (Poisson, numpy's generator): the shot noise on the top of a strong
    line (up to 20,000 counts over 100) is not taken for spikes, while cosmic rays of 15-50 times
    the local shot noise beside the lines are found (Anscombe 1948, Biometrika 35, 246: the transform that
    makes Poisson noise uniform)."""
    from flakebook.spectra.processing import is_counts

    rng = np.random.default_rng(11)
    missed = false = 0
    for _ in range(200):
        lam = 100 + _lorentz(X, 384, 4, rng.uniform(500, 20000)) + _lorentz(X, 403, 4, 800)
        y = rng.poisson(lam).astype(float)
        away = np.flatnonzero((np.abs(X - 384) > 8) & (np.abs(X - 403) > 8))[2:-3]
        k = rng.choice(away, 2, replace=False)
        y[k] += np.round(rng.uniform(15, 50, 2) * np.sqrt(lam[k]))  # 15-50 local noise s.d.
        assert is_counts(y)
        out = remove_spikes(y)
        missed += sum(int(not out.mask[i]) for i in k)
        false += int(out.mask[(np.abs(X - 384) < 6) | (np.abs(X - 403) < 6)].any())
    assert missed == 0 and false == 0
    assert not is_counts(np.array([1.5, 30.0, 2.0])) and not is_counts(np.array([-1.0, 30.0]))


def test_spike_replacement_is_close_to_the_clean_spectrum():
    rng = np.random.default_rng(6)
    clean = 300 + _lorentz(X, 384, 4, 500) + rng.normal(0, 2, X.size)
    y = clean.copy()
    y[100] += 400
    out = remove_spikes(y)
    assert out.n_spikes == 1 and out.mask[100]
    assert abs(out.y[100] - clean[100]) < 10
    with pytest.raises(InputError, match="accepted"):
        remove_spikes(np.ones((3, 4)))


def test_default_baseline_follows_a_curved_background():
    """The default (pybaselines imodpoly, order 3) recovers a sloped and curved background
    under narrow lines to within 2 noise s.d. away from the lines (truth: the background drawn)."""
    rng = np.random.default_rng(7)
    background = 500 + 0.8 * (X - 300) + 6e-3 * (X - 420) ** 2
    y = background + _lorentz(X, 384, 4, 200) + _lorentz(X, 403, 4, 300)
    y = y + rng.normal(0, 2.0, X.size)
    b = estimate_baseline(X, y)
    assert b.method == "imodpoly"
    off = (np.abs(X - 384) > 10) & (np.abs(X - 403) > 10)
    assert np.max(np.abs(b.baseline - background)[off]) < 4.0
    m = estimate_baseline(X, y, method="masked_poly", peak_windows=[(370, 418)], poly_order=2)
    assert np.max(np.abs(m.baseline - background)) < 3.0
    with pytest.raises(InputError, match="accepted"):
        estimate_baseline(X, y, method="magic")


def test_batched_modpoly_matches_pybaselines():
    """Our vectorised modified polynomial agrees with pybaselines' modpoly (the reference
    implementation of Lieber & Mahadevan-Jansen 2003) spectrum by spectrum."""
    from pybaselines import Baseline

    rng = np.random.default_rng(9)
    n = 20
    y = (
        400
        + rng.uniform(0, 1, (n, 1)) * (X - 300)
        + rng.uniform(0, 1e-2, (n, 1)) * (X - 400) ** 2
        + _lorentz(X, 384, 4, 300)
        + rng.normal(0, 2, (n, X.size))
    )
    ours = modpoly_batch(X, y, poly_order=3)
    fitter = Baseline(x_data=X)
    for i in range(n):
        ref, _ = fitter.modpoly(y[i], poly_order=3)
        np.testing.assert_allclose(ours[i], ref, atol=1e-6)


def test_calibration_on_the_silicon_line():
    """The Si phonon at 520.7 cm^-1 (common practice, no source): a spectrum whose Si line sits
    at 519.9 cm^-1 is shifted by +0.8 cm^-1; with auto_calibrate off nothing is fitted and a
    given shift is applied (series never auto-calibrate: the Si line moves with temperature)."""
    rng = np.random.default_rng(10)
    x = np.arange(450.0, 600.0, 0.5)
    y = 100 + _lorentz(x, 519.9, 3.5, 2000) + rng.normal(0, 3, x.size)
    cal = calibrate(x, y)
    assert cal.shift_cm1 == pytest.approx(0.8, abs=0.02)
    assert cal.measured_cm1 == pytest.approx(519.9, abs=0.02)
    np.testing.assert_allclose(cal.x_corrected, x + cal.shift_cm1)
    assert SI_LINE_CM1 == 520.7
    off = calibrate(x, y, auto_calibrate=False)
    assert off.shift_cm1 == 0.0 and off.measured_cm1 is None
    given = calibrate(x, y, auto_calibrate=False, shift_cm1=0.8)
    np.testing.assert_allclose(given.x_corrected, x + 0.8)
    user = calibrate(x, y, reference_cm1=520.0, window_cm1=3.0)
    assert user.shift_cm1 == pytest.approx(0.1, abs=0.02)
    with pytest.raises(InputError, match="no line found"):
        calibrate(x, 100 + rng.normal(0, 3, x.size))
    with pytest.raises(InputError, match="outside the spectrum"):
        calibrate(np.arange(100.0, 400.0), np.ones(300))
