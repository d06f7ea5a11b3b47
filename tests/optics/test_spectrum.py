"""Reflectance-contrast spectrum evidence: layer likelihood and oxide fit."""

import numpy as np
import pytest

from flakebook.errors import InputError
from flakebook.optics.materials import get_material
from flakebook.optics.microscope import cone_reflectance
from flakebook.optics.spectrum import read_reflectance_contrast, reflectance_contrast_likelihood
from flakebook.optics.substrate import Substrate

M = get_material("MoS2")
NOMINAL = Substrate.from_oxide(285.0)


def _spectrum(n, oxide, rng, noise=0.01):
    lam = np.linspace(420.0, 780.0, 181)
    sub = NOMINAL.with_oxide(oxide)
    r_ref = cone_reflectance(None, (), sub, lam, n_angles=8)[0]
    r_fl = cone_reflectance(M, [n], sub, lam, n_angles=8)[0]
    return lam, r_fl / r_ref - 1.0 + noise * rng.standard_normal(lam.size)


def test_layers_and_oxide_from_spectrum():
    """A simulated dR/R spectrum (the thin-film model, which the tmm checks of tests/optics
    validate) of a 3L flake on an oxide 7 nm off the nominal: N = 3 comes out with high
    probability and the fitted oxide within 0.6 nm of the truth (common practice, no source)."""
    rng = np.random.default_rng(8)
    lam, drr = _spectrum(3, 292.0, rng)
    res = reflectance_contrast_likelihood(
        lam, drr, np.full(lam.size, 0.01), material=M, substrate=NOMINAL, oxide_err_nm=10.0
    )
    post = res.likelihood / res.likelihood.sum()
    assert int(np.argmax(post)) == 2 and post[2] > 0.9
    assert res.oxide_nm == pytest.approx(292.0, abs=0.6)
    assert 0 < res.oxide_err_nm < 1.0


def test_noise_estimated_when_missing_and_file_reading(tmp_path):
    """Without errors the noise is estimated from the spectrum's own scatter; a file of
    wavelength_nm,dr_r reads back, and a file in eV is refused."""
    rng = np.random.default_rng(9)
    lam, drr = _spectrum(1, 285.0, rng, noise=0.005)
    path = tmp_path / "s.csv"
    path.write_text("wavelength_nm,dr_r\n" + "\n".join(f"{a},{b}" for a, b in zip(lam, drr)))
    lam2, drr2, err2 = read_reflectance_contrast(path)
    assert err2 is None and np.allclose(lam2, lam)
    res = reflectance_contrast_likelihood(lam2, drr2, material=M, substrate=NOMINAL)
    assert res.noise == pytest.approx(0.005, rel=0.4)
    assert int(np.argmax(res.likelihood)) == 0
    bad = tmp_path / "ev.csv"
    bad.write_text("\n".join(f"{2.0 + 0.01 * i},{0.1}" for i in range(10)))
    with pytest.raises(InputError, match="nm"):
        read_reflectance_contrast(bad)
