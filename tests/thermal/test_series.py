"""Series fits against numpy's weighted polynomial fit, and the series warnings."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from flakebook.errors import InputError
from flakebook.thermal import series


def _temperature_series(rng, sigma=0.03, chi=-0.0056, n=6):
    t = np.linspace(295.0, 395.0, n)
    return t, 241.5 + chi * (t - 295.0) + rng.normal(0, sigma, n), np.full(n, sigma)


def test_slope_and_error_match_numpy_polyfit():
    """Weighted least squares against numpy.polyfit (a general-purpose reference) with
    w = 1/sigma: same slope, same unscaled covariance when the reduced chi-square is below 1,
    the covariance scaled by it (numpy's default cov=True) when above."""
    rng = np.random.default_rng(3)
    for sigma_fit in (0.03, 0.003):  # honest errors, then errors 10x too small
        t, y, _ = _temperature_series(rng)
        s = np.full(t.size, sigma_fit)
        fit = series.fit_series(t, y, s, kind="temperature")
        coef, cov_u = np.polyfit(t, y, 1, w=1 / s, cov="unscaled")
        assert fit.slope == pytest.approx(coef[0], rel=1e-9)
        assert fit.intercept == pytest.approx(coef[1], rel=1e-9)
        if fit.reduced_chi2 > 1:
            assert fit.scaled
            assert fit.slope_err == pytest.approx(np.sqrt(cov_u[0, 0] * fit.reduced_chi2), rel=1e-9)
            # said only where the scatter is beyond chance (chi-square survival p < 0.05)
            p_value = stats.chi2.sf(fit.reduced_chi2 * (t.size - 2), t.size - 2)
            assert any("reduced chi-square" in w for w in fit.warnings) == (p_value < 0.05)
        else:
            assert fit.slope_err == pytest.approx(np.sqrt(cov_u[0, 0]), rel=1e-9)
    assert sigma_fit == 0.003 and fit.scaled


def test_curvature_warned_at_three_sigma():
    """A clearly quadratic series is warned of; a straight one is not (3 sigma, common
    practice, no source)."""
    p = np.linspace(0.0, 2.0, 9)
    s = np.full(p.size, 0.02)
    curved = series.fit_series(p, 241.0 - 0.5 * p - 0.3 * p**2, s)
    straight = series.fit_series(p, 241.0 - 0.5 * p + np.array([1, -1] * 4 + [1]) * 0.01, s)
    assert any("curved" in w for w in curved.warnings)
    assert not any("curved" in w for w in straight.warnings)


def test_shift_that_does_not_return_is_warned():
    """Points taken at the same power on the way up and down that differ by more than 3
    combined sigma: damage or hysteresis (common practice, no source)."""
    p = np.array([0.2, 0.5, 1.0, 1.5, 2.0, 1.0, 0.2])
    order = np.arange(p.size)
    s = np.full(p.size, 0.02)
    clean = 241.0 - 0.5 * p
    damaged = clean.copy()
    damaged[5:] -= 0.3
    assert not any("steps down" in w for w in series.fit_series(p, clean, s, order).warnings)
    warned = series.fit_series(p, damaged, s, order).warnings
    assert any("steps down" in w for w in warned)
    # the same points, listed shuffled, with their order: the same warning
    perm = np.array([3, 0, 6, 1, 5, 2, 4])
    again = series.fit_series(p[perm], damaged[perm], s[perm], order[perm]).warnings
    assert any("steps down" in w for w in again)


def test_too_few_points():
    """Fewer than 3 points refused with a clear InputError (a one-point series too); fewer
    than 5 warned."""
    with pytest.raises(InputError, match="at least 3"):
        series.fit_series([1.0], [241.0], [0.02])
    with pytest.raises(InputError, match="at least 3"):
        series.fit_series([1.0, 2.0], [241.0, 240.5], [0.02, 0.02])
    fit = series.fit_series([0.5, 1.0, 1.5, 2.0], [240.75, 240.5, 240.25, 240.0], [0.02] * 4)
    assert any("only 4 points" in w for w in fit.warnings)
    with pytest.raises(InputError, match="one value per point"):
        series.fit_series([0.5, 1.0, 1.5], [240.75, 240.5], [0.02] * 3)


def test_temperature_rise_beyond_calibrated_range():
    """P_max chi_P / chi_T above the temperature series' span is warned of."""
    rng = np.random.default_rng(5)
    t, y, s = _temperature_series(rng)  # 100 K span, chi_T -0.0056
    tf = series.fit_series(t, y, s, kind="temperature")
    p = np.linspace(0.02, 0.3, 6)
    pf = series.fit_series(p, 241.5 - 2.9 * p + rng.normal(0, 0.03, 6), np.full(6, 0.03))
    coeffs = series.combine_series(tf, pf)
    assert coeffs.max_temperature_rise_k == pytest.approx(0.3 * pf.slope / tf.slope)
    assert coeffs.max_temperature_rise_k > 100
    assert any("beyond the" in w for w in coeffs.warnings)
    low = series.fit_series(p / 3, 241.5 - 2.9 * p / 3, np.full(6, 0.03))
    assert not any("beyond the" in w for w in series.combine_series(tf, low).warnings)
    assert coeffs.covariance[0, 1] == 0.0
    corr = series.combine_series(tf, pf, correlation=0.4)
    assert corr.covariance[0, 1] == pytest.approx(0.4 * tf.slope_err * pf.slope_err)


def test_inputs_not_changed():
    """Core functions never change their inputs (DESIGN.md)."""
    p = np.array([0.2, 0.5, 1.0, 1.5, 2.0])
    y = 241.0 - 0.5 * p
    s = np.full(5, 0.02)
    before = (p.copy(), y.copy(), s.copy())
    series.fit_series(p, y, s)
    for a, b in zip((p, y, s), before):
        assert np.array_equal(a, b)
