"""Channel contrast of the microscope model against published examples and standards."""

import dataclasses

import numpy as np
import pytest
import tmm

from flakebook.errors import InputError
from flakebook.optics.materials import constant_material, get_material
from flakebook.optics.microscope import (
    Channels,
    Illumination,
    Microscope,
    channel_contrast,
    cie_illuminant_a,
    cone_reflectance,
)
from flakebook.optics.substrate import Hole, Substrate


def _mono(lam, na=0.0):
    return Microscope(na, Illumination.monochromatic(lam))


def test_blake_2007_graphene_example():
    """Graphene (n = 2.6 + 1.3i, 0.34 nm) on 300 nm SiO2/Si: contrast of roughly 0.1 at
    550-600 nm and close to zero at 450-500 nm (P. Blake et al., APL 91, 063124 (2007),
    'Making graphene visible'; tolerance loose: their Si and SiO2 data differ slightly from
    Green/Malitson)."""
    graphene = dataclasses.replace(constant_material("graphene", 2.6 + 1.3j), layer_spacing_nm=0.34)
    sub = Substrate.from_oxide(300.0)
    c = {
        lam: channel_contrast(graphene, [1], sub, _mono(lam)).contrast[0, 0]
        for lam in (450, 475, 500, 550, 575, 600)
    }
    assert 0.06 <= np.mean([c[550], c[575], c[600]]) <= 0.15
    assert max(c[575], c[600]) > 0.09
    for lam in (450, 475, 500):
        assert abs(c[lam]) < 0.02


def test_zero_thickness_flake_has_zero_contrast():
    """A flake of zero layers leaves the stack unchanged: C = 0 in every channel and geometry
    reference (physics, no source)."""
    m = get_material("MoSe2")
    t = channel_contrast(m, [0], Substrate.from_oxide(285.0), Microscope(0.5))
    np.testing.assert_allclose(t.contrast, 0.0, atol=1e-12)


def test_single_wavelength_matches_tmm():
    """Contrast at one wavelength, normal incidence, equals 1 - R_flake/R_substrate computed
    with tmm for a supported flake and for a membrane over an open hole (tmm package)."""
    m = get_material("MoS2")
    lam = 620.0
    sub = Substrate.from_oxide(90.0)
    n_f = complex(m.nk(lam, 2))
    n_ox = complex(get_material("SiO2").nk(lam))
    n_si = complex(get_material("Si").nk(lam))
    d = 2 * m.layer_spacing_nm
    r_ref = tmm.coh_tmm("s", [1, n_ox, n_si], [np.inf, 90.0, np.inf], 0.0, lam)["R"]
    r_fl = tmm.coh_tmm("s", [1, n_f, n_ox, n_si], [np.inf, d, 90.0, np.inf], 0.0, lam)["R"]
    r_open = tmm.coh_tmm("s", [1, n_f, 1], [np.inf, d, np.inf], 0.0, lam)["R"]
    r_si = tmm.coh_tmm("s", [1, n_f, 1, n_si], [np.inf, d, 90.0, np.inf], 0.0, lam)["R"]
    mic = _mono(lam)
    assert channel_contrast(m, [2], sub, mic).contrast[0, 0] == pytest.approx(
        1 - r_fl / r_ref, abs=1e-9
    )
    sus = channel_contrast(m, [2], sub, mic, "suspended", Hole("open"))
    assert sus.contrast[0, 0] == pytest.approx(1 - r_open / r_ref, abs=1e-9)
    assert sus.reflectance_reference[0, 0] == pytest.approx(r_ref, abs=1e-12)
    si = channel_contrast(m, [2], sub, mic, "suspended", Hole("si"))
    assert si.contrast[0, 0] == pytest.approx(1 - r_si / r_ref, abs=1e-9)


def test_partial_etch_and_gold_bottom_against_tmm():
    """A hole etched 100 nm into 285 nm oxide, and a gold-bottomed 500 nm gap (tmm package)."""
    m = get_material("WSe2")
    lam = 560.0
    sub = Substrate.from_oxide(285.0)
    n_f = complex(m.nk(lam, 3))
    d = 3 * m.layer_spacing_nm
    n_ox = complex(get_material("SiO2").nk(lam))
    n_si = complex(get_material("Si").nk(lam))
    n_au = complex(get_material("Au").nk(lam))
    r_part = tmm.coh_tmm("s", [1, n_f, 1, n_ox, n_si], [np.inf, d, 100, 185, np.inf], 0, lam)["R"]
    r_au = tmm.coh_tmm("s", [1, n_f, 1, n_au], [np.inf, d, 500, np.inf], 0, lam)["R"]
    got = cone_reflectance(m, [3], sub, [lam], geometry="suspended", hole=Hole("si", 100.0))
    assert got[0, 0] == pytest.approx(r_part, abs=1e-9)
    got = cone_reflectance(m, [3], sub, [lam], geometry="suspended", hole=Hole("au", 500.0))
    assert got[0, 0] == pytest.approx(r_au, abs=1e-9)
    with pytest.raises(InputError, match="deeper"):
        cone_reflectance(m, [3], sub, [lam], geometry="suspended", hole=Hole("si", 400.0))


def test_cone_average_against_tmm():
    """The illumination-cone average (uniform pupil, s and p) equals the same weighted sum of
    tmm values at the quadrature nodes (tmm package)."""
    from flakebook.optics.stack import cone_nodes

    m = get_material("SiO2")
    m = dataclasses.replace(m, layer_spacing_nm=10.0)
    sub = Substrate.from_oxide(285.0)
    lam = 500.0
    st, w = cone_nodes(0.6, 6)
    n_ox = complex(get_material("SiO2").nk(lam))
    n_si = complex(get_material("Si").nk(lam))
    ref = 0.0
    for s, wt in zip(st, w):
        for pol in "sp":
            ref += (
                0.5
                * wt
                * tmm.coh_tmm(
                    pol, [1, n_ox, n_ox, n_si], [np.inf, 20.0, 285.0, np.inf], np.arcsin(s), lam
                )["R"]
            )
    got = cone_reflectance(m, [2], sub, [lam], na=0.6, n_angles=6)
    assert got[0, 0] == pytest.approx(ref, abs=1e-9)


def test_cie_illuminant_a_and_srgb_channels():
    """colour-science's CIE illuminant A follows the CIE 15 defining formula (Planck with
    c2 = 1.435e7 nm K at 2848 K, 100 at 560 nm), our extension beyond its table too; the sRGB
    channels built from the CIE 1931 observer give R = G = B for the D65 white (IEC 61966-2-1:
    the sRGB white point is D65)."""
    lam = np.array([400.0, 500.0, 560.0, 700.0, 780.0, 800.0])
    formula = (
        100 * (560 / lam) ** 5 * np.expm1(1.435e7 / (2848 * 560)) / np.expm1(1.435e7 / (2848 * lam))
    )
    np.testing.assert_allclose(cie_illuminant_a(lam), formula, rtol=2e-3)
    import colour

    d65 = colour.SDS_ILLUMINANTS["D65"]
    grid = np.arange(380.0, 781.0, 1.0)
    spd = np.interp(grid, np.asarray(d65.wavelengths), np.asarray(d65.values))
    rgb = Channels.srgb().sensitivity(grid) @ spd
    assert rgb / rgb.mean() == pytest.approx([1, 1, 1], abs=0.01)


def test_broadband_channels_and_illumination_parsing():
    """A flat band is a weighted mean of monochromatic contrasts; parsing accepts the
    documented forms and refuses others (common practice, no source)."""
    m = get_material("MoSe2")
    sub = Substrate.from_oxide(285.0)
    mic = Microscope(0.0, Illumination.band(540, 560), Channels.mono(), wavelength_step_nm=1.0)
    band = channel_contrast(m, [1], sub, mic)
    lam = np.arange(540.0, 561.0)
    r_ref = cone_reflectance(None, (), sub, lam)[0]
    r_fl = cone_reflectance(m, [1], sub, lam)[0]
    assert band.contrast[0, 0] == pytest.approx(
        1 - np.trapezoid(r_fl, lam) / np.trapezoid(r_ref, lam), abs=1e-12
    )
    assert band.wavelength_nm is None
    assert Illumination.parse("blackbody:3200").temperature_k == 3200
    assert Illumination.parse("band:450-650").high_nm == 650
    assert Illumination.parse("bandpass:550/10").fwhm_nm == 10
    with pytest.raises(InputError, match="accepted"):
        Illumination.parse("sunlight")
    t = channel_contrast(m, [1, 2], sub, Microscope(0.3))
    recs = t.to_records()
    assert len(recs) == 6 and recs[0]["channel"] == "r" and recs[0]["wavelength_nm"] is None
    assert set(recs[0]) == {
        "layers",
        "channel",
        "wavelength_nm",
        "contrast",
        "reflectance_flake",
        "reflectance_reference",
    }


def test_user_channel_csv(tmp_path):
    """A user's channel file; a bad one is refused naming the file."""
    p = tmp_path / "cam.csv"
    p.write_text("wavelength_nm,red,green\n400,0,1\n600,1,0\n800,0,0\n")
    ch = Channels.parse(str(p))
    assert ch.names == ("red", "green")
    t = channel_contrast(
        get_material("MoSe2"), [1], Substrate.from_oxide(285.0), Microscope(0, channels=ch)
    )
    assert t.channels == ("red", "green")
    bad = tmp_path / "bad.csv"
    bad.write_text("nm,red\n400,x\n")
    with pytest.raises(InputError, match="bad.csv"):
        Channels.parse(str(bad))


def test_contrast_table_assembled_from_tmm():
    """A whole contrast table (N = 1, 2, 5; 400-800 nm at 20 nm; NA 0.5 with 4 angles; s and p;
    sRGB channels under illuminant A) equals the same channel integrals of tmm reflectances
    computed point by point (tmm package); the flake taken as isotropic since tmm has no
    uniaxial films."""
    from flakebook.optics.stack import cone_nodes

    m = dataclasses.replace(get_material("MoSe2"), extraordinary=None)
    sub = Substrate.from_oxide(285.0)
    mic = Microscope(0.5, n_angles=4, wavelength_step_nm=20.0)
    lam, w = mic.weights()
    st, wt = cone_nodes(0.5, 4)
    n_ox = get_material("SiO2").nk(lam)
    n_si = get_material("Si").nk(lam)

    def cone_r(ns_of_j, ds):
        out = np.zeros(lam.size)
        for j in range(lam.size):
            for s, a in zip(st, wt):
                for pol in "sp":
                    out[j] += (
                        0.5
                        * a
                        * tmm.coh_tmm(pol, ns_of_j(j), [np.inf, *ds, np.inf], np.arcsin(s), lam[j])[
                            "R"
                        ]
                    )
        return out

    r_ref = cone_r(lambda j: [1, n_ox[j], n_si[j]], [285.0])
    ref_c = (w @ r_ref) / w.sum(axis=1)
    table = channel_contrast(m, [1, 2, 5], sub, mic)
    for i, n in enumerate((1, 2, 5)):
        nf = m.nk(lam, n)  # layer-resolved, blended (4-5L) or bulk
        r_fl = cone_r(lambda j, nf=nf: [1, nf[j], n_ox[j], n_si[j]], [n * 0.646, 285.0])
        fl_c = np.maximum((w @ r_fl) / w.sum(axis=1), 0.0)
        np.testing.assert_allclose(table.contrast[i], 1 - fl_c / ref_c, atol=1e-9)


def test_illumination_cone_within_objective():
    """Reflected-light illumination through the objective cannot be wider than the objective's
    aperture (common practice, no source); the contrast moves with the illumination NA, more
    at NA 0.9 than at 0.3 (oblique rays see a thinner optical path in the oxide)."""
    with pytest.raises(InputError, match="exceeds"):
        Microscope(0.9, na_objective=0.5)
    m = get_material("MoSe2")
    sub = Substrate.from_oxide(285.0)
    c0 = channel_contrast(m, [1], sub, Microscope(0.0)).contrast[0]
    c3 = channel_contrast(m, [1], sub, Microscope(0.3, na_objective=0.8)).contrast[0]
    c9 = channel_contrast(m, [1], sub, Microscope(0.9, n_angles=16)).contrast[0]
    assert 0.01 < np.max(np.abs(c3 - c0)) < np.max(np.abs(c9 - c0))
    assert np.max(np.abs(c9 - c0)) > 0.2


def test_colour_science_imported_lazily():
    """Importing the optics package does not import colour-science (DESIGN.md: import it
    lazily, it is slow to import); a monochromatic contrast never needs it."""
    import subprocess
    import sys

    code = (
        "import sys\n"
        "import flakebook.optics.layers, flakebook.optics.absorptance, flakebook.evidence\n"
        "from flakebook.optics.materials import get_material\n"
        "from flakebook.optics.microscope import Microscope, Illumination, Channels, "
        "channel_contrast\n"
        "from flakebook.optics.substrate import Substrate\n"
        "channel_contrast(get_material('MoS2'), [1], Substrate.from_oxide(90), "
        "Microscope(0, Illumination.monochromatic(600), Channels.mono()))\n"
        "print('colour' in sys.modules)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
