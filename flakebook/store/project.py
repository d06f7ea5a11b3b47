"""The project file: one SQLite file (``.flakebook``) that holds a whole campaign.

:class:`Project` is the one way in, for the desktop program, the command line and scripts::

    with Project.create("k7.flakebook") as p:
        s = p.add_sample("K7-north", "MoSe2", "SiO2:285,Si")
        img = p.add_image(s, "k7n_50x_001.png", pixel_size_um=0.104, objective="50x")
        f = p.add_flake(s, "K7N-001")
        p.add_appearance(f, img, outline_px=[[10, 10], [60, 12], [55, 70]])

The file uses a rollback journal with ``synchronous=FULL`` (safe on USB sticks and network
shares), foreign keys, and one transaction per user action: a failed or interrupted action leaves
the file as it was. A file is never created or changed unless it is a flakebook project opened
read-write; a file from a newer flakebook is refused and left alone.
"""

from __future__ import annotations

import csv
import dataclasses
import hashlib
import json
import os
import shutil
import sqlite3
import struct
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np

import flakebook
from flakebook.errors import Cancelled, InputError, ProjectError, check_cancel
from flakebook.store import codec, lock, schema
from flakebook.store.recompute import registered_recomputers
from flakebook.store.records import (
    DERIVED_KINDS,
    KINDS,
    Appearance,
    Assignment,
    BeamProfile,
    Calibration,
    CatalogueRow,
    DeletedRows,
    Evidence,
    ExternalResult,
    Flake,
    FlakeHole,
    Hole,
    HolePattern,
    Image,
    ImageCheck,
    RecomputeReport,
    Record,
    Sample,
    SourceRef,
    Spectrum,
    Terrace,
    ThermometryResult,
    ThermometrySeries,
    layer_spacing_nm,
    record_to_dict,
    record_type,
)
from flakebook.substrate import SubstrateLayer, check_stack, oxide_stack, parse_substrate

SUFFIX = ".flakebook"
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
DEFAULT_MAX_LAYERS = 15
_SQLITE_MAGIC = b"SQLite format 3\x00"
_ACCEPTED = "accepted: a .flakebook project file written by flakebook"
_TIMESTAMP_COLUMNS = frozenset({"computed_at", "assigned_at", "imported_at"})
_TIMESTAMP_META = frozenset({"created_at"})
# Columns that are no dataclass field (area_um2; terraces.flake_id, appearances.pixel_size_um):
# kept in step with the records on every write, for the catalogue's speed.
_AREA_TABLES = frozenset({"appearances", "terraces"})

_TABLE_KINDS = {cls.TABLE: kind for kind, cls in KINDS.items()}

Clock = Callable[[], datetime | str]
Progress = Callable[[float, str], None]
RecordRef = Record | int


# ---- mapping records to rows ------------------------------------------------------------------


@dataclasses.dataclass(frozen=True)
class _Layout:
    cls: type[Record]
    columns: tuple[str, ...]  # stored columns in field order (no id)
    codecs: dict[str, str | None]
    select: str  # "SELECT id, col... FROM table"


_LAYOUTS: dict[type[Record], _Layout] = {}


def _layout(cls: type[Record]) -> _Layout:
    lay = _LAYOUTS.get(cls)
    if lay is None:
        cols, codecs = [], {}
        for f in dataclasses.fields(cls):
            c = f.metadata.get("codec")
            if f.name == "id" or c in ("inputs", "embedded"):
                continue
            cols.append(f.name)
            codecs[f.name] = c
        extra = ""
        if cls is Image:
            extra = ", EXISTS(SELECT 1 FROM image_data d WHERE d.image_id = images.id)"
        select = f"SELECT id, {', '.join(cols)}{extra} FROM {cls.TABLE}"
        lay = _Layout(cls, tuple(cols), codecs, select)
        _LAYOUTS[cls] = lay
    return lay


def _encode(codec_name: str | None, value: Any) -> Any:
    if codec_name is None:
        return value
    if codec_name == "array":
        return None if value is None else codec.encode_array(value)
    if codec_name in ("json", "tuple"):
        return json.dumps(list(value) if codec_name == "tuple" else value, ensure_ascii=False)
    if codec_name == "bool":
        return 1 if value else 0
    if codec_name == "substrate":
        return json.dumps([layer.to_dict() for layer in value], ensure_ascii=False)
    if codec_name == "pattern":
        return None if value is None else json.dumps(value.to_dict())
    raise AssertionError(codec_name)  # pragma: no cover


def _decode(codec_name: str | None, value: Any) -> Any:
    if codec_name is None:
        return value
    if codec_name == "array":
        return codec.decode_array(value)
    if codec_name == "json":
        return json.loads(value)
    if codec_name == "tuple":
        return tuple(json.loads(value))
    if codec_name == "bool":
        return bool(value)
    if codec_name == "substrate":
        return tuple(SubstrateLayer(d["material"], d["thickness_nm"]) for d in json.loads(value))
    if codec_name == "pattern":
        return None if value is None else HolePattern(**json.loads(value))
    raise AssertionError(codec_name)  # pragma: no cover


def _id_of(value: RecordRef | None) -> int | None:
    if value is None:
        return None
    if isinstance(value, Record):
        if value.id is None:
            raise InputError(f"this {value.KIND} is not stored in the project yet")
        return int(value.id)
    if isinstance(value, bool) or not isinstance(value, int):
        raise InputError(f"{value!r} is not a record or a record id")
    return int(value)


def _sha256_file(path: Path) -> tuple[str, int]:
    h = hashlib.sha256()
    size = 0
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
            size += len(chunk)
    return h.hexdigest(), size


def _iso(value: datetime | str) -> str:
    if isinstance(value, str):
        return value
    if value.tzinfo is None:
        value = value.replace(tzinfo=UTC)
    return value.astimezone(UTC).isoformat().replace("+00:00", "Z")


def _default_clock() -> datetime:
    return datetime.now(UTC).replace(microsecond=0)


# ---- checking a file before SQLite sees it ----------------------------------------------------


def _journal_path(path: Path) -> Path:
    return path.with_name(path.name + "-journal")


def _check_header(path: Path) -> None:
    """Refuse files that are not SQLite, or that are cut short, without opening them in SQLite."""
    if not path.exists():
        raise ProjectError(f"{path}: no such project file; {_ACCEPTED}")
    if not path.is_file():
        raise ProjectError(f"{path} is not a file; {_ACCEPTED}")
    try:
        size = path.stat().st_size
        with open(path, "rb") as fh:
            header = fh.read(100)
    except OSError as exc:
        raise ProjectError(f"{path} cannot be read: {exc.strerror}") from None
    if size == 0:
        raise ProjectError(f"{path} is empty, not a flakebook project; {_ACCEPTED}")
    if not header.startswith(_SQLITE_MAGIC):
        raise ProjectError(
            f"{path} is not a flakebook project (it is not an SQLite database file); {_ACCEPTED}"
        )
    if len(header) < 100:
        raise ProjectError(f"{path} is damaged: it is cut short ({size} bytes); {_ACCEPTED}")
    # The header's own fields, read before SQLite is given the file (so that not even a
    # leftover journal of some other database is rolled back): application id and user version.
    (user_version,) = struct.unpack(">I", header[60:64])
    (app_id,) = struct.unpack(">I", header[68:72])
    if app_id != schema.APPLICATION_ID:
        raise ProjectError(f"{path} is an SQLite database but not a flakebook project; {_ACCEPTED}")
    if user_version > schema.SCHEMA_VERSION:
        raise ProjectError(_newer_message(path, user_version))
    (page_size,) = struct.unpack(">H", header[16:18])
    page_size = 65536 if page_size == 1 else page_size
    change_counter, page_count = struct.unpack(">II", header[24:32])
    (valid_for,) = struct.unpack(">I", header[92:96])
    expected = page_size * page_count
    if (
        page_count > 0
        and change_counter == valid_for
        and size < expected
        and not _journal_path(path).exists()
    ):
        raise ProjectError(
            f"{path} is damaged: it is cut short ({size} of {expected} bytes); it may be an "
            f"incomplete copy. {_ACCEPTED}"
        )


def _inspect(con: sqlite3.Connection, path: Path) -> int:
    """Check a connection holds a flakebook project this version can read; returns its version."""
    try:
        app_id = con.execute("PRAGMA application_id").fetchone()[0]
        version = con.execute("PRAGMA user_version").fetchone()[0]
        tables = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type='table'")}
    except sqlite3.DatabaseError as exc:
        raise ProjectError(
            f"{path} cannot be read as a flakebook project: {exc}; {_ACCEPTED}"
        ) from None
    if app_id != schema.APPLICATION_ID or "meta" not in tables:
        raise ProjectError(f"{path} is an SQLite database but not a flakebook project; {_ACCEPTED}")
    if version > schema.SCHEMA_VERSION:
        raise ProjectError(_newer_message(path, version))
    if version < 1:
        raise ProjectError(f"{path} has no project format version; {_ACCEPTED}")
    return version


def _newer_message(path: Path, version: int) -> str:
    return (
        f"{path} was written by a newer flakebook (project format {version}; this is "
        f"flakebook {flakebook.__version__}, which reads formats up to "
        f"{schema.SCHEMA_VERSION}).\nThe file was not changed; open it with a newer flakebook."
    )


def _connect_ro(path: Path) -> sqlite3.Connection:
    uri = path.resolve().as_uri() + "?mode=ro"
    return sqlite3.connect(uri, uri=True, isolation_level=None, timeout=10)


# ---- the project -------------------------------------------------------------------------------


class Project:
    """An open project file. Make one with :meth:`create` or :meth:`open`; close it with
    :meth:`close` or use it as a context manager.

    Record arguments accept a stored record or its integer id. Every method that changes the file
    runs in one transaction; wrap several calls in :meth:`transaction` to make them one action.
    """

    def __init__(
        self,
        path: Path,
        con: sqlite3.Connection,
        *,
        read_only: bool,
        clock: Clock | None,
        user: str | None,
        lock_info: lock.LockInfo | None,
        warnings: list[str],
    ) -> None:
        self._path = path
        self._con = con
        self._read_only = read_only
        self._clock = clock or _default_clock
        self._user = user if user is not None else lock.current_user()
        self._lock = lock_info
        self._depth = 0
        self.warnings: list[str] = list(warnings)
        """Messages for the user from opening (a stale lock taken over, an upgraded file)."""
        self._meta = dict(con.execute("SELECT key, value FROM meta").fetchall())

    # ---- opening and closing -------------------------------------------------------------

    @classmethod
    def create(
        cls,
        path: str | os.PathLike,
        *,
        clock: Clock | None = None,
        user: str | None = None,
        max_layers: int = DEFAULT_MAX_LAYERS,
    ) -> Project:
        """Create a new, empty project file and open it read-write.

        ``path`` gets the suffix ``.flakebook`` if it has none; an existing file is never
        overwritten. ``clock`` (returning a datetime or an ISO text) stamps the records; pass a
        fixed one for reproducible files. ``user`` is who assignments are by (default: the login
        name). ``max_layers`` is the project's N_max for layer evidence.
        """
        path = Path(path)
        if path.suffix != SUFFIX:
            path = path.with_name(path.name + SUFFIX)
        if isinstance(max_layers, bool) or not isinstance(max_layers, int) or max_layers < 1:
            raise InputError(f"max_layers {max_layers!r} is not allowed; accepted: 1 or more")
        if path.exists():
            raise ProjectError(f"{path} already exists; choose another name or open it")
        if not path.parent.is_dir():
            raise ProjectError(f"{path.parent} is not a folder; cannot create {path.name} there")
        lock_info, warnings = lock.acquire(path)
        tmp = path.with_name(f".{path.name}.{os.getpid()}.new")
        try:
            con = sqlite3.connect(tmp, isolation_level=None)
            try:
                con.execute("PRAGMA journal_mode=DELETE")
                con.execute("BEGIN IMMEDIATE")
                schema.create_v1(con)
                schema.migrate(con, 1)
                created = _iso((clock or _default_clock)())
                con.executemany(
                    "INSERT INTO meta (key, value) VALUES (?, ?)",
                    [
                        ("max_layers", str(max_layers)),
                        ("created_with", flakebook.__version__),
                        ("created_at", created),
                    ],
                )
                con.execute("COMMIT")
            finally:
                con.close()
            if path.exists():
                raise ProjectError(f"{path} already exists; choose another name or open it")
            os.replace(tmp, path)
            con = cls._connect_rw(path)
        except BaseException:
            tmp.unlink(missing_ok=True)
            lock.release(path, lock_info)
            raise
        return cls(
            path,
            con,
            read_only=False,
            clock=clock,
            user=user,
            lock_info=lock_info,
            warnings=warnings,
        )

    @classmethod
    def open(
        cls,
        path: str | os.PathLike,
        *,
        read_only: bool = False,
        clock: Clock | None = None,
        user: str | None = None,
    ) -> Project:
        """Open an existing project file.

        Read-write takes the lock (:class:`~flakebook.store.lock.ProjectLocked` if another
        program holds it) and upgrades a file of an earlier format in place (keeping a copy
        ``NAME.flakebook.vN.bak``). Read-only needs no write access to the folder and changes
        nothing (an earlier format is upgraded in memory only). Files that are not projects, are
        damaged or come from a newer flakebook raise :class:`ProjectError` and are left alone.
        """
        path = Path(path)
        _check_header(path)
        hot_journal = False
        try:
            ro = _connect_ro(path)
        except sqlite3.Error as exc:
            raise ProjectError(f"{path} cannot be opened: {exc}") from None
        try:
            version = _inspect(ro, path)
        except ProjectError:
            ro.close()
            if read_only or not _journal_path(path).exists():
                if _journal_path(path).exists():
                    raise ProjectError(
                        f"{path} was interrupted while saving; open it read-write once so that "
                        "the unfinished save is rolled back"
                    ) from None
                raise
            hot_journal = True  # validated again below, once SQLite has rolled the journal back
            ro = None
        if read_only:
            assert ro is not None
            warnings: list[str] = []
            con = ro
            if version < schema.SCHEMA_VERSION:
                mem = sqlite3.connect(":memory:", isolation_level=None)
                ro.backup(mem)
                ro.close()
                mem.execute("BEGIN")
                schema.migrate(mem, version)
                mem.execute("COMMIT")
                con = mem
                warnings.append(
                    f"{path.name} is in project format {version}; it is shown upgraded to format "
                    f"{schema.SCHEMA_VERSION} but the file is not changed (read-only)"
                )
            con.execute("PRAGMA foreign_keys=ON")
            return cls(
                path,
                con,
                read_only=True,
                clock=clock,
                user=user,
                lock_info=None,
                warnings=warnings,
            )
        if ro is not None:
            ro.close()
        if not os.access(path, os.W_OK):
            raise ProjectError(
                f"{path} cannot be written (no write permission); open it read-only instead"
            )
        lock_info, warnings = lock.acquire(path)
        try:
            con = cls._connect_rw(path)
            try:
                if hot_journal:
                    version = _inspect(con, path)
                if version < schema.SCHEMA_VERSION:
                    backup = path.with_name(f"{path.name}.v{version}.bak")
                    shutil.copy2(path, backup)
                    con.execute("BEGIN IMMEDIATE")
                    try:
                        schema.migrate(con, version)
                        con.execute("COMMIT")
                    except BaseException:
                        con.execute("ROLLBACK")
                        raise
                    warnings.append(
                        f"{path.name} was upgraded from project format {version} to "
                        f"{schema.SCHEMA_VERSION}; the old file is kept as {backup.name}"
                    )
                return cls(
                    path,
                    con,
                    read_only=False,
                    clock=clock,
                    user=user,
                    lock_info=lock_info,
                    warnings=warnings,
                )
            except BaseException:
                con.close()
                raise
        except sqlite3.DatabaseError as exc:
            lock.release(path, lock_info)
            raise ProjectError(f"{path} cannot be opened: {exc}") from None
        except BaseException:
            lock.release(path, lock_info)
            raise

    @staticmethod
    def _connect_rw(path: Path) -> sqlite3.Connection:
        con = sqlite3.connect(path, isolation_level=None, timeout=10)
        con.execute("PRAGMA journal_mode=DELETE")
        con.execute("PRAGMA synchronous=FULL")
        con.execute("PRAGMA foreign_keys=ON")
        return con

    def close(self) -> None:
        """Close the file and release the lock (safe to call twice)."""
        if self._con is None:
            return
        try:
            self._con.close()
        finally:
            self._con = None
            if self._lock is not None:
                lock.release(self._path, self._lock)
                self._lock = None

    def __enter__(self) -> Project:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def __del__(self) -> None:  # pragma: no cover - a last resort; close() is the rule
        try:
            self.close()
        except Exception:  # noqa: BLE001
            pass

    def __repr__(self) -> str:
        mode = "read-only" if self._read_only else "read-write"
        state = "closed" if self._con is None else mode
        return f"<Project {self._path} ({state})>"

    # ---- properties ----------------------------------------------------------------------

    @property
    def path(self) -> Path:
        """The project file."""
        return self._path

    @property
    def folder(self) -> Path:
        """The folder image paths are relative to (the project file's)."""
        return self._path.resolve().parent

    @property
    def read_only(self) -> bool:
        """True when opened read-only: every change raises :class:`ProjectError`."""
        return self._read_only

    @property
    def closed(self) -> bool:
        """True after :meth:`close`."""
        return self._con is None

    @property
    def user(self) -> str:
        """Who this session's assignments are by."""
        return self._user

    @property
    def schema_version(self) -> int:
        """The project format of the open file (always the current one once open)."""
        return int(self._db.execute("PRAGMA user_version").fetchone()[0])

    @property
    def max_layers(self) -> int:
        """The project's N_max: layer likelihoods run over 1..N_max plus a 'more' bin."""
        return int(self._meta.get("max_layers", DEFAULT_MAX_LAYERS))

    @property
    def _db(self) -> sqlite3.Connection:
        if self._con is None:
            raise ProjectError(f"{self._path} is closed")
        return self._con

    def now(self) -> str:
        """The time stamp this project writes (from its clock), ISO 8601 UTC."""
        return _iso(self._clock())

    # ---- transactions --------------------------------------------------------------------

    @contextmanager
    def transaction(self) -> Iterator[Project]:
        """One user action: everything inside is saved together or not at all.

        Nested use makes savepoints: an error inside undoes only the inner block (and is
        raised on).
        """
        if self._read_only:
            raise ProjectError(f"{self._path} is open read-only; open it read-write to change it")
        con = self._db
        depth = self._depth
        if depth == 0:
            con.execute("BEGIN IMMEDIATE")
        else:
            con.execute(f"SAVEPOINT sp{depth}")
        self._depth += 1
        try:
            yield self
            if depth == 0:
                con.execute("COMMIT")
        except BaseException as exc:
            self._depth -= 1
            if depth == 0:
                if con.in_transaction:
                    con.execute("ROLLBACK")
            else:
                con.execute(f"ROLLBACK TO sp{depth}")
                con.execute(f"RELEASE sp{depth}")
            if isinstance(exc, sqlite3.IntegrityError):
                raise InputError(
                    f"{self._path.name}: this change refers to a record that does not exist or "
                    f"repeats a unique name ({exc}); nothing was changed"
                ) from None
            if isinstance(exc, sqlite3.Error):
                raise ProjectError(
                    f"{self._path} could not be saved ({exc}); nothing of this action was saved"
                ) from None
            raise
        self._depth -= 1
        if depth > 0:
            con.execute(f"RELEASE sp{depth}")

    # ---- generic records -----------------------------------------------------------------

    def _row_values(self, rec: Record) -> dict[str, Any]:
        lay = _layout(type(rec))
        values = {c: _encode(lay.codecs[c], getattr(rec, c)) for c in lay.columns}
        values.pop("revision")
        if rec.TABLE in _AREA_TABLES:
            values["area_um2"] = rec.area_um2
        if isinstance(rec, Terrace):
            row = self._db.execute(
                "SELECT flake_id FROM appearances WHERE id = ?", (rec.appearance_id,)
            ).fetchone()
            if row is None:
                raise InputError(f"{self._path.name} has no appearance with id {rec.appearance_id}")
            values["flake_id"] = row[0]
        elif isinstance(rec, Appearance):
            values["pixel_size_um"] = self._pixel_size(rec.image_id)
        return values

    def _from_row(self, cls: type[Record], row: Sequence[Any]) -> Record:
        lay = _layout(cls)
        kwargs = {"id": row[0]}
        for name, value in zip(lay.columns, row[1:]):
            kwargs[name] = _decode(lay.codecs[name], value)
        if cls is Image:
            kwargs["embedded"] = bool(row[len(lay.columns) + 1])
        if cls.DERIVED:
            kwargs["inputs"] = tuple(
                SourceRef(k, i, r)
                for k, i, r in self._db.execute(
                    "SELECT input_kind, input_id, input_revision FROM dependencies "
                    "WHERE derived_kind = ? AND derived_id = ? ORDER BY position",
                    (cls.KIND, row[0]),
                )
            )
        return _construct(cls, kwargs)

    def _select(self, cls: type[Record], where: str = "", params: Sequence[Any] = ()) -> list:
        sql = _layout(cls).select + (f" WHERE {where}" if where else "") + " ORDER BY id"
        return [self._from_row(cls, row) for row in self._db.execute(sql, tuple(params))]

    def get(self, kind: str | type[Record], record_id: int) -> Record:
        """The stored record of ``kind`` (a name like ``"flake"`` or a class) with this id."""
        cls = record_type(kind)
        rows = self._select(cls, "id = ?", (_id_of(record_id),))
        if not rows:
            raise InputError(f"{self._path.name} has no {cls.KIND} with id {record_id}")
        return rows[0]

    def records(self, kind: str | type[Record], **where: Any) -> list[Record]:
        """Every record of ``kind``, in id order, optionally where fields equal given values.

        Example: ``records("spectrum", flake_id=3, kind="raman")``.
        """
        cls = record_type(kind)
        lay = _layout(cls)
        clauses, params = [], []
        for name, value in where.items():
            if name != "id" and name not in lay.columns:
                raise InputError(f"{cls.KIND} has no field {name!r}")
            if isinstance(value, Record):
                value = _id_of(value)
            if value is None:
                clauses.append(f"{name} IS NULL")
            else:
                clauses.append(f"{name} = ?")
                params.append(_encode(lay.codecs.get(name), value))
        return self._select(cls, " AND ".join(clauses), params)

    def count(self, kind: str | type[Record]) -> int:
        """How many records of ``kind`` the project holds."""
        cls = record_type(kind)
        return int(self._db.execute(f"SELECT COUNT(*) FROM {cls.TABLE}").fetchone()[0])

    def add(self, record: Record) -> Record:
        """Store a new record; returns it with its id and revision 1.

        Derived records get their flakebook version and time stamp; their ``inputs`` are kept
        with the revisions given (a record made from an outdated input is stored stale).
        """
        if record.id is not None:
            raise InputError(f"this {record.KIND} is already stored (id {record.id}); use update")
        with self.transaction():
            rec = self._prepare(record, None)
            values = self._row_values(rec)
            cols = list(values)
            cur = self._db.execute(
                f"INSERT INTO {rec.TABLE} ({', '.join(cols)}) VALUES "
                f"({', '.join('?' * len(cols))})",
                [values[c] for c in cols],
            )
            rec = dataclasses.replace(rec, id=cur.lastrowid, revision=1)
            if rec.DERIVED:
                self._write_inputs(rec)
            return self.get(type(rec), rec.id)

    def update(self, record: Record, **changes: Any) -> Record:
        """Store changed fields of a stored record (``changes`` are applied first).

        The revision goes up by one and every record derived from this one is marked stale. A
        record with nothing changed is left as it is. Returns the stored record.
        """
        rid = _id_of(record)
        cls = type(record)
        with self.transaction():
            old = self.get(cls, rid)
            new = dataclasses.replace(record, **changes) if changes else record
            new = self._prepare(new, old)
            return self._write_update(old, new)

    def _write_update(self, old: Record, new: Record, *, clear_stale: bool = False) -> Record:
        values = self._row_values(new)
        old_values = self._row_values(old)
        inputs_changed = new.DERIVED and new.inputs != old.inputs
        if values == old_values and not inputs_changed and not clear_stale:
            return old
        if clear_stale:
            values["stale"] = 0
        sets = ", ".join(f"{c} = ?" for c in values)
        self._db.execute(
            f"UPDATE {new.TABLE} SET {sets}, revision = revision + 1 WHERE id = ?",
            [*values.values(), old.id],
        )
        if new.DERIVED:
            self._write_inputs(dataclasses.replace(new, id=old.id))
        self._mark_dependents(new.KIND, old.id)
        stored = self.get(type(new), old.id)
        self._after_update(old, stored)
        return stored

    def delete(
        self,
        record: Record | str | type[Record],
        record_id: int | None = None,
        *,
        undo: bool = True,
    ) -> DeletedRows:
        """Delete a record (``delete(rec)`` or ``delete("flake", 3)``) and what belongs to it.

        Deleting a sample deletes its images, flakes and everything on them (foreign keys);
        records derived from anything deleted are marked stale. Returns what was removed, which
        :meth:`restore` puts back exactly (for undo); ``undo=False`` keeps no copy (for large
        deletes whose data need not stay in memory) and returns an empty :class:`DeletedRows`.
        """
        if isinstance(record, Record):
            cls, rid = type(record), _id_of(record)
        else:
            cls, rid = record_type(record), _id_of(record_id)
        with self.transaction():
            self.get(cls, rid)
            doomed = self._cascade(cls.TABLE, rid)
            rows, nulled = [], []
            for table, ids in doomed.items() if undo else ():
                cur = self._db.execute(
                    f"SELECT rowid, * FROM {table} WHERE rowid IN ({_qmarks(ids)}) ORDER BY rowid",
                    sorted(ids),
                )
                columns = tuple(d[0] for d in cur.description[1:])
                rows.append((table, columns, tuple(tuple(r[1:]) for r in cur)))
                for child, column in self._foreign_keys().get(table, {}).get("SET NULL", ()):
                    keep = self._db.execute(
                        f"SELECT rowid, {column} FROM {child} WHERE {column} IN ({_qmarks(ids)})",
                        sorted(ids),
                    ).fetchall()
                    nulled.extend(
                        (child, column, r, v) for r, v in keep if r not in doomed.get(child, ())
                    )
            staled: list[tuple[str, int]] = []
            for table, ids in doomed.items():
                kind = _TABLE_KINDS.get(table)
                if kind is not None:
                    for i in ids:
                        staled.extend(self._mark_dependents(kind, i))
            dead = {(_TABLE_KINDS.get(t), i) for t, ids in doomed.items() for i in ids}
            staled = [x for x in staled if (_TABLE_KINDS.get(x[0]), x[1]) not in dead]
            deps = []
            for kind in DERIVED_KINDS:
                ids = doomed.get(KINDS[kind].TABLE)
                if ids:
                    deps.extend(
                        self._db.execute(
                            "SELECT derived_kind, derived_id, position, input_kind, input_id, "
                            f"input_revision FROM dependencies WHERE derived_kind = ? AND "
                            f"derived_id IN ({_qmarks(ids)})",
                            (kind, *sorted(ids)),
                        ).fetchall()
                    )
            self._db.execute(f"DELETE FROM {cls.TABLE} WHERE id = ?", (rid,))
            for kind in DERIVED_KINDS:
                self._db.execute(
                    f"DELETE FROM dependencies WHERE derived_kind = ? AND derived_id NOT IN "
                    f"(SELECT id FROM {KINDS[kind].TABLE})",
                    (kind,),
                )
        if not undo:
            return DeletedRows()
        return DeletedRows(tuple(rows), tuple(nulled), tuple(staled), tuple(deps))

    def restore(self, deleted: DeletedRows) -> None:
        """Put back exactly what a :meth:`delete` removed (same ids, values and revisions), and
        undo the stale marks and emptied references it caused. Raises :class:`InputError` when
        an id has been taken since."""
        with self.transaction():
            self._db.execute("PRAGMA defer_foreign_keys = ON")
            for table, columns, rows in deleted.rows:
                self._db.executemany(
                    f"INSERT INTO {table} ({', '.join(columns)}) VALUES ({_qmarks(columns)})",
                    rows,
                )
            for table, column, rowid, value in deleted.nulled:
                self._db.execute(
                    f"UPDATE {table} SET {column} = ? WHERE rowid = ? AND {column} IS NULL",
                    (value, rowid),
                )
            for table, rid in deleted.staled:
                self._db.execute(f"UPDATE {table} SET stale = 0 WHERE id = ?", (rid,))
            self._db.executemany(
                "INSERT OR IGNORE INTO dependencies (derived_kind, derived_id, position, "
                "input_kind, input_id, input_revision) VALUES (?, ?, ?, ?, ?, ?)",
                deleted.dependencies,
            )

    def _foreign_keys(self) -> dict[str, dict[str, list[tuple[str, str]]]]:
        """parent table -> on-delete action -> [(child table, column)], from the schema."""
        fks = getattr(self, "_fk_cache", None)
        if fks is None:
            fks = {}
            tables = [
                r[0]
                for r in self._db.execute(
                    "SELECT name FROM sqlite_master WHERE type = 'table' AND name NOT LIKE 'sqlite_%'"
                )
            ]
            for child in tables:
                for row in self._db.execute(f"PRAGMA foreign_key_list({child})"):
                    parent, column, action = row[2], row[3], row[6]
                    fks.setdefault(parent, {}).setdefault(action, []).append((child, column))
            self._fk_cache = fks
        return fks

    def _cascade(self, table: str, rid: int) -> dict[str, set[int]]:
        """Every row (table -> rowids) that deleting ``table`` row ``rid`` removes."""
        doomed: dict[str, set[int]] = {}
        todo = [(table, {rid})]
        while todo:
            t, ids = todo.pop()
            ids = ids - doomed.get(t, set())
            if not ids:
                continue
            doomed.setdefault(t, set()).update(ids)
            for child, column in self._foreign_keys().get(t, {}).get("CASCADE", ()):
                found = {
                    r[0]
                    for r in self._db.execute(
                        f"SELECT rowid FROM {child} WHERE {column} IN ({_qmarks(ids)})",
                        sorted(ids),
                    )
                }
                if found:
                    todo.append((child, found))
        return doomed

    # ---- per-kind rules applied on every add and update -----------------------------------

    def _prepare(self, rec: Record, old: Record | None) -> Record:
        if (
            isinstance(rec, Appearance | Terrace)
            and old is not None
            and rec.outline_um is not None
            and not np.array_equal(rec.outline_px, old.outline_px)
            and _same_array(rec.outline_um, old.outline_um)
        ):
            # A new outline in pixels with the old one in um: the um outline follows the pixels.
            rec = dataclasses.replace(rec, outline_um=None)
        if isinstance(rec, Appearance | Terrace) and rec.outline_um is None:
            size = self._pixel_size_for(rec)
            if size is not None:
                rec = dataclasses.replace(rec, outline_um=rec.outline_px * size)
        if isinstance(rec, Hole) and rec.radius_um is None:
            size = self._pixel_size(rec.image_id)
            if size is not None:
                rec = dataclasses.replace(rec, radius_um=rec.radius_px * size)
        if isinstance(rec, Spectrum) and rec.sample_id is None:
            if rec.flake_id is None:
                raise InputError("a spectrum needs its sample or its flake")
            rec = dataclasses.replace(rec, sample_id=self.get(Flake, rec.flake_id).sample_id)
        if isinstance(rec, Image) and old is not None:
            rec = dataclasses.replace(rec, embedded=old.embedded)
        if isinstance(rec, Flake) and rec.primary_terrace_id is not None and rec.id is not None:
            terrace = self.get(Terrace, rec.primary_terrace_id)
            if self.get(Appearance, terrace.appearance_id).flake_id != rec.id:
                raise InputError(
                    f"terrace {terrace.id} is not on flake {rec.label}; a flake's primary terrace "
                    "must be one of its own"
                )
        if isinstance(rec, Evidence) and rec.likelihood.size != self.max_layers + 1:
            raise InputError(
                f"layer evidence has {rec.likelihood.size} values; this project needs "
                f"{self.max_layers + 1} (N = 1..{self.max_layers} and one 'more' bin)"
            )
        if rec.DERIVED:
            self._check_inputs(rec)
            if old is None:
                rec = dataclasses.replace(
                    rec,
                    flakebook_version=rec.flakebook_version or flakebook.__version__,
                    computed_at=rec.computed_at or self.now(),
                    stale=rec.stale or self._outdated(rec.inputs),
                )
        if isinstance(rec, Assignment) and old is None:
            rec = dataclasses.replace(
                rec, who=rec.who or self._user, assigned_at=rec.assigned_at or self.now()
            )
        if isinstance(rec, ExternalResult) and rec.imported_at is None:
            rec = dataclasses.replace(rec, imported_at=self.now())
        return rec

    def _pixel_size(self, image_id: int) -> float | None:
        row = self._db.execute("SELECT pixel_size_um FROM images WHERE id = ?", (image_id,))
        row = row.fetchone()
        if row is None:
            raise InputError(f"{self._path.name} has no image with id {image_id}")
        return row[0]

    def _pixel_size_for(self, rec: Appearance | Terrace) -> float | None:
        if isinstance(rec, Appearance):
            return self._pixel_size(rec.image_id)
        return self._pixel_size(self.get(Appearance, rec.appearance_id).image_id)

    def _after_update(self, old: Record, new: Record) -> None:
        """Keep the catalogue's columns in step; a new pixel size rescales what was measured in
        um on that image."""
        if isinstance(new, Appearance) and new.flake_id != old.flake_id:
            self._db.execute(
                "UPDATE terraces SET flake_id = ? WHERE appearance_id = ?", (new.flake_id, new.id)
            )
        if not isinstance(new, Image) or new.pixel_size_um == old.pixel_size_um:
            return
        self._db.execute(
            "UPDATE appearances SET pixel_size_um = ? WHERE image_id = ?",
            (new.pixel_size_um, new.id),
        )
        size = new.pixel_size_um
        if size is None:
            return
        ratio = None if old.pixel_size_um is None else size / old.pixel_size_um
        for app in self._select(Appearance, "image_id = ?", (new.id,)):
            self._write_update(app, dataclasses.replace(app, outline_um=app.outline_px * size))
            for ter in self._select(Terrace, "appearance_id = ?", (app.id,)):
                self._write_update(ter, dataclasses.replace(ter, outline_um=ter.outline_px * size))
        for hole in self._select(Hole, "image_id = ?", (new.id,)):
            err = hole.radius_err_um
            if err is not None and ratio is not None:
                err = err * ratio
            self._write_update(
                hole, dataclasses.replace(hole, radius_um=hole.radius_px * size, radius_err_um=err)
            )
            if ratio is not None:
                for link in self._select(
                    FlakeHole, "hole_id = ? AND margin_um IS NOT NULL", (hole.id,)
                ):
                    self._write_update(
                        link, dataclasses.replace(link, margin_um=link.margin_um * ratio)
                    )

    # ---- provenance and staleness --------------------------------------------------------

    def _current_revision(self, kind: str, rid: int) -> int | None:
        cls = record_type(kind)
        row = self._db.execute(f"SELECT revision FROM {cls.TABLE} WHERE id = ?", (rid,))
        row = row.fetchone()
        return None if row is None else int(row[0])

    def _check_inputs(self, rec: Record) -> None:
        for ref in rec.inputs:
            if ref.kind not in KINDS:
                raise InputError(f"input {ref} is not a record kind")
            if self._current_revision(ref.kind, ref.id) is None:
                raise InputError(f"input {ref.kind} {ref.id} of this {rec.KIND} is not stored")

    def _outdated(self, refs: Iterable[SourceRef]) -> bool:
        return any(self._current_revision(r.kind, r.id) != r.revision for r in refs)

    def _write_inputs(self, rec: Record) -> None:
        self._db.execute(
            "DELETE FROM dependencies WHERE derived_kind = ? AND derived_id = ?",
            (rec.KIND, rec.id),
        )
        self._db.executemany(
            "INSERT INTO dependencies (derived_kind, derived_id, position, input_kind, input_id, "
            "input_revision) VALUES (?, ?, ?, ?, ?, ?)",
            [(rec.KIND, rec.id, i, r.kind, r.id, r.revision) for i, r in enumerate(rec.inputs)],
        )

    def _mark_dependents(self, kind: str, rid: int) -> list[tuple[str, int]]:
        """Mark everything computed from a record stale (transitively); returns the (table, id)
        of records that were not stale before."""
        todo, seen, newly = [(kind, rid)], set(), []
        while todo:
            k, i = todo.pop()
            rows = self._db.execute(
                "SELECT DISTINCT derived_kind, derived_id FROM dependencies "
                "WHERE input_kind = ? AND input_id = ?",
                (k, i),
            ).fetchall()
            for dk, did in rows:
                if (dk, did) in seen or dk not in KINDS:
                    continue
                seen.add((dk, did))
                table = KINDS[dk].TABLE
                cur = self._db.execute(
                    f"UPDATE {table} SET stale = 1 WHERE id = ? AND stale = 0", (did,)
                )
                if cur.rowcount:
                    newly.append((table, did))
                todo.append((dk, did))
        return newly

    def stale_records(self) -> list[Record]:
        """Every derived record marked stale (evidence, assignments, thermometry results)."""
        out: list[Record] = []
        for kind in DERIVED_KINDS:
            out.extend(self._select(KINDS[kind], "stale = 1"))
        return out

    def recompute_stale(
        self,
        recompute: Mapping[str, Callable] | None = None,
        progress: Progress | None = None,
        cancel=None,
    ) -> RecomputeReport:
        """Bring every stale derived record up to date, as one action.

        Each record's ``method`` picks its recompute function: ``recompute`` (method -> function)
        first, then those registered with ``register_recomputer``. A function gets
        ``(project, record)`` and returns the new record or a dict of changed fields; the store
        saves it, records its inputs' current revisions and clears the mark. Records come after
        the stale records they are computed from. Records whose method has no function, or
        whose function fails, stay stale and are reported. Cancelling (``cancel`` set) undoes
        the whole run.
        """
        registry = registered_recomputers(recompute)
        recomputed, unregistered, failed = [], [], []
        with self.transaction():
            pending = self.stale_records()
            total = max(1, len(pending))
            stuck: set[tuple[str, int]] = set()  # records that stay stale
            while pending:
                stale_now = {(r.KIND, r.id) for r in pending}
                ready = [
                    r for r in pending if not any((x.kind, x.id) in stale_now for x in r.inputs)
                ]
                if not ready:  # a cycle of records computed from each other
                    for rec in pending:
                        failed.append((rec.KIND, rec.id, "it is computed from itself (a cycle)"))
                    break
                for rec in ready:
                    check_cancel(cancel)
                    if progress is not None:
                        done = len(recomputed) + len(unregistered) + len(failed)
                        progress(done / total, f"{rec.KIND} {rec.id}")
                    problem = self._recompute_one(self.get(type(rec), rec.id), registry)
                    if problem is None:
                        recomputed.append((rec.KIND, rec.id))
                        continue
                    stuck.add((rec.KIND, rec.id))
                    if problem == "unregistered":
                        unregistered.append((rec.KIND, rec.id, rec.method))
                    else:
                        failed.append((rec.KIND, rec.id, problem))
                pending = [r for r in pending if r not in ready]
                # What is computed from a record that stays stale cannot be brought up to date.
                changed = True
                while changed:
                    changed = False
                    for rec in list(pending):
                        blocker = next((x for x in rec.inputs if (x.kind, x.id) in stuck), None)
                        if blocker is not None:
                            failed.append(
                                (
                                    rec.KIND,
                                    rec.id,
                                    f"its input {blocker.kind} {blocker.id} stays stale",
                                )
                            )
                            stuck.add((rec.KIND, rec.id))
                            pending.remove(rec)
                            changed = True
        if progress is not None:
            progress(1.0, "done")
        return RecomputeReport(tuple(recomputed), tuple(unregistered), tuple(failed))

    def _recompute_one(self, rec: Record, registry: Mapping[str, Callable]) -> str | None:
        """Recompute one record; returns None when done, else what kept it stale."""
        fn = registry.get(rec.method)
        if fn is None:
            return "unregistered"
        missing = [r for r in rec.inputs if self._current_revision(r.kind, r.id) is None]
        if missing:
            return f"its input {missing[0].kind} {missing[0].id} was deleted"
        try:
            with self.transaction():
                self._store_recomputed(rec, fn(self, rec))
        except Cancelled:
            raise
        except Exception as exc:  # noqa: BLE001 - reported; the record stays stale
            return f"{type(exc).__name__}: {exc}"
        return None

    def _store_recomputed(self, rec: Record, result: Any) -> None:
        if isinstance(result, Mapping):
            new = dataclasses.replace(rec, **result)
        elif isinstance(result, type(rec)):
            new = result
        else:
            raise ProjectError(
                f"the recompute function of {rec.method!r} returned {type(result).__name__}; "
                f"accepted: a {type(rec).__name__} or a dict of changed fields"
            )
        refs = tuple(
            SourceRef(r.kind, r.id, self._current_revision(r.kind, r.id) or r.revision)
            for r in new.inputs
        )
        new = dataclasses.replace(
            new,
            id=rec.id,
            inputs=refs,
            stale=False,
            flakebook_version=flakebook.__version__,
            computed_at=self.now(),
        )
        self._check_inputs(new)
        self._write_update(rec, new, clear_stale=True)

    # ---- typed helpers to add records ----------------------------------------------------

    def add_sample(
        self,
        name: str,
        material: str,
        substrate: str | Sequence[SubstrateLayer | dict] | None = None,
        *,
        oxide_nm: float | None = None,
        hole_pattern: HolePattern | dict | None = None,
        notes: str = "",
    ) -> Sample:
        """Add a chip: flake material, substrate (SPEC text like ``"SiO2:285,Si"``, a list of
        layers, or ``oxide_nm`` for SiO2 on Si) and its hole pattern, if any."""
        if (substrate is None) == (oxide_nm is None):
            raise InputError("give the substrate either as a stack or as oxide_nm, not both")
        if oxide_nm is not None:
            stack = oxide_stack(oxide_nm)
        elif isinstance(substrate, str):
            stack = parse_substrate(substrate)
        else:
            stack = check_stack(substrate)
        if isinstance(hole_pattern, dict):
            hole_pattern = HolePattern(**hole_pattern)
        if self.sample_by_name(name) is not None:
            raise InputError(f"{self._path.name} already has a sample named {name!r}")
        return self.add(
            Sample(
                name=name,
                material=material,
                substrate=stack,
                hole_pattern=hole_pattern,
                notes=notes,
            )
        )

    def add_image(
        self, sample: RecordRef, file: str | os.PathLike, *, embed: bool = False, **fields: Any
    ) -> Image:
        """Add a micrograph file of a sample: its path (relative to the project where possible),
        SHA-256 and size are recorded; ``fields`` are the :class:`Image` settings
        (``pixel_size_um``, ``objective``, ``na_objective``, ``na_illumination``, ...).
        ``embed=True`` also stores the bytes in the project."""
        file = Path(file)
        if not file.is_file():
            raise InputError(f"image file {file} does not exist")
        data = file.read_bytes() if embed else None
        sha, size = (hashlib.sha256(data).hexdigest(), len(data)) if data else _sha256_file(file)
        with self.transaction():
            img = self.add(
                Image(
                    sample_id=_id_of(sample),
                    path=self._stored_path(file),
                    sha256=sha,
                    size_bytes=size,
                    **fields,
                )
            )
            if data is not None:
                self._db.execute(
                    "INSERT INTO image_data (image_id, data) VALUES (?, ?)", (img.id, data)
                )
                img = self.get(Image, img.id)
        return img

    def add_flake(self, sample: RecordRef, label: str, **fields: Any) -> Flake:
        """Add a flake with its human-readable ID ``label`` (unique in the project);
        ``fields``: ``tags``, ``notes``, ``status``."""
        if self.flake_by_label(label) is not None:
            raise InputError(f"{self._path.name} already has a flake {label!r}")
        return self.add(Flake(sample_id=_id_of(sample), label=label, **fields))

    def add_appearance(
        self, flake: RecordRef, image: RecordRef, outline_px, outline_um=None
    ) -> Appearance:
        """Add a flake's outline in an image, as (x, y) pixels; in um it is taken as
        ``outline_px * pixel_size_um`` unless given."""
        return self.add(
            Appearance(
                flake_id=_id_of(flake),
                image_id=_id_of(image),
                outline_px=outline_px,
                outline_um=outline_um,
            )
        )

    def add_terrace(
        self, appearance: RecordRef, outline_px, *, label: str = "", outline_um=None, notes=""
    ) -> Terrace:
        """Add a region of uniform thickness inside an appearance."""
        return self.add(
            Terrace(
                appearance_id=_id_of(appearance),
                outline_px=outline_px,
                outline_um=outline_um,
                label=label,
                notes=notes,
            )
        )

    def add_hole(
        self, image: RecordRef, center_px: Sequence[float], radius_px: float, **fields: Any
    ) -> Hole:
        """Add a hole seen in an image, centre (x, y) and radius in px; ``radius_um`` defaults
        to ``radius_px * pixel_size_um``; ``fields``: ``radius_err_um``, ``source``,
        ``lattice_i``, ``lattice_j``."""
        x, y = center_px
        return self.add(
            Hole(
                image_id=_id_of(image), center_x_px=x, center_y_px=y, radius_px=radius_px, **fields
            )
        )

    def link_flake_hole(self, flake: RecordRef, hole: RecordRef, **fields: Any) -> FlakeHole:
        """Record that a flake lies over a hole: ``covered_fraction``, ``fully_covered``,
        ``margin_um``, ``terrace_id`` (the terrace over it). Replaces an earlier link."""
        fid, hid = _id_of(flake), _id_of(hole)
        with self.transaction():
            old = self.records(FlakeHole, flake_id=fid, hole_id=hid)
            if old:
                return self.update(old[0], **fields)
            return self.add(FlakeHole(flake_id=fid, hole_id=hid, **fields))

    def add_spectrum(self, flake: RecordRef | None, x, y, **fields: Any) -> Spectrum:
        """Add a spectrum measured on a flake (or, with ``sample_id=...`` and ``flake=None``, on
        the bare substrate); ``fields`` are the :class:`Spectrum` settings (``kind``,
        ``x_unit``, ``laser_nm``, ``power_mw``, ``series_id``, ``metadata``, ...)."""
        fields = {k: _id_of(v) if isinstance(v, Record) else v for k, v in fields.items()}
        return self.add(Spectrum(flake_id=_id_of(flake), x=x, y=y, **fields))

    def add_beam_profile(
        self, objective: str, laser_nm: float, radius_um: float, **fields
    ) -> BeamProfile:
        """Add a measured laser spot (1/e^2 intensity radius W)."""
        return self.add(
            BeamProfile(objective=objective, laser_nm=laser_nm, radius_um=radius_um, **fields)
        )

    def add_evidence(
        self,
        flake: RecordRef,
        likelihood,
        *,
        method: str,
        terrace: RecordRef | None = None,
        inputs: Sequence[Record | SourceRef] = (),
        parameters: Mapping[str, Any] | None = None,
        source: str = "",
        reason: str = "",
    ) -> Evidence:
        """Add layer evidence: a likelihood over N = 1..N_max and the 'more' bin (length
        ``max_layers + 1``), what it was computed from (``inputs``), how (``method``,
        ``parameters``) and the published ``source`` of its constants."""
        return self.add(
            Evidence(
                flake_id=_id_of(flake),
                terrace_id=_id_of(terrace),
                likelihood=likelihood,
                method=method,
                inputs=tuple(inputs),
                parameters=dict(parameters or {}),
                source=source,
                reason=reason,
            )
        )

    def assign(
        self,
        flake: RecordRef,
        layers: int,
        *,
        reason: str,
        terrace: RecordRef | None = None,
        who: str | None = None,
    ) -> Assignment:
        """A person's assignment of the layer number, with the required reason (to the flake's
        primary terrace unless ``terrace`` is given)."""
        fid = _id_of(flake)
        tid = _id_of(terrace) if terrace is not None else self.primary_terrace_id(fid)
        return self.add(
            Assignment(
                flake_id=fid,
                terrace_id=tid,
                layers=layers,
                probability=None,
                manual=True,
                reason=reason,
                who=who or "",
            )
        )

    def add_assignment(self, flake: RecordRef, layers: int, **fields: Any) -> Assignment:
        """Add a computed assignment (``probability``, ``ambiguous_with``, ``posterior``,
        ``method``, ``inputs``: the evidence it combines, ...)."""
        fields = {k: _id_of(v) if k == "terrace_id" else v for k, v in fields.items()}
        return self.add(Assignment(flake_id=_id_of(flake), layers=layers, **fields))

    def add_thermometry_series(
        self, flake: RecordRef, kind: str, **fields: Any
    ) -> ThermometrySeries:
        """Add a stage-temperature or laser-power series (``kind`` temperature|power); its
        spectra name it with ``series_id``."""
        fields = {k: _id_of(v) if isinstance(v, Record) else v for k, v in fields.items()}
        return self.add(ThermometrySeries(flake_id=_id_of(flake), kind=kind, **fields))

    def add_thermometry_result(self, flake: RecordRef, **fields: Any) -> ThermometryResult:
        """Add a thermal-conductivity result (``kappa_w_mk``, its interval, ``method``,
        ``inputs``, ...)."""
        return self.add(ThermometryResult(flake_id=_id_of(flake), **fields))

    def add_external_result(self, flake: RecordRef, **fields: Any) -> ExternalResult:
        """Add a result from an analysis done outside flakebook."""
        return self.add(ExternalResult(flake_id=_id_of(flake), **fields))

    def add_calibration(self, sample: RecordRef, **fields: Any) -> Calibration:
        """Add an optics calibration of a sample (``image_id`` for one image only)."""
        fields = {
            k: _id_of(v) if k == "image_id" and v is not None else v for k, v in fields.items()
        }
        return self.add(Calibration(sample_id=_id_of(sample), **fields))

    # ---- lookups and catalogue queries ---------------------------------------------------

    def sample_by_name(self, name: str) -> Sample | None:
        """The sample of this name, or None."""
        rows = self._select(Sample, "name = ?", (name,))
        return rows[0] if rows else None

    def flake_by_label(self, label: str) -> Flake | None:
        """The flake with this human-readable ID, or None."""
        rows = self._select(Flake, "label = ?", (label,))
        return rows[0] if rows else None

    def find_flake(self, key: str | int) -> Flake:
        """The flake with this label, or (if no label matches) this integer id."""
        flake = self.flake_by_label(str(key))
        if flake is None and str(key).isdigit():
            rows = self._select(Flake, "id = ?", (int(key),))
            flake = rows[0] if rows else None
        if flake is None:
            raise InputError(
                f"{self._path.name} has no flake {key!r}; `flakebook export` lists them"
            )
        return flake

    def samples(self) -> list[Sample]:
        """Every sample."""
        return self._select(Sample)

    def images_of(self, sample: RecordRef) -> list[Image]:
        """The images of a sample."""
        return self._select(Image, "sample_id = ?", (_id_of(sample),))

    def flakes_of(self, sample: RecordRef) -> list[Flake]:
        """The flakes of a sample."""
        return self._select(Flake, "sample_id = ?", (_id_of(sample),))

    def appearances_of(self, flake: RecordRef) -> list[Appearance]:
        """Where a flake appears (one outline per image)."""
        return self._select(Appearance, "flake_id = ?", (_id_of(flake),))

    def terraces_of(self, flake: RecordRef) -> list[Terrace]:
        """The terraces of every appearance of a flake."""
        return self._select(
            Terrace,
            "appearance_id IN (SELECT id FROM appearances WHERE flake_id = ?)",
            (_id_of(flake),),
        )

    def holes_of(self, image: RecordRef) -> list[Hole]:
        """The holes found in an image."""
        return self._select(Hole, "image_id = ?", (_id_of(image),))

    def holes_covered_by(self, flake: RecordRef) -> list[tuple[FlakeHole, Hole]]:
        """The holes a flake lies over, with the link (covered fraction, margin)."""
        links = self._select(FlakeHole, "flake_id = ?", (_id_of(flake),))
        return [(link, self.get(Hole, link.hole_id)) for link in links]

    def spectra_of(self, flake: RecordRef, kind: str | None = None) -> list[Spectrum]:
        """The spectra of a flake (``kind`` raman|pl|reflectance to choose)."""
        if kind is None:
            return self._select(Spectrum, "flake_id = ?", (_id_of(flake),))
        return self._select(Spectrum, "flake_id = ? AND kind = ?", (_id_of(flake), kind))

    def spectra_of_series(self, series: RecordRef) -> list[Spectrum]:
        """The spectra of a thermometry series."""
        return self._select(Spectrum, "series_id = ?", (_id_of(series),))

    def evidence_of(self, flake: RecordRef, terrace: RecordRef | None = None) -> list[Evidence]:
        """The layer evidence of a flake (of one terrace when given)."""
        if terrace is None:
            return self._select(Evidence, "flake_id = ?", (_id_of(flake),))
        return self._select(
            Evidence, "flake_id = ? AND terrace_id = ?", (_id_of(flake), _id_of(terrace))
        )

    def assignments_of(self, flake: RecordRef) -> list[Assignment]:
        """Every assignment of a flake, oldest first."""
        return self._select(Assignment, "flake_id = ?", (_id_of(flake),))

    def thermometry_of(
        self, flake: RecordRef
    ) -> tuple[list[ThermometrySeries], list[ThermometryResult]]:
        """A flake's thermometry series and results."""
        fid = _id_of(flake)
        return (
            self._select(ThermometrySeries, "flake_id = ?", (fid,)),
            self._select(ThermometryResult, "flake_id = ?", (fid,)),
        )

    def external_results_of(self, flake: RecordRef) -> list[ExternalResult]:
        """Results imported for a flake from outside analyses."""
        return self._select(ExternalResult, "flake_id = ?", (_id_of(flake),))

    def calibrations_of(self, sample: RecordRef) -> list[Calibration]:
        """The optics calibrations of a sample."""
        return self._select(Calibration, "sample_id = ?", (_id_of(sample),))

    def primary_terrace_id(self, flake: RecordRef) -> int | None:
        """The terrace whose layer number is the flake's: the one chosen by the user, else the
        one over a hole, else the largest (DESIGN.md); None for a flake without terraces."""
        row = self._db.execute(
            f"SELECT {_PRIMARY_TERRACE} FROM flakes f WHERE f.id = ?", (_id_of(flake),)
        ).fetchone()
        return None if row is None else row[0]

    def latest_assignment(self, flake: RecordRef) -> Assignment | None:
        """The flake's current assignment: the latest one of its primary terrace (or of the
        flake as a whole)."""
        fid = _id_of(flake)
        tid = self.primary_terrace_id(fid)
        rows = self._select(
            Assignment,
            "id = (SELECT id FROM assignments WHERE flake_id = ? AND "
            "(terrace_id IS NULL OR terrace_id IS ?) ORDER BY id DESC LIMIT 1)",
            (fid, tid),
        )
        return rows[0] if rows else None

    def catalogue(self, sample: RecordRef | None = None) -> list[CatalogueRow]:
        """The flakes (of one sample, or all) with their latest assignment, area (from the
        finest-pixel image), fully covered holes and whether anything of theirs is stale."""
        sid = _id_of(sample)
        con = self._db
        # Few flakes cover holes or have stale records: two small queries, looked up per row.
        covered = {r[0]: r[1:] for r in con.execute(_COVERED_SQL)}
        stale = {r[0] for r in con.execute(_STALE_SQL)}
        make = CatalogueRow._make
        return [
            make(
                (
                    *r[:6],
                    _tags(r[6]),
                    *r[7:11],
                    bool(r[11]),
                    *covered.get(r[0], (0, None)),
                    r[0] in stale,
                )
            )
            for r in con.execute(_CATALOGUE_SQL, (sid, sid))
        ]

    def export_rows(self, sample: RecordRef | None = None) -> list[dict[str, Any]]:
        """The rows of ``flakebook export`` (INTERFACE.md): ``flake_id`` (the label),
        ``sample``, ``area_um2``, ``layers``, ``probability``, ``holes_covered`` (fully covered),
        ``thickness_nm``, ``kappa_w_mk``, ``kappa_p16_w_mk``, ``kappa_p84_w_mk``, ``stale``.

        kappa comes from the latest thermometry result, else the latest imported result;
        thickness is that result's own, else layers x the material's layer spacing.
        """
        thermo = {
            r[0]: r[1:]
            for r in self._db.execute(
                "SELECT flake_id, kappa_w_mk, kappa_p16_w_mk, kappa_p84_w_mk, thickness_nm "
                "FROM thermometry_results WHERE id IN "
                "(SELECT MAX(id) FROM thermometry_results GROUP BY flake_id)"
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
        for row in self.catalogue(sample):
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
        return out

    def info(self) -> dict[str, Any]:
        """A summary: file, format, counts of every record kind, stale records, samples."""
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
        }

    # ---- image files ----------------------------------------------------------------------

    def _stored_path(self, file: Path) -> str:
        target = file.resolve()
        try:
            return Path(os.path.relpath(target, self.folder)).as_posix()
        except ValueError:  # another drive (Windows): keep it absolute
            return target.as_posix()

    def image_file(self, image: RecordRef) -> Path:
        """Where an image's file is expected on disk (it may be missing)."""
        img = image if isinstance(image, Image) else self.get(Image, _id_of(image))
        return (
            (self.folder / img.path).resolve()
            if not Path(img.path).is_absolute()
            else Path(img.path)
        )

    def _check_one(self, img: Image) -> ImageCheck:
        file = self.image_file(img)
        if not file.is_file():
            status = "missing"
        elif file.stat().st_size != img.size_bytes or _sha256_file(file)[0] != img.sha256:
            status = "changed"
        else:
            status = "ok"
        return ImageCheck(img.id, img.path, status, img.embedded, str(file))

    def check_images(self, progress: Progress | None = None, cancel=None) -> list[ImageCheck]:
        """The state of every image's file: ``ok``, ``missing`` or ``changed`` (its hash
        differs from the one recorded). A changed file is never used silently."""
        images = self._select(Image)
        out = []
        for i, img in enumerate(images):
            check_cancel(cancel)
            out.append(self._check_one(img))
            if progress is not None:
                progress((i + 1) / len(images), img.path)
        return out

    def image_bytes(self, image: RecordRef) -> bytes:
        """An image's content: the embedded copy, else the file (checked against its hash)."""
        iid = _id_of(image)
        row = self._db.execute("SELECT data FROM image_data WHERE image_id = ?", (iid,)).fetchone()
        if row is not None:
            return bytes(row[0])
        img = self.get(Image, iid)
        file = self.image_file(img)
        try:
            data = file.read_bytes()
        except OSError:
            raise ProjectError(
                f"image {img.path} of {self._path.name} is missing (looked at {file}); "
                "relink it (flakebook relink PROJECT --search DIR)"
            ) from None
        if hashlib.sha256(data).hexdigest() != img.sha256:
            raise ProjectError(
                f"image {img.path} has changed since it was added (its SHA-256 differs); "
                "relink it to the original file"
            )
        return data

    def relink(
        self, search_dir: str | os.PathLike, progress: Progress | None = None, cancel=None
    ) -> dict[str, list]:
        """Find missing or changed images again by their SHA-256 under ``search_dir``.

        Returns ``{"relinked": [(image_id, new_path)], "not_found": [image_id]}``; only the
        stored paths change (the content is the same, so nothing becomes stale).
        """
        root = Path(search_dir)
        if not root.is_dir():
            raise InputError(f"--search {root} is not a folder")
        wanted = [c for c in self.check_images(cancel=cancel) if c.status != "ok"]
        if not wanted:
            return {"relinked": [], "not_found": []}
        images = {c.image_id: self.get(Image, c.image_id) for c in wanted}
        sizes = {img.size_bytes for img in images.values()}
        by_hash: dict[str, Path] = {}
        candidates = [
            Path(d) / name
            for d, _dirs, files in os.walk(root)
            for name in files
            if not name.endswith((SUFFIX, ".lock", "-journal"))
        ]
        for i, path in enumerate(candidates):
            check_cancel(cancel)
            try:
                if path.stat().st_size in sizes:
                    by_hash.setdefault(_sha256_file(path)[0], path)
            except OSError:
                continue
            if progress is not None:
                progress((i + 1) / len(candidates), path.name)
        relinked, not_found = [], []
        with self.transaction():
            for iid, img in images.items():
                found = by_hash.get(img.sha256)
                if found is None:
                    not_found.append(iid)
                    continue
                new_path = self._stored_path(found)
                self._db.execute("UPDATE images SET path = ? WHERE id = ?", (new_path, iid))
                relinked.append((iid, new_path))
        return {"relinked": relinked, "not_found": not_found}

    def pack(self, progress: Progress | None = None, cancel=None) -> int:
        """Embed every referenced image's bytes so the file stands alone; returns how many were
        added. All or nothing: a missing or changed image raises :class:`ProjectError`."""
        todo = self._select(Image, "id NOT IN (SELECT image_id FROM image_data)")
        checks = [self._check_one(img) for img in todo]
        bad = [c for c in checks if c.status != "ok"]
        if bad:
            names = ", ".join(f"{c.path} ({c.status})" for c in bad[:3])
            more = f" and {len(bad) - 3} more" if len(bad) > 3 else ""
            raise ProjectError(
                f"cannot pack {self._path.name}: {names}{more}.\n"
                "Relink the images first (flakebook relink PROJECT --search DIR); nothing was changed"
            )
        with self.transaction():
            for i, img in enumerate(todo):
                check_cancel(cancel)
                data = self.image_file(img).read_bytes()
                if hashlib.sha256(data).hexdigest() != img.sha256:
                    raise ProjectError(
                        f"image {img.path} changed while packing; nothing was changed"
                    )
                self._db.execute(
                    "INSERT INTO image_data (image_id, data) VALUES (?, ?)", (img.id, data)
                )
                if progress is not None:
                    progress((i + 1) / len(todo), img.path)
        return len(todo)

    # ---- hand-off --------------------------------------------------------------------------

    def handoff_bundle(self, flakes: Iterable[RecordRef | str]) -> dict[str, Any]:
        """A JSON-able bundle of flakes for an outside analysis: each flake with its sample
        (substrate, hole pattern), latest assignment, covered holes, spectra (with data),
        thermometry series and results."""
        out = []
        for key in flakes:
            flake = self.find_flake(key) if isinstance(key, str) else self.get(Flake, _id_of(key))
            sample = self.get(Sample, flake.sample_id)
            asg = self.latest_assignment(flake)
            series, results = self.thermometry_of(flake)
            out.append(
                {
                    "flake_id": flake.label,
                    "sample": sample.name,
                    "material": sample.material,
                    "substrate": [layer.to_dict() for layer in sample.substrate],
                    "hole_pattern": None
                    if sample.hole_pattern is None
                    else sample.hole_pattern.to_dict(),
                    "layers": None if asg is None else asg.layers,
                    "probability": None if asg is None else asg.probability,
                    "layer_spacing_nm": layer_spacing_nm(sample.material),
                    "holes": [
                        {
                            "hole_id": hole.id,
                            "radius_um": hole.radius_um,
                            "radius_err_um": hole.radius_err_um,
                            "fully_covered": link.fully_covered,
                            "covered_fraction": link.covered_fraction,
                            "margin_um": link.margin_um,
                        }
                        for link, hole in self.holes_covered_by(flake)
                    ],
                    "spectra": [record_to_dict(s) for s in self.spectra_of(flake)],
                    "thermometry_series": [record_to_dict(s) for s in series],
                    "thermometry_results": [record_to_dict(r) for r in results],
                }
            )
        return {
            "flakebook_version": flakebook.__version__,
            "project": self._path.name,
            "flakes": out,
        }

    def import_external_results(self, csv_file: str | os.PathLike) -> list[ExternalResult]:
        """Import a hand-off CSV (columns ``flake_id, kappa_w_mk, kappa_p16_w_mk,
        kappa_p84_w_mk, method, note``). Every row is checked first; one bad row imports
        nothing and raises :class:`InputError` naming the row."""
        rows = _read_handoff_csv(Path(csv_file))
        pending = []
        for lineno, row in rows:
            try:
                flake = self.find_flake(row["flake_id"])
            except InputError:
                raise InputError(
                    f"{csv_file} line {lineno}: no flake {row['flake_id']!r} in {self._path.name}; "
                    "nothing was imported"
                ) from None
            try:
                rec = ExternalResult(
                    flake_id=flake.id,
                    kappa_w_mk=row["kappa_w_mk"],
                    kappa_p16_w_mk=row["kappa_p16_w_mk"],
                    kappa_p84_w_mk=row["kappa_p84_w_mk"],
                    method=row["method"],
                    note=row["note"],
                    source_file=Path(csv_file).name,
                )
            except InputError as exc:
                raise InputError(f"{csv_file} line {lineno}: {exc}; nothing was imported") from None
            k, lo, hi = rec.kappa_w_mk, rec.kappa_p16_w_mk, rec.kappa_p84_w_mk
            if k is not None and ((lo is not None and lo > k) or (hi is not None and hi < k)):
                raise InputError(
                    f"{csv_file} line {lineno}: kappa_p16_w_mk <= kappa_w_mk <= kappa_p84_w_mk "
                    "does not hold; nothing was imported"
                )
            pending.append(rec)
        with self.transaction():
            return [self.add(rec) for rec in pending]

    # ---- the canonical dump ------------------------------------------------------------------

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


def _qmarks(items) -> str:
    return ", ".join("?" * len(items))


def _tags(text: str) -> tuple:
    return () if text == "[]" else tuple(json.loads(text))


def _same_array(a, b) -> bool:
    return a is b or (a is not None and b is not None and np.array_equal(a, b))


def _canonical_value(value: Any) -> Any:
    if isinstance(value, bytes | memoryview):
        data = bytes(value)
        return {"sha256": hashlib.sha256(data).hexdigest(), "bytes": len(data)}
    return value


def _construct(cls: type[Record], kwargs: dict[str, Any]) -> Record:
    try:
        return cls(**kwargs)
    except (InputError, TypeError) as exc:
        raise ProjectError(
            f"a stored {cls.KIND} (id {kwargs.get('id')}) cannot be read: {exc}"
        ) from None


_HANDOFF_COLUMNS = ("flake_id", "kappa_w_mk", "kappa_p16_w_mk", "kappa_p84_w_mk", "method", "note")


def _read_handoff_csv(path: Path) -> list[tuple[int, dict[str, Any]]]:
    accepted = f"accepted: a CSV with the columns {', '.join(_HANDOFF_COLUMNS)}"
    try:
        text = path.read_text(encoding="utf-8-sig")
    except OSError as exc:
        raise InputError(f"{path} cannot be read: {exc.strerror}") from None
    except UnicodeDecodeError:
        raise InputError(f"{path} is not UTF-8 text; {accepted}") from None
    reader = csv.DictReader(text.splitlines())
    header = [h.strip() for h in (reader.fieldnames or [])]
    missing = [c for c in _HANDOFF_COLUMNS if c not in header]
    if missing:
        raise InputError(f"{path} lacks the column(s) {', '.join(missing)}; {accepted}")
    out = []
    for lineno, raw in enumerate(reader, start=2):
        row = {(k or "").strip(): (v or "").strip() for k, v in raw.items() if k is not None}
        if None in raw:
            raise InputError(f"{path} line {lineno} has more cells than columns; {accepted}")
        if not any(row.values()):
            continue
        if not row["flake_id"]:
            raise InputError(f"{path} line {lineno} has no flake_id; nothing was imported")
        parsed: dict[str, Any] = {
            "flake_id": row["flake_id"],
            "method": row["method"],
            "note": row["note"],
        }
        for col in ("kappa_w_mk", "kappa_p16_w_mk", "kappa_p84_w_mk"):
            cell = row[col]
            if cell == "":
                parsed[col] = None
                continue
            try:
                parsed[col] = float(cell)
            except ValueError:
                raise InputError(
                    f"{path} line {lineno}: {col} {cell!r} is not a number (W/mK); "
                    "nothing was imported"
                ) from None
        out.append((lineno, parsed))
    if not out:
        raise InputError(f"{path} has no result rows; {accepted}")
    return out


# The catalogue's queries. A flake's primary terrace: the user's choice, else the terrace over a
# hole (fully covered first), else the largest terrace.
_PRIMARY_TERRACE = """COALESCE(
    f.primary_terrace_id,
    (SELECT fh.terrace_id FROM flake_holes fh
      WHERE fh.flake_id = f.id AND fh.terrace_id IS NOT NULL
      ORDER BY fh.fully_covered DESC, fh.covered_fraction DESC, fh.id LIMIT 1),
    (SELECT t.id FROM terraces t WHERE t.flake_id = f.id ORDER BY t.area_um2 DESC, t.id LIMIT 1))"""

_CATALOGUE_SQL = f"""
WITH base AS MATERIALIZED (
    SELECT f.id, f.label, f.sample_id, f.status, f.tags, {_PRIMARY_TERRACE} AS tid
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
JOIN samples s ON s.id = l.sample_id
LEFT JOIN assignments asg ON asg.id = l.aid
ORDER BY l.sample_id, l.label
"""

_COVERED_SQL = (
    "SELECT flake_id, COUNT(*), MAX(margin_um) FROM flake_holes WHERE fully_covered "
    "GROUP BY flake_id"
)
_STALE_SQL = (
    "SELECT flake_id FROM evidence WHERE stale UNION SELECT flake_id FROM assignments WHERE stale "
    "UNION SELECT flake_id FROM thermometry_results WHERE stale"
)

__all__ = ["Project", "SUFFIX", "DEFAULT_MAX_LAYERS", "EXPORT_COLUMNS"]
