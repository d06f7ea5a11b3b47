"""Catalogue queries and exports: the flakes table, ``flakebook export`` rows, the project
summary and the canonical dump.

The catalogue is a few SQL queries over the whole project (not a loop over records), so that it
stays quick with thousands of flakes; the columns it reads that are no record field
(``area_um2``, ``terraces.flake_id``, ``appearances.pixel_size_um``) are kept in step by the
project core.
"""

from __future__ import annotations

import hashlib
import json
from typing import Any

from flakebook.store._util import RecordRef, id_of
from flakebook.store.kinds import PRIMARY_TERRACE_SQL
from flakebook.store.records import KINDS, layer_spacing_nm
from flakebook.store.results import CatalogueRow, CatalogueRows, unreadable_summary

#: The keys of ``flakebook export`` rows, in order (INTERFACE.md).
EXPORT_COLUMNS = (
    "flake_id",
    "sample",
    "area_um2",
    "layers",
    "probability",
    "holes_covered",
    "thickness_nm",
    "kappa_w_mk",
    "kappa_p16_w_mk",
    "kappa_p84_w_mk",
    "stale",
)
_TIMESTAMP_COLUMNS = frozenset({"computed_at", "assigned_at", "imported_at"})
_TIMESTAMP_META = frozenset({"created_at"})


class CatalogueQueries:
    """The catalogue, export rows, summary and canonical dump (a mixin of
    :class:`~flakebook.store.project.Project`).

    Relies on the project core (``_db``, ``_path``, ``_meta``, ``_read_only``, ``count``,
    ``schema_version``, ``max_layers``), on :class:`~flakebook.store.kinds.RecordKinds`
    (``samples``, ``images_of``, ``flakes_of``) and on
    :class:`~flakebook.store.provenance.Provenance` (``stale_records``) and on
    :class:`~flakebook.store.files.ImageFiles` (``check_images``).
    """

    def catalogue(self, sample: RecordRef | None = None) -> CatalogueRows:
        """The flakes (of one sample, or all) with their latest assignment, area (from the
        finest-pixel image), fully covered holes and whether anything of theirs is stale.

        A flake that cannot be read (its sample reference broken, a value of the wrong type) is
        not a row: it is named in the result's ``problems``."""
        sid = id_of(sample)
        con = self._db
        # Few flakes cover holes or have stale records: two small queries, looked up per row.
        covered = {r[0]: r[1:] for r in con.execute(_COVERED_SQL)}
        stale = {r[0] for r in con.execute(_STALE_SQL)}
        make = CatalogueRow._make
        rows, unreadable = [], []
        for r in con.execute(_CATALOGUE_SQL, (sid, sid)):
            reason = _unreadable(r)
            if reason is None:
                try:
                    tags = _tags(r[6])
                except (TypeError, ValueError):
                    reason = "its tags are not readable"
            if reason is not None:
                unreadable.append((r[0], reason))
                continue
            rows.append(
                make(
                    (
                        *r[:6],
                        tags,
                        *r[7:11],
                        bool(r[11]),
                        *covered.get(r[0], (0, None)),
                        r[0] in stale,
                    )
                )
            )
        unreadable.sort()
        return CatalogueRows(rows, unreadable_summary(unreadable))

    def export_rows(self, sample: RecordRef | None = None) -> CatalogueRows:
        """The rows of ``flakebook export`` (INTERFACE.md): ``flake_id`` (the label),
        ``sample``, ``area_um2``, ``layers``, ``probability``, ``holes_covered`` (fully covered),
        ``thickness_nm``, ``kappa_w_mk``, ``kappa_p16_w_mk``, ``kappa_p84_w_mk``, ``stale``.

        kappa comes from the latest thermometry result, else the latest imported result;
        thickness is that result's own, else layers x the material's layer spacing. Flakes
        that cannot be read are named in the result's ``problems`` (as in :meth:`catalogue`).
        """
        thermo = {
            r[0]: r[1:]
            for r in self._db.execute(
                "SELECT flake_id, kappa_w_mk, kappa_p16_w_mk, kappa_p84_w_mk, thickness_nm "
                "FROM thermometry_results WHERE id IN (SELECT MAX(id) FROM "
                "thermometry_results WHERE kappa_w_mk IS NOT NULL GROUP BY flake_id)"
            )
        }
        external = {
            r[0]: (*r[1:], None)
            for r in self._db.execute(
                "SELECT flake_id, kappa_w_mk, kappa_p16_w_mk, kappa_p84_w_mk "
                "FROM external_results WHERE id IN "
                "(SELECT MAX(id) FROM external_results GROUP BY flake_id)"
            )
        }
        out = []
        catalogue = self.catalogue(sample)
        for row in catalogue:
            kappa, p16, p84, thickness = thermo.get(row.flake_id) or external.get(
                row.flake_id, (None, None, None, None)
            )
            if thickness is None and row.layers is not None:
                spacing = layer_spacing_nm(row.material)
                thickness = None if spacing is None else round(row.layers * spacing, 6)
            values = (
                row.label,
                row.sample,
                row.area_um2,
                row.layers,
                row.probability,
                row.holes_covered,
                thickness,
                kappa,
                p16,
                p84,
                row.stale,
            )
            out.append(dict(zip(EXPORT_COLUMNS, values, strict=True)))
        return CatalogueRows(out, catalogue.problems)

    def info(self) -> dict[str, Any]:
        """A summary: file, format, counts of every record kind, stale records, samples, and
        the images whose file is missing or changed (``images_missing``, ``images_changed``:
        ``{"image_id", "path", "embedded", "looked_at"}``; an embedded copy still serves), and
        ``unreadable``: the catalogue's problems (flakes that could not be read)."""
        counts = {kind: self.count(kind) for kind in KINDS}
        samples = []
        for s in self.samples():
            samples.append(
                {
                    "name": s.name,
                    "material": s.material,
                    "substrate": [layer.to_dict() for layer in s.substrate],
                    "hole_pattern": None if s.hole_pattern is None else s.hole_pattern.to_dict(),
                    "images": len(self.images_of(s)),
                    "flakes": len(self.flakes_of(s)),
                }
            )
        embedded = self._db.execute("SELECT COUNT(*) FROM image_data").fetchone()[0]
        checks = [c for c in self.check_images() if c.status != "ok"]
        return {
            "path": str(self._path),
            "project_format": self.schema_version,
            "created_with": self._meta.get("created_with"),
            "max_layers": self.max_layers,
            "read_only": self._read_only,
            "counts": counts,
            "images_embedded": embedded,
            "stale": len(self.stale_records()),
            "samples": samples,
            "unreadable": list(self.catalogue().problems),
            "images_missing": _image_list(checks, "missing"),
            "images_changed": _image_list(checks, "changed"),
        }

    def canonical_dump(self, *, include_timestamps: bool = True) -> dict[str, Any]:
        """Every row of every table as JSON-able data, in a fixed order: for comparing two
        projects' content (not their SQLite bytes). Blobs become ``{"sha256", "bytes"}``;
        ``include_timestamps=False`` leaves out time stamps (created, computed, assigned,
        imported) for files made without a fixed clock."""
        con = self._db
        tables = sorted(
            r[0]
            for r in con.execute(
                "SELECT name FROM sqlite_master WHERE type = 'table' AND name NOT LIKE 'sqlite_%'"
            )
        )
        out: dict[str, Any] = {"project_format": self.schema_version, "tables": {}}
        for table in tables:
            cur = con.execute(
                f"SELECT * FROM {table} ORDER BY 1, 2, 3"
                if table == "dependencies"
                else f"SELECT * FROM {table} ORDER BY 1"
            )
            columns = [d[0] for d in cur.description]
            keep = [
                i
                for i, c in enumerate(columns)
                if include_timestamps or c not in _TIMESTAMP_COLUMNS
            ]
            rows = []
            for row in cur:
                if table == "meta" and not include_timestamps and row[0] in _TIMESTAMP_META:
                    continue
                rows.append([_canonical_value(row[i]) for i in keep])
            out["tables"][table] = {"columns": [columns[i] for i in keep], "rows": rows}
        return out


def _image_list(checks, status: str) -> list[dict[str, Any]]:
    return [
        {"image_id": c.image_id, "path": c.path, "embedded": c.embedded, "looked_at": c.file}
        for c in checks
        if c.status == status
    ]


def _tags(text: str) -> tuple:
    if text == "[]":
        return ()
    tags = json.loads(text)
    if not isinstance(tags, list) or not all(isinstance(t, str) for t in tags):
        raise ValueError("tags are a JSON list of texts")
    return tuple(tags)


_NUMBER = (int, float)


def _unreadable(r) -> str | None:
    """Why a catalogue row cannot be read (a broken reference, a value of the wrong type), or
    None. Columns as in ``_CATALOGUE_SQL``."""
    if r[3] is None:
        return "its sample reference is broken"
    if not isinstance(r[1], str) or not isinstance(r[4], str) or not isinstance(r[6], str):
        return "its label, material or tags are not text"
    if r[7] is not None and (isinstance(r[7], bool) or not isinstance(r[7], _NUMBER)):
        return "its area is not a number"
    if r[8] is not None and not isinstance(r[8], int):
        return "its layer number is not a whole number"
    if r[9] is not None and not isinstance(r[9], _NUMBER):
        return "its probability is not a number"
    return None


def _canonical_value(value: Any) -> Any:
    if isinstance(value, bytes | memoryview):
        data = bytes(value)
        return {"sha256": hashlib.sha256(data).hexdigest(), "bytes": len(data)}
    return value


# The catalogue's queries (a flake's primary terrace: kinds.PRIMARY_TERRACE_SQL).
_CATALOGUE_SQL = f"""
WITH base AS MATERIALIZED (
    SELECT f.id, f.label, f.sample_id, f.status, f.tags, {PRIMARY_TERRACE_SQL} AS tid
    FROM flakes f WHERE (? IS NULL OR f.sample_id = ?)
), latest AS (
    SELECT b.*, (
        SELECT a.id FROM assignments a
        WHERE a.flake_id = b.id AND (a.terrace_id IS NULL OR a.terrace_id = b.tid)
        ORDER BY a.id DESC LIMIT 1) AS aid
    FROM base b
)
SELECT l.id, l.label, l.sample_id, s.name, s.material, l.status, l.tags,
    (SELECT ap.area_um2 FROM appearances ap WHERE ap.flake_id = l.id
      ORDER BY COALESCE(ap.pixel_size_um, 1e308), ap.id LIMIT 1),
    asg.layers, asg.probability, l.tid, COALESCE(asg.manual, 0)
FROM latest l
LEFT JOIN samples s ON s.id = l.sample_id
LEFT JOIN assignments asg ON asg.id = l.aid
ORDER BY l.sample_id, l.label
"""

# The same hole seen in two images of a flake is two hole records: count the fully covered
# holes per image and take the image that shows the most.
_COVERED_SQL = (
    "SELECT flake_id, MAX(n), MAX(m) FROM ("
    " SELECT fh.flake_id AS flake_id, h.image_id, COUNT(*) AS n, MAX(fh.margin_um) AS m"
    " FROM flake_holes fh JOIN holes h ON h.id = fh.hole_id WHERE fh.fully_covered"
    " GROUP BY fh.flake_id, h.image_id"
    ") GROUP BY flake_id"
)
_STALE_SQL = (
    "SELECT flake_id FROM evidence WHERE stale UNION SELECT flake_id FROM assignments WHERE stale "
    "UNION SELECT flake_id FROM thermometry_results WHERE stale"
)
