"""Files that are not (or no longer) projects are refused by name and left exactly as they were.

Common practice, no source; the SQLite file header layout (magic string, page size at offset 16,
page count at offset 28) follows the SQLite file-format documentation (sqlite.org/fileformat.html).
"""

from __future__ import annotations

import sqlite3

import pytest
from store_helpers import FIXED_CLOCK, folder_state, populate

from flakebook.errors import ProjectError
from flakebook.store import SCHEMA_VERSION, Project


def _assert_refused(path, match, *, read_only):
    before = folder_state(path.parent)
    with pytest.raises(ProjectError, match=match) as info:
        Project.open(path, read_only=read_only)
    assert str(path) in str(info.value), "the message names the file"
    assert len(str(info.value).splitlines()) <= 3
    assert folder_state(path.parent) == before, "nothing created or changed"


@pytest.mark.parametrize("read_only", [False, True])
def test_empty_file(tmp_path, read_only):
    path = tmp_path / "empty.flakebook"
    path.write_bytes(b"")
    _assert_refused(path, "empty", read_only=read_only)


@pytest.mark.parametrize("read_only", [False, True])
def test_text_file(tmp_path, read_only):
    path = tmp_path / "notes.flakebook"
    path.write_text("flake K7N-3 looks like a bilayer\n", encoding="utf-8")
    _assert_refused(path, "not an SQLite database", read_only=read_only)


@pytest.mark.parametrize("read_only", [False, True])
def test_truncated_project(tmp_path, read_only):
    p = Project.create(tmp_path / "whole", clock=lambda: FIXED_CLOCK)
    populate(p, tmp_path)
    p.close()
    data = (tmp_path / "whole.flakebook").read_bytes()
    path = tmp_path / "cut.flakebook"
    path.write_bytes(data[: len(data) // 2])
    _assert_refused(path, "cut short", read_only=read_only)
    path.write_bytes(data[:60])
    _assert_refused(path, "cut short", read_only=read_only)


@pytest.mark.parametrize("read_only", [False, True])
def test_other_sqlite_database(tmp_path, read_only):
    path = tmp_path / "other.flakebook"
    con = sqlite3.connect(path)
    con.execute("CREATE TABLE t (x)")
    con.commit()
    con.close()
    _assert_refused(path, "not a flakebook project", read_only=read_only)


@pytest.mark.parametrize("read_only", [False, True])
def test_newer_project_is_refused_untouched(tmp_path, read_only):
    path = tmp_path / "future.flakebook"
    Project.create(path).close()
    con = sqlite3.connect(path)
    con.execute(f"PRAGMA user_version = {SCHEMA_VERSION + 1}")
    con.commit()
    con.close()
    _assert_refused(path, "newer flakebook", read_only=read_only)


def test_missing_file_is_not_created(tmp_path):
    with pytest.raises(ProjectError, match="no such project"):
        Project.open(tmp_path / "nothing.flakebook")
    assert list(tmp_path.iterdir()) == []


def test_create_never_overwrites(tmp_path):
    path = tmp_path / "x.flakebook"
    path.write_text("keep me")
    with pytest.raises(ProjectError, match="already exists"):
        Project.create(path)
    assert path.read_text() == "keep me"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["x.flakebook"]


def test_read_only_open_creates_no_file(tmp_path):
    """A read-only open in a folder (made read-only too) writes nothing there.

    As root, chmod does not stop writes, so the check is that no file appears or changes.
    """
    p = Project.create(tmp_path / "ro", clock=lambda: FIXED_CLOCK)
    populate(p, tmp_path)
    p.close()
    before = folder_state(tmp_path)
    tmp_path.chmod(0o555)
    try:
        with Project.open(tmp_path / "ro.flakebook", read_only=True) as q:
            assert q.read_only
            assert len(q.catalogue()) == 1
            q.export_rows()
            q.canonical_dump()
            q.check_images()
    finally:
        tmp_path.chmod(0o755)
    assert folder_state(tmp_path) == before


def test_other_database_with_a_leftover_journal_is_not_rolled_back(tmp_path):
    """A foreign SQLite file caught mid-transaction (database and journal copied while a write
    was under way) is refused from its header alone: SQLite never sees it, so its journal is not
    rolled back and no lock is made."""
    live = tmp_path / "live"
    live.mkdir()
    db = live / "other.flakebook"
    con = sqlite3.connect(db, isolation_level=None)
    con.execute("PRAGMA journal_mode=DELETE")
    con.execute("CREATE TABLE t (x BLOB)")
    con.executemany("INSERT INTO t VALUES (?)", [(b"a" * 4000,) for _ in range(200)])
    con.execute("PRAGMA cache_size=1")
    con.execute("BEGIN")
    con.execute("UPDATE t SET x = ?", (b"b" * 4000,))  # spills pages into the file
    crashed = tmp_path / "crashed"
    crashed.mkdir()
    for name in ("other.flakebook", "other.flakebook-journal"):
        (crashed / name).write_bytes((live / name).read_bytes())
    con.execute("ROLLBACK")
    con.close()
    path = crashed / "other.flakebook"
    _assert_refused(path, "not a flakebook project", read_only=False)
    _assert_refused(path, "not a flakebook project", read_only=True)


def test_unusual_folder_names(tmp_path):
    """Spaces, '#', '?', '%' and non-ASCII letters in the path survive the read-only URI."""
    folder = tmp_path / "Mess #3 ?% Ünïcødé 样品"
    folder.mkdir()
    with Project.create(folder / "chip α", clock=lambda: FIXED_CLOCK) as p:
        p.add_sample("K7-north", "MoS2", oxide_nm=285)
    with Project.open(folder / "chip α.flakebook", read_only=True) as q:
        assert [s.name for s in q.samples()] == ["K7-north"]
