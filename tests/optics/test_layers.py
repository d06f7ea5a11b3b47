"""Layer likelihood from contrast: robustness to a mismatched sample, calibration, edge cases."""

import numpy as np
import pytest
from scipy.stats import multivariate_normal

from flakebook.errors import InputError
from flakebook.optics.layers import (
    _mvn_loglike,
    contrast_err_from_pixels,
    layer_likelihood,
)
from flakebook.optics.materials import get_material
from flakebook.optics.microscope import Microscope, channel_contrast
from flakebook.optics.substrate import Substrate

MOSE2 = get_material("MoSe2")
SUB = Substrate.from_oxide(285.0)
MIC = Microscope(0.3)
RGB = ("r", "g", "b")


def _measure(table, n, channels=RGB):
    return {c: float(table.contrast[n - 1, MIC.channel_names.index(c)]) for c in channels}


def _infer(c, err=0.02, **kw):
    kw.setdefault("oxide_err_nm", 10.0)
    return layer_likelihood(
        c, {k: err for k in c}, material=MOSE2, substrate=SUB, microscope=MIC, explain=False, **kw
    )


def test_single_green_channel_with_oxide_off():
    """One channel only, oxide 10 nm off: contrast near 550 nm is non-monotonic in N and swings
    with the oxide, so the answer must stay ambiguous rather than wrong (issue check)."""
    table = channel_contrast(MOSE2, range(1, 11), Substrate.from_oxide(295.0), MIC)
    for n in range(1, 11):
        post = _infer(_measure(table, n, ("g",))).posterior()
        assert post.layers == n or n in post.ambiguous_with


def test_channel_crossing_zero():
    """Green contrast of MoSe2 on 285 nm SiO2 crosses zero near 4 layers (model); a measured
    value near zero gives a finite likelihood peaked there, with finite residuals, even with an
    error of zero and no model error (common practice, no source: no division by the
    contrast)."""
    table = channel_contrast(MOSE2, range(1, 8), SUB, MIC)
    g = table.column("g")
    assert g[2] > 0.2 and g[4] < -0.2  # 3L positive, 5L negative
    like = _infer({"g": float(g[3])}, oxide_err_nm=0.0)
    post = like.posterior()
    assert post.layers == 4 or 4 in post.ambiguous_with
    assert np.all(np.isfinite(like.residuals))
    exact = layer_likelihood(
        {"g": float(g[3])},
        {},
        material=MOSE2,
        substrate=SUB,
        microscope=MIC,
        model_err=0.0,
        model_rel_err=0.0,
        nk_ensemble=False,
        explain=False,
    )
    assert exact.posterior().layers == 4
    assert np.all(np.isfinite(exact.log_likelihood[:3]))


def test_ambiguity_says_what_would_decide():
    """With the green channel only and an uncalibrated oxide the result is ambiguous and the
    decider names another channel, a bandpass filter or a calibrated oxide; with all channels
    at a known oxide and the centre n,k data alone the thin flake is unambiguous and the decider
    is empty (issue check; with the n,k uncertainty marginalised 3L keeps a few percent until a
    calibration narrows it)."""
    table = channel_contrast(MOSE2, range(1, 4), SUB, MIC)
    amb = layer_likelihood(
        _measure(table, 2, ("g",)),
        {"g": 0.02},
        material=MOSE2,
        substrate=SUB,
        microscope=MIC,
        oxide_err_nm=5.0,
    )
    assert amb.posterior().ambiguous_with
    assert amb.decider.startswith("to decide between")
    assert any(w in amb.decider for w in ("channel", "bandpass", "oxide"))
    clear = layer_likelihood(
        _measure(table, 2),
        {c: 0.01 for c in RGB},
        material=MOSE2,
        substrate=SUB,
        microscope=MIC,
        nk_ensemble=False,
    )
    assert clear.posterior().layers == 2 and clear.posterior().probability > 0.95
    assert clear.decider == ""


def test_thick_flake_goes_to_more_bin():
    """A 40-layer flake lands in the "more than N_max" bin (DESIGN.md: the last bin)."""
    table = channel_contrast(MOSE2, [40], SUB, MIC)
    c = dict(zip(RGB, table.contrast[0].tolist()))
    like = _infer(c, oxide_err_nm=0.0, max_layers=15)
    assert like.likelihood.shape == (16,)
    assert like.posterior().layers == 16


def test_contrast_scale_is_shared_and_marginalised():
    """A camera with 12% stray light compresses every channel's contrast by the same factor;
    with the contrast scale marginalised (prior 1 +- 0.15) a 2L flake is still found. The
    rank-one marginal equals scipy's multivariate normal with covariance diag + s^2 m m^T
    (scipy.stats, reference library)."""
    table = channel_contrast(MOSE2, [2], SUB, MIC)
    c = dict(zip(RGB, (0.88 * table.contrast[0]).tolist()))
    post = _infer(c, oxide_err_nm=0.0, contrast_scale_err=0.15).posterior()
    assert post.layers == 2
    m = np.array([0.4, -0.2, 0.7])
    meas = np.array([0.35, -0.1, 0.6])
    var = np.array([0.01, 0.02, 0.015]) ** 2
    u = np.array([[0.05, -0.02], [0.01, 0.03], [-0.04, 0.02]])
    cov = np.diag(var) + 0.1**2 * np.outer(m, m) + u @ u.T
    ours, _ = _mvn_loglike(meas - 0.95 * m, cov)
    assert ours == pytest.approx(multivariate_normal(0.95 * m, cov).logpdf(meas), rel=1e-10)


def test_bad_input_refused():
    """Channels the microscope lacks, impossible limits and all-saturated input are refused
    with a message saying what is accepted."""
    with pytest.raises(InputError, match="accepted"):
        _infer({"x": 0.1})
    with pytest.raises(InputError):
        _infer({"g": 0.1}, max_layers=0)
    with pytest.raises(InputError, match="cannot exceed 1"):
        _infer({"g": 31.0})
    with pytest.raises(InputError, match="saturated"):
        _infer({"g": 0.1}, saturated=("g",))
    like = _infer({"g": 0.3, "r": 0.5}, saturated=("r",), oxide_err_nm=0.0)
    assert like.channels == ("g",) and any("saturated" in w for w in like.warnings)


def test_pixel_noise_with_spatial_correlation():
    """Correlated pixel noise: the mean of n pixels with correlation length l has the error of
    n / (2 pi l^2) independent pixels (Gaussian correlation; common practice, no source)."""
    assert contrast_err_from_pixels(0.1, 100, 0.0) == pytest.approx(0.01)
    assert contrast_err_from_pixels(0.1, 10000, 2.0) == pytest.approx(
        0.1 / np.sqrt(10000 / (2 * np.pi * 4))
    )
    assert contrast_err_from_pixels(0.1, 3, 5.0) == pytest.approx(0.1)


def test_model_curve_band():
    """The model curve's band contains the nominal curve for the default data set and widens
    with the oxide uncertainty (common practice, no source)."""
    from flakebook.optics.layers import model_contrast_curve

    exact = model_contrast_curve(MOSE2, range(1, 6), SUB, MIC, nk_ensemble=False)
    np.testing.assert_allclose(exact.low, exact.contrast, atol=1e-12)
    np.testing.assert_allclose(exact.high, exact.contrast, atol=1e-12)
    wide = model_contrast_curve(MOSE2, range(1, 6), SUB, MIC, oxide_err_nm=10.0)
    assert np.all(wide.low <= wide.high)
    assert np.mean(wide.high - wide.low) > 0.02
    assert wide.contrast.shape == (5, 3) and wide.channels == RGB


def test_suspended_flake_likelihood():
    """A membrane over an open through-hole is found from its own model (common practice, no
    source), the reference staying the bare supported substrate."""
    from flakebook.optics.substrate import Hole

    hole = Hole("open")
    table = channel_contrast(MOSE2, range(1, 4), SUB, MIC, "suspended", hole)
    c = dict(zip(RGB, table.contrast[1].tolist()))
    like = layer_likelihood(
        c,
        {k: 0.01 for k in c},
        material=MOSE2,
        substrate=SUB,
        microscope=MIC,
        geometry="suspended",
        hole=hole,
        explain=False,
    )
    assert like.posterior().layers == 2


def test_rows_at_once_equal_rows_one_by_one():
    """layer_likelihoods over many rows (vectorised) gives each row the same likelihood,
    posterior (evidence.combine, flat prior) and warnings as layer_likelihood row by row, also
    for rows that measured different channels (common practice, no source)."""
    from flakebook import evidence
    from flakebook.optics.layers import layer_likelihoods

    rng = np.random.default_rng(4)
    rows = [dict(zip(RGB, rng.uniform([0.3, -0.4, -0.3], [1.0, 0.6, -0.05]))) for _ in range(6)]
    rows.append({"g": 0.3})
    errs = [dict.fromkeys(r, 0.015) for r in rows]
    kw = {"material": MOSE2, "substrate": SUB, "microscope": MIC, "oxide_err_nm": 3.0}
    many = layer_likelihoods(rows, errs, **kw)
    for r, e, lk in zip(rows, errs, many):
        one = layer_likelihood(r, e, **kw)
        np.testing.assert_allclose(lk.likelihood, one.likelihood, rtol=1e-9, atol=1e-300)
        ref = evidence.combine([one.likelihood])
        post = lk.posterior()
        np.testing.assert_allclose(post.posterior, ref.posterior, rtol=1e-9, atol=1e-300)
        assert (post.layers, post.ambiguous_with) == (ref.layers, ref.ambiguous_with)
        assert lk.warnings == one.warnings and lk.decider == one.decider
