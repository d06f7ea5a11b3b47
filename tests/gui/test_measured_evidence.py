"""AFM height and Si line in the window (pytest-qt, offscreen): the spectra view's "AFM / Si
line…" button records them on the selected flake, the combined answer and the inspector follow,
undo takes them away, a refused input stores nothing.

Truths: an AFM step of 2 x 0.65 nm for the 2-layer flake (the MoSe2 layer spacing, about
0.65 nm; value from memory, resources); a Si line whose area is the thin-film model's 2L fraction
of a bare-substrate line (the measurement is what is checked here, the model elsewhere against
tmm). The project is the invented one of conftest.py.
"""

from __future__ import annotations

import numpy as np
import pytest

from flakebook.errors import InputError
from flakebook.pipeline_spectra import AFM_METHOD, SI_METHOD


def lorentz(x, c, fwhm, h):
    return h / (1 + ((x - c) / (fwhm / 2)) ** 2)


def write_raman(path, si_height, *, a1g=True, seed=0):
    rng = np.random.default_rng(seed)
    x = np.linspace(150, 600, 1200)
    mean = 150 + 0.05 * x + lorentz(x, 520.7, 3.5, si_height)
    if a1g:
        mean = mean + lorentz(x, 241.5, 3.0, 1500.0)
    y = rng.poisson(mean)
    rows = ["# Laser wavelength: 532 nm", "Raman shift (cm-1)\tcounts"]
    rows += [f"{a:.4f}\t{b:d}" for a, b in zip(x, y)]
    path.write_text("\n".join(rows) + "\n")
    return path


def _methods(p, fid):
    return [e.method for e in p.evidence_of(fid)]


def test_afm_height_recorded_and_undone(qtbot, window):
    p = window.session.project
    fid = p.flake_by_label("Q3W-002").id
    window.select_flake(fid)
    before = len(p.evidence_of(fid))
    window.add_measured(fid, afm=(1.3, 0.2))
    assert AFM_METHOD in _methods(p, fid)
    assert p.latest_assignment(fid).layers == 2
    window.undo_stack.undo()
    assert len(p.evidence_of(fid)) == before
    window.undo_stack.redo()
    assert AFM_METHOD in _methods(p, fid)


def test_si_line_from_spectra_and_a_refused_file(qtbot, window, tmp_path):
    from flakebook.optics.absorptance import si_raman_attenuation
    from flakebook.optics.materials import get_material
    from flakebook.optics.substrate import parse_substrate

    p = window.session.project
    fid = p.flake_by_label("Q3W-002").id
    frac = float(
        si_raman_attenuation(get_material("MoSe2"), np.array([2]), parse_substrate("SiO2:285,Si"))[
            0
        ]
    )
    window.attach_spectrum_files(fid, [write_raman(tmp_path / "on_flake.txt", frac * 3000.0)])
    bare = write_raman(tmp_path / "bare.txt", 3000.0, a1g=False, seed=1)
    window.tabs.setCurrentWidget(window.views["spectra"])
    qtbot.waitUntil(lambda: window.views["spectra"].measured_button.isEnabled(), timeout=5000)

    n_spectra = len(p.records(type(p.spectra_of(fid)[0])))
    broken = tmp_path / "broken.txt"
    broken.write_text("not a spectrum\n")
    with pytest.raises(InputError):
        window.session.add_measured(fid, si=("file", str(broken)))
    assert SI_METHOD not in _methods(p, fid)
    assert len(p.records(type(p.spectra_of(fid)[0]))) == n_spectra  # nothing stored

    window.add_measured(fid, si=("file", str(bare)))
    si = [e for e in p.evidence_of(fid) if e.method == SI_METHOD]
    assert len(si) == 1 and si[0].parameters["ratio"] == pytest.approx(frac, rel=0.06)
    assert int(np.argmax(si[0].likelihood)) + 1 == 2
    assert window.session.has_bare_reference(fid)
    assert "Si" in window.inspector.evidence.text()
    window.undo_stack.undo()
    assert SI_METHOD not in _methods(p, fid)
    assert not window.session.has_bare_reference(fid)
