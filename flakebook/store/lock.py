"""The writer's lock: a sidecar ``NAME.flakebook.lock`` beside the project file.

SQLite cannot tell that a file is already open, so the one program that opens a project
read-write writes a small JSON file with its host, process ID, user and the time. A second
read-write open is refused (:class:`ProjectLocked`); a lock whose process no longer runs on this
host, or an empty or unreadable one untouched for :data:`LEFTOVER_AFTER_S` seconds, is taken over,
with a warning for the user. The lock is written whole before it gets its name (a hard link of a
complete temporary file), so a lock that exists can be read. Read-only opens never touch it.
"""

from __future__ import annotations

import errno
import getpass
import json
import os
import secrets
import socket
import time
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

from flakebook.errors import ProjectError


class ProjectLocked(ProjectError):
    """The project is open read-write elsewhere; it can still be opened read-only."""

    def __init__(self, message: str, holder: LockInfo | None = None) -> None:
        super().__init__(message)
        self.holder = holder


@dataclass(frozen=True)
class LockInfo:
    """Who holds a project: host, process ID, user and since when (ISO 8601, UTC)."""

    host: str
    pid: int
    user: str
    time: str

    def to_json(self) -> str:
        """The lock file's text."""
        return json.dumps(
            {"host": self.host, "pid": self.pid, "user": self.user, "time": self.time}, indent=1
        )


def lock_path(project_path: str | os.PathLike) -> Path:
    """The lock file of a project: ``NAME.flakebook.lock`` beside it."""
    p = Path(project_path)
    return p.with_name(p.name + ".lock")


def current_user() -> str:
    """The user name of this process (or ``unknown``)."""
    try:
        return getpass.getuser()
    except Exception:  # noqa: BLE001 - no user database in some containers
        return "unknown"


def this_process() -> LockInfo:
    """A lock record for this process, now."""
    now = datetime.now(UTC).replace(microsecond=0).isoformat().replace("+00:00", "Z")
    return LockInfo(socket.gethostname(), os.getpid(), current_user(), now)


def read_lock(path: Path) -> LockInfo | None:
    """The lock file's content, or None when it cannot be read as a lock."""
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
        return LockInfo(str(data["host"]), int(data["pid"]), str(data["user"]), str(data["time"]))
    except (OSError, ValueError, KeyError, TypeError):
        return None


def _process_alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    except OSError:
        return True
    # A zombie (exited, not yet reaped) holds nothing open.
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii") as fh:
            state = fh.read().rsplit(")", 1)[1].split()[0]
        if state in ("Z", "X"):
            return False
    except (OSError, IndexError):
        pass
    return True


#: An empty or unreadable lock older than this (seconds) is left over, not being written.
LEFTOVER_AFTER_S = 10.0


def _refusal(project_path: Path, holder: LockInfo) -> ProjectLocked:
    hint = "Open it read-only instead, or close it there first."
    if holder.host != socket.gethostname():
        # Another host's process cannot be checked from here: only the user can.
        hint += (
            f" If flakebook no longer runs on {holder.host}, {lock_path(project_path).name} "
            "is left over and may be removed."
        )
    return ProjectLocked(
        f"{project_path} is already open by {holder.user} on {holder.host} since {holder.time} "
        f"(process {holder.pid}).\n{hint}",
        holder,
    )


def _write_error(path: Path, exc: OSError) -> ProjectError:
    if exc.errno in (errno.ENOSPC, getattr(errno, "EDQUOT", errno.ENOSPC)):
        return ProjectError(
            f"cannot write the lock file {path}: the disk is full; nothing was changed.\n"
            "Free some space on that disk and try again."
        )
    return ProjectError(
        f"cannot write the lock file {path}: {exc.strerror}.\n"
        "Open the project read-only, or move it to a folder you can write to."
    )


def _complete_temporary(path: Path, mine: LockInfo) -> Path:
    """A temporary file beside the lock holding the whole lock text (written and synced)."""
    tmp = path.with_name(f".{path.name}.{mine.pid}.{secrets.token_hex(4)}.tmp")
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(mine.to_json())
            fh.flush()
            os.fsync(fh.fileno())
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return tmp


def _place(tmp: Path, path: Path) -> bool:
    """Put the complete lock in place unless a lock exists (False then): a hard link, which
    fails if the name is taken, so the lock appears whole or not at all."""
    try:
        os.link(tmp, path)
        return True
    except FileExistsError:
        return False
    except OSError as exc:
        if exc.errno not in (errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.EXDEV):
            raise
    # A file system without hard links: claim the name empty, then fill it (an empty lock is
    # then told apart from a left-over one by its age).
    try:
        fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
    except FileExistsError:
        return False
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(tmp.read_bytes())
            fh.flush()
            os.fsync(fh.fileno())
    except BaseException:
        path.unlink(missing_ok=True)
        raise
    return True


def acquire(project_path: str | os.PathLike) -> tuple[LockInfo, list[str]]:
    """Take the lock of ``project_path`` for this process.

    The lock file appears complete or not at all (a complete temporary file linked to its
    name). Returns the lock written and warnings for the user (a lock left over taken over).
    Raises :class:`ProjectLocked` when a live process (or another host) holds it, or when a
    lock is being written this moment, and :class:`ProjectError` when the lock file cannot be
    written (nothing is left behind then).
    """
    project_path = Path(project_path)
    path = lock_path(project_path)
    mine = this_process()
    warnings: list[str] = []
    try:
        tmp = _complete_temporary(path, mine)
    except OSError as exc:
        raise _write_error(path, exc) from None
    try:
        for _attempt in range(5):
            try:
                if _place(tmp, path):
                    return mine, warnings
                seen = os.stat(path)
            except FileNotFoundError:
                continue  # released in between: try again
            except OSError as exc:
                raise _write_error(path, exc) from None
            holder = read_lock(path)
            if holder is None:
                age = time.time() - seen.st_mtime
                if age < LEFTOVER_AFTER_S:
                    raise ProjectLocked(
                        f"{project_path} is being opened by another program this moment (its "
                        f"lock file {path.name} is being written).\nTry again in a few seconds, "
                        "or open it read-only.",
                        None,
                    )
                note = (
                    f"{project_path.name} had an empty or unreadable lock file left over "
                    f"(untouched for {age:.0f} s); it was taken over."
                )
            elif holder.host != mine.host or _process_alive(holder.pid):
                raise _refusal(project_path, holder)
            else:
                note = (
                    f"{project_path.name} was left open by {holder.user} (process "
                    f"{holder.pid}, no longer running) since {holder.time}; its lock was "
                    "taken over."
                )
            # Remove the left-over lock only if it is still the file judged above (not a lock
            # another program has put in place since), then claim the name again.
            try:
                now = os.stat(path)
                if (now.st_ino, now.st_dev, now.st_mtime_ns) == (
                    seen.st_ino,
                    seen.st_dev,
                    seen.st_mtime_ns,
                ):
                    path.unlink()
            except FileNotFoundError:
                pass
            except OSError as exc:
                raise _write_error(path, exc) from None
            if note not in warnings:
                warnings.append(note)
        holder = read_lock(path)
        if holder is not None:
            raise _refusal(project_path, holder)
        raise ProjectLocked(
            f"{project_path} is being opened by another program this moment.\n"
            "Try again in a few seconds, or open it read-only.",
            None,
        )
    finally:
        tmp.unlink(missing_ok=True)


def release(project_path: str | os.PathLike, mine: LockInfo) -> None:
    """Remove the lock if it is still this process's."""
    path = lock_path(project_path)
    holder = read_lock(path)
    if holder is not None and holder.pid == mine.pid and holder.host == mine.host:
        try:
            path.unlink()
        except OSError:
            pass
