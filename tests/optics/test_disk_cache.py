"""The optics tables kept on disk between runs give the values computed afresh, and any change
to what enters them (an n,k value, the flakebook version) is a new key, never a stale table.
Common practice, no source: a cache that changes a number, or serves one for other inputs, is
wrong."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from flakebook.optics import _disk_cache, layers
from flakebook.optics.materials import get_material
from flakebook.optics.microscope import Microscope, channel_contrast
from flakebook.optics.substrate import parse_substrate

ARGS = dict(geometry="supported", hole=None, t=None, na=0.3, f=1.0, layers=(1, 2, 3))


@pytest.fixture
def cache(tmp_path, monkeypatch):
    monkeypatch.setenv("FLAKEBOOK_CACHE_DIR", str(tmp_path / "tables"))
    layers._table.cache_clear()
    yield tmp_path / "tables"
    layers._table.cache_clear()


def _table(mat):
    layers._table.cache_clear()  # the in-process cache would hide the disk
    return layers._table(mat, parse_substrate("SiO2:285,Si"), Microscope(), **ARGS)


def _fresh(mat):
    mic = Microscope(na_illumination=0.3)
    return channel_contrast(mat, (1, 2, 3), parse_substrate("SiO2:285,Si"), mic).contrast


def test_a_stored_table_is_the_computed_one(cache):
    mat = get_material("MoSe2")
    first = _table(mat)
    assert len(list(cache.glob("*.npy"))) == 1
    again = _table(mat)  # read from disk
    np.testing.assert_array_equal(again, first)
    np.testing.assert_array_equal(again, _fresh(mat))


def test_changed_nk_values_are_a_new_key(cache):
    mat = get_material("MoSe2")
    _table(mat)
    # The same data-set name with other n values (equal by name, so only the values differ).
    ds = mat.ordinary
    lam = np.linspace(*ds.wavelength_range_nm, 200)
    nk = ds.nk(lam)
    moved = replace(ds, _n=(lam, nk.real + 0.2), _k=(lam, nk.imag))
    other = replace(mat, ordinary=moved, by_layers=tuple((n, moved) for n, _ in mat.by_layers))
    assert other.ordinary == mat.ordinary  # equal by name: only the values tell them apart
    got = _table(other)
    np.testing.assert_array_equal(got, _fresh(other))
    assert not np.allclose(got, _fresh(mat))
    assert len(list(cache.glob("*.npy"))) == 2


def test_another_version_is_a_new_key(cache, monkeypatch):
    import flakebook

    mat = get_material("MoSe2")
    sub, mic = parse_substrate("SiO2:285,Si"), Microscope(na_illumination=0.3)
    k1 = _disk_cache.table_key("contrast-table", mat, (1, 2, 3), sub, mic, "supported", None)
    _disk_cache._code_fingerprint.cache_clear()
    monkeypatch.setattr(flakebook, "__version__", flakebook.__version__ + ".post1")
    try:
        k2 = _disk_cache.table_key("contrast-table", mat, (1, 2, 3), sub, mic, "supported", None)
    finally:
        _disk_cache._code_fingerprint.cache_clear()
    assert k1 != k2
    oxide = parse_substrate("SiO2:290,Si")
    assert k1 != _disk_cache.table_key(
        "contrast-table", mat, (1, 2, 3), oxide, mic, "supported", None
    )


def test_a_damaged_file_is_computed_again(cache):
    mat = get_material("MoSe2")
    first = _table(mat)
    (path,) = cache.glob("*.npy")
    path.write_bytes(b"not a table")
    np.testing.assert_array_equal(_table(mat), first)
    np.save(path, np.full(first.shape, np.nan))
    np.testing.assert_array_equal(_table(mat), first)


def test_off_writes_nothing(tmp_path, monkeypatch):
    monkeypatch.setenv("FLAKEBOOK_CACHE_DIR", "off")
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path))
    assert _disk_cache.cache_dir() is None
    _table(get_material("MoSe2"))
    assert not any(tmp_path.rglob("*.npy"))
    layers._table.cache_clear()
