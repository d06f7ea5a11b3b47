"""The heat model against standard results computed with general-purpose scipy routines."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, special

from flakebook.errors import InputError
from flakebook.thermal import model

GAMMA = 0.5772156649015329


def _reference_g(big_r: float, w: float, k: int) -> float:
    """2 pi kappa t R_m by scipy quad of the standard disk profile with scipy's E1, weighted by
    I^k over the disk (REFERENCES.md: radial conduction with a Gaussian source)."""

    def theta(r: float) -> float:
        return (
            math.log(big_r / r)
            - special.exp1(2 * r * r / w**2) / 2
            + special.exp1(2 * big_r**2 / w**2) / 2
        )

    def wt(r: float) -> float:
        return math.exp(-2 * k * r * r / w**2) * r

    num = integrate.quad(lambda r: theta(r) * wt(r), 0, big_r, points=[w], limit=200)[0]
    den = integrate.quad(wt, 0, big_r, points=[w], limit=200)[0]
    return num / den


@pytest.mark.parametrize("ratio", [5, 8, 20, 50, 200])
def test_closed_form_matches_quadrature_for_large_disks(ratio):
    """Standard result (REFERENCES.md): for R/W >= 5, 2 pi kappa t R_m = ln(R/W) + gamma/2 to
    1e-6 with intensity weighting; checked against scipy.integrate.quad with scipy.special.exp1."""
    ref = _reference_g(ratio * 0.5, 0.5, 1)
    assert abs(model.geometry_factor_closed_form(ratio * 0.5, 0.5) - ref) < 1e-6
    assert abs(math.log(ratio) + GAMMA / 2 - ref) < 1e-6


def test_check_values_of_references():
    """REFERENCES.md check values: R = 2.5 um, W = 0.5 um gives 1.89805 (intensity) and
    2.04189 (I^2, by quadrature of the standard profile)."""
    assert model.geometry_factor_quadrature(2.5, 0.5) == pytest.approx(1.89805, abs=1e-5)
    assert model.geometry_factor_quadrature(2.5, 0.5, "confocal") == pytest.approx(
        2.04189, abs=1e-5
    )
    assert model.geometry_factor_closed_form(2.5, 0.5, "confocal") == pytest.approx(
        2.04189, abs=1e-5
    )
    assert _reference_g(2.5, 0.5, 2) == pytest.approx(2.04189, abs=1e-5)


@pytest.mark.parametrize("ratio", [3, 4, 5, 10, 20, 50])
@pytest.mark.parametrize("weighting,k", [("intensity", 1), ("confocal", 2)])
def test_numerical_solver_agrees_with_closed_form(ratio, weighting, k):
    """The finite-volume solver against the closed form (standard result, REFERENCES.md) to
    0.1% for R/W from 3 to 50, both weightings."""
    sol = model.solve_membrane(30.0, 1.938, 0.5 * ratio, 0.5, weighting=weighting)
    closed = math.log(ratio) + GAMMA / 2 + 0.5 * math.log(2 * k / (1 + k))
    assert sol.geometry_factor == pytest.approx(closed, rel=1e-3)
    # the absolute rise is the same number: T_m - T_a = G P / (2 pi kappa t)
    assert sol.temperature_rise_k == pytest.approx(
        closed * 1e-4 / (2 * math.pi * 30.0 * 1.938e-9), rel=1e-3
    )


@pytest.mark.parametrize("ratio", [1.2, 1.5])
def test_closed_form_parts_from_solver_below_r_over_w_2(ratio):
    """Below R/W ~ 2 the closed form misses the beam's tail beyond the edge: it parts from the
    solver by more than 1%, while the solver still follows the quadrature of the standard
    profile (scipy quad, E1) to 0.1%. At R/W = 2 they still agree to 0.05%."""
    sol = model.solve_membrane(30.0, 1.938, 0.5 * ratio, 0.5)
    closed = math.log(ratio) + GAMMA / 2
    assert abs(closed / sol.geometry_factor - 1) > 0.01
    assert sol.geometry_factor == pytest.approx(_reference_g(0.5 * ratio, 0.5, 1), rel=1e-3)
    sol2 = model.solve_membrane(30.0, 1.938, 1.0, 0.5)
    assert sol2.geometry_factor == pytest.approx(math.log(2) + GAMMA / 2, rel=5e-4)


def test_supported_annulus_approaches_edge_at_sink():
    """Physics (common practice, no source): as the interface conductance grows, the supported
    annulus is clamped to the sink and the result tends to the edge-at-sink disk; for smaller g
    the annulus adds resistance, monotonically."""
    edge = model.geometry_factor_closed_form(2.5, 0.5)
    gs = [1e5, 1e6, 1e7, 1e8, 1e9, 1e10]
    vals = [
        model.solve_membrane(30.0, 1.938, 2.5, 0.5, interface_conductance_w_m2k=g).geometry_factor
        for g in gs
    ]
    assert all(a > b for a, b in zip(vals, vals[1:]))
    assert vals[-1] == pytest.approx(edge, rel=2e-3)
    assert vals[0] > edge * 1.1


def test_supported_flake_against_k0_green_function():
    """A flake resting on the substrate: the sheet's Green's function with heat loss is
    K0(rho/L) / (2 pi kappa t), L = sqrt(kappa t / g) (standard result); the weighted mean of a
    Gaussian source seen by a Gaussian weight is K0 averaged over the difference of two
    Gaussians. scipy.special.k0 and quad against the model's E1 form."""
    kappa, t_nm, w_um = 30.0, 1.938, 0.5
    for g in (1e6, 1e7, 1e8):
        for weighting, k in (("intensity", 1), ("confocal", 2)):
            length = math.sqrt(kappa * t_nm * 1e-9 / g)
            s2 = (w_um * 1e-6) ** 2 / 4 * (1 + 1 / k)
            ref = integrate.quad(
                lambda rho, s2=s2, length=length: (
                    special.k0(rho / length) * math.exp(-(rho**2) / (2 * s2)) * rho / s2
                ),
                0,
                20 * math.sqrt(s2),
                limit=200,
            )[0]
            got = model.supported_geometry_factor(g, kappa, t_nm, w_um, weighting)
            assert got == pytest.approx(ref, rel=1e-6)


def test_interface_conductance_round_trip():
    """g fitted to a supported series returns the g that made it (within the model)."""
    g = 3.0e7
    gf = model.supported_geometry_factor(g, 30.0, 1.938, 0.5)
    r_m = gf / (2 * math.pi * 30.0 * 1.938e-9)
    assert model.interface_conductance_from_supported(r_m, 30.0, 1.938, 0.5) == pytest.approx(
        g, rel=1e-8
    )


def test_kappa_alpha_zero_equals_constant():
    """kappa(T) with alpha = 0 is the constant case (definition)."""
    a = model.solve_membrane(30.0, 1.938, 2.5, 0.5, 2e-5)
    b = model.solve_membrane(30.0, 1.938, 2.5, 0.5, 2e-5, kappa_alpha=0.0, nonlinear="iterate")
    assert b.temperature_rise_k == pytest.approx(a.temperature_rise_k, rel=1e-12)


def test_kappa_of_t_kirchhoff_and_iteration_agree():
    """The Kirchhoff transform (standard result: U = integral of kappa(T)/kappa_a dT obeys the
    linear equation) and a fixed-point iteration agree; a falling kappa(T) heats more."""
    lin = model.solve_membrane(30.0, 1.938, 2.5, 0.5, 2e-5)
    for alpha in (0.5, 1.0, 1.3):
        kir = model.solve_membrane(30.0, 1.938, 2.5, 0.5, 2e-5, kappa_alpha=alpha)
        it = model.solve_membrane(
            30.0, 1.938, 2.5, 0.5, 2e-5, kappa_alpha=alpha, nonlinear="iterate"
        )
        assert it.temperature_rise_k == pytest.approx(kir.temperature_rise_k, rel=1e-4)
        assert kir.temperature_rise_k > lin.temperature_rise_k


def test_thermal_runaway_is_refused():
    """No steady state when kappa falls too fast with T: a clear InputError."""
    with pytest.raises(InputError, match="runaway"):
        model.solve_membrane(30.0, 1.938, 2.5, 0.5, 3e-4, kappa_alpha=1.5)


def test_zero_offset_equals_centred_solve():
    """An off-centre solve with zero offset is the centred one (definition)."""
    a = model.solve_membrane(30.0, 1.938, 2.5, 0.5)
    b = model.solve_membrane(30.0, 1.938, 2.5, 0.5, beam_offset_um=0.0)
    c = model.solve_membrane(30.0, 1.938, 2.5, 0.5, beam_offset_um=1e-9)
    assert b.geometry_factor == a.geometry_factor
    assert c.geometry_factor == pytest.approx(a.geometry_factor, rel=1e-9)


@pytest.mark.parametrize("w,big_r,d", [(0.2, 5.0, 2.0), (0.2, 5.0, 3.0), (0.3, 5.0, 1.5)])
def test_off_centre_against_method_of_images(w, big_r, d):
    """The disk's Green's function by the method of images (standard result): a source at d
    sees its image at R^2/d, so for W << R - d the geometry factor changes by ln(1 - d^2/R^2)."""
    g0 = model.solve_membrane(30.0, 1.938, big_r, w).geometry_factor
    gd = model.solve_membrane(30.0, 1.938, big_r, w, beam_offset_um=d).geometry_factor
    assert gd - g0 == pytest.approx(math.log(1 - d * d / big_r**2), abs=1e-3)


def test_profile_matches_standard_expression():
    """profile() is the REFERENCES.md expression, finite at the centre."""
    r = np.array([0.0, 1e-6, 0.1, 0.5, 1.0, 2.5])
    got = model.profile(r, 2.5, 0.5)
    for ri, gi in zip(r[1:], got[1:]):
        ref = math.log(2.5 / ri) - special.exp1(2 * ri**2 / 0.25) / 2 + special.exp1(50) / 2
        assert gi == pytest.approx(ref, rel=1e-9)
    assert got[0] == pytest.approx(got[1], rel=1e-6)


def test_bad_geometry_refused():
    """W >= R and non-positive sizes: clear InputErrors."""
    with pytest.raises(InputError, match="not smaller than the hole radius"):
        model.solve_membrane(30.0, 1.938, 0.5, 0.5)
    with pytest.raises(InputError, match="hole radius"):
        model.geometry_factor_quadrature(-1.0, 0.5)
    with pytest.raises(InputError, match="weighting"):
        model.geometry_factor_closed_form(2.5, 0.5, "peak")
    with pytest.raises(InputError, match="offset"):
        model.solve_membrane(30.0, 1.938, 2.5, 0.5, beam_offset_um=3.0)


def test_kappa_of_t_off_centre_tends_to_centred():
    """kappa(T) with a beam off centre (Kirchhoff transform of the harmonic solve) tends to
    the centred kappa(T) solve as the offset goes to zero, and a larger offset (nearer the cold
    edge) reads cooler (definition; method of images for the sign)."""
    c = model.solve_membrane(30.0, 1.938, 2.5, 0.5, 2e-5, kappa_alpha=1.0)
    o = model.solve_membrane(30.0, 1.938, 2.5, 0.5, 2e-5, kappa_alpha=1.0, beam_offset_um=1e-6)
    far = model.solve_membrane(30.0, 1.938, 2.5, 0.5, 2e-5, kappa_alpha=1.0, beam_offset_um=0.8)
    assert o.temperature_rise_k == pytest.approx(c.temperature_rise_k, rel=1e-6)
    assert far.temperature_rise_k < c.temperature_rise_k


def test_supported_annulus_with_kappa_of_t_iterates():
    """A supported annulus with kappa(T) is solved by fixed-point iteration; alpha = 0 there is
    the linear supported solve (definition)."""
    lin = model.solve_membrane(30.0, 1.938, 2.5, 0.5, 2e-5, interface_conductance_w_m2k=1e7)
    zero = model.solve_membrane(
        30.0, 1.938, 2.5, 0.5, 2e-5, interface_conductance_w_m2k=1e7, nonlinear="iterate"
    )
    hot = model.solve_membrane(
        30.0, 1.938, 2.5, 0.5, 2e-5, interface_conductance_w_m2k=1e7, kappa_alpha=1.0
    )
    assert zero.temperature_rise_k == pytest.approx(lin.temperature_rise_k, rel=1e-12)
    assert hot.iterations > 1 and hot.temperature_rise_k > lin.temperature_rise_k
    with pytest.raises(InputError, match="Kirchhoff"):
        model.solve_membrane(
            30.0,
            1.938,
            2.5,
            0.5,
            2e-5,
            interface_conductance_w_m2k=1e7,
            kappa_alpha=1.0,
            nonlinear="kirchhoff",
        )


def test_hole_with_supported_annulus_against_bessel_edge_resistance():
    """Standard result (fin with lateral loss): beyond the hole the flake on the substrate is
    a fin of healing length L = sqrt(kappa t / g), whose edge resistance is K0(R/L) /
    (2 pi kappa t (R/L) K1(R/L)); the Raman-weighted rise over the hole is the edge-at-sink
    disk's plus that edge rise, so G = G_disk + K0(x)/(x K1(x)), x = R/L. scipy.special k0, k1
    against the finite-volume solve, from L << W to L ~ R."""
    kappa, t_nm, r_um, w_um = 30.0, 1.938, 2.5, 0.5
    g_disk = model.solve_membrane(kappa, t_nm, r_um, w_um).geometry_factor
    for g in (1e9, 1e7, 1e5, 1e4):
        x = r_um / (math.sqrt(kappa * t_nm * 1e-9 / g) * 1e6)
        want = g_disk + special.k0(x) / (x * special.k1(x))
        got = model.solve_membrane(
            kappa, t_nm, r_um, w_um, interface_conductance_w_m2k=g
        ).geometry_factor
        assert got == pytest.approx(want, rel=1e-3)
