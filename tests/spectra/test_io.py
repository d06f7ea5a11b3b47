"""Readers: delimited text, multi-column, JCAMP-DX, flakebook map text, and their refusals."""

from __future__ import annotations

import numpy as np
import pytest

from flakebook.errors import InputError
from flakebook.spectra.io import (
    read_jcamp,
    read_map,
    read_spectra,
    read_spectrum,
)


def _lorentz(x, c, w, h):
    return h / (1 + ((x - c) / (w / 2)) ** 2)


X = np.arange(200.0, 300.0, 0.5)
Y = 100 + _lorentz(X, 241.5, 4.0, 900.0)


def _write(tmp_path, name, text):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


@pytest.mark.parametrize(
    ("sep", "decimal"),
    [(",", "."), ("\t", "."), (";", ","), (" ", "."), ("\t", ","), ("  ", ",")],
)
def test_two_column_delimiters_and_decimal_commas(tmp_path, sep, decimal):
    """Comma, tab, semicolon and whitespace separators, decimal commas; common practice, no source."""
    rows = [f"{x:.2f}{sep}{y:.3f}".replace(".", decimal) for x, y in zip(X, Y)]
    text = "Laser wavelength: 532 nm\nExposure (s) = 10\nRaman shift (cm-1)" + sep + "Counts\n"
    p = _write(tmp_path, "s.txt", text + "\n".join(rows) + "\n")
    s = read_spectrum(p)
    assert s.x_unit == "cm1" and s.kind == "raman"
    np.testing.assert_allclose(s.x, X, atol=1e-9)
    np.testing.assert_allclose(s.y, Y, atol=1e-3)
    assert s.metadata["laser_nm"] == 532.0
    assert s.metadata["exposure_s"] == 10.0
    assert not s.x.flags.writeable


def test_descending_axis_is_reordered(tmp_path):
    """A descending axis (spectrometers that write wavenumbers high to low) is reordered."""
    rows = [f"{x},{y}" for x, y in zip(X[::-1], Y[::-1])]
    s = read_spectrum(_write(tmp_path, "d.csv", "\n".join(rows)))
    np.testing.assert_allclose(s.x, X)
    np.testing.assert_allclose(s.y, Y)


def test_semicolon_with_decimal_comma_example(tmp_path):
    """The example of the brief: '520,7;1234'; common practice, no source."""
    s = read_spectrum(_write(tmp_path, "e.csv", "shift;counts\n519,2;100\n520,7;1234\n522,0;130\n"))
    np.testing.assert_allclose(s.x, [519.2, 520.7, 522.0])
    np.testing.assert_allclose(s.y, [100, 1234, 130])


def test_multi_column(tmp_path):
    """One x column and three spectra, with column names from the header line."""
    rows = [f"{x}\t{y}\t{2 * y}\t{3 * y}" for x, y in zip(X, Y)]
    p = _write(tmp_path, "m.tsv", "shift\tspot_a\tspot_b\tspot_c\n" + "\n".join(rows))
    ss = read_spectra(p)
    assert ss.names == ("spot_a", "spot_b", "spot_c")
    assert ss.y.shape == (3, X.size)
    np.testing.assert_allclose(ss.y[2], 3 * Y)
    with pytest.raises(InputError, match="3 intensity columns"):
        read_spectrum(p)


def test_jcamp_dx_written_by_hand(tmp_path):
    """JCAMP-DX 4.24 (R. S. McDonald, P. A. Wilks, Appl. Spectrosc. 42, 151 (1988); IUPAC):
    core header labels and ##XYDATA=(X++(Y..Y)) in AFFN, read back through the jcamp package."""
    x = np.arange(100.0, 120.0, 1.0)  # 20 points, 1 cm^-1 apart
    y = np.round(1000 + 500 * np.exp(-(((x - 110) / 2) ** 2)))
    lines = [
        "##TITLE=chip K7 flake 12, 532 nm",
        "##JCAMP-DX=4.24",
        "##DATA TYPE=RAMAN SPECTRUM",
        "##ORIGIN=flakebook test",
        "##OWNER=public domain",
        "##$LASER WAVELENGTH=532.0",
        "##XUNITS=1/CM",
        "##YUNITS=ARBITRARY UNITS",
        "##XFACTOR=1.0",
        "##YFACTOR=1.0",
        "##FIRSTX=100.0",
        "##LASTX=119.0",
        "##DELTAX=1.0",
        "##NPOINTS=20",
        f"##FIRSTY={y[0]:g}",
        "##XYDATA=(X++(Y..Y))",
    ]
    for i in range(0, 20, 5):
        lines.append(f"{x[i]:g} " + " ".join(f"{v:g}" for v in y[i : i + 5]))
    lines.append("##END=")
    p = _write(tmp_path, "k7.jdx", "\n".join(lines) + "\n")
    s = read_jcamp(p)
    np.testing.assert_allclose(s.x, x)
    np.testing.assert_allclose(s.y, y)
    assert s.x_unit == "cm1"
    assert s.metadata["laser_nm"] == 532.0
    assert read_spectrum(p).y.size == 20  # dispatched by its ##TITLE


def test_map_text_round_trip(tmp_path):
    """flakebook's map text (docs/spectrum-map-format.md): positions in any order, a full grid."""
    axis = np.arange(230.0, 260.0, 0.5)
    xs, ys = np.array([0.0, 0.5, 1.0]), np.array([-1.0, 0.0])
    rng = np.random.default_rng(3)
    lines = ["# laser: 532 nm", "#flakebook-map x_unit=cm1 kind=raman"]
    lines.append("spectral_axis " + " ".join(f"{a:g}" for a in axis))
    truth = {}
    pts = [(x, y) for y in ys for x in xs]
    for x, y in [pts[i] for i in rng.permutation(len(pts))]:
        spec = 10 + _lorentz(axis, 241 + x, 4, 100 + y)
        truth[(x, y)] = spec
        lines.append(f"{x:g} {y:g} " + " ".join(f"{v:.6f}" for v in spec))
    m = read_map(_write(tmp_path, "map.txt", "\n".join(lines)))
    assert m.shape == (2, 3)
    np.testing.assert_allclose(m.x_um, xs)
    np.testing.assert_allclose(m.y_um, ys)
    np.testing.assert_allclose(m.spectra[1, 2], truth[(1.0, 0.0)], atol=1e-6)
    assert m.metadata["laser_nm"] == 532.0
    lines.pop()  # one spectrum missing: no longer a grid
    with pytest.raises(InputError, match="complete grid"):
        read_map(_write(tmp_path, "map2.txt", "\n".join(lines)))


# --- refusals: each names what is wrong and what is accepted ---------------------------------


def _csv(tmp_path, x, y, header="shift,counts\n"):
    rows = [f"{a},{b}" for a, b in zip(x, y)]
    return _write(tmp_path, "bad.csv", header + "\n".join(rows) + "\n")


def test_nan_refused(tmp_path):
    y = Y.copy()
    y[10] = np.nan
    with pytest.raises(InputError, match=r"NaN or infinite.*accepted: finite"):
        read_spectrum(_csv(tmp_path, X, y))


def test_non_monotonic_refused(tmp_path):
    x = X.copy()
    x[[20, 21]] = x[[21, 20]]
    with pytest.raises(InputError, match=r"not monotonic.*accepted: strictly"):
        read_spectrum(_csv(tmp_path, x, Y))


def test_one_point_refused(tmp_path):
    with pytest.raises(InputError, match=r"1 point.*accepted: at least 2"):
        read_spectrum(_csv(tmp_path, [520.7], [1000]))


def test_saturated_flat_top_refused(tmp_path):
    """A clipped top: a flat run at the maximum (common practice, no source)."""
    y = np.minimum(Y, 700.0)
    with pytest.raises(InputError, match=r"flat at the maximum.*saturated.*accepted"):
        read_spectrum(_csv(tmp_path, X, y))


def test_detector_limit_refused(tmp_path):
    """Counts at a 16-bit detector's limit, 65535 = 2^16 - 1."""
    y = Y.copy()
    y[80] = 65535
    with pytest.raises(InputError, match=r"detector limit 65535.*accepted"):
        read_spectrum(_csv(tmp_path, X, y), detector_limit=65535)
    assert read_spectrum(_csv(tmp_path, X, Y), detector_limit=65535).y.max() < 65535


def test_unreadable_file_refused(tmp_path):
    with pytest.raises(InputError, match=r"cannot be read.*accepted"):
        read_spectrum(tmp_path / "missing.csv")
    binary = tmp_path / "b.spc"
    binary.write_bytes(b"\x00\x01\x02" * 100)
    with pytest.raises(InputError, match=r"binary.*accepted"):
        read_spectrum(binary)
    with pytest.raises(InputError, match=r"no rows of numbers.*accepted"):
        read_spectrum(_write(tmp_path, "words.txt", "just some words\nand more\n"))


def test_ragged_rows_refused(tmp_path):
    with pytest.raises(InputError, match=r"line 3: 3 column.*accepted: the same number"):
        read_spectrum(_write(tmp_path, "r.csv", "1,2\n3,4\n5,6,7\n"))


def test_wavelength_given_as_raman_shift_refused(tmp_path):
    """A 'Raman' file whose x runs 540-560 nm: told it looks like nm, and to give --x-unit nm
    with --laser-nm. 1024 CCD pixels over 20 nm is 0.02 nm per pixel (common practice, no source)."""
    x = np.linspace(540, 560, 1024)
    y = 100 + _lorentz(x, 545.0, 0.1, 500)
    p = _csv(tmp_path, x, y, header="")
    with pytest.raises(InputError, match=r"looks like a wavelength in nm.*--x-unit nm.*--laser-nm"):
        read_spectrum(p)
    labelled = _csv(tmp_path, x, y, header="Wavelength (nm),Intensity\n")
    with pytest.raises(InputError, match=r"labelled in nm.*--x-unit nm.*--laser-nm"):
        read_spectrum(labelled)
    s = read_spectrum(p, x_unit="nm")  # stated: accepted as it is
    assert s.x_unit == "nm"


def test_bad_jcamp_refused(tmp_path):
    with pytest.raises(InputError, match=r"not a JCAMP-DX file.*accepted"):
        read_jcamp(_write(tmp_path, "x.jdx", "hello\n"))
