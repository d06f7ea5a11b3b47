"""The project file's schema, its version history and the forward migrations.

``PRAGMA user_version`` holds the schema version and ``PRAGMA application_id`` marks the file as a
flakebook project. A new file is made by running the first version's SQL and then every
migration, so the path an old file takes is the path every file takes.

Version history:
  1. first release: a sample's substrate was a SiO2 thickness on Si (``samples.oxide_nm``).
  2. a sample's substrate is a stack of layers (``samples.substrate``, JSON list of
     ``{"material", "thickness_nm"}`` from the top down; v1 files get ``SiO2:oxide_nm, Si``);
     results imported from outside analyses (``external_results``) and optics calibrations
     (``calibrations``).
  3. for the catalogue's speed, terraces carry their flake (``terraces.flake_id``) and
     appearances their image's pixel size (``appearances.pixel_size_um``), both kept in step by
     the store, with indexes for the catalogue; every derived record names the published source
     of its constants (``source`` on assignments and thermometry results, as evidence had).
  4. spectrum fits (``spectrum_fits``: a stored spectrum's fit settings, fitted peaks, Si-line
     calibration and warnings, derived from the spectrum) and Raman/PL rule tables calibrated
     on a sample's own flakes (``rule_calibrations``).
  5. a layer calibration keeps its whole fit (``calibrations.model``: the JSON of
     ``flakebook calibrate``, with the n,k coefficients and residuals) and when it was made
     (``calibrations.created_at``).
  6. Raman maps (``raman_maps``): a map's fitted quantities (one float64 array of shape
     (quantities, rows, cols) with their names), its grid, the sample it was taken on and
     optionally the micrograph it was taken over with its placement (``offset_x_um``,
     ``offset_y_um``: where the map's coordinate origin lies, in um from the image's pixel
     origin, along the image's axes), its settings and provenance.
"""

from __future__ import annotations

import json
import sqlite3
from collections.abc import Callable

#: "FLKB": marks a SQLite file as a flakebook project.
APPLICATION_ID = 0x464C4B42
SCHEMA_VERSION = 6

_PROVENANCE = """
    method TEXT NOT NULL DEFAULT '',
    parameters TEXT NOT NULL DEFAULT '{}',
    flakebook_version TEXT NOT NULL DEFAULT '',
    computed_at TEXT,
    stale INTEGER NOT NULL DEFAULT 0,
"""

SCHEMA_V1 = f"""
CREATE TABLE meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);

CREATE TABLE samples (
    id INTEGER PRIMARY KEY,
    revision INTEGER NOT NULL DEFAULT 1,
    name TEXT NOT NULL UNIQUE,
    material TEXT NOT NULL,
    oxide_nm REAL,
    hole_pattern TEXT,
    notes TEXT NOT NULL DEFAULT ''
);

CREATE TABLE images (
    id INTEGER PRIMARY KEY,
    revision INTEGER NOT NULL DEFAULT 1,
    sample_id INTEGER NOT NULL REFERENCES samples(id) ON DELETE CASCADE,
    path TEXT NOT NULL,
    sha256 TEXT NOT NULL,
    size_bytes INTEGER NOT NULL,
    pixel_size_um REAL,
    objective TEXT NOT NULL DEFAULT '',
    na_objective REAL,
    na_illumination REAL,
    illumination TEXT NOT NULL DEFAULT '',
    camera TEXT NOT NULL DEFAULT '{{}}',
    stage_x_um REAL,
    stage_y_um REAL,
    width_px INTEGER,
    height_px INTEGER
);
CREATE INDEX images_sample ON images(sample_id);

CREATE TABLE image_data (
    image_id INTEGER PRIMARY KEY REFERENCES images(id) ON DELETE CASCADE,
    data BLOB NOT NULL
);

CREATE TABLE flakes (
    id INTEGER PRIMARY KEY,
    revision INTEGER NOT NULL DEFAULT 1,
    sample_id INTEGER NOT NULL REFERENCES samples(id) ON DELETE CASCADE,
    label TEXT NOT NULL UNIQUE,
    tags TEXT NOT NULL DEFAULT '[]',
    notes TEXT NOT NULL DEFAULT '',
    status TEXT NOT NULL DEFAULT 'new',
    primary_terrace_id INTEGER REFERENCES terraces(id) ON DELETE SET NULL
);
CREATE INDEX flakes_sample ON flakes(sample_id);

CREATE TABLE appearances (
    id INTEGER PRIMARY KEY,
    revision INTEGER NOT NULL DEFAULT 1,
    flake_id INTEGER NOT NULL REFERENCES flakes(id) ON DELETE CASCADE,
    image_id INTEGER NOT NULL REFERENCES images(id) ON DELETE CASCADE,
    area_um2 REAL,
    outline_px BLOB NOT NULL,
    outline_um BLOB
);
CREATE INDEX appearances_flake ON appearances(flake_id);
CREATE INDEX appearances_image ON appearances(image_id);

CREATE TABLE terraces (
    id INTEGER PRIMARY KEY,
    revision INTEGER NOT NULL DEFAULT 1,
    appearance_id INTEGER NOT NULL REFERENCES appearances(id) ON DELETE CASCADE,
    label TEXT NOT NULL DEFAULT '',
    notes TEXT NOT NULL DEFAULT '',
    area_um2 REAL,
    outline_px BLOB NOT NULL,
    outline_um BLOB
);
CREATE INDEX terraces_appearance ON terraces(appearance_id);

CREATE TABLE holes (
    id INTEGER PRIMARY KEY,
    revision INTEGER NOT NULL DEFAULT 1,
    image_id INTEGER NOT NULL REFERENCES images(id) ON DELETE CASCADE,
    center_x_px REAL NOT NULL,
    center_y_px REAL NOT NULL,
    radius_px REAL NOT NULL,
    radius_um REAL,
    radius_err_um REAL,
    source TEXT NOT NULL DEFAULT 'manual',
    lattice_i INTEGER,
    lattice_j INTEGER
);
CREATE INDEX holes_image ON holes(image_id);

CREATE TABLE flake_holes (
    id INTEGER PRIMARY KEY,
    revision INTEGER NOT NULL DEFAULT 1,
    flake_id INTEGER NOT NULL REFERENCES flakes(id) ON DELETE CASCADE,
    hole_id INTEGER NOT NULL REFERENCES holes(id) ON DELETE CASCADE,
    terrace_id INTEGER REFERENCES terraces(id) ON DELETE SET NULL,
    covered_fraction REAL NOT NULL,
    fully_covered INTEGER NOT NULL DEFAULT 0,
    margin_um REAL,
    UNIQUE (flake_id, hole_id)
);
CREATE INDEX flake_holes_hole ON flake_holes(hole_id);

CREATE TABLE beam_profiles (
    id INTEGER PRIMARY KEY,
    revision INTEGER NOT NULL DEFAULT 1,
    objective TEXT NOT NULL,
    laser_nm REAL NOT NULL,
    radius_um REAL NOT NULL,
    radius_err_um REAL,
    method TEXT NOT NULL DEFAULT '',
    measured_on TEXT,
    notes TEXT NOT NULL DEFAULT ''
);

CREATE TABLE thermometry_series (
    id INTEGER PRIMARY KEY,
    revision INTEGER NOT NULL DEFAULT 1,
    flake_id INTEGER NOT NULL REFERENCES flakes(id) ON DELETE CASCADE,
    kind TEXT NOT NULL,
    laser_nm REAL,
    mode TEXT NOT NULL DEFAULT '',
    beam_profile_id INTEGER REFERENCES beam_profiles(id) ON DELETE SET NULL,
    hole_id INTEGER REFERENCES holes(id) ON DELETE SET NULL,
    notes TEXT NOT NULL DEFAULT ''
);
CREATE INDEX thermometry_series_flake ON thermometry_series(flake_id);

CREATE TABLE spectra (
    id INTEGER PRIMARY KEY,
    revision INTEGER NOT NULL DEFAULT 1,
    sample_id INTEGER REFERENCES samples(id) ON DELETE CASCADE,
    flake_id INTEGER REFERENCES flakes(id) ON DELETE CASCADE,
    terrace_id INTEGER REFERENCES terraces(id) ON DELETE SET NULL,
    series_id INTEGER REFERENCES thermometry_series(id) ON DELETE SET NULL,
    kind TEXT NOT NULL,
    x_unit TEXT NOT NULL,
    laser_nm REAL,
    power_mw REAL,
    spot_image_id INTEGER REFERENCES images(id) ON DELETE SET NULL,
    spot_x_px REAL,
    spot_y_px REAL,
    polarization TEXT NOT NULL DEFAULT '',
    stage_temperature_k REAL,
    integration_s REAL,
    metadata TEXT NOT NULL DEFAULT '{{}}',
    source_path TEXT NOT NULL DEFAULT '',
    source_sha256 TEXT NOT NULL DEFAULT '',
    x BLOB NOT NULL,
    y BLOB NOT NULL
);
CREATE INDEX spectra_flake ON spectra(flake_id);
CREATE INDEX spectra_series ON spectra(series_id);
CREATE INDEX spectra_sample ON spectra(sample_id);

CREATE TABLE evidence (
    id INTEGER PRIMARY KEY,
    revision INTEGER NOT NULL DEFAULT 1,
    {_PROVENANCE}
    flake_id INTEGER NOT NULL REFERENCES flakes(id) ON DELETE CASCADE,
    terrace_id INTEGER REFERENCES terraces(id) ON DELETE CASCADE,
    source TEXT NOT NULL DEFAULT '',
    reason TEXT NOT NULL DEFAULT '',
    likelihood BLOB NOT NULL
);
CREATE INDEX evidence_flake ON evidence(flake_id);
CREATE INDEX evidence_stale ON evidence(flake_id) WHERE stale;

CREATE TABLE assignments (
    id INTEGER PRIMARY KEY,
    revision INTEGER NOT NULL DEFAULT 1,
    {_PROVENANCE}
    flake_id INTEGER NOT NULL REFERENCES flakes(id) ON DELETE CASCADE,
    terrace_id INTEGER REFERENCES terraces(id) ON DELETE CASCADE,
    layers INTEGER NOT NULL,
    probability REAL,
    ambiguous_with TEXT NOT NULL DEFAULT '[]',
    manual INTEGER NOT NULL DEFAULT 0,
    reason TEXT NOT NULL DEFAULT '',
    who TEXT NOT NULL DEFAULT '',
    assigned_at TEXT,
    posterior BLOB
);
CREATE INDEX assignments_flake ON assignments(flake_id, id);

CREATE TABLE thermometry_results (
    id INTEGER PRIMARY KEY,
    revision INTEGER NOT NULL DEFAULT 1,
    {_PROVENANCE}
    flake_id INTEGER NOT NULL REFERENCES flakes(id) ON DELETE CASCADE,
    layers INTEGER,
    thickness_nm REAL,
    layer_spacing_nm REAL,
    kappa_w_mk REAL,
    kappa_median_w_mk REAL,
    kappa_p16_w_mk REAL,
    kappa_p84_w_mk REAL,
    chi_t_cm1_per_k REAL,
    chi_t_err_cm1_per_k REAL,
    chi_p_cm1_per_mw REAL,
    chi_p_err_cm1_per_mw REAL,
    absorptance REAL,
    absorptance_err REAL,
    details TEXT NOT NULL DEFAULT '{{}}'
);
CREATE INDEX thermometry_results_flake ON thermometry_results(flake_id, id);

-- What each derived record was computed from (record kind, id and revision at the time).
CREATE TABLE dependencies (
    derived_kind TEXT NOT NULL,
    derived_id INTEGER NOT NULL,
    position INTEGER NOT NULL,
    input_kind TEXT NOT NULL,
    input_id INTEGER NOT NULL,
    input_revision INTEGER NOT NULL,
    PRIMARY KEY (derived_kind, derived_id, position)
);
CREATE INDEX dependencies_input ON dependencies(input_kind, input_id);
"""


def _v1_to_v2(con: sqlite3.Connection) -> None:
    """Substrate stacks, external results and calibrations."""
    con.execute("ALTER TABLE samples ADD COLUMN substrate TEXT NOT NULL DEFAULT '[]'")
    rows = con.execute("SELECT id, oxide_nm FROM samples").fetchall()
    for sample_id, oxide_nm in rows:
        if oxide_nm is None:
            stack = [{"material": "Si", "thickness_nm": None}]
        else:
            stack = [
                {"material": "SiO2", "thickness_nm": float(oxide_nm)},
                {"material": "Si", "thickness_nm": None},
            ]
        con.execute("UPDATE samples SET substrate = ? WHERE id = ?", (json.dumps(stack), sample_id))
    con.execute("ALTER TABLE samples DROP COLUMN oxide_nm")
    for statement in _V2_TABLES.split(";"):
        if statement.strip():
            con.execute(statement)


_V2_TABLES = """
CREATE TABLE external_results (
    id INTEGER PRIMARY KEY,
    revision INTEGER NOT NULL DEFAULT 1,
    flake_id INTEGER NOT NULL REFERENCES flakes(id) ON DELETE CASCADE,
    kappa_w_mk REAL,
    kappa_p16_w_mk REAL,
    kappa_p84_w_mk REAL,
    method TEXT NOT NULL DEFAULT '',
    note TEXT NOT NULL DEFAULT '',
    source_file TEXT NOT NULL DEFAULT '',
    imported_at TEXT
);
CREATE INDEX external_results_flake ON external_results(flake_id, id);

CREATE TABLE calibrations (
    id INTEGER PRIMARY KEY,
    revision INTEGER NOT NULL DEFAULT 1,
    sample_id INTEGER NOT NULL REFERENCES samples(id) ON DELETE CASCADE,
    image_id INTEGER REFERENCES images(id) ON DELETE CASCADE,
    oxide_nm REAL,
    oxide_err_nm REAL,
    dark_offset TEXT NOT NULL DEFAULT '{}',
    dark_offset_err TEXT NOT NULL DEFAULT '{}',
    contrast_scale TEXT NOT NULL DEFAULT '{}',
    contrast_scale_err TEXT NOT NULL DEFAULT '{}',
    method TEXT NOT NULL DEFAULT '',
    notes TEXT NOT NULL DEFAULT ''
);
CREATE INDEX calibrations_sample ON calibrations(sample_id)
"""


def _v2_to_v3(con: sqlite3.Connection) -> None:
    """Catalogue columns and indexes; provenance source on every derived record."""
    for statement in _V3_CHANGES.split(";"):
        if statement.strip():
            con.execute(statement)
    con.execute(
        "UPDATE terraces SET flake_id = "
        "(SELECT a.flake_id FROM appearances a WHERE a.id = terraces.appearance_id)"
    )
    con.execute(
        "UPDATE appearances SET pixel_size_um = "
        "(SELECT i.pixel_size_um FROM images i WHERE i.id = appearances.image_id)"
    )


_V3_CHANGES = """
ALTER TABLE terraces ADD COLUMN flake_id INTEGER REFERENCES flakes(id) ON DELETE CASCADE;
CREATE INDEX terraces_flake ON terraces(flake_id, area_um2 DESC, id);
ALTER TABLE appearances ADD COLUMN pixel_size_um REAL;
CREATE INDEX appearances_finest ON appearances(flake_id, COALESCE(pixel_size_um, 1e308), id);
CREATE INDEX flake_holes_primary ON flake_holes(flake_id, fully_covered DESC, covered_fraction DESC, id)
    WHERE terrace_id IS NOT NULL;
CREATE INDEX flake_holes_covered ON flake_holes(flake_id, fully_covered);
CREATE INDEX assignments_stale ON assignments(flake_id) WHERE stale;
CREATE INDEX thermometry_results_stale ON thermometry_results(flake_id) WHERE stale;
ALTER TABLE assignments ADD COLUMN source TEXT NOT NULL DEFAULT '';
ALTER TABLE thermometry_results ADD COLUMN source TEXT NOT NULL DEFAULT ''
"""


def _v3_to_v4(con: sqlite3.Connection) -> None:
    """Spectrum fits and calibrated rule tables."""
    for statement in _V4_TABLES.split(";"):
        if statement.strip():
            con.execute(statement)


_V4_TABLES = f"""
CREATE TABLE spectrum_fits (
    id INTEGER PRIMARY KEY,
    revision INTEGER NOT NULL DEFAULT 1,
    {_PROVENANCE}
    source TEXT NOT NULL DEFAULT '',
    spectrum_id INTEGER NOT NULL REFERENCES spectra(id) ON DELETE CASCADE,
    flake_id INTEGER REFERENCES flakes(id) ON DELETE CASCADE,
    settings TEXT NOT NULL DEFAULT '{{}}',
    peaks TEXT NOT NULL DEFAULT '[]',
    calibration TEXT NOT NULL DEFAULT '{{}}',
    warnings TEXT NOT NULL DEFAULT '[]'
);
CREATE INDEX spectrum_fits_spectrum ON spectrum_fits(spectrum_id);
CREATE INDEX spectrum_fits_flake ON spectrum_fits(flake_id);

CREATE TABLE rule_calibrations (
    id INTEGER PRIMARY KEY,
    revision INTEGER NOT NULL DEFAULT 1,
    sample_id INTEGER NOT NULL REFERENCES samples(id) ON DELETE CASCADE,
    material TEXT NOT NULL,
    laser_nm REAL NOT NULL,
    rule_table TEXT NOT NULL DEFAULT '{{}}',
    flakes_used TEXT NOT NULL DEFAULT '[]',
    method TEXT NOT NULL DEFAULT '',
    notes TEXT NOT NULL DEFAULT '',
    created_at TEXT
);
CREATE INDEX rule_calibrations_sample ON rule_calibrations(sample_id, laser_nm, id)
"""


def _v4_to_v5(con: sqlite3.Connection) -> None:
    """A calibration's whole fit and its date."""
    con.execute("ALTER TABLE calibrations ADD COLUMN model TEXT NOT NULL DEFAULT '{}'")
    con.execute("ALTER TABLE calibrations ADD COLUMN created_at TEXT")


def _v5_to_v6(con: sqlite3.Connection) -> None:
    """Raman maps."""
    for statement in _V6_TABLES.split(";"):
        if statement.strip():
            con.execute(statement)


_V6_TABLES = f"""
CREATE TABLE raman_maps (
    id INTEGER PRIMARY KEY,
    revision INTEGER NOT NULL DEFAULT 1,
    {_PROVENANCE}
    source TEXT NOT NULL DEFAULT '',
    sample_id INTEGER NOT NULL REFERENCES samples(id) ON DELETE CASCADE,
    image_id INTEGER REFERENCES images(id) ON DELETE SET NULL,
    offset_x_um REAL,
    offset_y_um REAL,
    name TEXT NOT NULL DEFAULT '',
    kind TEXT NOT NULL DEFAULT 'raman',
    material TEXT NOT NULL,
    laser_nm REAL NOT NULL,
    max_layers INTEGER NOT NULL,
    x_um BLOB NOT NULL,
    y_um BLOB NOT NULL,
    quantities TEXT NOT NULL DEFAULT '[]',
    maps BLOB NOT NULL,
    settings TEXT NOT NULL DEFAULT '{{}}',
    warnings TEXT NOT NULL DEFAULT '[]',
    source_path TEXT NOT NULL DEFAULT '',
    source_sha256 TEXT NOT NULL DEFAULT '',
    notes TEXT NOT NULL DEFAULT ''
);
CREATE INDEX raman_maps_sample ON raman_maps(sample_id);
CREATE INDEX raman_maps_image ON raman_maps(image_id)
"""


#: MIGRATIONS[v] brings a file from version v to v + 1 (run inside one transaction).
MIGRATIONS: dict[int, Callable[[sqlite3.Connection], None]] = {
    1: _v1_to_v2,
    2: _v2_to_v3,
    3: _v3_to_v4,
    4: _v4_to_v5,
    5: _v5_to_v6,
}


def create_v1(con: sqlite3.Connection) -> None:
    """Write the version-1 schema into an empty database (inside the caller's transaction)."""
    for statement in SCHEMA_V1.split(";"):
        if statement.strip():
            con.execute(statement)
    con.execute(f"PRAGMA application_id = {APPLICATION_ID}")
    con.execute("PRAGMA user_version = 1")


def migrate(con: sqlite3.Connection, version: int) -> int:
    """Run every migration from ``version`` to :data:`SCHEMA_VERSION`; returns the new version.

    The caller holds the transaction, so a failed migration leaves the file as it was.
    """
    while version < SCHEMA_VERSION:
        MIGRATIONS[version](con)
        version += 1
        con.execute(f"PRAGMA user_version = {version}")
    return version


_TABLES_OF: dict[int, frozenset[str]] = {}


def tables_of(version: int) -> frozenset[str]:
    """The tables a file of project format ``version`` holds (built once in memory)."""
    if version not in _TABLES_OF:
        con = sqlite3.connect(":memory:", isolation_level=None)
        try:
            con.execute("BEGIN")
            create_v1(con)
            v = 1
            while v < version:
                MIGRATIONS[v](con)
                v += 1
            con.execute("COMMIT")
            _TABLES_OF[version] = frozenset(
                r[0]
                for r in con.execute(
                    "SELECT name FROM sqlite_master WHERE type = 'table' "
                    "AND name NOT LIKE 'sqlite_%'"
                )
            )
        finally:
            con.close()
    return _TABLES_OF[version]
