"""The writer's lock beside the project file (common practice, no source)."""

from __future__ import annotations

import errno
import json
import os
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest

from flakebook.errors import ProjectError
from flakebook.store import Project, ProjectLocked
from flakebook.store import lock as lock_module
from flakebook.store.lock import lock_path


def test_second_read_write_open_is_refused(project):
    lock = lock_path(project.path)
    info = json.loads(lock.read_text())
    assert set(info) == {"host", "pid", "user", "time"}
    with pytest.raises(ProjectLocked) as exc:
        Project.open(project.path)
    text = str(exc.value)
    assert f"already open by {info['user']} on {info['host']} since {info['time']}" in text
    assert "read-only" in text
    with Project.open(project.path, read_only=True) as q:  # still allowed
        assert q.read_only
    project.close()
    assert not lock.exists(), "closing releases the lock"
    with Project.open(project.path) as again:
        assert not again.read_only


def test_lock_of_a_process_in_another_program_is_respected(tmp_path):
    """A child process holds the project; this one is refused until the child ends."""
    path = tmp_path / "held.flakebook"
    Project.create(path).close()
    code = (
        "import sys, time\n"
        "from flakebook.store import Project\n"
        f"p = Project.open({str(path)!r})\n"
        "print('open', flush=True)\n"
        "sys.stdin.readline()\n"
        "p.close()\n"
    )
    child = subprocess.Popen(
        [sys.executable, "-c", code], stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True
    )
    try:
        assert child.stdout.readline().strip() == "open"
        with pytest.raises(ProjectLocked, match="already open by"):
            Project.open(path)
    finally:
        child.communicate("\n", timeout=30)
    with Project.open(path) as p:
        assert not p.warnings


def test_stale_lock_is_taken_over_with_a_warning(tmp_path):
    path = tmp_path / "left.flakebook"
    Project.create(path).close()
    dead = subprocess.run(
        [sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True
    )
    pid = int(dead.stdout)
    lock_path(path).write_text(
        json.dumps(
            {
                "host": socket.gethostname(),
                "pid": pid,
                "user": "lee",
                "time": "2026-01-05T08:00:00Z",
            }
        )
    )
    with Project.open(path) as p:
        assert any("taken over" in w and "lee" in w for w in p.warnings)
        assert json.loads(lock_path(path).read_text())["pid"] != pid


def test_lock_from_another_host_is_not_taken(tmp_path):
    path = tmp_path / "shared.flakebook"
    Project.create(path).close()
    lock_path(path).write_text(
        json.dumps({"host": "bench-pc-7", "pid": 1, "user": "lee", "time": "2026-01-05T08:00:00Z"})
    )
    with pytest.raises(ProjectLocked, match="already open by lee on bench-pc-7 since 2026-01-05"):
        Project.open(path)


def _empty_lock(path, age_s: float):
    lock = lock_path(path)
    lock.write_bytes(b"")
    then = time.time() - age_s
    os.utime(lock, (then, then))
    return lock


def test_a_lock_being_written_this_moment_is_never_called_deletable(tmp_path):
    """An empty lock file seconds old may be another program's, being written: wait, not delete."""
    path = tmp_path / "busy.flakebook"
    Project.create(path).close()
    lock = _empty_lock(path, 0.0)
    with pytest.raises(ProjectLocked) as exc:
        Project.open(path)
    text = str(exc.value)
    assert "delete" not in text.lower() and "try again" in text.lower() and "read-only" in text
    assert lock.exists() and lock.read_bytes() == b""


@pytest.mark.parametrize("content", [b"", b'{"host": "be'])
def test_an_empty_or_unreadable_lock_left_over_is_taken_over(tmp_path, content):
    path = tmp_path / "left.flakebook"
    Project.create(path).close()
    lock = _empty_lock(path, 60.0)
    lock.write_bytes(content)
    os.utime(lock, (time.time() - 60, time.time() - 60))
    with Project.open(path) as p:
        assert any("left over" in w and "taken over" in w for w in p.warnings)
        assert json.loads(lock.read_text())["pid"] == os.getpid()
    assert not lock.exists()


def test_a_lock_that_cannot_be_written_leaves_nothing_behind(tmp_path, monkeypatch):
    """A full disk while the lock is written: the disk is named, no empty lock blocks the next
    try (ENOSPC simulated by the write's fsync)."""
    path = tmp_path / "full.flakebook"

    def full(fd):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    with monkeypatch.context() as m:
        m.setattr(lock_module.os, "fsync", full)
        with pytest.raises(ProjectError) as exc:
            Project.create(path)
    assert "disk is full" in str(exc.value)
    assert list(tmp_path.iterdir()) == []
    with Project.create(path) as p:
        assert not p.warnings


def test_the_lock_is_complete_the_moment_it_appears(tmp_path, monkeypatch):
    """The lock is put in place whole (a complete temporary file linked to its name, which fails
    if a lock exists): whoever sees it can read who holds it."""
    path = tmp_path / "whole.flakebook"
    seen = []
    real_link = os.link

    def watching_link(src, dst, *a, **k):
        seen.append(Path(src).read_text())
        return real_link(src, dst, *a, **k)

    monkeypatch.setattr(lock_module.os, "link", watching_link)
    with Project.create(path):
        assert seen and json.loads(seen[0])["pid"] == os.getpid()
        assert json.loads(lock_path(path).read_text()) == json.loads(seen[0])
    assert [p.name for p in tmp_path.iterdir()] == ["whole.flakebook"]
