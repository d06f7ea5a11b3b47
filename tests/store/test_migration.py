"""Files of every earlier project format open, upgraded, with nothing lost (common practice, no
source)."""

from __future__ import annotations

import sqlite3

import numpy as np
import pytest
from store_helpers import sha256

from flakebook.store import SCHEMA_VERSION, Project
from flakebook.store import schema as sch
from flakebook.store.codec import encode_array


def _old_file(path, version: int) -> None:
    """A project as flakebook wrote it in format ``version``: the v1 schema with v1 rows, then the
    migrations up to ``version``."""
    con = sqlite3.connect(path, isolation_level=None)
    con.execute("BEGIN")
    sch.create_v1(con)
    con.executemany(
        "INSERT INTO meta (key, value) VALUES (?, ?)",
        [("max_layers", "15"), ("created_with", "0.0.9"), ("created_at", "2025-11-01T10:00:00Z")],
    )
    con.execute(
        "INSERT INTO samples (id, name, material, oxide_nm, notes) VALUES (1, 'K7-süd', 'MoSe2', 285.0, '')"
    )
    con.execute(
        "INSERT INTO samples (id, name, material, oxide_nm, notes) VALUES (2, 'bare-Si', 'WS2', NULL, '')"
    )
    con.execute(
        "INSERT INTO images (id, sample_id, path, sha256, size_bytes, pixel_size_um) "
        "VALUES (1, 1, 'img/a.png', ?, 10, 0.1)",
        ("ab" * 32,),
    )
    con.execute("INSERT INTO flakes (id, sample_id, label) VALUES (1, 1, 'K7S-01')")
    outline = encode_array(np.array([[0, 0], [10, 0], [10, 10]], float))
    con.execute(
        "INSERT INTO appearances (id, flake_id, image_id, area_um2, outline_px, outline_um) "
        "VALUES (1, 1, 1, 0.5, ?, ?)",
        (outline, encode_array(np.array([[0, 0], [1, 0], [1, 1]], float))),
    )
    con.execute(
        "INSERT INTO terraces (id, appearance_id, area_um2, outline_px, outline_um) "
        "VALUES (1, 1, 0.4, ?, NULL)",
        (outline,),
    )
    con.execute(
        "INSERT INTO evidence (id, flake_id, method, likelihood) VALUES (1, 1, 'contrast', ?)",
        (encode_array(np.full(16, 0.5)),),
    )
    con.execute("INSERT INTO dependencies VALUES ('evidence', 1, 0, 'appearance', 1, 1)")
    v = 1
    while v < version:
        sch.MIGRATIONS[v](con)
        v += 1
        con.execute(f"PRAGMA user_version = {v}")
    con.execute("COMMIT")
    con.close()


EARLIER = list(range(1, SCHEMA_VERSION))


def test_there_is_an_earlier_format():
    assert EARLIER, "migrations are tested from every earlier format"
    assert set(sch.MIGRATIONS) == set(EARLIER)


@pytest.mark.parametrize("version", EARLIER)
def test_read_write_open_upgrades_and_keeps_a_copy(tmp_path, version):
    path = tmp_path / f"v{version}.flakebook"
    _old_file(path, version)
    original = sha256(path)
    with Project.open(path) as p:
        assert p.schema_version == SCHEMA_VERSION
        assert any("upgraded" in w for w in p.warnings)
        s = p.sample_by_name("K7-süd")
        assert [(x.material, x.thickness_nm) for x in s.substrate] == [
            ("SiO2", 285.0),
            ("Si", None),
        ]
        assert s.oxide_nm == 285.0
        assert [(x.material, x.thickness_nm) for x in p.sample_by_name("bare-Si").substrate] == [
            ("Si", None)
        ]
        row = p.catalogue(s)[0]
        assert row.label == "K7S-01" and row.area_um2 == 0.5
        assert row.primary_terrace_id == 1, "the catalogue's columns are filled in on upgrade"
        ev = p.evidence_of(1)[0]
        assert ev.inputs[0].kind == "appearance"
        # The later model's tables work on an upgraded file.
        p.add_external_result(1, kappa_w_mk=30.0, method="elsewhere")
        p.add_calibration(s, oxide_nm=287.0, oxide_err_nm=1.5)
    assert sha256(tmp_path / f"v{version}.flakebook.v{version}.bak") == original
    with Project.open(path, read_only=True) as q:
        assert q.schema_version == SCHEMA_VERSION and not q.warnings


@pytest.mark.parametrize("version", EARLIER)
def test_read_only_open_upgrades_in_memory_only(tmp_path, version):
    path = tmp_path / f"v{version}.flakebook"
    _old_file(path, version)
    before = sha256(path)
    with Project.open(path, read_only=True) as q:
        assert q.sample_by_name("K7-süd").oxide_nm == 285.0
        assert any("not changed" in w for w in q.warnings)
    assert sha256(path) == before
    assert sorted(x.name for x in tmp_path.iterdir()) == [path.name]


def test_new_file_equals_migrated_v1_schema(tmp_path):
    """A new file and an upgraded v1 file have the same tables and columns."""
    Project.create(tmp_path / "new").close()
    _old_file(tmp_path / "old.flakebook", 1)
    Project.open(tmp_path / "old.flakebook").close()

    def columns(path):
        con = sqlite3.connect(path)
        tables = [
            r[0]
            for r in con.execute("SELECT name FROM sqlite_master WHERE type='table' ORDER BY name")
        ]
        out = {t: sorted(r[1] for r in con.execute(f"PRAGMA table_info({t})")) for t in tables}
        con.close()
        return out

    assert columns(tmp_path / "new.flakebook") == columns(tmp_path / "old.flakebook")


def test_v3_file_takes_spectrum_fits_and_rule_calibrations(tmp_path):
    """A version-3 file with a stored spectrum opens upgraded to the current version; the spectrum is kept
    and the new tables take its fit and a calibrated rule table (common practice, no source)."""
    path = tmp_path / "v3.flakebook"
    _old_file(path, 3)
    con = sqlite3.connect(path, isolation_level=None)
    x = np.linspace(200.0, 300.0, 11)
    con.execute(
        "INSERT INTO spectra (id, sample_id, flake_id, kind, x_unit, x, y) "
        "VALUES (1, 1, 1, 'raman', 'cm-1', ?, ?)",
        (encode_array(x), encode_array(x * 0 + 5.0)),
    )
    con.close()
    with Project.open(path) as p:
        assert p.schema_version == SCHEMA_VERSION
        spec = p.get("spectrum", 1)
        assert np.array_equal(spec.x, x)
        fit = p.add_spectrum_fit(spec, settings={"peak_model": "voigt"}, method="m", inputs=[spec])
        assert fit.flake_id == 1, "a fit takes its spectrum's flake"
        p.add_rule_calibration(1, "MoSe2", 532.0, {"material": "MoSe2", "rules": []})
    with Project.open(path, read_only=True) as q:
        assert q.fits_of(1)[0].settings == {"peak_model": "voigt"}
        assert q.rule_calibrations_of(1, 532.0)[0].material == "MoSe2"


def test_v5_file_takes_raman_maps(tmp_path):
    """A version-5 file opens upgraded to version 6 with nothing lost; a Raman map's fits are
    stored on its sample and image and read back, NaN (no line) kept (common practice, no
    source)."""
    path = tmp_path / "v5.flakebook"
    _old_file(path, 5)
    with Project.open(path) as p:
        assert p.schema_version == 6
        assert p.get("image", 1).sample_id == 1
        maps = np.array([[[241.2, np.nan]], [[1.0, np.nan]]])
        rec = p.add_raman_map(
            1, image_id=1, offset_x_um=2.0, offset_y_um=-1.5, material="MoSe2", laser_nm=532.0,
            x_um=np.array([0.0, 1.0]), y_um=np.array([0.0]),
            quantities=("A1g_center_cm1", "layers"), maps=maps, method="Raman map fit",
        )  # fmt: skip
        assert rec.flakebook_version, "the store records the flakebook version"
    with Project.open(path, read_only=True) as q:
        got = q.raman_maps_on(1)[0]
        assert got.id == rec.id and got.offset_x_um == 2.0 and got.offset_y_um == -1.5
        assert np.array_equal(got.quantity("layers"), maps[1], equal_nan=True)
        assert q.raman_maps_of(1)[0].shape == (1, 2)


def test_a_map_on_an_image_needs_its_offset_and_the_same_sample(tmp_path):
    """Placement is refused when half given or on another sample's image (common practice,
    no source)."""
    from flakebook.errors import InputError

    path = tmp_path / "v5.flakebook"
    _old_file(path, 5)
    base = dict(
        material="MoSe2", laser_nm=532.0, x_um=[0.0], y_um=[0.0], quantities=("layers",),
        maps=[[[1.0]]], method="Raman map fit",
    )  # fmt: skip
    with Project.open(path) as p:
        with pytest.raises(InputError, match="offset"):
            p.add_raman_map(1, image_id=1, **base)
        with pytest.raises(InputError, match="another sample"):
            p.add_raman_map(2, image_id=1, offset_x_um=0.0, offset_y_um=0.0, **base)
        with pytest.raises(InputError, match="accepted: raman"):
            p.add_raman_map(1, kind="pl", **base)
        with pytest.raises(InputError, match="shape"):
            p.add_raman_map(1, **{**base, "maps": [[[1.0, 2.0]]]})
        assert p.raman_maps_of() == []
