"""Every way out of a run ends in a final state on disk, even with the disk full.

Why: a manifest left at `running` says "someone is still writing this folder" and hides why the
run stopped. The run folder keeps a small reserve file (`space.reserve`, 1 MiB) from the moment it
is created; when the manifest cannot be written for lack of space, the reserve is given back and
the write tried again, so the final state and its cause always reach the disk.

`final_state_guard` wraps the part of a run that may raise: whatever escapes (an error writing
the event log, an internal error, Ctrl-C after safing) closes the manifest as `faulted` (or
`aborted`) with the error as its cause before it propagates.

Example::

    with final_state_guard(run, manifest, clock):
        outcome = execute(...)
    close_manifest(run, manifest, outcome.state, outcome.cause, clock)
"""

from __future__ import annotations

from collections.abc import Callable

import time

import errno
import os
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

RESERVE_NAME = "space.reserve"
RESERVE_BYTES = 1 << 20


def make_reserve(run_path: Path | str, size: int = RESERVE_BYTES) -> None:
    """Hold `size` bytes of the disk for the closing manifest (no-op if already there)."""
    path = Path(run_path) / RESERVE_NAME
    if path.exists():
        return
    try:
        with open(path, "wb") as fh:
            fh.write(b"\0" * size)
            fh.flush()
            os.fsync(fh.fileno())
    except OSError:
        path.unlink(missing_ok=True)  # a disk already full: the run will say so itself


def release_reserve(run_path: Path | str) -> None:
    (Path(run_path) / RESERVE_NAME).unlink(missing_ok=True)


def _no_space(exc: BaseException) -> bool:
    return isinstance(exc, OSError) and exc.errno in (errno.ENOSPC, errno.EDQUOT)


def close_manifest(run: Any, manifest: Any, state: str, cause: str | None, clock: Any,
                   wall: Callable[[], float] = time.time) -> None:
    """Close the event log and write the final manifest; uses the reserve if the disk is full."""
    log = getattr(run, "_events", None)
    if log is not None and getattr(log, "broken", None) is not None:
        cause = (f"{cause}; {log.lost} event(s) could not be written to {log.path.name} "
                 f"({log.broken.strerror or log.broken})")
    try:
        run.close()
    except OSError:
        pass  # the log's last lines may be lost; the manifest below says why the run ended
    release_reserve(run.path)
    try:
        manifest.close(run.path, state=state, cause=cause, clock=clock, wall=wall)
    except OSError as exc:
        if not _no_space(exc):
            raise
        # the reserve is already given back: one more try with the cause saying so
        manifest.close(run.path, state=state, clock=clock, wall=wall,
                       cause=f"{cause}; the disk is full (the manifest lists what was written)")


@contextmanager
def final_state_guard(run: Any, manifest: Any, clock: Any) -> Iterator[None]:
    """Close the manifest as faulted/aborted if anything escapes the block (then re-raise)."""
    try:
        yield
    except BaseException as exc:
        aborted = isinstance(exc, (KeyboardInterrupt, SystemExit))
        state = "aborted" if aborted else "faulted"
        what = "disk full" if _no_space(exc) else type(exc).__name__
        cause = f"stopped by an error the run could not handle ({what}: {exc})"
        try:
            close_manifest(run, manifest, state, cause, clock)
        except Exception:
            pass  # the original error is the one to report
        raise


__all__ = ["RESERVE_NAME", "close_manifest", "final_state_guard", "make_reserve",
           "release_reserve"]
