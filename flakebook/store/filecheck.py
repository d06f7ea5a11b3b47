"""Recognising a flakebook project file: before SQLite is given it, and once it is open.

:func:`check_header` reads the SQLite header's own fields (application id, format version, page
count) so that a file that is not a project, is cut short or comes from a newer flakebook is
refused without SQLite touching it (not even rolling back a leftover journal);
:func:`inspect` checks the same on an open connection.
"""

from __future__ import annotations

import sqlite3
import struct
from pathlib import Path

import flakebook
from flakebook.errors import ProjectError
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


def _newer_message(path: Path, version: int) -> str:
    return (
        f"{path} was written by a newer flakebook (project format {version}; this is "
        f"flakebook {flakebook.__version__}, which reads formats up to "
        f"{schema.SCHEMA_VERSION}).\nThe file was not changed; open it with a newer flakebook."
    )
