"""Absorptance at the laser line and the Si Raman attenuation, against tmm and physics."""

import numpy as np
import pytest
import tmm

from flakebook.errors import InputError
from flakebook.optics.absorptance import (
    absorptance,
    absorptance_spread,
    raman_wavelength_nm,
    si_raman_attenuation,
    si_raman_likelihood,
)
from flakebook.optics.materials import get_material
from flakebook.optics.stack import cone_nodes
from flakebook.optics.substrate import Hole, Substrate

M = get_material("MoSe2")
SUB = Substrate.from_oxide(285.0)
LASER = 532.0


def _nk(name, layers=None):
    return complex(get_material(name).nk(LASER, layers) if layers else get_material(name).nk(LASER))


def test_geometries_against_tmm():
    """Absorbed fraction in a 3L flake at 532 nm, normal incidence: supported on 285 nm
    SiO2/Si, over an open hole, over a hole etched to the Si, and over a 300 nm gap above gold,
    equal tmm's absorp_in_each_layer (tmm package)."""
    n = complex(M.nk(LASER, 3))
    d = 3 * M.layer_spacing_nm
    ox, si, au = _nk("SiO2"), _nk("Si"), _nk("Au")
    cases = [
        ("supported", None, [1, n, ox, si], [np.inf, d, 285, np.inf]),
        ("suspended", Hole("open"), [1, n, 1], [np.inf, d, np.inf]),
        ("suspended", Hole("si"), [1, n, 1, si], [np.inf, d, 285, np.inf]),
        ("suspended", Hole("au", 300.0), [1, n, 1, au], [np.inf, d, 300, np.inf]),
    ]
    for geometry, hole, ns, ds in cases:
        ref = tmm.coh_tmm("s", ns, ds, 0.0, LASER)
        ours = absorptance(M, 3, LASER, SUB, geometry=geometry, hole=hole)
        assert ours.absorptance_flake == pytest.approx(tmm.absorp_in_each_layer(ref)[1], abs=1e-9)
        assert ours.reflectance == pytest.approx(ref["R"], abs=1e-9)
        assert ours.transmittance == pytest.approx(ref["T"], abs=1e-9)
        total = ours.absorptance_flake + ours.reflectance + ours.transmittance
        assert total + ours.absorptance_below == pytest.approx(1.0, abs=1e-12)


def test_objective_cone_against_tmm():
    """With NA 0.7 the result is the uniform-pupil average of s and p tmm values at the
    quadrature nodes (tmm package)."""
    n = complex(M.nk(LASER, 2))
    d = 2 * M.layer_spacing_nm
    st, w = cone_nodes(0.7, 6)
    ref = 0.0
    for s, wt in zip(st, w):
        for pol in "sp":
            data = tmm.coh_tmm(pol, [1, n, 1], [np.inf, d, np.inf], np.arcsin(s), LASER)
            ref += 0.5 * wt * tmm.absorp_in_each_layer(data)[1]
    ours = absorptance(
        M, 2, LASER, None, geometry="suspended", hole=Hole("open"), na_objective=0.7, n_angles=6
    )
    # The flake is uniaxial for N > 3 only; 2L uses Hsu's isotropic data, as tmm does.
    assert ours.absorptance_flake == pytest.approx(ref, abs=1e-9)


def test_transparent_membrane_absorbs_nothing():
    """hBN (k = 0 in the visible) absorbs nothing (physics: a lossless stack)."""
    res = absorptance(get_material("hBN"), 10, LASER, SUB, geometry="suspended", hole=Hole("au"))
    assert abs(res.absorptance_flake) < 1e-12


def test_deep_hole_warning_and_depth_limits():
    """Holes deeper than about 1 um carry a warning (issue: coherence and defocus); a hole
    etched deeper than the films is refused."""
    deep = absorptance(M, 1, LASER, SUB, geometry="suspended", hole=Hole("au", 2000.0))
    assert deep.warnings and "1 um" in deep.warnings[0]
    assert not absorptance(M, 1, LASER, SUB, geometry="suspended").warnings
    with pytest.raises(InputError, match="deeper"):
        absorptance(M, 1, LASER, SUB, geometry="suspended", hole=Hole("si", 500.0))
    with pytest.raises(InputError):
        absorptance(M, 0, LASER, SUB)


def test_spread_for_monte_carlo():
    """The spread from depth and NA uncertainty: zero for exact inputs, and the draws' mean
    close to the central value for small uncertainties (common practice, no source)."""
    hole = Hole("au", 500.0)
    exact = absorptance_spread(
        M, 3, LASER, SUB, geometry="suspended", hole=hole, draws=10, rng=np.random.default_rng(1)
    )
    central = absorptance(M, 3, LASER, SUB, geometry="suspended", hole=hole).absorptance_flake
    assert exact.std == pytest.approx(0.0, abs=1e-12)
    assert exact.mean == pytest.approx(central, abs=1e-12)
    spread = absorptance_spread(
        M,
        3,
        LASER,
        SUB,
        geometry="suspended",
        hole=hole,
        depth_err_nm=30.0,
        na_objective=0.5,
        na_objective_err=0.05,
        draws=400,
        rng=np.random.default_rng(2),
    )
    assert spread.std > 0.005
    assert spread.p16 < spread.mean < spread.p84
    one = absorptance(
        M,
        3,
        LASER,
        SUB,
        geometry="suspended",
        hole=Hole("au", 530.0),
        na_objective=0.5,
        n_angles=12,
    )
    lo, hi = np.min(spread.samples), np.max(spread.samples)
    assert lo <= one.absorptance_flake <= hi


def test_si_raman_attenuation():
    """The Si line (520.7 cm^-1, common practice) under a flake weakens with N; with no flake
    the ratio is 1; the 532 nm line's Stokes Si line lies at 547.1 nm (1/lambda arithmetic);
    the likelihood peaks at the N whose model ratio is measured."""
    assert raman_wavelength_nm(532.0, 520.7) == pytest.approx(547.15, abs=0.02)
    ratio = si_raman_attenuation(M, [0, 1, 2, 3, 5, 10], SUB)
    assert ratio[0] == pytest.approx(1.0, abs=1e-12)
    assert np.all(np.diff(ratio) < 0)
    like = si_raman_likelihood(float(ratio[3]), 0.02, M, SUB, max_layers=15)
    assert like.shape == (16,) and int(np.argmax(like)) == 2
