"""The shared calibration helper (tests/calibration.py) on cases with known answers."""

import numpy as np
import pytest

from tests.calibration import calibration_report, expected_calibration_error


def test_perfectly_calibrated_forecasts_have_small_ece():
    """Outcomes drawn with the stated probability: ECE near 0 (definition of calibration,
    Guo et al. 2017; common practice)."""
    rng = np.random.default_rng(1)
    p = rng.uniform(0.3, 1.0, 20000)
    ok = rng.uniform(size=p.size) < p
    assert expected_calibration_error(p, ok) < 0.02


def test_overconfident_forecasts_have_large_ece():
    """Always 0.99 while right half the time: ECE = 0.49 (worked by hand)."""
    p = np.full(1000, 0.99)
    ok = np.arange(1000) % 2 == 0
    assert expected_calibration_error(p, ok) == pytest.approx(0.49)
    post = np.tile([0.99, 0.01, 0.0], (1000, 1))
    rep = calibration_report(post, np.where(ok, 1, 2))
    assert rep.accuracy == 0.5 and rep.confidently_wrong == 0.5
