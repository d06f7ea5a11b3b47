"""The transfer-matrix stack against tmm, physical identities and textbook formulas."""

import numpy as np
import pytest
import tmm

from flakebook.errors import InputError
from flakebook.optics.stack import (
    cone_nodes,
    repeated_film_reflectance,
    stack_admittance,
    stack_reflectance,
    transfer_matrix,
)


def _random_stack(rng):
    n_films = int(rng.integers(1, 6))
    ns = []
    for _ in range(n_films):
        k = rng.uniform(0.0, 2.5) if rng.random() < 0.6 else 0.0
        ns.append(complex(rng.uniform(1.2, 5.0), k))
    ds = list(rng.uniform(0.5, 400.0, n_films))
    base = complex(rng.uniform(1.3, 4.5), rng.uniform(0.0, 0.5))
    theta = np.deg2rad(rng.uniform(0.0, 70.0))
    lam = rng.uniform(400.0, 900.0)
    return ns, ds, base, theta, lam


def test_against_tmm_random_stacks():
    """R, T and every film's absorbed fraction agree with the general-purpose tmm package
    (S. Byrnes, PyPI 'tmm', coh_tmm / absorp_in_each_layer) to 1e-9: random stacks of 1-5 films,
    absorbing and not, s and p, 0-70 degrees, 400-900 nm."""
    rng = np.random.default_rng(20240)
    for _ in range(25):
        ns, ds, base, theta, lam = _random_stack(rng)
        for pol in "sp":
            ref = tmm.coh_tmm(pol, [1.0, *ns, base], [np.inf, *ds, np.inf], theta, lam)
            absorbed = tmm.absorp_in_each_layer(ref)[1:-1]
            res = transfer_matrix(ns, ds, 1.0, base, lam, np.sin(theta), pol)
            assert res.reflectance == pytest.approx(ref["R"], abs=1e-9)
            assert res.transmittance == pytest.approx(ref["T"], abs=1e-9)
            assert res.absorptance == pytest.approx(sum(absorbed), abs=1e-9)
            for ours, theirs in zip(res.absorptance_films, absorbed):
                assert ours == pytest.approx(theirs, abs=1e-9)
            fast = stack_reflectance(ns, ds, 1.0, base, lam, np.sin(theta), pol)
            assert fast == pytest.approx(ref["R"], abs=1e-9)


def test_vectorised_equals_pointwise():
    """One broadcast call over wavelength x angle x thickness equals point-by-point calls
    (common practice, no source: vectorisation must not change results)."""
    lam = np.linspace(400, 800, 7)[:, None, None]
    st = np.linspace(0, 0.8, 5)[None, :, None]
    d = np.array([0.0, 3.0, 50.0])[None, None, :]
    n1 = 4.5 + 1.2j
    res = transfer_matrix([n1, 1.46], [d, 285.0], 1.0, 3.9 + 0.02j, lam, st, "p")
    for i in range(7):
        for j in range(5):
            for k in range(3):
                one = transfer_matrix(
                    [n1, 1.46],
                    [d[0, 0, k], 285.0],
                    1.0,
                    3.9 + 0.02j,
                    lam[i, 0, 0],
                    st[0, j, 0],
                    "p",
                )
                assert res.reflectance[i, j, k] == pytest.approx(one.reflectance, abs=1e-14)
                assert res.absorptance[i, j, k] == pytest.approx(one.absorptance, abs=1e-14)


def test_energy_conservation_and_lossless():
    """R + T + A = 1 for every stack; a lossless stack absorbs nothing (physics: energy
    conservation, common practice, no source)."""
    rng = np.random.default_rng(3)
    for _ in range(20):
        ns, ds, base, theta, lam = _random_stack(rng)
        for pol in "sp":
            r = transfer_matrix(ns, ds, 1.0, base, lam, np.sin(theta), pol)
            assert r.reflectance + r.transmittance + r.absorptance == pytest.approx(1.0, abs=1e-12)
            lossless = [complex(n.real, 0.0) for n in ns]
            r0 = transfer_matrix(lossless, ds, 1.0, base.real, lam, np.sin(theta), pol)
            assert abs(r0.absorptance) < 1e-12
            assert r0.reflectance + r0.transmittance == pytest.approx(1.0, abs=1e-12)


def test_uniaxial_film_against_airy_formula():
    """A lossless uniaxial film (optic axis normal to the layers) on glass in p polarisation
    against the textbook Airy sum with the uniaxial Fresnel coefficient
    r01 = (n_o n_e cos t - sqrt(n_e^2 - sin^2 t)) / (n_o n_e cos t + sqrt(n_e^2 - sin^2 t))
    and phase k0 d (n_o/n_e) sqrt(n_e^2 - sin^2 t) (P. Yeh, Optical Waves in Layered Media,
    1988; formula from memory, re-derived from Maxwell's equations). s polarisation sees n_o
    alone."""
    n_o, n_e, n2, d = 2.2, 1.7, 1.5, 180.0
    for theta_deg in (0.0, 30.0, 60.0):
        for lam in (450.0, 633.0):
            t = np.deg2rad(theta_deg)
            s = np.sin(t)
            k0 = 2 * np.pi / lam
            kz1 = np.sqrt(n_e**2 - s**2) * n_o / n_e  # k_z/k0 in the film, TM
            kz2 = np.sqrt(n2**2 - s**2)
            # Admittance-like TM quantities eps/kz: interface coefficient (a - b)/(a + b).
            a0, a1, a2 = 1.0 / np.cos(t), n_o**2 / kz1, n2**2 / kz2
            r01 = (a0 - a1) / (a0 + a1)
            r12 = (a1 - a2) / (a1 + a2)
            phase = np.exp(2j * k0 * d * kz1)
            r = (r01 + r12 * phase) / (1 + r01 * r12 * phase)
            ours = transfer_matrix([n_o], [d], 1.0, n2, lam, s, "p", n_films_e=[n_e])
            assert ours.reflectance == pytest.approx(abs(r) ** 2, abs=1e-12)
            # Textbook form of r01 gives the same magnitude.
            r01_book = (n_o * n_e * np.cos(t) - np.sqrt(n_e**2 - s**2)) / (
                n_o * n_e * np.cos(t) + np.sqrt(n_e**2 - s**2)
            )
            assert abs(r01) == pytest.approx(abs(r01_book), abs=1e-12)
            s_pol = transfer_matrix([n_o], [d], 1.0, n2, lam, s, "s", n_films_e=[n_e])
            s_iso = transfer_matrix([n_o], [d], 1.0, n2, lam, s, "s")
            assert s_pol.reflectance == pytest.approx(s_iso.reflectance, abs=1e-15)


def test_uniaxial_absorbing_conserves_energy():
    """An absorbing uniaxial film at oblique incidence: R + T + A = 1 and A > 0 (physics)."""
    res = transfer_matrix(
        [4.8 + 1.5j, 1.46], [20.0, 285.0], 1.0, 3.9 + 0.02j, 550.0, 0.7, "p", n_films_e=[2.9, None]
    )
    assert res.reflectance + res.transmittance + res.absorptance == pytest.approx(1.0, abs=1e-12)
    assert res.absorptance_films[0] > 0.01


def test_repeated_film_equals_general_stack():
    """The N-layer shortcut (phase factor to the power N) equals the general transfer matrix
    for N = 0..60 (common practice, no source: the same algebra)."""
    lam = np.linspace(400, 800, 9)[None, :, None]
    st = np.linspace(0, 0.9, 4)[None, None, :]
    n_flake, n_e = 5.0 + 1.1j, 2.9 + 0.0j
    for pol in "sp":
        y_below = stack_admittance([1.46], [285.0], 1.0, 3.9 + 0.02j, lam, st, pol)
        counts = np.array([0, 1, 4, 5, 6, 30, 60])
        fast = repeated_film_reflectance(
            n_flake, 0.646, counts, y_below, 1.0, lam, st, pol, n_film_e=n_e
        )
        for i, n in enumerate(counts):
            ref = transfer_matrix(
                [n_flake, 1.46],
                [n * 0.646, 285.0],
                1.0,
                3.9 + 0.02j,
                lam,
                st,
                pol,
                n_films_e=[n_e, None],
            )
            np.testing.assert_allclose(fast[i, 0], ref.reflectance[0], atol=1e-12)


def test_opaque_thick_film_does_not_overflow():
    """A 1 mm absorbing film reflects like a half-space and transmits nothing (physics)."""
    n = 0.2 + 3.5j
    res = transfer_matrix([n], [1e6], 1.0, 1.5, 600.0, 0.3, "s")
    half = transfer_matrix([], [], 1.0, n, 600.0, 0.3, "s")
    assert np.isfinite(res.reflectance)
    assert res.reflectance == pytest.approx(half.reflectance, abs=1e-12)
    assert res.transmittance == pytest.approx(0.0, abs=1e-12)


def test_cone_nodes_and_bad_input():
    """A uniformly filled pupil: weights sum to 1 and the mean of sin^2 over the cone is
    NA^2/2 (common practice, no source); NA >= 1 in air and bad polarisations are refused."""
    s, w = cone_nodes(0.9, 16)
    assert w.sum() == pytest.approx(1.0)
    assert np.sum(w * s**2) == pytest.approx(0.9**2 / 2, rel=1e-10)
    assert cone_nodes(0.0)[0].tolist() == [0.0]
    with pytest.raises(InputError):
        cone_nodes(1.2)
    with pytest.raises(InputError):
        transfer_matrix([1.5], [10.0], 1.0, 1.5, 500.0, 0.0, "x")
