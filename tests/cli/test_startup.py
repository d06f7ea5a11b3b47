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


def test_command_table_matches_the_modules():
    """cli.COMMANDS names, for every command, the module that registers it (so that a command
    builds only its own parser); checked against a parser built from every module."""
    import argparse
    import importlib

    from flakebook import cli

    for name in cli._COMMAND_MODULES:
        parser = argparse.ArgumentParser()
        sub = parser.add_subparsers()
        importlib.import_module(f"flakebook.cli.{name}").register(sub)
        for command in sub.choices:
            assert cli.COMMANDS.get(command) == name, (command, name)
    sub = next(a for a in cli.build_parser()._actions if isinstance(a, argparse._SubParsersAction))
    assert set(sub.choices) == set(cli.COMMANDS)


def test_version_imports_no_command_module():
    """``flakebook --version`` builds the top-level parser only; a command imports its own
    command module (and those it borrows from), not every command's (common practice, no
    source)."""
    code = (
        "import flakebook.cli, contextlib, io\n"
        "with contextlib.redirect_stdout(io.StringIO()):\n"
        "    flakebook.cli.main(['--version'])\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", code + "import sys\nprint(' '.join(sorted(sys.modules)))"],
        capture_output=True,
        text=True,
        check=True,
    ).stdout.split()
    commands = {f"flakebook.cli.{m}" for m in __import__("flakebook.cli").cli._COMMAND_MODULES}
    assert not commands & set(out), sorted(commands & set(out))
    code = (
        "import flakebook.cli, contextlib, io\n"
        "with contextlib.redirect_stdout(io.StringIO()):\n"
        "    try:\n"
        "        flakebook.cli.main(['survey', '--help'])\n"
        "    except SystemExit:\n"
        "        pass\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", code + "import sys\nprint(' '.join(sorted(sys.modules)))"],
        capture_output=True,
        text=True,
        check=True,
    ).stdout.split()
    # (the survey's options share the optics commands' helpers)
    assert commands & set(out) <= {"flakebook.cli.imaging", "flakebook.cli.optics"}
    assert "flakebook.cli.imaging" in out
