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
