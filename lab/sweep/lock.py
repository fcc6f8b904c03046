"""One process at a time per sweep folder: an OS file lock (POSIX ``fcntl.lockf``) on ``<folder>/.lock``.

The lock file holds its holder's pid, host and start time, so a second process is told who
holds the folder. The OS drops the lock when its holder dies (also on SIGKILL), so a lock left
by a dead process is stale by construction: the next process takes it and says whose it was.
A POSIX lock belongs to the process, not to forked workers (which never hold it), and it is
dropped when the process closes any descriptor of the file: the holder reads and writes the file
through its one locked descriptor only. Locks are advisory; NFS passes POSIX locks on, other
network filesystems may not.
"""

from __future__ import annotations

import fcntl
import json
import os
import socket
import time
from pathlib import Path
from typing import Any

from shortcut_gym.envs.errors import ShortcutGymError

LOCK_NAME = ".lock"


class SweepLockedError(ShortcutGymError):
    """Another live process holds the sweep folder; the message names its pid and host."""


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def describe_holder(holder: dict[str, Any]) -> str:
    """'pid 123 on host h since 2026-01-01 10:00:00 UTC' from a lock file's record."""
    since = holder.get("since")
    when = time.strftime("%Y-%m-%d %H:%M:%S UTC", time.gmtime(since)) if isinstance(since, (int, float)) else "?"
    return f"pid {holder.get('pid', '?')} on host {holder.get('host', '?')} since {when}"


class FolderLock:
    """Exclusive lock of one sweep folder; use as a context manager or call acquire/release."""

    def __init__(self, folder: Path) -> None:
        self.path = Path(folder) / LOCK_NAME
        self._fd: int | None = None
        #: The previous holder's record when it was a dead process (a stale lock), else None.
        self.stale: dict[str, Any] | None = None

    @staticmethod
    def _parse(raw: bytes) -> dict[str, Any]:
        try:
            data = json.loads(raw.decode() or "{}")
        except ValueError:
            return {}
        return data if isinstance(data, dict) else {}

    def read_holder(self) -> dict[str, Any]:
        """The record in the lock file ({} when absent or unreadable); never call it while holding."""
        try:
            return self._parse(self.path.read_bytes())
        except OSError:
            return {}

    def acquire(self) -> FolderLock:
        """Take the lock or raise :class:`SweepLockedError` naming the live holder."""
        self.path.parent.mkdir(parents=True, exist_ok=True)
        fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.lockf(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            holder = self._parse(os.pread(fd, 4096, 0))
            os.close(fd)
            raise SweepLockedError(f"{self.path.parent}: the sweep folder is in use by {describe_holder(holder)}; "
                                   "wait for it to finish or stop it first") from None
        previous = self._parse(os.pread(fd, 4096, 0))
        here = socket.gethostname()
        if previous.get("pid") is not None:
            dead = previous.get("host") == here and not _pid_alive(int(previous["pid"]))
            self.stale = {**previous, "dead": dead}
        record = {"pid": os.getpid(), "host": here, "since": time.time()}
        os.ftruncate(fd, 0)
        os.pwrite(fd, json.dumps(record).encode(), 0)
        os.fsync(fd)
        self._fd = fd
        return self

    def release(self) -> None:
        """Clear the holder record and drop the lock (the file stays: removing it would race)."""
        if self._fd is None:
            return
        try:
            os.ftruncate(self._fd, 0)
        finally:
            fcntl.lockf(self._fd, fcntl.LOCK_UN)
            os.close(self._fd)
            self._fd = None

    def __enter__(self) -> FolderLock:
        return self.acquire()

    def __exit__(self, *exc: object) -> None:
        self.release()
