"""Recognising a flakebook project file: before SQLite is given it, and once it is open.

:func:`check_header` reads the SQLite header's own fields (application id, format version, page
count) so that a file that is not a project, is cut short or comes from a newer flakebook is
refused without SQLite touching it (not even rolling back a leftover journal);
:func:`inspect` checks the same on an open connection.
"""

from __future__ import annotations

import errno
import sqlite3
import struct
from pathlib import Path

import flakebook
from flakebook.errors import FlakebookError, InputError, ProjectError
from flakebook.store import schema

#: The file name suffix of a project file.
SUFFIX = ".flakebook"
_SQLITE_MAGIC = b"SQLite format 3\x00"
ACCEPTED = "accepted: a .flakebook project file written by flakebook"


def journal_path(path: Path) -> Path:
    """The rollback journal SQLite keeps beside a file while it saves."""
    return path.with_name(path.name + "-journal")


def check_header(path: Path) -> None:
    """Refuse files that are not SQLite, or that are cut short, without opening them in SQLite."""
    if not path.exists():
        raise ProjectError(f"{path}: no such project file; {ACCEPTED}")
    if not path.is_file():
        raise ProjectError(f"{path} is not a file; {ACCEPTED}")
    try:
        size = path.stat().st_size
        with open(path, "rb") as fh:
            header = fh.read(100)
    except OSError as exc:
        raise ProjectError(f"{path} cannot be read: {exc.strerror}") from None
    if size == 0:
        raise ProjectError(f"{path} is empty, not a flakebook project; {ACCEPTED}")
    if not header.startswith(_SQLITE_MAGIC):
        raise ProjectError(
            f"{path} is not a flakebook project (it is not an SQLite database file); {ACCEPTED}"
        )
    if len(header) < 100:
        raise ProjectError(f"{path} is damaged: it is cut short ({size} bytes); {ACCEPTED}")
    # The header's own fields, read before SQLite is given the file (so that not even a
    # leftover journal of some other database is rolled back): application id and user version.
    (user_version,) = struct.unpack(">I", header[60:64])
    (app_id,) = struct.unpack(">I", header[68:72])
    if app_id != schema.APPLICATION_ID:
        raise ProjectError(f"{path} is an SQLite database but not a flakebook project; {ACCEPTED}")
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
        and not journal_path(path).exists()
    ):
        raise ProjectError(
            f"{path} is damaged: it is cut short ({size} of {expected} bytes); it may be an "
            f"incomplete copy. {ACCEPTED}"
        )


def inspect(con: sqlite3.Connection, path: Path) -> int:
    """Check a connection holds a flakebook project this version can read; returns its version."""
    try:
        app_id = con.execute("PRAGMA application_id").fetchone()[0]
        version = con.execute("PRAGMA user_version").fetchone()[0]
        tables = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type='table'")}
    except sqlite3.DatabaseError as exc:
        raise ProjectError(
            f"{path} cannot be read as a flakebook project: {exc}; {ACCEPTED}"
        ) from None
    if app_id != schema.APPLICATION_ID or "meta" not in tables:
        raise ProjectError(f"{path} is an SQLite database but not a flakebook project; {ACCEPTED}")
    if version > schema.SCHEMA_VERSION:
        raise ProjectError(_newer_message(path, version))
    if version < 1:
        raise ProjectError(f"{path} has no project format version; {ACCEPTED}")
    return version


def check_tables(con: sqlite3.Connection, path: Path, version: int) -> None:
    """Refuse a project that lacks a table of its format (dropped by another program)."""
    try:
        present = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    except sqlite3.DatabaseError as exc:
        raise ProjectError(
            damaged_message(path, f"its list of tables cannot be read: {exc}")
        ) from None
    missing = sorted(schema.tables_of(version) - present)
    if missing:
        what = (
            f"its table {missing[0]} is missing"
            if len(missing) == 1
            else f"its tables {', '.join(missing)} are missing"
        )
        raise ProjectError(
            f"{path} is damaged: {what}; the file was not changed.\n"
            "Go back to a backup copy of the project (a copy of this file has the same damage)."
        )


def check_integrity(con: sqlite3.Connection, path: Path) -> None:
    """Refuse a file whose pages fail SQLite's ``PRAGMA quick_check`` (before writing to it)."""
    try:
        result = [r[0] for r in con.execute("PRAGMA quick_check(3)")]
    except sqlite3.DatabaseError as exc:
        result = [str(exc)]
    if result != ["ok"]:
        raise ProjectError(damaged_message(path, f"SQLite's integrity check: {result[0]}"))


def damaged_message(path: Path, what: str) -> str:
    """The refusal of a damaged file, with what really helps: reading it read-only (every read
    names what it cannot read) or a backup copy."""
    return (
        f"{path} is damaged ({what}); the file was not changed.\n"
        "Open it read-only (e.g. flakebook export) to save what can still be read, or go back "
        "to a backup copy."
    )


_SQLITE_CORRUPT, _SQLITE_FULL, _SQLITE_NOTADB = 11, 13, 26


def is_disk_full(exc: BaseException) -> bool:
    """True for SQLite's SQLITE_FULL ("database or disk is full") and OSError ENOSPC/EDQUOT."""
    if isinstance(exc, sqlite3.Error):
        return (getattr(exc, "sqlite_errorcode", 0) or 0) & 0xFF == _SQLITE_FULL
    if isinstance(exc, OSError):
        return exc.errno in (errno.ENOSPC, getattr(errno, "EDQUOT", errno.ENOSPC))
    return False


def sql_error(path: Path, exc: sqlite3.Error, *, otherwise: str | None = None) -> FlakebookError:
    """The error for the user in place of an SQLite error on ``path``: a full disk, a broken
    reference (InputError), a damaged file (a corrupted page, a missing table or column), or
    else ``otherwise`` (default: the file cannot be used)."""
    code = (getattr(exc, "sqlite_errorcode", 0) or 0) & 0xFF
    text = str(exc)
    if code == _SQLITE_FULL:
        return ProjectError(
            f"{path} could not be saved: the disk is full (SQLite: {text}); nothing of this "
            "action was saved.\nFree some space on that disk and try again."
        )
    if isinstance(exc, sqlite3.IntegrityError):
        return InputError(
            f"{path.name}: this change refers to a record that does not exist or repeats a "
            f"unique name ({text}); nothing was changed"
        )
    if (
        code in (_SQLITE_CORRUPT, _SQLITE_NOTADB)
        or "malformed" in text
        or text.startswith(("no such table", "no such column"))
    ):
        return ProjectError(damaged_message(path, f"SQLite: {text}"))
    return ProjectError(otherwise or f"{path} cannot be used: {text}")


def _newer_message(path: Path, version: int) -> str:
    return (
        f"{path} was written by a newer flakebook (project format {version}; this is "
        f"flakebook {flakebook.__version__}, which reads formats up to "
        f"{schema.SCHEMA_VERSION}).\nThe file was not changed; open it with a newer flakebook."
    )
