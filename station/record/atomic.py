"""Crash-safe file writing, checksums and free-disk checks for the run folder.

Why: a run folder must survive a power cut at any instant. A file is either written whole under a
temporary name, flushed, fsynced and renamed over its final name (POSIX rename is atomic on one
file system), or it is appended to line by line. A reader never sees half a file under a final name.

Example::

    write_json_atomic(run / "results" / "netd.json", {"netd_mK": np.float64(41.2)})
    check_free_space(run, needed_bytes=2_000_000_000, margin=0.1)
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import errno
import hashlib
import json
import math
import os
import shutil
import tempfile
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

TEMP_SUFFIX = ".tmp"
"""Suffix of temporary files; a leftover one means a write was interrupted (verify reports it)."""

DEFAULT_MARGIN_BYTES = 256 * 1024 * 1024
"""Free space kept in reserve beyond what a plan or a frame needs (common practice: leave room
for the log, the manifest and the operating system)."""


class DiskFullError(OSError):
    """Not enough free disk for what is about to be written. The sequencer faults safely on it."""

    def __init__(self, path: Path | str, needed: int, free: int, what: str = "") -> None:
        self.path = Path(path)
        self.needed = int(needed)
        self.free = int(free)
        self.what = what
        doing = f" for {what}" if what else ""
        super().__init__(
            errno.ENOSPC,
            f"not enough free disk at {self.path}{doing}: need {_human(self.needed)} "
            f"(including margin), {_human(self.free)} free. Free some space or point the run "
            f"folder at a larger disk, then start (or resume) the run again.",
        )

    def __str__(self) -> str:
        return str(self.args[1])


def _human(n: int) -> str:
    value = float(n)
    for unit in ("B", "KiB", "MiB", "GiB", "TiB"):
        if abs(value) < 1024 or unit == "TiB":
            return f"{value:.0f} {unit}" if unit == "B" else f"{value:.1f} {unit}"
        value /= 1024
    return f"{n} B"


def to_jsonable(obj: object) -> object:
    """Convert numpy scalars/arrays, paths, datetimes, sets and dataclasses to plain JSON values.

    Non-finite floats become None: RFC 8259 (JSON) has no NaN or Infinity, and other tools must be
    able to read every file of a run folder.
    """
    if obj is None or isinstance(obj, (bool, str)):
        return obj
    if isinstance(obj, (int, np.integer)) and not isinstance(obj, np.bool_):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, (float, np.floating)):
        value = float(obj)
        return value if math.isfinite(value) else None
    if isinstance(obj, np.ndarray):
        return [to_jsonable(v) for v in obj.tolist()]
    if isinstance(obj, Mapping):
        return {str(k): to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [to_jsonable(v) for v in obj]
    if isinstance(obj, (set, frozenset)):
        return sorted(to_jsonable(v) for v in obj)
    if isinstance(obj, Path):
        return obj.as_posix()
    if isinstance(obj, _dt.datetime):
        return obj.isoformat()
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return to_jsonable(dataclasses.asdict(obj))
    raise TypeError(f"cannot store a {type(obj).__name__} in JSON: {obj!r}")


def dumps_json(obj: object, *, indent: int | None = 2) -> str:
    """JSON text with sorted keys (stable checksums, readable diffs) and plain values only."""
    separators = None if indent is not None else (",", ":")
    return json.dumps(to_jsonable(obj), sort_keys=True, indent=indent, allow_nan=False,
                      separators=separators, ensure_ascii=False)


def fsync_dir(path: Path | str) -> None:
    """Make a rename or a new file in `path` durable (the directory entry itself is fsynced)."""
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def fsync_file(path: Path | str) -> None:
    """Flush a file that was written by another library (e.g. a TIFF writer) to the disk."""
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def replace_durably(src: Path | str, dst: Path | str) -> None:
    """Rename `src` over `dst` and fsync the directory so the rename survives a power cut."""
    os.replace(src, dst)
    fsync_dir(Path(dst).parent)


def current_umask() -> int:
    """The process's umask, read without changing it where Linux tells it (/proc), else by the
    usual set-and-restore (which is not thread safe, hence the /proc path first)."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def follow_umask(fd: int) -> None:
    """Give a file made by `tempfile.mkstemp` (always 0600) the mode every other new file of a
    run folder gets: 0666 less the umask, so colleagues read manifests as they read frames."""
    os.fchmod(fd, 0o666 & ~current_umask())


def write_bytes_atomic(path: Path | str, data: bytes, *, durable: bool = True) -> Path:
    """Write `data` to `path` so that `path` holds either the old content or all of the new.

    `durable=False` skips the two fsyncs (file, then folder): the rename is still atomic for
    every reader, only a power cut may lose the file (used for runs on simulated time)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=TEMP_SUFFIX, dir=path.parent)
    try:
        follow_umask(fd)
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            if durable:
                os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException as exc:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        if isinstance(exc, OSError) and exc.errno == errno.ENOSPC:
            raise DiskFullError(path.parent, len(data), free_bytes(path.parent),
                                f"writing {path.name}") from exc
        raise
    if durable:
        fsync_dir(path.parent)
    return path


def write_text_atomic(path: Path | str, text: str, encoding: str = "utf-8", *,
                      durable: bool = True) -> Path:
    """Atomic text write (see `write_bytes_atomic`)."""
    return write_bytes_atomic(path, text.encode(encoding), durable=durable)


def write_json_atomic(path: Path | str, obj: object, *, durable: bool = True) -> Path:
    """Atomic JSON write: sorted keys, indent 2, numpy values converted, trailing newline."""
    return write_text_atomic(path, dumps_json(obj) + "\n", durable=durable)


def sha256_bytes(data: bytes) -> str:
    """Hex SHA-256 (FIPS 180-4) of bytes."""
    return hashlib.sha256(data).hexdigest()


def sha256_file(path: Path | str, chunk: int = 1 << 20) -> str:
    """Hex SHA-256 of a file, read in 1 MiB chunks so a multi-gigabyte stack needs no memory."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        while True:
            block = fh.read(chunk)
            if not block:
                break
            digest.update(block)
    return digest.hexdigest()


def free_bytes(path: Path | str) -> int:
    """Free bytes available on the file system holding `path` (its nearest existing parent)."""
    probe = Path(path)
    while not probe.exists() and probe != probe.parent:
        probe = probe.parent
    return int(shutil.disk_usage(probe).free)


def check_free_space(path: Path | str, needed_bytes: int, margin: float | int = DEFAULT_MARGIN_BYTES,
                     what: str = "") -> int:
    """Raise `DiskFullError` unless `needed_bytes` plus a margin is free at `path`.

    `margin` below 1 is a fraction of `needed_bytes`; otherwise it is a number of bytes.
    Returns the free bytes measured. The free-space probe is looked up at call time, so tests
    can monkeypatch `station.record.atomic.free_bytes`.
    """
    if needed_bytes < 0:
        raise ValueError(f"needed_bytes must be >= 0, got {needed_bytes}")
    extra = needed_bytes * margin if 0 <= margin < 1 else margin
    total = int(math.ceil(needed_bytes + extra))
    free = free_bytes(path)
    if free < total:
        raise DiskFullError(path, total, free, what)
    return free
