"""A full disk: SQLite's SQLITE_FULL ("database or disk is full", made here with the
connection's ``PRAGMA max_page_count``) and OSError ENOSPC (simulated on the write) are named as
a full disk, nothing is saved, and no partial file is left (common practice, no source)."""

from __future__ import annotations

import errno
import os
import sqlite3

import numpy as np
import pytest
from store_helpers import FIXED_CLOCK, folder_state, sha256

from flakebook.errors import InputError, ProjectError
from flakebook.store import Project, schema
from flakebook.store.outfile import write_file


def _full(p: Project) -> None:
    """Let the file grow no further: the next page SQLite needs reports SQLITE_FULL."""
    n = p._db.execute("PRAGMA page_count").fetchone()[0]
    p._db.execute(f"PRAGMA max_page_count = {n}")


def _no_space(*args, **kwargs):
    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))


@pytest.mark.parametrize("nested", [False, True])
def test_a_full_disk_is_named_and_nothing_of_the_action_is_saved(tmp_path, nested):
    path = tmp_path / "k7.flakebook"
    with Project.create(path, clock=lambda: FIXED_CLOCK) as p:
        s = p.add_sample("K7-north", "MoSe2", "SiO2:285,Si")
        before = sha256(path)
        _full(p)
        x = np.linspace(100.0, 600.0, 200_000)
        with pytest.raises(ProjectError) as exc:
            with p.transaction():
                p.add_flake(s, "K7N-001")
                if nested:
                    with p.transaction():
                        p.add_spectrum(None, x, x, sample_id=s.id)
                else:
                    p.add_spectrum(None, x, x, sample_id=s.id)
        text = str(exc.value)
        assert "the disk is full" in text and "savepoint" not in text
        assert len(text.splitlines()) <= 3
        assert sha256(path) == before
        assert p.flake_by_label("K7N-001") is None
        p._db.execute("PRAGMA max_page_count = 1073741823")
        p.add_flake(s, "K7N-001")  # the project stays usable once there is space
    with Project.open(path, read_only=True) as p:
        assert p.count("flake") == 1 and p.count("spectrum") == 0


def test_create_on_a_full_disk_leaves_no_file_and_no_lock(tmp_path, monkeypatch):
    def full(con):
        exc = sqlite3.OperationalError("database or disk is full")
        exc.sqlite_errorcode = 13  # SQLITE_FULL
        raise exc

    with monkeypatch.context() as m:
        m.setattr(schema, "create_v1", full)
        with pytest.raises(ProjectError, match="the disk is full"):
            Project.create(tmp_path / "new.flakebook")
    assert list(tmp_path.iterdir()) == []
    Project.create(tmp_path / "new.flakebook").close()


def test_write_file_is_whole_or_leaves_the_old_file(tmp_path, monkeypatch):
    out = tmp_path / "catalogue.csv"
    write_file(out, "flake_id\nK7N-001\n")
    before = folder_state(tmp_path)
    with monkeypatch.context() as m:
        m.setattr(os, "write", _no_space)
        with pytest.raises(InputError) as exc:
            write_file(out, "flake_id\nK7N-002\n")
    assert "the disk is full" in str(exc.value) and "nothing was written" in str(exc.value)
    assert folder_state(tmp_path) == before, "the earlier file is kept, no temporary left"
    with pytest.raises(InputError, match="cannot be written"):
        write_file(tmp_path / "no-such-folder" / "x.csv", "x")
