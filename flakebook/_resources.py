"""Access to the data files in ``resources/`` (installed as ``flakebook.resources``)."""

from __future__ import annotations

import importlib.resources
from pathlib import Path


def resource_path(name: str) -> Path:
    """Path of the resource file ``name`` (relative to ``resources/``).

    Works from an installed wheel (``flakebook.resources``) and from a source checkout.
    """
    try:
        base = importlib.resources.files("flakebook.resources")
        candidate = Path(str(base.joinpath(name)))
        if candidate.exists():
            return candidate
    except ModuleNotFoundError:
        pass
    candidate = Path(__file__).resolve().parent.parent / "resources" / name
    if candidate.exists():
        return candidate
    raise FileNotFoundError(f"flakebook resource {name!r} is missing from this installation")
