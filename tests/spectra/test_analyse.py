"""The spectrum chain (spectra.analyse): axis, calibration, fit and layer evidence on spectra drawn
with known lines.

The truth of each check is the drawn spectrum (Lorentzian lines at stated centres, Gaussian
noise), not the code: a fit must find the centres within a few standard errors, and the layer
evidence must point where the rule table's published centres put those lines.
"""

from __future__ import annotations

import numpy as np
import pytest

from flakebook.errors import InputError
from flakebook.spectra.analyse import analyse_spectrum, peak_specs
from flakebook.spectra.io import Spectrum
from flakebook.spectra.rules import load_rule_table

HC_EV_NM = 1239.841984  # CODATA 2018 exact h, c, e


def lorentz(x, c, fwhm, h):
    return h / (1 + ((x - c) / (fwhm / 2)) ** 2)


def mose2_raman(a1g=241.6, b2g=353.0, si=520.7, seed=1, x=None):
    """A MoSe2 spectrum on SiO2/Si at 532 nm: A1g, E2g, B2g and the Si line on a sloped
    background (invented intensities; centres near Tonndorf et al. 2013's 2L, value from
    memory)."""
    rng = np.random.default_rng(seed)
    x = np.linspace(150, 560, 1400) if x is None else x
    y = 200 + 0.1 * x + lorentz(x, a1g, 3, 1000) + lorentz(x, 287.0, 4, 120)
    if b2g is not None:
        y = y + lorentz(x, b2g, 4, 60)
    y = y + lorentz(x, si, 3.5, 800) + rng.normal(0, 5, x.size)
    return x, y


def test_fit_finds_drawn_centres_and_calibrates_on_si():
    """The Si line drawn 1.5 cm^-1 high is moved to 520.7 (common practice, no source) and the
    A1g comes back at its drawn position less that shift."""
    x, y = mose2_raman(a1g=243.1, si=522.2)
    a = analyse_spectrum(Spectrum(x, y), "MoSe2", laser_nm=532)
    assert a.calibration["shift_cm1"] == pytest.approx(-1.5, abs=0.02)
    a1g = next(p for p in a.peaks() if p["mode"] == "A1g")
    assert abs(a1g["center_cm1"] - 241.6) < 4 * a1g["center_err_cm1"] + 0.02
    assert a1g["fwhm_cm1"] == pytest.approx(3.0, rel=0.05)


def test_b2g_absent_points_to_monolayer_and_present_to_few_layers():
    """B2g(1) is absent in the monolayer (Tonndorf et al. 2013, value from memory)."""
    x, y = mose2_raman(a1g=240.8, b2g=None)
    one = analyse_spectrum(Spectrum(x, y), "MoSe2", laser_nm=532).report()
    x, y = mose2_raman(a1g=241.6, b2g=353.0)
    two = analyse_spectrum(Spectrum(x, y), "MoSe2", laser_nm=532).report()
    assert one.posterior.layers == 1 and two.posterior.layers >= 2
    assert two.posterior.posterior[0] < 0.05


def test_wavelength_axis_becomes_raman_shift():
    """A spectrum exported in nm (air) gives the same A1g as the one in cm^-1: lambda from the
    shift by 1e7/lambda = 1e7/laser - shift (definition of the Raman shift), within the air
    index of about 2.8e-4 (Ciddor 1996), which the chain corrects."""
    from flakebook.spectra.units import air_to_vacuum_nm, vacuum_to_air_nm

    x, y = mose2_raman()
    laser_vac = float(air_to_vacuum_nm(532.0))  # the laser line quoted in air, as the axis
    lam = vacuum_to_air_nm(1e7 / (1e7 / laser_vac - x))
    ref = analyse_spectrum(Spectrum(x, y), "MoSe2", laser_nm=532, auto_calibrate=False)
    nm = analyse_spectrum(
        Spectrum(lam, y, x_unit="nm"), "MoSe2", laser_nm=532, auto_calibrate=False
    )
    c_ref = next(p for p in ref.peaks() if p["mode"] == "A1g")["center_cm1"]
    c_nm = next(p for p in nm.peaks() if p["mode"] == "A1g")["center_cm1"]
    assert c_nm == pytest.approx(c_ref, abs=0.02)


def test_low_frequency_modes_of_a_bilayer():
    """Shear and breathing lines drawn at the linear chain's 2L values w_b cos(pi/4) and
    w_b sin(pi/4) (Zhao et al., Nano Lett. 13, 1007 (2013), the rule table's bulk frequencies)
    are fitted as such and read as 2L."""
    t = load_rule_table("MoSe2")
    sh = float(t.rule("shear mode").center(np.array([2]))[0])
    br = float(t.rule("breathing mode").center(np.array([2]))[0])
    assert sh == pytest.approx(25.0 * np.cos(np.pi / 4), abs=1e-9)
    rng = np.random.default_rng(3)
    x = np.linspace(5, 60, 600)
    y = 50 + lorentz(x, sh, 1.5, 300) + lorentz(x, br, 1.5, 200) + rng.normal(0, 5, x.size)
    a = analyse_spectrum(Spectrum(x, y), "MoSe2", laser_nm=532)
    rows = {p["mode"]: p for p in a.peaks()}
    assert rows["shear"]["center_cm1"] == pytest.approx(sh, abs=0.1)
    assert rows["breathing"]["center_cm1"] == pytest.approx(br, abs=0.1)
    assert a.report().posterior.layers == 2
    assert any("Si line" in w for w in a.warnings)


def test_pl_on_a_wavelength_axis():
    """A PL peak drawn at 1.57 eV in nm (vacuum -> air) is fitted on the energy axis
    (E = hc / lambda, CODATA 2018) and gives PL evidence."""
    from flakebook.spectra.units import vacuum_to_air_nm

    rng = np.random.default_rng(5)
    lam_vac = np.linspace(700, 880, 600)
    e = HC_EV_NM / lam_vac
    # I_lambda = I_E |dE/dlambda| = I_E E^2 / hc, scaled to about 500 counts at the peak
    y = 20 + np.exp(-0.5 * ((e - 1.57) / 0.02) ** 2) * 500 * e**2 / 1.57**2
    y = y + rng.normal(0, 1, y.size)
    a = analyse_spectrum(
        Spectrum(vacuum_to_air_nm(lam_vac), y, x_unit="nm", kind="pl"),
        "MoSe2",
        laser_nm=532,
        peak_model="gaussian",
    )
    row = a.peaks()[0]
    assert row["center_cm1"] is None
    assert row["center_ev"] == pytest.approx(1.57, abs=0.002)
    assert a.evidence and a.x_unit == "ev"


def test_peak_models_are_choices_and_bad_ones_refused():
    x, y = mose2_raman()
    for model in ("gaussian", "voigt", "pseudo-voigt"):
        a = analyse_spectrum(Spectrum(x, y), "MoSe2", laser_nm=532, peak_model=model)
        assert a.settings["peak_model"] == model and a.fit.model == model
    with pytest.raises(InputError, match="accepted"):
        analyse_spectrum(Spectrum(x, y), "MoSe2", peak_model="triangle")
    with pytest.raises(InputError, match="accepted"):
        analyse_spectrum(Spectrum(x, y), "MoSe2", baseline="guess")


def test_modes_outside_the_range_are_not_looked_for():
    table = load_rule_table("MoS2")
    specs = peak_specs(table, np.linspace(360, 420, 300))
    assert [s.mode for s in specs] == ["E2g", "A1g"]
    assert peak_specs(table, np.linspace(100, 300, 300)) == []
