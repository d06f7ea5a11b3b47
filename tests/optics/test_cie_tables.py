"""The CIE tables shipped in resources/cie_tables.json agree with colour-science (a general-purpose
reference library; its tables are those of CIE 15 and CIE 1931, and its sRGB matrix that of
IEC 61966-2-1), and the contrast model reads them without importing colour-science."""

from __future__ import annotations

import subprocess
import sys
import warnings

import numpy as np

from flakebook.optics import microscope


def _colour():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import colour
    return colour


def test_illuminant_a_matches_colour_science():
    colour = _colour()
    sd = colour.SDS_ILLUMINANTS["A"]
    w, v = microscope._cie_a_table()
    np.testing.assert_allclose(w, sd.wavelengths, rtol=0, atol=1e-9)
    np.testing.assert_allclose(v, sd.values, rtol=1e-12)
    # Between table points the model's illuminant follows colour-science's interpolation
    # within 0.1% (its table is 5 nm apart and smooth).
    lam = np.array([452.5, 561.0, 633.0])
    ref = sd.copy().interpolate(colour.SpectralShape(300, 780, 0.5))
    want = np.array([ref[x] for x in lam])
    np.testing.assert_allclose(microscope.cie_illuminant_a(lam), want, rtol=1e-3)


def test_cie1931_observer_and_srgb_matrix_match_colour_science():
    colour = _colour()
    cmfs = colour.MSDS_CMFS["CIE 1931 2 Degree Standard Observer"]
    m = np.asarray(colour.RGB_COLOURSPACES["sRGB"].matrix_XYZ_to_RGB, float)
    want = (np.asarray(cmfs.values, float) @ m.T).T
    ch = microscope._srgb()
    np.testing.assert_allclose(ch._wavelength_nm, cmfs.wavelengths, atol=1e-9)
    np.testing.assert_allclose(ch._table, want, rtol=1e-12, atol=1e-15)
    # IEC 61966-2-1's published XYZ -> linear sRGB matrix (4 decimals in the standard).
    np.testing.assert_allclose(m[0], [3.2406, -1.5372, -0.4986], atol=1e-4)


def test_srgb_channels_need_no_colour_science():
    code = (
        "import sys\n"
        "from flakebook.optics.microscope import Channels, cie_illuminant_a\n"
        "Channels.srgb(); cie_illuminant_a([550.0])\n"
        "print('colour' in sys.modules)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
