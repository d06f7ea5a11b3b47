"""Files written for the user (an export, a hand-off bundle): complete or not at all.

The text goes to a temporary file in the same folder, is synced, and only then takes the
file's name (``os.replace``), so a full disk or an interruption never leaves a partial or empty
file, nor spoils an earlier file of that name.
"""

from __future__ import annotations

import errno
import os
import secrets
from pathlib import Path

from flakebook.errors import InputError

_DISK_FULL = {errno.ENOSPC, getattr(errno, "EDQUOT", errno.ENOSPC)}


def write_file(path: str | os.PathLike, data: str | bytes, *, option: str = "--out") -> Path:
    """Write ``data`` (text is UTF-8) to ``path`` whole, or leave ``path`` as it was.

    ``option`` names where the path came from in the message of the :class:`InputError` raised
    when it cannot be written (a full disk, a missing folder, no permission).
    """
    path = Path(path)
    raw = data.encode("utf-8") if isinstance(data, str) else bytes(data)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.{secrets.token_hex(4)}.tmp")
    try:
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
    except OSError as exc:
        raise _error(option, path, exc) from None
    try:
        try:
            view = memoryview(raw)
            while view:
                written = os.write(fd, view)
                view = view[written:]
            os.fsync(fd)
        finally:
            os.close(fd)
        os.replace(tmp, path)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise _error(option, path, exc) from None
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return path


def _error(option: str, path: Path, exc: OSError) -> InputError:
    if exc.errno in _DISK_FULL:
        return InputError(
            f"{option} {path} could not be written: the disk is full; nothing was written.\n"
            "Free some space on that disk or choose a file on another one."
        )
    return InputError(
        f"{option} {path} cannot be written: {exc.strerror or exc}; nothing was written.\n"
        "Accepted: a file in an existing folder you can write to."
    )
