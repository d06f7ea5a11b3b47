"""The command line starts without its heavy dependencies: building the parser (what
``flakebook --version`` and ``--help`` do) imports no numpy, scipy, OpenCV, pandas or
colour-science; the commands import them when they run (common practice, no source)."""

from __future__ import annotations

import subprocess
import sys

HEAVY = ("numpy", "scipy", "cv2", "pandas", "colour", "PySide6")


def _modules_after(code: str) -> set[str]:
    out = subprocess.run(
        [sys.executable, "-c", code + "\nimport sys\nprint(' '.join(sorted(sys.modules)))"],
        capture_output=True,
        text=True,
        check=True,
    ).stdout.split()
    return {m.split(".")[0] for m in out}


def test_build_parser_imports_no_numpy():
    loaded = _modules_after("import flakebook.cli\nflakebook.cli.build_parser()")
    assert not loaded & set(HEAVY), sorted(loaded & set(HEAVY))


def test_version_and_help_import_no_numpy():
    code = (
        "import flakebook.cli, contextlib, io\n"
        "for argv in (['--version'], ['--help'], ['survey', '--help'], ['calibrate', '--help']):\n"
        "    with contextlib.redirect_stdout(io.StringIO()):\n"
        "        try:\n"
        "            flakebook.cli.main(argv)\n"
        "        except SystemExit:\n"
        "            pass\n"
    )
    loaded = _modules_after(code)
    assert not loaded & set(HEAVY), sorted(loaded & set(HEAVY))


def test_parser_default_max_layers_is_the_stores():
    from flakebook.cli import project as cli_project
    from flakebook.store import DEFAULT_MAX_LAYERS

    assert cli_project.DEFAULT_MAX_LAYERS == DEFAULT_MAX_LAYERS
