"""Camera realism: saturation mask, dark offset and contrast scale, and their calibration."""

import numpy as np
import pytest

from flakebook.errors import InputError
from flakebook.optics.camera import (
    CalibrationObservation,
    CameraCalibration,
    calibrate,
    saturation_mask,
)
from flakebook.optics.layers import layer_likelihood
from flakebook.optics.materials import get_material
from flakebook.optics.microscope import Microscope, channel_contrast
from flakebook.optics.substrate import Substrate

M = get_material("MoSe2")
NOMINAL = Substrate.from_oxide(285.0)
MIC = Microscope(0.3)
RGB = ("r", "g", "b")


def _simulate(
    rng,
    *,
    oxide=291.0,
    scale=0.9,
    dark=(12.0, 9.0, 15.0),
    noise=0.5,
    exposures=(1.0, 0.55),
    layers=(1, 2, 3, 5),
):
    """Raw counts I = g (R + f) + d with the flare f chosen to give the contrast scale."""
    table = channel_contrast(M, list(layers), NOMINAL.with_oxide(oxide), MIC)
    gain = np.array([900.0, 1400.0, 500.0])
    obs = []
    for k, n in enumerate(layers):
        r_ref = table.reflectance_reference[k]
        r_fl = table.reflectance_flake[k]
        flare = r_ref * (1.0 / scale - 1.0)
        for e in exposures:
            ref = e * gain * (r_ref + flare) + np.array(dark)
            fl = e * gain * (r_fl + flare) + np.array(dark)
            ref = ref + noise * rng.standard_normal(3)
            fl = fl + noise * rng.standard_normal(3)
            obs.append(
                CalibrationObservation(
                    n,
                    dict(zip(RGB, fl)),
                    dict(zip(RGB, ref)),
                    {c: noise for c in RGB},
                    {c: noise for c in RGB},
                )
            )
    return obs


def test_saturation_mask():
    """A pixel is saturated when any channel reaches the threshold of full scale (common
    practice, no source)."""
    img = np.zeros((2, 3, 3), np.uint16)
    img[0, 1, 2] = 4095
    img[1, 2, 0] = 4000
    mask = saturation_mask(img, 4095)
    assert mask.tolist() == [[False, True, False], [False, False, False]]
    assert saturation_mask(img, 4095, threshold=0.97)[1, 2]
    with pytest.raises(InputError):
        saturation_mask(np.zeros(5), 255)


def test_calibration_recovers_truth_within_errors():
    """Simulated raw counts from the camera model (gain, flare, dark offset; common practice,
    no source) at two exposures: the fit returns the true oxide, dark offsets and contrast
    scale within 3 sigma, with small errors."""
    rng = np.random.default_rng(4)
    obs = _simulate(rng)
    cal = calibrate(obs, material=M, substrate=NOMINAL, microscope=MIC)
    assert abs(cal.oxide_nm - 291.0) < 3 * cal.oxide_err_nm + 0.05
    assert cal.oxide_err_nm < 2.0
    assert abs(cal.contrast_scale - 0.9) < 3 * cal.contrast_scale_err + 1e-3
    for c, d in zip(RGB, (12.0, 9.0, 15.0)):
        assert abs(cal.dark_offset[c] - d) < 3 * cal.dark_offset_err[c] + 0.05
    back = CameraCalibration.from_dict(cal.to_dict())
    assert back == cal


def test_calibrated_values_feed_the_likelihood():
    """With the calibration applied (dark subtracted, oxide and contrast scale from the fit), a
    4-layer flake on the same chip is found (common practice, no source)."""
    rng = np.random.default_rng(5)
    cal = calibrate(_simulate(rng), material=M, substrate=NOMINAL, microscope=MIC)
    test = _simulate(rng, layers=(4,), exposures=(0.8,))[0]
    contrast = cal.contrast(test.flake, test.reference)
    like = layer_likelihood(
        contrast,
        {c: 0.01 for c in RGB},
        material=M,
        microscope=MIC,
        explain=False,
        **cal.likelihood_options(NOMINAL),
    )
    assert like.posterior().layers == 4


def test_unidentifiable_calibration_is_refused():
    """One exposure and no image with the light blocked cannot separate dark offset from contrast
    scale: the message says what data would."""
    obs = _simulate(np.random.default_rng(6), exposures=(1.0,))
    with pytest.raises(InputError, match="light blocked"):
        calibrate(obs, material=M, substrate=NOMINAL, microscope=MIC)
    cal = calibrate(
        obs,
        material=M,
        substrate=NOMINAL,
        microscope=MIC,
        dark_frame={"r": 12.0, "g": 9.0, "b": 15.0},
        dark_frame_err={"r": 0.3, "g": 0.3, "b": 0.3},
    )
    assert abs(cal.contrast_scale - 0.9) < 0.03


def test_malformed_record_refused():
    """A stored calibration from a newer version, or with keys missing, is refused."""
    with pytest.raises(InputError, match="newer"):
        CameraCalibration.from_dict({"version": 99})
    with pytest.raises(InputError, match="malformed"):
        CameraCalibration.from_dict({"version": 1, "oxide_nm": 1.0})
