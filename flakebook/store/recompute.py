"""The registry of recompute functions for derived records.

The physics lives outside the store, so a derived record's ``method`` names a function that the
package computing it registers::

    register_recomputer("contrast-likelihood", fn)

``fn(project, record)`` receives the open project and the stale record and returns either a new
record of the same kind (``dataclasses.replace(record, likelihood=..., inputs=...)``) or a dict of
the fields that changed. ``Project.recompute_stale`` stores the result, records the inputs'
current revisions and clears the stale mark.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

from flakebook.errors import InputError

Recomputer = Callable[[Any, Any], Any]

_REGISTRY: dict[str, Recomputer] = {}


def register_recomputer(method: str, fn: Recomputer) -> None:
    """Register ``fn`` as the recompute function of records whose ``method`` is ``method``."""
    if not str(method).strip():
        raise InputError("a recompute function needs a method name")
    if not callable(fn):
        raise InputError(f"the recompute function for {method!r} is not callable")
    _REGISTRY[str(method)] = fn


def unregister_recomputer(method: str) -> None:
    """Forget the recompute function of ``method`` (no error if there is none)."""
    _REGISTRY.pop(str(method), None)


def registered_recomputers(extra: Mapping[str, Recomputer] | None = None) -> dict[str, Recomputer]:
    """The registered functions, with ``extra`` (method -> function) taking precedence."""
    out = dict(_REGISTRY)
    if extra:
        out.update(extra)
    return out


#: Modules that register recompute functions when imported (the packages that compute derived
#: records add themselves here, e.g. ``"flakebook.optics.recompute"``).
RECOMPUTER_MODULES: tuple[str, ...] = (
    "flakebook.pipeline",
    "flakebook.pipeline_thermal",
    "flakebook.pipeline_maps",
)


def load_recomputers() -> list[str]:
    """Import every module of :data:`RECOMPUTER_MODULES`; returns those that could not be
    imported (their records stay stale and are reported)."""
    import importlib

    missing = []
    for name in RECOMPUTER_MODULES:
        try:
            importlib.import_module(name)
        except ImportError:
            missing.append(name)
    return missing
