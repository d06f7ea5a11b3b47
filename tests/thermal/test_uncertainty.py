"""Monte Carlo kappa: the JSON contract, the layer posterior, and honest intervals."""

from __future__ import annotations

import math

import numpy as np
import pytest

from flakebook.errors import InputError
from flakebook.thermal import series
from flakebook.thermal.inversion import HeatModel, invert_kappa
from flakebook.thermal.model import geometry_factor_closed_form
from flakebook.thermal.uncertainty import kappa_with_uncertainty

SPACING = 0.646  # MoSe2 layer spacing, REFERENCES.md (from memory)
KAPPA_KEYS = {
    "kappa_w_mk",
    "kappa_median_w_mk",
    "kappa_p16_w_mk",
    "kappa_p84_w_mk",
    "thermal_resistance_k_per_w",
    "temperature_rise_k_per_mw_incident",
    "absorptance",
    "thickness_nm",
    "variance_share",
    "warnings",
}
ERRS = dict(
    chi_t_err_cm1_per_k=0.0003,
    chi_p_err_cm1_per_mw=0.1,
    absorptance_err=0.01,
    hole_radius_err_um=0.05,
    beam_radius_err_um=0.05,
)


def _run(**kw):
    args = dict(
        chi_t_cm1_per_k=-0.0056,
        chi_p_cm1_per_mw=-2.9,
        absorptance=0.10,
        hole_radius_um=2.5,
        beam_radius_um=0.5,
        layer_spacing_nm=SPACING,
        layers=3,
    )
    args.update(kw)
    return kappa_with_uncertainty(**args)


def test_exact_inputs_give_the_worked_example_everywhere():
    """REFERENCES.md worked example with exact inputs: kappa = 30.1 W/m/K, and the median and
    percentiles equal it (INTERFACE.md: all equal when every input is exact)."""
    res = _run()
    d = res.to_dict()
    assert set(d) == KAPPA_KEYS
    assert d["kappa_w_mk"] == pytest.approx(30.1, abs=0.05)
    assert d["kappa_median_w_mk"] == d["kappa_p16_w_mk"] == d["kappa_p84_w_mk"] == d["kappa_w_mk"]
    assert d["thickness_nm"] == pytest.approx(3 * SPACING)
    assert any("optical phonons" in w for w in d["warnings"])


def test_variance_shares_sum_to_one_and_follow_the_errors():
    """INTERFACE.md: each input's share of var(ln kappa), normalised to sum to 1, keys named
    there. With only chi_T uncertain, all of it is chi_T's; the first-order share of an input
    is (d ln kappa / d ln x)^2 (rel err)^2 over the sum (linear error propagation, common
    practice)."""
    res = _run(**ERRS)
    shares = res.variance_share
    assert set(shares) == {
        "chi_t",
        "chi_p",
        "absorptance",
        "hole_radius",
        "beam_radius",
        "hole_depth",
        "layers",
    }
    assert sum(shares.values()) == pytest.approx(1.0)
    g = geometry_factor_closed_form(2.5, 0.5)
    lin = {
        "chi_t": (0.0003 / 0.0056) ** 2,
        "chi_p": (0.1 / 2.9) ** 2,
        "absorptance": (0.01 / 0.1) ** 2,
        "hole_radius": (0.05 / 2.5 / g) ** 2,
        "beam_radius": (0.05 / 0.5 / g) ** 2,
    }
    total = sum(lin.values())
    for key, v in lin.items():
        assert shares[key] == pytest.approx(v / total, abs=0.03)
    only = _run(chi_t_err_cm1_per_k=0.0003)
    assert only.variance_share["chi_t"] == pytest.approx(1.0)
    assert only.kappa_p16_w_mk < only.kappa_w_mk < only.kappa_p84_w_mk


def test_correlated_coefficients_share_one_key():
    """INTERFACE.md: correlated inputs are one group, keyed chi_t+chi_p; a positive
    correlation between chi_T and chi_P narrows the spread of their ratio (error propagation
    of a ratio, common practice)."""
    corr = _run(chi_t_err_cm1_per_k=0.0003, chi_p_err_cm1_per_mw=0.15, chi_correlation=0.8)
    indep = _run(chi_t_err_cm1_per_k=0.0003, chi_p_err_cm1_per_mw=0.15)
    assert "chi_t+chi_p" in corr.variance_share and "chi_t" not in corr.variance_share
    assert corr.variance_share["chi_t+chi_p"] == pytest.approx(1.0)
    width = lambda r: r.kappa_p84_w_mk - r.kappa_p16_w_mk  # noqa: E731
    assert width(corr) < 0.6 * width(indep)


def test_layer_posterior():
    """DESIGN.md: the posterior runs over N = 1..N_max plus 'more'; more than 5% in 'more' is
    refused asking for the layer number; less is dropped, renormalised and said."""
    post = np.zeros(16)
    post[2], post[3], post[-1] = 0.9, 0.08, 0.02
    res = _run(layers=None, layer_posterior=post)
    assert res.layers == 3 and res.thickness_nm == pytest.approx(3 * SPACING)
    assert any("renormalised" in w for w in res.warnings)
    assert res.variance_share["layers"] > 0.9
    post[-1] = 0.2
    with pytest.raises(InputError, match="give the layer number"):
        _run(layers=None, layer_posterior=post)
    with pytest.raises(InputError, match="either the layer number"):
        _run(layers=3, layer_posterior=post)


def test_absorptance_of_hole_depth():
    """A callable absorptance(depth) and the same values as a table give the same result; the
    depth's spread enters as hole_depth."""

    def a_of_depth(depth_nm):
        return 0.10 + 0.0004 * (np.asarray(depth_nm) - 250.0)

    depths = np.linspace(100, 400, 61)
    table = (depths, a_of_depth(depths))
    a = _run(absorptance=a_of_depth, hole_depth_nm=250.0, hole_depth_err_nm=10.0)
    b = _run(absorptance=table, hole_depth_nm=250.0, hole_depth_err_nm=10.0)
    assert a.absorptance == pytest.approx(0.10)
    assert a.kappa_p84_w_mk == pytest.approx(b.kappa_p84_w_mk, rel=1e-9)
    assert a.variance_share["hole_depth"] == pytest.approx(1.0)
    # d ln A = 0.004 / 0.1 per 10 nm: a 4% spread in kappa (first order)
    half = (a.kappa_p84_w_mk - a.kappa_p16_w_mk) / 2 / a.kappa_w_mk
    assert half == pytest.approx(0.04, rel=0.1)
    with pytest.raises(InputError, match="hole depth"):
        _run(absorptance=a_of_depth)


def test_seed_and_draws():
    """Draws and seed are settable; the same seed repeats the result."""
    a = _run(**ERRS, draws=2000, seed=11)
    b = _run(**ERRS, draws=2000, seed=11)
    c = _run(**ERRS, draws=2000, seed=12)
    assert a.kappa_p16_w_mk == b.kappa_p16_w_mk
    assert a.kappa_p16_w_mk != c.kappa_p16_w_mk
    assert a.samples_w_mk.size == 2000
    with pytest.raises(InputError, match="draws"):
        _run(draws=10)


def test_kappa_of_t_monte_carlo_matches_solver():
    """The vectorised Kirchhoff path of the Monte Carlo reproduces the finite-volume solver's
    inversion (REFERENCES.md disk profile, Kirchhoff transform) at the central inputs."""
    m = HeatModel(kappa_alpha=1.0, powers_mw=(0.02, 0.05, 0.1, 0.15, 0.2))
    res = _run(chi_t_err_cm1_per_k=1e-7, model=m, draws=200)
    fv = invert_kappa(-0.0056, -2.9, 0.1, 3 * SPACING, 2.5, 0.5, m).kappa_w_mk
    assert res.kappa_median_w_mk == pytest.approx(fv, rel=2e-4)


def _simulate(rng, kappa_true):
    """One invented experiment: raw series points with their noise, re-fitted, and measured
    absorptance, radii with their errors."""
    n_layers, a_true, r_true, w_true = 3, 0.10, 2.5, 0.5
    chi_t_true = -0.0056
    t_nm = n_layers * SPACING
    g = geometry_factor_closed_form(r_true, w_true)
    r_m = g / (2 * math.pi * kappa_true * t_nm * 1e-9)
    chi_p_true = chi_t_true * a_true * r_m * 1e-3
    sigma = 0.03
    temps = np.linspace(295.0, 395.0, 6)
    tf = series.fit_series(
        temps,
        241.5 + chi_t_true * (temps - 295.0) + rng.normal(0, sigma, temps.size),
        np.full(temps.size, sigma),
        kind="temperature",
    )
    powers = np.array([0.02, 0.06, 0.10, 0.14, 0.18, 0.10, 0.02])
    pf = series.fit_series(
        powers,
        241.5 + chi_p_true * powers + rng.normal(0, sigma, powers.size),
        np.full(powers.size, sigma),
    )
    errs = {"a": 0.008, "r": 0.05, "w": 0.03}
    return dict(
        chi_t_cm1_per_k=tf.slope,
        chi_t_err_cm1_per_k=tf.slope_err,
        chi_p_cm1_per_mw=pf.slope,
        chi_p_err_cm1_per_mw=pf.slope_err,
        absorptance=rng.normal(a_true, errs["a"]),
        absorptance_err=errs["a"],
        hole_radius_um=rng.normal(r_true, errs["r"]),
        hole_radius_err_um=errs["r"],
        beam_radius_um=rng.normal(w_true, errs["w"]),
        beam_radius_err_um=errs["w"],
    )


@pytest.mark.slow
def test_intervals_are_honest():
    """Coverage of the 16-84% interval (the definition of a 68% interval): 1,000 invented
    experiments with known kappa (drawn in 15-35 W/m/K, the few-layer MoSe2 band; common
    practice, no source), every input noisy, the raw series simulated and re-fitted. The
    interval holds the true kappa in 68 +/- 4% of them."""
    rng = np.random.default_rng(20260302)
    hits = 0
    n = 1000
    for i in range(n):
        kappa_true = rng.uniform(15, 35)
        exp = _simulate(rng, kappa_true)
        res = kappa_with_uncertainty(
            **exp,
            layer_spacing_nm=SPACING,
            layers=3,
            draws=2000,
            seed=i,
            variance_shares=False,
        )
        hits += res.kappa_p16_w_mk <= kappa_true <= res.kappa_p84_w_mk
    assert 0.64 <= hits / n <= 0.72, hits / n


def test_bad_errors_refused():
    """Negative errors and impossible correlations: clear InputErrors."""
    with pytest.raises(InputError, match="standard deviation"):
        _run(chi_t_err_cm1_per_k=-1.0)
    with pytest.raises(InputError, match="correlation"):
        _run(chi_correlation=1.0)
    with pytest.raises(InputError, match="different signs"):
        kappa_with_uncertainty(-0.0056, 2.9, 0.1, 2.5, 0.5, layer_spacing_nm=SPACING, layers=3)


def test_tabulated_monte_carlo_paths_match_direct_inversion():
    """The Monte Carlo's tabulated supported-annulus and off-centre paths give, draw by draw,
    the finite-volume inversion's kappa to 1e-4 (the solver itself is checked against the K0
    Green's function and the method of images in test_model)."""
    from flakebook.thermal import uncertainty as unc

    rng = np.random.default_rng(2)
    n = 6
    ct, cp = rng.normal(-0.0056, 0.0003, n), rng.normal(-2.9, 0.1, n)
    a, t = rng.normal(0.1, 0.01, n), np.full(n, 3 * SPACING)
    r, w = rng.normal(2.5, 0.1, n), rng.normal(0.5, 0.05, n)
    g = rng.lognormal(np.log(1e7), 0.5, n)  # one interface conductance per draw
    model = HeatModel(interface_conductance_w_m2k=1e7)
    got = unc._kappa_supported(ct, cp, a, t, r, w, g, model, None)
    for i in range(n):
        mi = HeatModel(interface_conductance_w_m2k=float(g[i]))
        ref = invert_kappa(ct[i], cp[i], a[i], t[i], r[i], w[i], mi).kappa_w_mk
        assert got[i] == pytest.approx(ref, rel=1e-4)
    model = HeatModel(beam_offset_um=0.3)
    got = unc._kappa_offset(ct, cp, a, t, r, w, model, None)
    for i in range(n):
        ref = invert_kappa(ct[i], cp[i], a[i], t[i], r[i], w[i], model).kappa_w_mk
        assert got[i] == pytest.approx(ref, rel=1e-4)


def test_general_model_monte_carlo_runs_draw_by_draw():
    """A model without a tabulated path (a given supported outer radius) inverts each draw with
    the solver; its median follows the central value and progress reaches 1."""
    seen = []
    m = HeatModel(interface_conductance_w_m2k=1e7, supported_outer_radius_um=20.0)
    res = _run(
        chi_t_err_cm1_per_k=0.0003,
        model=m,
        draws=100,
        variance_shares=False,
        progress=lambda f, msg: seen.append(f),
    )
    assert res.kappa_median_w_mk == pytest.approx(res.kappa_w_mk, rel=0.03)
    assert res.kappa_p16_w_mk < res.kappa_w_mk < res.kappa_p84_w_mk
    assert seen[-1] == 1.0


def test_cancel_stops_the_monte_carlo():
    """INTERFACE.md: a set cancel event raises Cancelled."""
    import threading

    from flakebook.errors import Cancelled

    ev = threading.Event()
    ev.set()
    with pytest.raises(Cancelled):
        _run(**ERRS, cancel=ev)


def test_interface_conductance_error_is_drawn():
    """The supported region's interface conductance given with an error: its draws widen the
    interval, take a share of var(ln kappa) under their own key, and the draws' median follows
    the central value; an error without a conductance is refused."""
    model = HeatModel(interface_conductance_w_m2k=1e5)  # low: the healing length ~ W
    exact = _run(**ERRS, model=model, draws=2000)
    drawn = _run(**ERRS, model=model, draws=2000, interface_conductance_err_w_m2k=5e4)
    assert drawn.kappa_w_mk == exact.kappa_w_mk
    assert drawn.variance_share["interface_conductance"] > 0.02  # 0.046 measured
    assert exact.variance_share["interface_conductance"] == 0.0
    alone = _run(model=model, draws=2000, interface_conductance_err_w_m2k=5e4)
    assert alone.variance_share["interface_conductance"] == pytest.approx(1.0)
    # a lower g (more resistance below the supported flake) means a higher kappa for the
    # same measured resistance: the 84th percentile comes from the low-g draws
    assert alone.kappa_p16_w_mk < alone.kappa_w_mk < alone.kappa_p84_w_mk
    assert sum(drawn.variance_share.values()) == pytest.approx(1.0)
    assert (drawn.kappa_p84_w_mk - drawn.kappa_p16_w_mk) > (
        exact.kappa_p84_w_mk - exact.kappa_p16_w_mk
    )
    with pytest.raises(InputError, match="without an interface conductance"):
        _run(interface_conductance_err_w_m2k=5e5)


@pytest.mark.slow
def test_intervals_with_a_drawn_interface_conductance_are_honest():
    """Coverage with the supported-region model: 300 invented experiments, each with a true
    kappa (15-35 W/m/K) and a true g; the measured R_m comes from the finite-volume solve with
    the true g (checked against the closed form and the K0 Green's function in test_model), the
    stated g is the true one scattered log-normally by its stated 40% error, the coefficients
    carry noise. The 16-84% interval holds the truth in 68 +/- 6% of them (the definition of a
    68% interval)."""
    from flakebook.thermal.model import solve_membrane

    rng = np.random.default_rng(20261202)
    n, hits = 300, 0
    rel = 0.4
    s_ln = math.sqrt(math.log1p(rel**2))
    t_nm, r_um, w_um, a = 3 * SPACING, 2.5, 0.5, 0.10
    chi_t_true, st = -0.0056, 0.0003
    for i in range(n):
        kappa_true = rng.uniform(15, 35)
        g_true = 10 ** rng.uniform(4.5, 5.5)  # low enough to matter
        geo = solve_membrane(
            kappa_true, t_nm, r_um, w_um, interface_conductance_w_m2k=g_true
        ).geometry_factor
        r_m = geo / (2 * math.pi * kappa_true * t_nm * 1e-9)
        chi_p_true = chi_t_true * a * r_m * 1e-3
        sp = 0.03 * abs(chi_p_true)
        g_stated = g_true * math.exp(rng.normal(0.0, s_ln))
        res = kappa_with_uncertainty(
            rng.normal(chi_t_true, st),
            rng.normal(chi_p_true, sp),
            a,
            r_um,
            w_um,
            layer_spacing_nm=SPACING,
            layers=3,
            chi_t_err_cm1_per_k=st,
            chi_p_err_cm1_per_mw=sp,
            interface_conductance_err_w_m2k=rel * g_stated,
            model=HeatModel(interface_conductance_w_m2k=g_stated),
            draws=2000,
            seed=i,
            variance_shares=False,
        )
        hits += res.kappa_p16_w_mk <= kappa_true <= res.kappa_p84_w_mk
    assert 0.62 <= hits / n <= 0.74, hits / n
