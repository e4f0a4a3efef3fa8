"""One run folder, one writer: an operating-system lock held for the life of a run or a resume.

Why a lock and not a PID in the manifest: two `nightbench resume` started together both read the
manifest before either writes it, so both see "not running" and both write journal lines. An
exclusive `flock` (POSIX advisory lock, released by the kernel when the process ends, even on
kill -9) on `<run>/writer.lock` is taken before anything in the folder is read or written; the
second process is refused at once and told who holds the folder (pid, host, start).

The lock file also holds that description as JSON, for the refusal message. It is not part of
the run's record (the manifest does not list it and `verify` ignores it); the holder removes it
as it lets go (a process killed leaves it behind, unlocked), and a process that locked a file
just removed locks the new one instead.

Example::

    with WriterLock.acquire(run_path, "resume"):
        ...  # the only writer of this folder
"""

from __future__ import annotations

import datetime as _dt
import fcntl
import json
import os
import socket
from pathlib import Path
from typing import Any

LOCK_NAME = "writer.lock"


class RunFolderBusy(ValueError):
    """Another process writes this run folder; the message names it. A ValueError: exit code 2."""


class WriterLock:
    """An exclusive lock on one run folder (see the module docstring)."""

    def __init__(self, path: Path, fd: int, holder: dict[str, Any]) -> None:
        self.path = path
        self._fd: int | None = fd
        self.holder = holder

    @classmethod
    def acquire(cls, run_path: Path | str, purpose: str) -> WriterLock:
        """Take the lock or raise `RunFolderBusy` naming the holder; never waits."""
        path = Path(run_path) / LOCK_NAME
        while True:
            fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                holder = _read_holder(fd)
                os.close(fd)
                raise RunFolderBusy(f"{Path(run_path)}: {describe_holder(holder)} is writing "
                                    "this run folder; only one run or resume may write a folder "
                                    "at a time. Wait for it to end (or stop it), then try "
                                    "again.") from None
            except BaseException:
                os.close(fd)
                raise
            if _same_file(fd, path):
                break
            os.close(fd)  # the holder removed the file as it let go: lock the new one
        holder = {"pid": os.getpid(), "host": socket.gethostname(), "purpose": purpose,
                  "started_utc": _dt.datetime.now(_dt.timezone.utc).strftime(
                      "%Y-%m-%dT%H:%M:%S.%fZ")}
        os.ftruncate(fd, 0)
        os.pwrite(fd, (json.dumps(holder, sort_keys=True) + "\n").encode("utf-8"), 0)
        return cls(path, fd, holder)

    def release(self) -> None:
        """Let go of the folder (the kernel also does it when the process ends). Idempotent."""
        if self._fd is None:
            return
        try:
            self.path.unlink(missing_ok=True)  # still held: nobody can lock this inode now
            fcntl.flock(self._fd, fcntl.LOCK_UN)
        finally:
            os.close(self._fd)
            self._fd = None

    @property
    def held(self) -> bool:
        return self._fd is not None

    def __enter__(self) -> WriterLock:
        return self

    def __exit__(self, *exc: object) -> None:
        self.release()


def _same_file(fd: int, path: Path) -> bool:
    try:
        return os.fstat(fd).st_ino == os.stat(path).st_ino
    except FileNotFoundError:
        return False


def _read_holder(fd: int) -> dict[str, Any]:
    try:
        raw = os.pread(fd, 4096, 0)
        data = json.loads(raw.decode("utf-8")) if raw.strip() else {}
    except (OSError, ValueError):
        data = {}
    return data if isinstance(data, dict) else {}


def describe_holder(holder: dict[str, Any]) -> str:
    """`nightbench resume (pid 123 on host lab-pc, since 2026-...Z)`, or a generic phrase."""
    if not holder.get("pid"):
        return "another nightbench process (it has only just started)"
    return (f"nightbench {holder.get('purpose', 'run')} (pid {holder.get('pid')} on host "
            f"{holder.get('host')}, since {holder.get('started_utc')})")


__all__ = ["LOCK_NAME", "RunFolderBusy", "WriterLock", "describe_holder"]
