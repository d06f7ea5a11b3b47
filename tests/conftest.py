"""Test configuration: Qt runs offscreen; no test needs a display or a GPU.

The tests never touch the user's own files (DESIGN.md): settings, the recent-files list and
caches of every process the tests start (the window in-process, and command-line children, which
inherit the environment) go to a throw-away folder.
"""

import atexit
import os
import shutil
import tempfile

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

_USER_DIRS = tempfile.mkdtemp(prefix="flakebook-tests-home-")
atexit.register(shutil.rmtree, _USER_DIRS, ignore_errors=True)
for _var in ("XDG_CONFIG_HOME", "XDG_CACHE_HOME", "XDG_DATA_HOME", "XDG_STATE_HOME"):
    os.environ[_var] = os.path.join(_USER_DIRS, _var.lower())
    os.makedirs(os.environ[_var], exist_ok=True)


def pytest_sessionfinish(session, exitstatus):
    """Let Qt's worker threads end and its deferred deletions run while Qt is still there: left
    to the interpreter's exit, they can crash it after every test has passed."""
    import sys

    if "PySide6.QtCore" not in sys.modules:
        return
    import gc

    from PySide6.QtCore import QCoreApplication, QThreadPool

    QThreadPool.globalInstance().waitForDone(10000)
    app = QCoreApplication.instance()
    if app is not None:
        app.processEvents()
    gc.collect()
