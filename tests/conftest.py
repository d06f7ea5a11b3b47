"""Test configuration: Qt runs offscreen; no test needs a display or a GPU."""

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
