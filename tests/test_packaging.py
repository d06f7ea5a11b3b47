"""The wheel carries every package and the resources (the CI wheel check runs the demo too)."""

from __future__ import annotations

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_every_package_is_listed_for_the_wheel():
    """Common practice, no source: a package left out of pyproject's list would be missing
    from an installed (non-editable) flakebook."""
    listed = set(
        tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"]
    )
    found = {
        ".".join(p.parent.relative_to(ROOT).parts)
        for p in (ROOT / "flakebook").rglob("__init__.py")
    }
    assert found | {"flakebook.resources"} == listed
    assert (ROOT / "resources" / "objectives.json").is_file()


def test_no_machine_specific_paths():
    """Common practice, no source: the repository names no folder of one machine (a home, a
    virtual environment's absolute path), so its instructions work on any checkout."""
    import re

    bad = re.compile(r"(?<![\w.])/(?:work|root|home/\w+|Users/\w+)/")
    hits = []
    for path in ROOT.rglob("*"):
        if (
            path.suffix not in {".py", ".md", ".toml", ".json", ".txt", ".cfg"}
            or not path.is_file()
        ):
            continue
        if any(part in {".git", ".venv", "venv", "sample_project", "build"} for part in path.parts):
            continue
        for n, line in enumerate(path.read_text(errors="replace").splitlines(), 1):
            if bad.search(line):
                hits.append(f"{path.relative_to(ROOT)}:{n}: {line.strip()}")
    assert not hits, hits


def test_every_qt_module_used_is_in_the_essentials_wheel():
    """The program depends on PySide6-Essentials (QtCore, QtGui, QtWidgets, QtSvg and the
    other essential modules, per Qt for Python's wheel split): every Qt module that flakebook's
    code imports must import from the installed Qt (common practice, no source)."""
    import importlib
    import re

    used = set()
    for path in (ROOT / "flakebook").rglob("*.py"):
        used.update(re.findall(r"PySide6\.(Qt\w+)", path.read_text()))
        for names in re.findall(r"from PySide6 import ([\w, ]+)", path.read_text()):
            used.update(n.strip() for n in names.split(","))
    assert used, "no Qt module found: the scan is broken"
    essentials = {
        "QtCore", "QtGui", "QtWidgets", "QtSvg", "QtSvgWidgets", "QtPrintSupport", "QtOpenGL",
        "QtOpenGLWidgets", "QtNetwork", "QtConcurrent", "QtDBus", "QtSql", "QtTest", "QtXml",
    }  # fmt: skip
    assert used <= essentials, sorted(used - essentials)
    for name in sorted(used):
        importlib.import_module(f"PySide6.{name}")
    deps = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]["dependencies"]
    assert any(d.startswith("PySide6-Essentials") for d in deps)
    assert not any(re.match(r"PySide6\s*([<>=!~]|$)", d) for d in deps)
