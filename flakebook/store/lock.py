"""The writer's lock: a sidecar ``NAME.flakebook.lock`` beside the project file.

SQLite cannot tell that a file is already open, so the one program that opens a project
read-write writes a small JSON file with its host, process ID, user and the time. A second
read-write open is refused (:class:`ProjectLocked`); a lock whose process no longer runs on this
host is taken over, with a warning for the user. Read-only opens never touch the lock.
"""

from __future__ import annotations

import getpass
import json
import os
import socket
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


def _refusal(project_path: Path, holder: LockInfo) -> ProjectLocked:
    hint = "Open it read-only instead, or close it there first."
    if holder.host != socket.gethostname():
        hint += f" If it no longer runs there, delete {lock_path(project_path).name}."
    return ProjectLocked(
        f"{project_path} is already open by {holder.user} on {holder.host} since {holder.time} "
        f"(process {holder.pid}).\n{hint}",
        holder,
    )


def acquire(project_path: str | os.PathLike) -> tuple[LockInfo, list[str]]:
    """Take the lock of ``project_path`` for this process.

    Returns the lock written and warnings for the user (a stale lock taken over). Raises
    :class:`ProjectLocked` when a live process (or another host) holds it, and
    :class:`ProjectError` when the lock file cannot be written.
    """
    project_path = Path(project_path)
    path = lock_path(project_path)
    mine = this_process()
    warnings: list[str] = []
    try:
        fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
    except FileExistsError:
        holder = read_lock(path)
        if holder is None:
            raise ProjectLocked(
                f"{project_path} has a lock file {path.name} that cannot be read.\n"
                "Open the project read-only, or delete the lock file if no one has it open.",
                None,
            ) from None
        if holder.host != mine.host or _process_alive(holder.pid):
            raise _refusal(project_path, holder) from None
        # The process that left the lock no longer runs on this host: take it over.
        tmp = path.with_name(f"{path.name}.{mine.pid}.tmp")
        try:
            tmp.write_text(mine.to_json(), encoding="utf-8")
            os.replace(tmp, path)
        except OSError as exc:
            raise ProjectError(f"cannot write the lock file {path}: {exc.strerror}") from None
        now = read_lock(path)
        if now != mine:  # another program took the stale lock over at the same moment
            raise _refusal(project_path, now or holder) from None
        warnings.append(
            f"{project_path.name} was left open by {holder.user} (process {holder.pid}, no "
            f"longer running) since {holder.time}; its lock was taken over."
        )
        return mine, warnings
    except OSError as exc:
        raise ProjectError(
            f"cannot write the lock file {path}: {exc.strerror}.\n"
            "Open the project read-only, or move it to a folder you can write to."
        ) from None
    with os.fdopen(fd, "w", encoding="utf-8") as fh:
        fh.write(mine.to_json())
        fh.flush()
        os.fsync(fh.fileno())
    return mine, warnings


def release(project_path: str | os.PathLike, mine: LockInfo) -> None:
    """Remove the lock if it is still this process's."""
    path = lock_path(project_path)
    holder = read_lock(path)
    if holder is not None and holder.pid == mine.pid and holder.host == mine.host:
        try:
            path.unlink()
        except OSError:
            pass
