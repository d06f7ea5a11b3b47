"""Damaged project files for the store and command-line tests: a dropped table, a broken
reference, a value of the wrong type, a corrupted page (common practice, no source).

Each function changes a closed project file the way another program or a failing disk might, with
plain ``sqlite3`` (foreign keys off, as SQLite's default) or by writing bytes.
"""

from __future__ import annotations

import sqlite3
from pathlib import Path


def _execute(path: Path, sql: str, params: tuple = ()) -> None:
    con = sqlite3.connect(path)
    try:
        con.execute(sql, params)
        con.commit()
    finally:
        con.close()


def drop_table(path: Path, table: str = "holes") -> None:
    """Drop one of the schema's tables (its indexes go with it)."""
    _execute(path, f"DROP TABLE {table}")


def break_sample_reference(path: Path, label: str) -> int:
    """Point a flake at a sample that does not exist; returns the flake's id."""
    con = sqlite3.connect(path)
    try:
        (fid,) = con.execute("SELECT id FROM flakes WHERE label = ?", (label,)).fetchone()
        con.execute("UPDATE flakes SET sample_id = 999 WHERE id = ?", (fid,))
        con.commit()
    finally:
        con.close()
    return fid


def wrong_type(path: Path, label: str) -> int:
    """Store text that is not JSON in a flake's ``tags`` (a JSON list); returns its id."""
    con = sqlite3.connect(path)
    try:
        (fid,) = con.execute("SELECT id FROM flakes WHERE label = ?", (label,)).fetchone()
        con.execute("UPDATE flakes SET tags = 'raman-next' WHERE id = ?", (fid,))
        con.commit()
    finally:
        con.close()
    return fid


def corrupt_page(path: Path, table: str = "flakes") -> None:
    """Overwrite the b-tree page header of a table's root page (its cell count), as a bad sector
    or a half-written copy would: SQLite then reports 'database disk image is malformed'."""
    con = sqlite3.connect(path)
    try:
        page_size = con.execute("PRAGMA page_size").fetchone()[0]
        (root,) = con.execute(
            "SELECT rootpage FROM sqlite_master WHERE type = 'table' AND name = ?", (table,)
        ).fetchone()
    finally:
        con.close()
    data = bytearray(path.read_bytes())
    offset = (root - 1) * page_size + (100 if root == 1 else 0)
    data[offset + 3 : offset + 5] = b"\xff\xff"
    path.write_bytes(bytes(data))


DAMAGES = {
    "dropped table": lambda path: drop_table(path),
    "corrupted page": lambda path: corrupt_page(path),
}
