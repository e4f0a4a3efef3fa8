"""Frames to disk as they arrive: a uint16 TIFF stack and/or a float32 average, with JSON metadata.

Why streaming: an overnight capture of a thousand 640x512 frames is 650 MB; holding it in memory
to average it is neither needed nor safe. Each frame is appended to the stack file as one TIFF page
and added into ONE float64 accumulator (integers up to 2^53 add exactly in float64, IEEE 754, so the
average is exact before its final rounding to float32).

Crash safety: everything is written under names ending `.partial` and renamed at `finish()`, the
metadata JSON last, so a complete `<name>.json` means a complete capture. Pages are written one by
one with their own directory entries (tifffile `contiguous=False`), so even a stack torn by kill -9
stays readable page by page. Leftovers of an interrupted capture are moved to
`frames/abandoned/<step id>-<n>/` with a `reason.json` and are never mixed with new frames.

File names. A capture outside any loop is named by its recipe name (`flat`); inside loops the
plan names an instance with the loop values, `flat[difference=10]`, `spot[az=-11,el=-2.125]`.
Its files are named (see `capture_stem`)::

    <group>_<variable><value>_<variable><value>...
    flat_difference+10        spot_az-11_el-2.125        spot_az0_el+5      mtf_target-edge

Numbers carry their sign (`+`, `-`; none for zero) right after the variable name, so a name never
has a doubled or trailing dash; a text value follows its variable after one `-`. Other characters
than letters, digits, `.`, `_`, `+` and `-` become `-`, runs of them one `-`. The metadata
JSON keeps the instance name exactly as the plan wrote it.

Files of a capture named `flat` (axis order of every image: rows, cols)::

    frames/flat.stack.tif   uint16, one page per frame       (keep = stack | both)
    frames/flat.avg.tif     float32, the mean of the frames  (keep = average | both)
    frames/flat.json        step id, counters, times, per-frame readings, checksums

Example::

    writer = CaptureWriter(run / "frames", "sweep[1].capture", "flat_5K", keep="both",
                           expected_count=100, clock=clock)
    for frame in grabber.grab(100):
        writer.add(frame, readings={"bb_difference_K": bb.difference()})
    record = writer.finish()
"""

from __future__ import annotations

import datetime as _dt
import errno
import json
import os
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal, Protocol, Union

import numpy as np
import tifffile

from drivers.clock import Clock
from drivers.interfaces import Frame
from station.record import atomic
from station.record.atomic import DiskFullError, dumps_json, fsync_dir, fsync_file, sha256_file
from station.record.events import EventLog, utc_iso

Keep = Literal["stack", "average", "both"]
KEEP_MODES: tuple[str, ...] = ("stack", "average", "both")
PARTIAL = ".partial"
STACK_SUFFIX = ".stack.tif"
AVERAGE_SUFFIX = ".avg.tif"
META_SUFFIX = ".json"
FRAMES_LOG_SUFFIX = ".frames.jsonl"
ABANDONED = "abandoned"
CAPTURE_FORMAT = "nightbench-capture"
DEFAULT_MIN_FREE = 64 * 1024 * 1024
"""Free bytes kept in reserve while a capture writes (common practice: never fill a disk)."""


class FrameStoreError(Exception):
    """A capture cannot be written or read; the message names the capture and what to do."""


_SAFE = re.compile(r"[^A-Za-z0-9._+-]+")
_INSTANCE = re.compile(r"^(?P<group>[^\[\]]+)\[(?P<inner>[^\[\]]*)\]$")
_INDEX = re.compile(r"\[(\d+)\]")
_NUMBER = re.compile(r"^[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?$")


def _clean(text: str) -> str:
    cleaned = re.sub(r"-{2,}", "-", _SAFE.sub("-", text.strip()))
    return cleaned.strip(".-")


def safe_name(text: str) -> str:
    """A file-name-safe form of a step id (`s3.sweep[2].s1.capture` -> `s3.sweep2.s1.capture`)."""
    cleaned = _clean(_INDEX.sub(r"\1", text))
    if not cleaned:
        raise FrameStoreError(f"{text!r} gives an empty file name; use letters, digits, '.', '_' or '-'")
    return cleaned


def _value_text(value: str) -> str:
    value = value.strip()
    if _NUMBER.match(value):
        number = float(value)
        if number == 0:
            return "0"
        digits = value.lstrip("+-")
        return ("-" if number < 0 else "+") + digits
    return "-" + value


def capture_stem(name: str) -> str:
    """The file stem of a capture instance (scheme in the module docstring).

    >>> capture_stem("flat[difference=10]"), capture_stem("spot[az=-11,el=-2.125]")
    ('flat_difference+10', 'spot_az-11_el-2.125')
    >>> capture_stem("spot[az=0,el=5.0]"), capture_stem("mtf[target=edge]"), capture_stem("grid")
    ('spot_az0_el+5.0', 'mtf_target-edge', 'grid')
    """
    match = _INSTANCE.match(name.strip())
    if match is None:
        return safe_name(name)
    parts = [match.group("group")]
    for item in match.group("inner").split(","):
        key, sep, value = item.partition("=")
        parts.append(f"{key.strip()}{_value_text(value)}" if sep else item)
    cleaned = "_".join(_clean(p) for p in parts if _clean(p))
    if not cleaned:
        raise FrameStoreError(f"{name!r} gives an empty file name; use letters, digits, '.', '_' or '-'")
    return cleaned


def _legacy_stem(name: str) -> str:
    """The stem older versions used (`flat-difference-10-`), to read their run folders."""
    return re.sub(r"[^A-Za-z0-9._-]+", "-", name.strip()).strip(".")


@dataclass
class CaptureRecord:
    """What a finished capture wrote. Paths are absolute; `to_dict` gives them relative to the run."""

    step_id: str
    name: str
    keep: str
    count: int
    shape: tuple[int, int]
    dtype: str
    first_counter: int
    last_counter: int
    counter_gaps: int
    repeated_counters: int
    start_t: float
    end_t: float
    metadata_path: Path
    stack_path: Path | None = None
    average_path: Path | None = None
    checksums: dict[str, str] = field(default_factory=dict)
    sizes: dict[str, int] = field(default_factory=dict)

    def to_dict(self, relative_to: Path | None = None) -> dict[str, Any]:
        def rel(p: Path | None) -> str | None:
            if p is None:
                return None
            return (p.relative_to(relative_to) if relative_to else p).as_posix()

        return {"step_id": self.step_id, "name": self.name, "keep": self.keep, "count": self.count,
                "shape": list(self.shape), "dtype": self.dtype,
                "first_counter": self.first_counter, "last_counter": self.last_counter,
                "counter_gaps": self.counter_gaps, "repeated_counters": self.repeated_counters,
                "start_t": self.start_t, "end_t": self.end_t,
                "metadata": rel(self.metadata_path), "stack": rel(self.stack_path),
                "average": rel(self.average_path), "checksums": dict(self.checksums),
                "sizes": dict(self.sizes)}


def capture_files(frames_dir: Path, stem: str) -> dict[str, Path]:
    """Final paths of a capture's files, by role (stack, average, metadata)."""
    return {"stack": frames_dir / f"{stem}{STACK_SUFFIX}",
            "average": frames_dir / f"{stem}{AVERAGE_SUFFIX}",
            "metadata": frames_dir / f"{stem}{META_SUFFIX}"}


def _leftovers(frames_dir: Path, stem: str) -> list[Path]:
    names = [f"{stem}{s}{p}" for s in (STACK_SUFFIX, AVERAGE_SUFFIX, META_SUFFIX, FRAMES_LOG_SUFFIX)
             for p in (PARTIAL, "")]
    return [frames_dir / n for n in names if (frames_dir / n).exists()]


def partial_files(frames_dir: Path) -> list[Path]:
    """Every `.partial` file directly in `frames_dir` (captures that were never finished)."""
    if not frames_dir.is_dir():
        return []
    return sorted(p for p in frames_dir.iterdir() if p.is_file() and p.name.endswith(PARTIAL))


def stem_of(path: Path) -> str:
    """Capture stem of one of its files (`flat.stack.tif.partial` -> `flat`)."""
    name = path.name.removesuffix(PARTIAL)
    for suffix in (STACK_SUFFIX, AVERAGE_SUFFIX, FRAMES_LOG_SUFFIX, META_SUFFIX):
        if name.endswith(suffix):
            return name[: -len(suffix)]
    return name


def _count_pages(path: Path) -> int | None:
    try:
        with tifffile.TiffFile(path) as tf:
            return len(tf.pages)
    except Exception:  # a torn file may not even have a header
        return None


def abandon_files(frames_dir: Path, step_id: str, files: list[Path], reason: str, *,
                  clock: Clock | None = None, events: EventLog | None = None,
                  frames_added: int | None = None) -> Path:
    """Move `files` to `frames/abandoned/<step id>-<n>/` beside a `reason.json`; returns the folder."""
    base = frames_dir / ABANDONED
    base.mkdir(parents=True, exist_ok=True)
    n = 1
    while True:
        target = base / f"{safe_name(step_id)}-{n}"
        try:
            target.mkdir()
            break
        except FileExistsError:
            n += 1
    listing: dict[str, Any] = {}
    for src in files:
        if not src.exists():
            continue
        dst = target / src.name
        os.replace(src, dst)
        entry: dict[str, Any] = {"bytes": dst.stat().st_size, "sha256": sha256_file(dst)}
        if ".tif" in dst.name:
            entry["readable_pages"] = _count_pages(dst)
        listing[dst.name] = entry
    fsync_dir(frames_dir)
    now = clock.now() if clock else _dt.datetime.now(_dt.timezone.utc).timestamp()
    atomic.write_json_atomic(target / "reason.json", {
        "step_id": step_id, "reason": reason, "t": now, "utc": utc_iso(now),
        "frames_added": frames_added, "files": listing,
        "note": "set aside; never mixed with the frames of the capture that replaced it"})
    if events is not None:
        events.emit("capture.abandoned", step=step_id, reason=reason,
                    folder=target.relative_to(frames_dir.parent).as_posix(),
                    files=sorted(listing), frames_added=frames_added)
    return target


class CaptureWriter:
    """Streams the frames of one capture step to disk; see the module docstring for the files."""

    def __init__(self, frames_dir: Path | str, step_id: str, name: str, keep: Keep = "both", *,
                 expected_count: int | None = None, clock: Clock | None = None,
                 events: EventLog | None = None, min_free_bytes: int = DEFAULT_MIN_FREE,
                 extra: Mapping[str, object] | None = None, durable: bool = True) -> None:
        if keep not in KEEP_MODES:
            raise FrameStoreError(f"capture {name!r}: keep must be one of {KEEP_MODES}, not {keep!r}")
        if expected_count is not None and expected_count < 1:
            raise FrameStoreError(f"capture {name!r}: expected_count must be >= 1")
        self.frames_dir = Path(frames_dir)
        self.frames_dir.mkdir(parents=True, exist_ok=True)
        self.step_id = step_id
        self.name = name
        self.stem = capture_stem(name)
        self.keep = keep
        self.expected_count = expected_count
        self.clock = clock
        self.events = events
        self.min_free_bytes = min_free_bytes
        self.extra = dict(extra or {})
        self.durable = durable
        self.files = capture_files(self.frames_dir, self.stem)
        self._partial = {role: p.with_name(p.name + PARTIAL) for role, p in self.files.items()}
        self._frames_log = self.frames_dir / f"{self.stem}{FRAMES_LOG_SUFFIX}{PARTIAL}"
        self._clear_leftovers()
        self.count = 0
        self.shape: tuple[int, int] | None = None
        self.input_dtype: str | None = None
        self._acc: np.ndarray | None = None
        self._tiff: tifffile.TiffWriter | None = None
        self._log_fh = None
        self._counters: list[int] = []
        self._timestamps: list[float] = []
        self._readings: list[dict[str, Any] | None] = []
        self._start_t = clock.now() if clock else None
        self._closed = False

    # -- leftovers of an earlier session -------------------------------------------------------
    def _clear_leftovers(self) -> None:
        found = _leftovers(self.frames_dir, self.stem)
        if not found:
            return
        meta = self.files["metadata"]
        if meta.exists():
            try:
                other = json.loads(meta.read_text(encoding="utf-8")).get("step_id")
            except ValueError:
                other = None
            if other is not None and other != self.step_id:
                raise FrameStoreError(
                    f"capture name {self.name!r} of step {self.step_id!r} is already used by step "
                    f"{other!r} in {self.frames_dir}; give each capture its own name in the recipe")
            reason = ("a capture of this step was written but the step was not journaled as done "
                      "(interrupted before it was recorded); it is being taken again")
        else:
            reason = "unfinished capture left by an interrupted session; it is being taken again"
        abandon_files(self.frames_dir, self.step_id, found, reason, clock=self.clock,
                      events=self.events)

    # -- streaming -----------------------------------------------------------------------------
    def add(self, frame: Frame, readings: Mapping[str, object] | None = None) -> int:
        """Append one frame (and the instrument readings at its time); returns frames so far."""
        if self._closed:
            raise FrameStoreError(f"capture {self.name!r} is already finished or abandoned")
        data = np.asarray(frame.data)
        if data.ndim != 2:
            raise FrameStoreError(f"capture {self.name!r}: frame {frame.counter} has shape "
                                  f"{data.shape}; frames must be 2-D (rows, cols)")
        if np.issubdtype(data.dtype, np.floating) and not np.isfinite(data).all():
            bad = int(data.size - np.count_nonzero(np.isfinite(data)))
            raise FrameStoreError(f"capture {self.name!r}: frame {frame.counter} holds {bad} NaN "
                                  "or infinite pixel(s); a camera delivers finite counts, so the "
                                  "grabber or its settings are at fault")
        if self.shape is None:
            self._first_frame(data)
        elif data.shape != self.shape:
            raise FrameStoreError(f"capture {self.name!r}: frame {frame.counter} is {data.shape} "
                                  f"(rows, cols), earlier frames were {self.shape}: a short or "
                                  f"resized frame; grab it again")
        self._check_disk(data)
        try:
            if self._tiff is not None:
                self._tiff.write(self._as_uint16(data, frame.counter), contiguous=False,
                                 photometric="minisblack", metadata=None)
            if self._acc is not None:
                np.add(self._acc, data, out=self._acc, casting="unsafe")
            line = {"i": self.count, "counter": int(frame.counter),
                    "timestamp": float(frame.timestamp), "readings": dict(readings or {})}
            self._log_fh.write((dumps_json(line, indent=None) + "\n").encode("utf-8"))
            self._log_fh.flush()
        except OSError as exc:
            if exc.errno == errno.ENOSPC:
                raise DiskFullError(self.frames_dir, data.nbytes, atomic.free_bytes(self.frames_dir),
                                    f"capture {self.name!r}") from exc
            raise
        self._counters.append(int(frame.counter))
        self._timestamps.append(float(frame.timestamp))
        self._readings.append(atomic.to_jsonable(dict(readings)) if readings else None)
        self.count += 1
        return self.count

    def _first_frame(self, data: np.ndarray) -> None:
        if not (np.issubdtype(data.dtype, np.integer) or np.issubdtype(data.dtype, np.floating)):
            raise FrameStoreError(f"capture {self.name!r}: frames of dtype {data.dtype} cannot be "
                                  f"stored; the grabber must deliver integer counts")
        self.shape = (int(data.shape[0]), int(data.shape[1]))
        self.input_dtype = str(data.dtype)
        if self.keep in ("stack", "both"):
            if not np.issubdtype(data.dtype, np.integer):
                raise FrameStoreError(f"capture {self.name!r}: a stack is kept as uint16 raw "
                                      f"counts but frames are {data.dtype}; use keep: average")
            frame_bytes = self.shape[0] * self.shape[1] * 2
            big = self.expected_count is None or self.expected_count * frame_bytes > 3_500_000_000
            self._tiff = tifffile.TiffWriter(self._partial["stack"], bigtiff=big)
        if self.keep in ("average", "both"):
            self._acc = np.zeros(self.shape, dtype=np.float64)
        self._log_fh = open(self._frames_log, "ab")
        header = {"step_id": self.step_id, "name": self.name, "keep": self.keep,
                  "shape": list(self.shape), "input_dtype": self.input_dtype}
        self._log_fh.write((dumps_json(header, indent=None) + "\n").encode("utf-8"))

    def _as_uint16(self, data: np.ndarray, counter: int) -> np.ndarray:
        if data.dtype == np.uint16:
            return data
        lo, hi = int(data.min()), int(data.max())
        if lo < 0 or hi > 65535:
            raise FrameStoreError(f"capture {self.name!r}: frame {counter} has values {lo}..{hi}, "
                                  f"outside uint16 (0..65535); check the grabber's bit depth")
        return data.astype(np.uint16)

    def _check_disk(self, data: np.ndarray) -> None:
        need = (data.size * 2 if self._tiff is not None else 0) + self.min_free_bytes
        if self._acc is not None and self.count == 0:
            need += data.size * 4  # the float32 average written at finish
        free = atomic.free_bytes(self.frames_dir)
        if free < need:
            raise DiskFullError(self.frames_dir, need, free,
                                f"frame {self.count + 1} of capture {self.name!r}")

    # -- ending --------------------------------------------------------------------------------
    def finish(self) -> CaptureRecord:
        """Close, checksum and rename the files (metadata last); returns what was written."""
        if self._closed:
            raise FrameStoreError(f"capture {self.name!r} is already finished or abandoned")
        if self.count == 0 or self.shape is None:
            raise FrameStoreError(f"capture {self.name!r} of step {self.step_id!r}: no frames "
                                  f"were added; nothing to finish (abandon it instead)")
        end_t = self.clock.now() if self.clock else self._timestamps[-1]
        start_t = self._start_t if self._start_t is not None else self._timestamps[0]
        self._close_streams()
        record_files: dict[str, dict[str, Any]] = {}
        if self._tiff is not None:
            if self.durable:
                fsync_file(self._partial["stack"])
            record_files["stack"] = {"file": self.files["stack"].name, "dtype": "uint16",
                                     "pages": self.count}
        if self._acc is not None:
            average = np.empty(self.shape, dtype=np.float32)  # no float64 temporary
            np.divide(self._acc, self.count, out=average, casting="unsafe")
            tifffile.imwrite(self._partial["average"], average, photometric="minisblack",
                             metadata=None)
            if self.durable:
                fsync_file(self._partial["average"])
            record_files["average"] = {
                "file": self.files["average"].name, "dtype": "float32",
                "min": float(average.min()), "max": float(average.max()),
                "mean": float(self._acc.sum() / (self.count * average.size))}
            self._acc = None
        checksums, sizes = {}, {}
        for role, info in record_files.items():
            path = self._partial[role]
            info["sha256"] = checksums[self.files[role].name] = sha256_file(path)
            info["bytes"] = sizes[self.files[role].name] = path.stat().st_size
        counters = np.asarray(self._counters, dtype=np.int64)
        steps = np.diff(counters)
        gaps, repeats = int(np.count_nonzero(steps > 1)), int(np.count_nonzero(steps <= 0))
        meta = {"format": CAPTURE_FORMAT, "version": 1, "step_id": self.step_id,
                "name": self.name, "keep": self.keep, "count": self.count,
                "expected_count": self.expected_count, "shape": list(self.shape),
                "axis_order": "rows, cols", "input_dtype": self.input_dtype,
                "files": record_files, "start_t": start_t, "end_t": end_t,
                "start_utc": utc_iso(start_t), "end_utc": utc_iso(end_t),
                "first_counter": self._counters[0], "last_counter": self._counters[-1],
                "counter_gaps": gaps, "repeated_counters": repeats,
                "counters": self._counters, "timestamps": self._timestamps,
                "readings": self._readings, "extra": self.extra}
        atomic.write_json_atomic(self._partial["metadata"], meta, durable=self.durable)
        for role in ("stack", "average", "metadata"):
            if self._partial[role].exists():
                os.replace(self._partial[role], self.files[role])
        self._frames_log.unlink(missing_ok=True)
        if self.durable:
            fsync_dir(self.frames_dir)
        self._closed = True
        record = CaptureRecord(
            step_id=self.step_id, name=self.name, keep=self.keep, count=self.count,
            shape=self.shape, dtype=self.input_dtype or "", first_counter=self._counters[0],
            last_counter=self._counters[-1], counter_gaps=gaps, repeated_counters=repeats,
            start_t=start_t, end_t=end_t, metadata_path=self.files["metadata"],
            stack_path=self.files["stack"] if "stack" in record_files else None,
            average_path=self.files["average"] if "average" in record_files else None,
            checksums=checksums, sizes=sizes)
        if self.events is not None:
            self.events.emit("capture.stored", step=self.step_id, name=self.name,
                             count=self.count, counter_gaps=gaps, repeated_counters=repeats,
                             files=sorted(checksums))
        return record

    def abandon(self, reason: str) -> Path | None:
        """Set aside whatever was written (abort, fault, failed guard); returns the folder or None."""
        if self._closed:
            return None
        self._close_streams()
        self._acc = None
        self._closed = True
        found = _leftovers(self.frames_dir, self.stem)
        found = [p for p in found if p.name.endswith(PARTIAL)]
        if not found:
            return None
        return abandon_files(self.frames_dir, self.step_id, found, reason, clock=self.clock,
                             events=self.events, frames_added=self.count)

    def _close_streams(self) -> None:
        if self._tiff is not None:
            self._tiff.close()
        if self._log_fh is not None:
            self._log_fh.close()
            self._log_fh = None

    def __enter__(self) -> CaptureWriter:
        return self

    def __exit__(self, exc_type: type[BaseException] | None, exc: BaseException | None,
                 tb: object) -> None:
        if not self._closed:
            why = f"capture interrupted by {exc_type.__name__}: {exc}" if exc_type else \
                "capture left unfinished"
            self.abandon(why)


class _HasPath(Protocol):
    @property
    def path(self) -> Path: ...


RunLocation = Union[Path, str, _HasPath]
"""A run folder (anything with a ``path``, e.g. RunFolder) or its path."""


# -- reading back ----------------------------------------------------------------------------------
def _frames_dir(run: RunLocation) -> Path:
    root = Path(run) if isinstance(run, (str, Path)) else Path(run.path)
    return root / "frames"


def _stem_files(run: RunLocation, name: str) -> dict[str, Path]:
    """The files of capture `name`, under the current naming scheme or, for older run folders,
    the one they were written with."""
    files = capture_files(_frames_dir(run), capture_stem(name))
    if not files["metadata"].exists():
        legacy = capture_files(_frames_dir(run), _legacy_stem(name))
        if legacy["metadata"].exists():
            return legacy
    return files


def load_metadata(run: RunLocation, name: str) -> dict[str, Any]:
    """The metadata of a finished capture; `run` is a RunFolder or a run folder path."""
    path = _stem_files(run, name)["metadata"]
    if not path.exists():
        raise FrameStoreError(f"no finished capture named {name!r} in {path.parent} "
                              f"(looked for {path.name}); check the name, or verify the run")
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except ValueError as exc:
        raise FrameStoreError(f"{path}: not valid JSON ({exc}); run `verify` on the run folder")\
            from None


def _load_tiff(run: RunLocation, name: str, role: str) -> np.ndarray:
    meta = load_metadata(run, name)
    if role not in meta.get("files", {}):
        raise FrameStoreError(f"capture {name!r} kept {meta.get('keep')!r}, so it has no {role}; "
                              f"use keep: both in the recipe to have both")
    return tifffile.imread(_stem_files(run, name)[role])


def load_average(run: RunLocation, name: str) -> np.ndarray:
    """The float32 average image (rows, cols) of a finished capture."""
    return _load_tiff(run, name, "average")


def load_stack(run: RunLocation, name: str) -> np.ndarray:
    """The uint16 stack (frames, rows, cols) of a finished capture."""
    stack = _load_tiff(run, name, "stack")
    return stack[np.newaxis] if stack.ndim == 2 else stack


def list_captures(run: RunLocation) -> list[str]:
    """Names of the finished captures of a run, sorted."""
    frames = _frames_dir(run)
    names = []
    for path in sorted(frames.glob(f"*{META_SUFFIX}")):
        try:
            meta = json.loads(path.read_text(encoding="utf-8"))
        except ValueError:
            continue
        if meta.get("format") == CAPTURE_FORMAT:
            names.append(meta["name"])
    return names


def move_partials_aside(frames_dir: Path, reason: str, *, clock: Clock | None = None,
                        events: EventLog | None = None) -> list[Path]:
    """Set aside every unfinished capture in `frames_dir` (used when a run is resumed)."""
    by_stem: dict[str, list[Path]] = {}
    for path in partial_files(frames_dir):
        by_stem.setdefault(stem_of(path), []).append(path)
    folders = []
    for stem, files in sorted(by_stem.items()):
        step_id, added = _read_frames_log(frames_dir / f"{stem}{FRAMES_LOG_SUFFIX}{PARTIAL}")
        folders.append(abandon_files(frames_dir, step_id or stem, files, reason, clock=clock,
                                     events=events, frames_added=added))
    return folders


def _read_frames_log(path: Path) -> tuple[str | None, int | None]:
    """Step id and number of complete frame lines of an unfinished capture's frame log."""
    try:
        lines = path.read_bytes().split(b"\n")[:-1]
    except OSError:
        return None, None
    if not lines:
        return None, 0
    try:
        step_id = json.loads(lines[0]).get("step_id")
    except ValueError:
        step_id = None
    return step_id, len(lines) - 1


__all__ = ["CaptureRecord", "CaptureWriter", "DiskFullError", "FrameStoreError", "KEEP_MODES",
           "abandon_files", "capture_files", "list_captures", "load_average", "load_metadata",
           "load_stack", "move_partials_aside", "partial_files", "safe_name", "capture_stem"]
