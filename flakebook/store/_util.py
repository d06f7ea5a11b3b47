"""Small helpers shared by the store's modules (not part of its public interface)."""

from __future__ import annotations

import hashlib
import os
import stat
from collections.abc import Callable, Sized
from pathlib import Path
from typing import BinaryIO

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


class NotRegularFile(OSError):
    """A path that is a FIFO, a device, a socket or a folder: never read as a file's content."""


def special_kind(mode: int) -> str | None:
    """What a non-regular file is (``"a FIFO"``, ``"a device"``, ...), None for a regular file."""
    if stat.S_ISREG(mode):
        return None
    if stat.S_ISFIFO(mode):
        return "a FIFO"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    if stat.S_ISDIR(mode):
        return "a folder"
    return "a special file"


def open_regular(path: Path) -> BinaryIO:
    """Open a regular file for reading; raises :class:`NotRegularFile` for anything else,
    without blocking (a FIFO is opened non-blocking and checked before any read)."""
    fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_BINARY", 0))
    try:
        kind = special_kind(os.fstat(fd).st_mode)
        if kind is not None:
            raise NotRegularFile(f"{path} is not a regular file ({kind})")
        return os.fdopen(fd, "rb")
    except BaseException:
        os.close(fd)
        raise


def read_regular(path: Path) -> bytes:
    """A regular file's bytes (:class:`NotRegularFile` for a FIFO, a device, ...)."""
    with open_regular(path) as fh:
        return fh.read()


def sha256_file(path: Path) -> tuple[str, int]:
    """A regular file's SHA-256 (hex) and size in bytes, read in chunks
    (:class:`NotRegularFile` for a FIFO, a device, ...)."""
    h = hashlib.sha256()
    size = 0
    with open_regular(path) as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
            size += len(chunk)
    return h.hexdigest(), size
