"""Spectra recorded in a project (flakebook.pipeline_spectra): a spectrum attached to a flake,
its fit, its evidence and the combined assignment of all the flake's evidence; settings edits,
staleness and recompute; a manual assignment; the rule table calibrated on known flakes.

The spectra are drawn with lines at stated centres (the truth of each check); the rule table's
centres are those of Tonndorf et al., Opt. Express 21, 4908 (2013) and the linear chain of Zhao
et al., Nano Lett. 13, 1007 (2013) (values from memory, in resources/raman_rules).
"""

from __future__ import annotations

import numpy as np
import pytest

from flakebook import pipeline
from flakebook.errors import InputError
from flakebook.pipeline_spectra import category
from flakebook.spectra.io import Spectrum
from flakebook.spectra.rules import load_rule_table
from flakebook.store import Project, SpectrumFit


def lorentz(x, c, fwhm, h):
    return h / (1 + ((x - c) / (fwhm / 2)) ** 2)


def raman(a1g=241.6, b2g=True, seed=1):
    rng = np.random.default_rng(seed)
    x = np.linspace(150, 560, 1400)
    y = 200 + 0.1 * x + lorentz(x, a1g, 3, 1000) + lorentz(x, 287.0, 4, 120)
    if b2g:
        y = y + lorentz(x, 353.0, 4, 60)
    y = y + lorentz(x, 520.7, 3.5, 800) + rng.normal(0, 5, x.size)
    return Spectrum(x, y, metadata={"laser_nm": 532.0})


def low_frequency(n=2, seed=2):
    t = load_rule_table("MoSe2")
    sh = float(t.rule("shear mode").center(np.array([n]))[0])
    br = float(t.rule("breathing mode").center(np.array([n]))[0])
    rng = np.random.default_rng(seed)
    x = np.linspace(5, 60, 600)
    y = 50 + lorentz(x, sh, 1.5, 300) + lorentz(x, br, 1.5, 200) + rng.normal(0, 5, x.size)
    return Spectrum(x, y, metadata={"laser_nm": 532.0})


@pytest.fixture
def flake(tmp_path):
    """A MoSe2 flake whose contrast evidence says 3L (an invented likelihood)."""
    p = Project.create(tmp_path / "spectra")
    s = p.add_sample("chip", "MoSe2", oxide_nm=285)
    f = p.add_flake(s, "F-01")
    lk = np.exp(-0.5 * ((np.arange(1, 17) - 3.0) / 0.3) ** 2)
    ev = p.add_evidence(
        f,
        lk,
        method=pipeline.CONTRAST_METHOD,
        inputs=[s],
        parameters={"contrast": {"g": 0.3}, "contrast_err": {"g": 0.02}},
        reason="contrast",
    )
    pipeline.add_combined(p, f, None, [ev])
    yield p, f
    p.close()


def test_attach_raman_conflicts_then_low_frequency_settles(flake):
    p, f = flake
    assert p.latest_assignment(f).layers == 3
    got = pipeline.attach_spectrum(p, f, raman())
    fit = p.get(SpectrumFit, got.fit)
    assert {r["mode"] for r in fit.peaks} >= {"A1g", "B2g"}
    report, recs = pipeline.flake_report(p, f)
    assert {category(r) for r in recs} == {"contrast", "Raman"}
    assert len(p.assignments_of(f)) == 1, "the computed assignment is brought up to date"
    pipeline.attach_spectrum(p, f, low_frequency(2))
    report, _ = pipeline.flake_report(p, f)
    assert report.posterior.layers == 2 and report.posterior.probability > 0.9
    assert report.conflicts, "contrast (3L) against the spectra (2L) is shown, not averaged"
    latest = p.latest_assignment(f)
    assert latest.layers == 2 and not latest.stale
    # the manual assignment overrides and stays in force when evidence is recombined
    p.assign(f, 2, reason="shear mode at 17.7 cm^-1")
    pipeline.assign_flake(p, f)
    assert p.latest_assignment(f).manual
    report, _ = pipeline.flake_report(p, f)
    assert report.manual.layers == 2


def test_settings_edit_marks_stale_and_recompute_redoes(flake):
    p, f = flake
    got = pipeline.attach_spectrum(p, f, raman())
    fit = p.get(SpectrumFit, got.fit)
    pipeline.set_fit_settings(p, fit, peak_model="voigt")
    stale = {(r.KIND, r.id) for r in p.stale_records()}
    assert ("spectrum_fit", fit.id) in stale
    assert ("assignment", p.latest_assignment(f).id) in stale
    assert all(("evidence", e) in stale for e in got.evidence)
    report = p.recompute_stale()
    assert not report.failed and not report.unregistered
    assert not p.stale_records()
    assert p.get(SpectrumFit, fit.id).settings["peak_model"] == "voigt"
    with pytest.raises(InputError, match="accepted"):
        pipeline.set_fit_settings(p, fit, peak_model="sawtooth")


def test_refit_at_once_and_detach(flake):
    p, f = flake
    got = pipeline.attach_spectrum(p, f, raman())
    fit = pipeline.refit(p, got.fit, peak_model="gaussian")
    assert fit.settings["peak_model"] == "gaussian" and not p.stale_records()
    pipeline.detach_spectrum(p, got.spectrum)
    assert p.latest_assignment(f).layers == 3
    assert not p.spectrum_fits_of_flake(f)


def test_rule_table_calibrated_on_known_flakes_is_used(flake):
    """Known flakes whose A1g sits 1 cm^-1 above the table move its centre (a Gaussian update)."""
    p, f = flake
    pipeline.attach_spectrum(p, f, raman(a1g=242.6))
    p.assign(f, 2, reason="AFM and shear mode")
    sample = p.get("sample", f.sample_id)
    with pytest.raises(InputError, match="manual layer number"):
        pipeline.calibrate_rules(p, p.add_sample("empty", "MoSe2", oxide_nm=90))
    rec = pipeline.calibrate_rules(p, sample)
    assert rec.flakes_used == ("F-01",)
    table, cal = pipeline.rule_table_for(p, sample, 532.0)
    assert cal.id == rec.id
    published = load_rule_table("MoSe2").rule("A1g position").center(np.array([2]))[0]
    assert table.rule("A1g position").center(np.array([2]))[0] > published + 0.3
    assert any(r.KIND == "spectrum_fit" for r in p.stale_records())
    assert not p.recompute_stale().failed


def test_afm_and_si_evidence_are_combined(flake):
    p, f = flake
    pipeline.add_afm_evidence(p, f, 2 * 0.646 + 0.5, 0.15)
    pipeline.assign_flake(p, f)
    report, recs = pipeline.flake_report(p, f)
    assert "AFM" in {category(r) for r in recs}
    assert len(report.contributions) == 2
