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


def _imported_modules(path: Path, root: Path) -> set[str]:
    """Absolute names of every module a source file imports, at the top or inside functions
    (``root`` is the folder holding the top package, for relative imports)."""
    import ast

    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    package = list(path.relative_to(root).parts[:-1])
    names: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            parts = package[: len(package) - node.level + 1] if node.level else []
            base = ".".join([*parts, node.module] if node.module else parts)
            names.add(base)
            names.update(f"{base}.{a.name}" for a in node.names)
    return names


def _cli_imports(gui_root: Path) -> list[str]:
    files = sorted(gui_root.rglob("*.py"))
    assert files, f"no sources under {gui_root}"
    return [
        f"{f.relative_to(gui_root.parent)}: {name}"
        for f in files
        for name in sorted(_imported_modules(f, gui_root.parent.parent))
        if name == "flakebook.cli" or name.startswith("flakebook.cli.")
    ]


def test_gui_never_imports_cli():
    """The window sits beside the command line, not above it: nothing under flakebook/gui
    imports flakebook.cli; the parsers both use live in flakebook.specs (DESIGN.md layers).

    Common practice, no source: read from the source, so imports inside functions count too.
    """
    bad = _cli_imports(Path(flakebook.__file__).parent / "gui")
    assert bad == [], "gui imports the command line: " + "; ".join(bad)


def test_cli_import_check_catches_hidden_imports(tmp_path):
    """The check above catches an absolute import inside a function and a relative one."""
    gui = tmp_path / "flakebook" / "gui"
    (gui / "tools").mkdir(parents=True)
    (gui / "a.py").write_text("def f():\n    from flakebook.cli._common import emit\n")
    (gui / "tools" / "b.py").write_text("from ...cli import main\n")
    (gui / "c.py").write_text("from flakebook.specs import parse_layer_range\n")
    bad = _cli_imports(gui)
    files = {b.split(":")[0] for b in bad}
    assert files == {"gui/a.py", "gui/tools/b.py"}, bad
    assert "gui/tools/b.py: flakebook.cli" in bad


def test_no_module_is_over_800_lines():
    """DESIGN.md's habit: a module that grows past about 800 lines is split by concern before
    new features are added to it (common practice, no source)."""
    root = Path(flakebook.__file__).parent
    long = {
        str(p.relative_to(root)): n
        for p in root.rglob("*.py")
        if (n := len(p.read_text(encoding="utf-8").splitlines())) > 800
    }
    assert not long, long
