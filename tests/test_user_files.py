"""The tests leave the user's settings and recent-files list alone (DESIGN.md)."""

import os
import subprocess
import sys
from pathlib import Path


def test_settings_of_child_processes_go_to_a_throwaway_folder(tmp_path):
    """A command-line child started by a test (as the snapshot tests do) keeps its Qt settings
    under the tests' temporary folder, not under the user's home (common practice, no source)."""
    code = (
        "from PySide6.QtCore import QCoreApplication, QSettings\n"
        "app = QCoreApplication([])\n"
        "from flakebook.gui.mainwindow import settings\n"
        "print(settings().fileName())\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    ).stdout.strip()
    assert out.startswith(os.environ["XDG_CONFIG_HOME"]), out
    assert not out.startswith(str(Path.home() / ".config")), out
