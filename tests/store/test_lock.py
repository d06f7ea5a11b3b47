"""The writer's lock beside the project file (common practice, no source)."""

from __future__ import annotations

import json
import socket
import subprocess
import sys

import pytest

from flakebook.store import Project, ProjectLocked
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
