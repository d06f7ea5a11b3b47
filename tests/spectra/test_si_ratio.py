"""The Si-line ratio measured from two spectra (flakebook.spectra.si_ratio, pipeline_si).

Truths: Lorentzian lines of stated height and FWHM, whose integral is pi/2 x height x FWHM
(the Lorentzian's closed-form area; any table of integrals), drawn with Poisson counts
(numpy's generator); the ratio of two such lines is the ratio of their areas. The reported
error's fit part is checked for coverage (68% within 1 sigma, common practice, no source).
"""

from __future__ import annotations

import math
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from flakebook.errors import InputError
from flakebook.spectra import si_ratio as sr

SAMPLE = Path(__file__).resolve().parents[2] / "sample_project" / "k7-campaign.flakebook"


def lorentz(x, c, fwhm, h):
    return h / (1 + ((x - c) / (fwhm / 2)) ** 2)


def spectrum(height, rng, *, fwhm=3.5, centre=520.7, background=150.0, lo=150.0, hi=600.0):
    x = np.linspace(lo, hi, 1200)
    mean = background + 0.05 * x + lorentz(x, centre, fwhm, height)
    return x, rng.poisson(mean).astype(float)


def test_ratio_of_two_lines_and_its_coverage(monkeypatch):
    monkeypatch.setattr(sr, "SPOT_REL_ERR", 0.0)  # the fit's part of the error alone
    rng = np.random.default_rng(7)
    truth = 0.43
    hits, ratios = 0, []
    for _ in range(150):
        res = sr.si_ratio(spectrum(truth * 900.0, rng), spectrum(900.0, rng))
        ratios.append(res.ratio)
        hits += abs(res.ratio - truth) <= res.ratio_err
    assert abs(np.mean(ratios) - truth) < 0.005
    assert 0.58 <= hits / 150 <= 0.78


def test_area_is_the_lorentzian_integral():
    rng = np.random.default_rng(3)
    line = sr.si_line(*spectrum(2000.0, rng, fwhm=4.0))
    assert line.area == pytest.approx(math.pi / 2 * 2000.0 * 4.0, rel=0.03)
    assert line.center_cm1 == pytest.approx(520.7, abs=0.05)


def test_doses_normalise_and_missing_doses_are_said():
    rng = np.random.default_rng(5)
    flake = spectrum(0.5 * 2 * 800.0, rng)  # taken at twice the power of the reference
    bare = spectrum(800.0, rng)
    res = sr.si_ratio(flake, bare, flake_dose=(2.0, 10.0), bare_dose=(1.0, 10.0))
    assert res.ratio == pytest.approx(0.5, abs=0.02)
    assert not res.warnings
    res = sr.si_ratio(flake, bare)
    assert res.ratio == pytest.approx(1.0, abs=0.04)
    assert any("same dose" in w for w in res.warnings)
    with pytest.raises(InputError, match="power > 0"):
        sr.si_ratio(flake, bare, flake_dose=(0.0, 10.0), bare_dose=(1.0, 10.0))


def test_bad_spectra_are_refused():
    rng = np.random.default_rng(1)
    with pytest.raises(InputError, match="does not cover the Si line"):
        sr.si_ratio(spectrum(800.0, rng, lo=150, hi=400), spectrum(800.0, rng))
    with pytest.raises(InputError, match="too weak"):
        sr.si_ratio(spectrum(3.0, rng), spectrum(800.0, rng))


def _write(path: Path, x, y, header=""):
    path.write_text(header + "".join(f"{a:.4f}\t{b:.1f}\n" for a, b in zip(x, y)))
    return path


def _cli(*args):
    return subprocess.run([sys.executable, "-m", "flakebook", *args], capture_output=True,
                          text=True, timeout=300)  # fmt: skip


def test_command_line_records_si_evidence_from_spectra(tmp_path):
    """End to end: a spectrum on a 2L flake whose Si line is the thin-film model's 2L fraction
    of the bare substrate's gives Si evidence favouring 2L, stored with both spectra as its
    inputs; the reference is kept on the sample."""
    from flakebook import pipeline
    from flakebook.optics.absorptance import si_raman_attenuation
    from flakebook.optics.materials import get_material
    from flakebook.optics.substrate import parse_substrate
    from flakebook.pipeline_spectra import SI_METHOD
    from flakebook.spectra.io import Spectrum
    from flakebook.store import Project, Sample
    from flakebook.substrate import format_substrate

    proj = tmp_path / "k7.flakebook"
    shutil.copy(SAMPLE, proj)
    with Project.open(proj) as p:
        flake = p.find_flake("K7N-02")
        sample = p.get(Sample, flake.sample_id)
        sub = parse_substrate(format_substrate(sample.substrate))
        frac = float(si_raman_attenuation(get_material("MoSe2"), np.array([2]), sub)[0])
        rng = np.random.default_rng(11)
        x, y = spectrum(frac * 3000.0, rng)
        y = y + rng.poisson(lorentz(x, 241.5, 3.0, 1500.0))
        pipeline.attach_spectrum(p, flake, Spectrum(x, y, metadata={"laser_nm": 532.0}))
    bare = _write(tmp_path / "bare.txt", *spectrum(3000.0, np.random.default_rng(12)),
                  header="# laser: 532 nm\n")  # fmt: skip

    out = _cli("assign", str(proj), "--flake", "K7N-02", "--si-from-spectra", str(bare))
    assert out.returncode == 0, out.stderr
    assert "Si line under K7N-02" in out.stderr
    with Project.open(proj, read_only=True) as p:
        flake = p.find_flake("K7N-02")
        ev = [e for e in p.evidence_of(flake) if e.method == SI_METHOD][-1]
        assert ev.parameters["measured_from"] == "spectra"
        assert ev.parameters["ratio"] == pytest.approx(frac, rel=0.05)
        assert int(np.argmax(ev.likelihood)) + 1 == 2
        assert sum(r.kind == "spectrum" for r in ev.inputs) == 2
        assert len(p.spectra_of_sample(flake.sample_id)) == 1
    # a second flake of the sample uses the stored reference; no reference on the other chip
    out = _cli("assign", str(proj), "--flake", "K7S-02", "--si-from-spectra")
    assert out.returncode == 2
    assert "no bare-substrate Raman spectrum" in out.stderr or "covers the Si line" in out.stderr
    assert len(out.stderr.strip().splitlines()) <= 3
