"""Layering rules of DESIGN.md that a test can see."""

import pkgutil
import subprocess
import sys
from pathlib import Path

import flakebook

CORE_AND_STORE = ("optics", "imaging", "spectra", "thermal", "store", "report")


def _modules(package: str) -> list[str]:
    root = Path(flakebook.__file__).parent / package
    names = [f"flakebook.{package}"]
    for info in pkgutil.walk_packages([str(root)], prefix=f"flakebook.{package}."):
        names.append(info.name)
    return names


def test_core_and_store_import_no_qt():
    """Core and store modules never import Qt (DESIGN.md: only gui/ and render/ do).

    Common practice, no source: checked in a fresh interpreter so that nothing else has
    imported Qt first.
    """
    modules = ["flakebook.evidence", "flakebook.errors", "flakebook.cli"]
    for package in CORE_AND_STORE:
        modules.extend(_modules(package))
    modules = [m for m in modules if m != "flakebook.evidence" or _exists("evidence")]
    code = (
        "import importlib, sys\n"
        f"for m in {modules!r}:\n"
        "    importlib.import_module(m)\n"
        "bad = sorted(k for k in sys.modules if k.startswith(('PySide6', 'pyqtgraph', 'shiboken6')))\n"
        "print(' '.join(bad))\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    ).stdout.strip()
    assert out == "", f"Qt imported by core/store: {out}"


def _exists(name: str) -> bool:
    return (Path(flakebook.__file__).parent / f"{name}.py").exists()


def test_version_command():
    """``flakebook --version`` names the interface version (INTERFACE.md)."""
    out = subprocess.run(
        [sys.executable, "-m", "flakebook", "--version"], capture_output=True, text=True
    )
    assert out.returncode == 0
    assert f"interface {flakebook.INTERFACE_VERSION}" in out.stdout
