"""Small helpers shared by the store's modules (not part of its public interface)."""

from __future__ import annotations

import hashlib
from collections.abc import Callable, Sized
from pathlib import Path

from flakebook.errors import InputError
from flakebook.store.records import Record

#: A record argument: a stored record or its integer id.
RecordRef = Record | int
#: A progress callback: fraction done (0..1) and what is being worked on.
Progress = Callable[[float, str], None]


def id_of(value: RecordRef | None) -> int | None:
    """The id of a stored record or an id given as such; None stays None."""
    if value is None:
        return None
    if isinstance(value, Record):
        if value.id is None:
            raise InputError(f"this {value.KIND} is not stored in the project yet")
        return int(value.id)
    if isinstance(value, bool) or not isinstance(value, int):
        raise InputError(f"{value!r} is not a record or a record id")
    return int(value)


def qmarks(items: Sized) -> str:
    """``?, ?, ?``: one SQL parameter mark per item."""
    return ", ".join("?" * len(items))


def sha256_file(path: Path) -> tuple[str, int]:
    """A file's SHA-256 (hex) and size in bytes, read in chunks."""
    h = hashlib.sha256()
    size = 0
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
            size += len(chunk)
    return h.hexdigest(), size
