"""A writer killed in the middle of a long save: the file reopens with exactly the last committed
state (SQLite's rollback journal; common practice, no source)."""

from __future__ import annotations

import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest
from store_helpers import FIXED_CLOCK, folder_state

from flakebook.errors import ProjectError
from flakebook.store import Project

CHILD = r"""
import json, sys
import numpy as np
from flakebook.store import Project
path, dump = sys.argv[1], sys.argv[2]
p = Project.create(path, clock=lambda: %r)
s = p.add_sample("K7-north", "MoSe2", "SiO2:285,Si")
for i in range(5):
    p.add_flake(s, f"K7N-{i:03d}")
with open(dump, "w") as fh:
    json.dump(p.canonical_dump(), fh)
print("committed", flush=True)
x = np.linspace(0.0, 1.0, 1_000_000)
with p.transaction():
    p.add_flake(s, "K7N-uncommitted")
    for i in range(10_000):
        p.add_spectrum(None, x, x * i, sample_id=s.id)
        if i == 2:
            print("writing", flush=True)
"""


def _run_and_kill(tmp_path: Path) -> tuple[Path, dict]:
    path = tmp_path / "killed.flakebook"
    dump = tmp_path / "committed.json"
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[2]))
    child = subprocess.Popen(
        [sys.executable, "-c", CHILD % FIXED_CLOCK, str(path), str(dump)],
        stdout=subprocess.PIPE,
        text=True,
        env=env,
    )
    try:
        assert child.stdout.readline().strip() == "committed"
        assert child.stdout.readline().strip() == "writing"
        time.sleep(0.3)
    finally:
        child.send_signal(signal.SIGKILL)
        child.wait(timeout=30)
    assert child.returncode == -signal.SIGKILL
    return path, json.loads(dump.read_text())


def test_killed_writer_leaves_the_last_committed_state(tmp_path):
    path, committed = _run_and_kill(tmp_path)
    journal = path.with_name(path.name + "-journal")
    assert journal.exists(), "the kill came in the middle of a transaction"
    # Read-only cannot roll the unfinished save back; it says so and changes nothing.
    before = folder_state(tmp_path)
    with pytest.raises(ProjectError, match="interrupted while saving"):
        Project.open(path, read_only=True)
    assert folder_state(tmp_path) == before
    with Project.open(path) as p:
        assert any("taken over" in w for w in p.warnings), "the dead writer's lock is recovered"
        assert p.canonical_dump() == committed
        assert p.flake_by_label("K7N-uncommitted") is None
        assert p.count("spectrum") == 0
    assert not journal.exists()
    con = sqlite3.connect(path)
    assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    con.close()
