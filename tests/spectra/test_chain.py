"""Linear chain model of shear and breathing modes (flakebook.spectra.chain)."""

import numpy as np
import pytest

from flakebook.errors import InputError
from flakebook.spectra import chain


def _reference_chain(n_layers: int, k: float, mu: float) -> np.ndarray:
    """Frequencies (cm^-1) of N masses mu joined by N-1 springs k, free ends, from
    numpy.linalg.eigh of M^-1/2 K M^-1/2 written out here (general-purpose reference)."""
    stiff = np.zeros((n_layers, n_layers))
    for i in range(n_layers - 1):
        stiff[i, i] += k
        stiff[i + 1, i + 1] += k
        stiff[i, i + 1] -= k
        stiff[i + 1, i] -= k
    ev, _ = np.linalg.eigh(stiff / mu)
    omega = np.sqrt(np.clip(ev, 0, None))
    return np.sort(omega / (2 * np.pi * chain.SPEED_OF_LIGHT_CM_S))


def test_closed_forms_for_two_and_three_layers():
    """N = 2: w_bulk/sqrt(2) on both branches; N = 3: cos(pi/6) = 0.866 and sin(pi/6) = 0.5 of
    w_bulk (nearest-neighbour linear chain; Zhang et al., PRB 87, 115413 (2013))."""
    w = 32.0
    assert chain.highest_shear_cm1([2], w)[0] == pytest.approx(w / np.sqrt(2), rel=1e-12)
    assert chain.lowest_breathing_cm1([2], w)[0] == pytest.approx(w / np.sqrt(2), rel=1e-12)
    assert chain.highest_shear_cm1([3], w)[0] / w == pytest.approx(0.8660254, abs=1e-7)
    assert chain.lowest_breathing_cm1([3], w)[0] / w == pytest.approx(0.5, abs=1e-12)
    assert chain.highest_shear_cm1([1], w)[0] == 0.0


def test_acta_phys_pol_force_constant_gives_bulk_shear_near_31_5():
    """K_x = 2.7e19 N/m^3 ("Raman Spectroscopy of Shear Modes in a Few-Layer MoS2", Acta Phys.
    Pol. A 129, A-33 (2016)) with MoS2's mass per area (160.07 u per (sqrt(3)/2) a^2,
    a = 3.16 A; value from memory) gives w_bulk = sqrt(4K/mu) near 31.5 cm^-1, consistent with
    the ~32 cm^-1 bulk shear mode of Zhang et al. 2013 (from memory); the chain's highest branch
    agrees with numpy eigh of the dynamical matrix for N = 2..12."""
    mu = chain.mass_per_area(160.07, 3.16)
    assert mu == pytest.approx(3.074e-6, rel=2e-3)
    w_bulk = chain.bulk_frequency_cm1(2.7e19, mu)
    assert w_bulk == pytest.approx(31.5, abs=0.15)
    assert abs(w_bulk - 32.0) < 1.5
    assert chain.force_constant_n_m3(w_bulk, mu) == pytest.approx(2.7e19, rel=1e-10)
    for n in range(2, 13):
        ref = _reference_chain(n, 2.7e19, mu)
        assert chain.highest_shear_cm1([n], w_bulk)[0] == pytest.approx(ref[-1], rel=1e-9)
        assert chain.lowest_breathing_cm1([n], w_bulk)[0] == pytest.approx(ref[1], rel=1e-9)
        np.testing.assert_allclose(chain.chain_branches_cm1(n, w_bulk), ref[1:], rtol=1e-9)


def test_fit_bulk_frequency_from_known_flakes():
    """The bulk frequency fitted to shear modes at 2..5L drawn around Zhang et al.'s chain
    (32 cm^-1, from memory) with 0.3 cm^-1 noise comes back within its stated error."""
    rng = np.random.default_rng(4)
    n = np.array([2, 2, 3, 3, 4, 5, 5])
    w = 32.0 * np.cos(np.pi / (2 * n)) + rng.normal(0, 0.3, n.size)
    fit = chain.fit_bulk_frequency("shear", n, w, np.full(n.size, 0.3))
    assert abs(fit.bulk_cm1 - 32.0) < 3 * fit.bulk_err_cm1
    assert 0.05 < fit.bulk_err_cm1 < 0.5
    with pytest.raises(InputError, match="2 layers"):
        chain.fit_bulk_frequency("shear", [1, 2], [1.0, 22.0], [0.3, 0.3])
    with pytest.raises(InputError, match="branch"):
        chain.fit_bulk_frequency("twist", [2], [22.0], [0.3])
