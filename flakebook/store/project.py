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

This module holds the core (opening, creating, closing, transactions, the lock, the schema and
generic record access: get, records, count, add, update, delete, restore). The rest of
:class:`Project`'s methods are written by concern in mixins beside it: the record kinds' add and
find functions (:mod:`~flakebook.store.kinds`), provenance and recompute
(:mod:`~flakebook.store.provenance`), image files and packing (:mod:`~flakebook.store.files`),
catalogue queries and exports (:mod:`~flakebook.store.catalogue`) and hand-off
(:mod:`~flakebook.store.handoff`).
"""

from __future__ import annotations

import dataclasses
import functools
import inspect as inspect_module
import os
import shutil
import sqlite3
import struct
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import flakebook
from flakebook.errors import InputError, ProjectError
from flakebook.store import lock, provenance, schema
from flakebook.store._util import id_of, qmarks
from flakebook.store.catalogue import EXPORT_COLUMNS, CatalogueQueries
from flakebook.store.filecheck import (
    SUFFIX,
    check_header,
    check_integrity,
    check_tables,
    inspect,
    is_disk_full,
    journal_path,
    sql_error,
)
from flakebook.store.files import ImageFiles
from flakebook.store.handoff import Handoff
from flakebook.store.kinds import RecordKinds
from flakebook.store.provenance import Provenance
from flakebook.store.records import (
    Appearance,
    Image,
    Record,
    Terrace,
    record_type,
)
from flakebook.store.results import DeletedRows
from flakebook.store.rows import AREA_TABLES, TABLE_KINDS, construct, decode, encode, layout

DEFAULT_MAX_LAYERS = 15

Clock = Callable[[], datetime | str]


def _iso(value: datetime | str) -> str:
    if isinstance(value, str):
        return value
    if value.tzinfo is None:
        value = value.replace(tzinfo=UTC)
    return value.astimezone(UTC).isoformat().replace("+00:00", "Z")


def _default_clock() -> datetime:
    return datetime.now(UTC).replace(microsecond=0)


def _connect_ro(path: Path) -> sqlite3.Connection:
    uri = path.resolve().as_uri() + "?mode=ro"
    return sqlite3.connect(uri, uri=True, isolation_level=None, timeout=10)


# ---- the core ------------------------------------------------------------------------------------


class _ProjectCore:
    """The file and its records: opening, closing, transactions and generic record access.

    On every write it keeps provenance (:mod:`flakebook.store.provenance`: inputs, stale marks)
    and calls two hooks of :class:`~flakebook.store.kinds.RecordKinds`: ``_prepare(rec, old)``
    before a record is written and ``_after_update(old, new)`` after one is updated.
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
        except BaseException as exc:
            tmp.unlink(missing_ok=True)
            lock.release(path, lock_info)
            if isinstance(exc, sqlite3.Error):
                raise sql_error(
                    path, exc, otherwise=f"{path} could not be created ({exc}); no file was made"
                ) from None
            if isinstance(exc, OSError):
                if is_disk_full(exc):
                    raise ProjectError(
                        f"{path} could not be created: the disk is full; no file was made.\n"
                        "Free some space on that disk and try again."
                    ) from None
                raise ProjectError(
                    f"{path} could not be created: {exc.strerror or exc}; no file was made"
                ) from None
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
        ``NAME.flakebook.vN.bak``); it first checks the file (every table of its format
        present, SQLite's ``PRAGMA quick_check``) and refuses a damaged one. Read-only needs no write access to the folder and changes
        nothing (an earlier format is upgraded in memory only). Files that are not projects, are
        damaged or come from a newer flakebook raise :class:`ProjectError` and are left alone.
        """
        path = Path(path)
        check_header(path)
        hot_journal = False
        try:
            ro = _connect_ro(path)
        except sqlite3.Error as exc:
            raise ProjectError(f"{path} cannot be opened: {exc}") from None
        try:
            version = inspect(ro, path)
        except ProjectError:
            ro.close()
            if read_only or not journal_path(path).exists():
                if journal_path(path).exists():
                    raise ProjectError(
                        f"{path} was interrupted while saving; open it read-write once so that "
                        "the unfinished save is rolled back"
                    ) from None
                raise
            hot_journal = True  # validated again below, once SQLite has rolled the journal back
            ro = None
        if read_only:
            assert ro is not None
            try:
                check_tables(ro, path, version)
            except BaseException:
                ro.close()
                raise
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
                    version = inspect(con, path)
                # Never write into a damaged file: every table of its format, and its pages.
                check_tables(con, path, version)
                check_integrity(con, path)
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
        elif not con.in_transaction:
            raise ProjectError(
                f"{self._path} could not be saved: this action was already undone by an error "
                "inside it; nothing of it was saved"
            )
        else:
            con.execute(f"SAVEPOINT sp{depth}")
        self._depth += 1
        try:
            yield self
            if depth == 0:
                if not con.in_transaction:  # SQLite undid it (a full disk) and it was caught
                    raise ProjectError(
                        f"{self._path} could not be saved: an error inside this action undid "
                        "it; nothing of it was saved"
                    )
                con.execute("COMMIT")
        except BaseException as exc:
            self._depth -= 1
            # SQLite rolls a whole transaction back by itself on some errors (a full disk):
            # then there is no savepoint left to undo, and the cause is what the user needs.
            if con.in_transaction:
                try:
                    if depth == 0:
                        con.execute("ROLLBACK")
                    else:
                        con.execute(f"ROLLBACK TO sp{depth}")
                        con.execute(f"RELEASE sp{depth}")
                except sqlite3.Error:
                    if not isinstance(exc, sqlite3.Error):
                        raise
            if isinstance(exc, sqlite3.Error):
                raise sql_error(
                    self._path,
                    exc,
                    otherwise=f"{self._path} could not be saved ({exc}); nothing of this action "
                    "was saved",
                ) from None
            raise
        self._depth -= 1
        if depth > 0:
            con.execute(f"RELEASE sp{depth}")

    # ---- generic records -----------------------------------------------------------------

    def _row_values(self, rec: Record) -> dict[str, Any]:
        lay = layout(type(rec))
        values = {c: encode(lay.codecs[c], getattr(rec, c)) for c in lay.columns}
        values.pop("revision")
        if rec.TABLE in AREA_TABLES:
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

    def _pixel_size(self, image_id: int) -> float | None:
        """An image's pixel size in um (None when unknown); appearances keep a copy."""
        row = self._db.execute("SELECT pixel_size_um FROM images WHERE id = ?", (image_id,))
        row = row.fetchone()
        if row is None:
            raise InputError(f"{self._path.name} has no image with id {image_id}")
        return row[0]

    def _from_row(self, cls: type[Record], row: Sequence[Any]) -> Record:
        lay = layout(cls)
        kwargs = {"id": row[0]}
        for name, value in zip(lay.columns, row[1:]):
            try:
                kwargs[name] = decode(lay.codecs[name], value)
            except (TypeError, ValueError, KeyError, AttributeError, struct.error, ProjectError):
                raise self._unreadable(cls, row[0], f"its {name} is not readable") from None
        if cls is Image:
            kwargs["embedded"] = bool(row[len(lay.columns) + 1])
        if cls.DERIVED:
            kwargs["inputs"] = provenance.read_inputs(self._db, cls.KIND, row[0])
        try:
            return construct(cls, kwargs)
        except (TypeError, ValueError, KeyError) as exc:
            raise self._unreadable(cls, row[0], f"its values are not accepted ({exc})") from None

    def _unreadable(self, cls: type[Record], rid: Any, why: str) -> ProjectError:
        """A stored row that cannot be read (changed by another program or a failing disk)."""
        first = str(why).splitlines()[0][:160]
        return ProjectError(
            f"{self._path.name}: {cls.KIND} id {rid} cannot be read: {first}.\n"
            "Open the file read-only to save what can still be read, or go back to a backup copy."
        )

    def _select(self, cls: type[Record], where: str = "", params: Sequence[Any] = ()) -> list:
        sql = layout(cls).select + (f" WHERE {where}" if where else "") + " ORDER BY id"
        return [self._from_row(cls, row) for row in self._db.execute(sql, tuple(params))]

    def get(self, kind: str | type[Record], record_id: int) -> Record:
        """The stored record of ``kind`` (a name like ``"flake"`` or a class) with this id."""
        cls = record_type(kind)
        rows = self._select(cls, "id = ?", (id_of(record_id),))
        if not rows:
            raise InputError(f"{self._path.name} has no {cls.KIND} with id {record_id}")
        return rows[0]

    def records(self, kind: str | type[Record], **where: Any) -> list[Record]:
        """Every record of ``kind``, in id order, optionally where fields equal given values.

        Example: ``records("spectrum", flake_id=3, kind="raman")``.
        """
        cls = record_type(kind)
        lay = layout(cls)
        clauses, params = [], []
        for name, value in where.items():
            if name != "id" and name not in lay.columns:
                raise InputError(f"{cls.KIND} has no field {name!r}")
            if isinstance(value, Record):
                value = id_of(value)
            if value is None:
                clauses.append(f"{name} IS NULL")
            else:
                clauses.append(f"{name} = ?")
                params.append(encode(lay.codecs.get(name), value))
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
                provenance.write_inputs(self._db, rec)
            return self.get(type(rec), rec.id)

    def update(self, record: Record, **changes: Any) -> Record:
        """Store changed fields of a stored record (``changes`` are applied first).

        The revision goes up by one and every record derived from this one is marked stale. A
        record with nothing changed is left as it is. Returns the stored record.
        """
        rid = id_of(record)
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
            provenance.write_inputs(self._db, dataclasses.replace(new, id=old.id))
        provenance.mark_dependents(self._db, new.KIND, old.id)
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
            cls, rid = type(record), id_of(record)
        else:
            cls, rid = record_type(record), id_of(record_id)
        with self.transaction():
            self.get(cls, rid)
            doomed = self._cascade(cls.TABLE, rid)
            rows, nulled = [], []
            for table, ids in doomed.items() if undo else ():
                cur = self._db.execute(
                    f"SELECT rowid, * FROM {table} WHERE rowid IN ({qmarks(ids)}) ORDER BY rowid",
                    sorted(ids),
                )
                columns = tuple(d[0] for d in cur.description[1:])
                rows.append((table, columns, tuple(tuple(r[1:]) for r in cur)))
                for child, column in self._foreign_keys().get(table, {}).get("SET NULL", ()):
                    keep = self._db.execute(
                        f"SELECT rowid, {column} FROM {child} WHERE {column} IN ({qmarks(ids)})",
                        sorted(ids),
                    ).fetchall()
                    nulled.extend(
                        (child, column, r, v) for r, v in keep if r not in doomed.get(child, ())
                    )
            staled: list[tuple[str, int]] = []
            for table, ids in doomed.items():
                kind = TABLE_KINDS.get(table)
                if kind is not None:
                    for i in ids:
                        staled.extend(provenance.mark_dependents(self._db, kind, i))
            dead = {(TABLE_KINDS.get(t), i) for t, ids in doomed.items() for i in ids}
            staled = [x for x in staled if (TABLE_KINDS.get(x[0]), x[1]) not in dead]
            deps = provenance.dependency_rows(self._db, doomed)
            self._db.execute(f"DELETE FROM {cls.TABLE} WHERE id = ?", (rid,))
            provenance.drop_orphan_dependencies(self._db)
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
                    f"INSERT INTO {table} ({', '.join(columns)}) VALUES ({qmarks(columns)})",
                    rows,
                )
            for table, column, rowid, value in deleted.nulled:
                self._db.execute(
                    f"UPDATE {table} SET {column} = ? WHERE rowid = ? AND {column} IS NULL",
                    (value, rowid),
                )
            for table, rid in deleted.staled:
                self._db.execute(f"UPDATE {table} SET stale = 0 WHERE id = ?", (rid,))
            provenance.restore_dependencies(self._db, deleted.dependencies)

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
                        f"SELECT rowid FROM {child} WHERE {column} IN ({qmarks(ids)})",
                        sorted(ids),
                    )
                }
                if found:
                    todo.append((child, found))
        return doomed


# ---- the project ---------------------------------------------------------------------------------


class Project(RecordKinds, Provenance, ImageFiles, CatalogueQueries, Handoff, _ProjectCore):
    """An open project file. Make one with :meth:`create` or :meth:`open`; close it with
    :meth:`close` or use it as a context manager.

    Record arguments accept a stored record or its integer id. Every method that changes the file
    runs in one transaction; wrap several calls in :meth:`transaction` to make them one action.
    """


def _guard(method: Callable) -> Callable:
    @functools.wraps(method)
    def guarded(self, *args, **kwargs):
        try:
            return method(self, *args, **kwargs)
        except sqlite3.Error as exc:
            raise sql_error(self._path, exc) from None

    return guarded


# Every public method of Project turns an SQLite error (a damaged file, a full disk) into the
# user's error (ProjectError, or InputError for a broken reference) instead of letting it
# through as an internal one; transaction() does the same for the writes inside it.
for _name, _member in list(vars(Project).items()) + [
    (n, m) for base in Project.__mro__[1:-1] for n, m in vars(base).items()
]:
    if (
        not _name.startswith("_")
        and _name not in ("transaction", "close", "create", "open")
        and inspect_module.isfunction(_member)
        and not hasattr(Project.__dict__.get(_name), "__wrapped__")
    ):
        setattr(Project, _name, _guard(_member))
del _name, _member


__all__ = ["Project", "SUFFIX", "DEFAULT_MAX_LAYERS", "EXPORT_COLUMNS"]
