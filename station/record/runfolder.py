"""One folder per run: where every file of a run lives, and the only place that knows its layout.

Layout (`<root>/<UTC YYYYmmddTHHMMSSZ>_<serial>_<recipe>/`, the time being the wall-clock time
the run was started, also for a dry run in simulated time; a second run in the same second gets
`-2`)::

    run-folder.json   marks the folder as a run folder (written atomically at creation)
    manifest.json     see station.record.manifest
    events.jsonl      see station.record.events
    journal.jsonl     see station.record.journal
    inputs/           station, UUT and recipe files exactly as run
    frames/           captures (see station.record.frame_store); frames/abandoned/ holds set-aside ones
    results/  plots/  written by analysis; `register` records each file in the event log

Example::

    folder = RunFolder.create(Path("runs"), uut_serial="SN-0042", recipe_name="sitf_sweep",
                              utc=datetime.now(timezone.utc), clock=clock)
    folder.copy_inputs(station=station_yaml, uut=uut_yaml, recipe=recipe_yaml)
    with folder.new_capture("sweep[1].capture", "flat_5K", keep="both") as cap: ...
"""

from __future__ import annotations

import datetime as _dt
import json
import re
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from drivers.clock import Clock, RealClock
from station.record.closing import make_reserve
from station.record.atomic import fsync_dir, sha256_file, write_bytes_atomic, write_json_atomic
from station.record.events import EventLog
from station.record.frame_store import DEFAULT_MIN_FREE, CaptureWriter, Keep, move_partials_aside
from station.record.journal import Journal
from station.record.writer_lock import WriterLock

MARKER_NAME = "run-folder.json"
MARKER_FORMAT = "nightbench-run-folder"
EVENTS_NAME = "events.jsonl"
JOURNAL_NAME = "journal.jsonl"
SUBFOLDERS = ("frames", "results", "plots", "inputs")
INPUT_ROLES = ("station", "uut", "recipe")


class RunFolderError(Exception):
    """The path is not a usable run folder; the message says why and what to do."""


_UNSAFE = re.compile(r"[^A-Za-z0-9.-]+")


def sanitise(text: str, fallback: str) -> str:
    """A short, portable name part: letters, digits, '.' and '-'; other runs become '-'."""
    cleaned = _UNSAFE.sub("-", str(text)).strip("-.")[:40]
    return cleaned or fallback


def folder_name(utc: _dt.datetime, uut_serial: str, recipe_name: str) -> str:
    """`<UTC YYYYmmddTHHMMSSZ>_<serial>_<recipe>`; a naive `utc` is taken to be UTC already."""
    moment = utc.astimezone(_dt.timezone.utc) if utc.tzinfo else utc
    return f"{moment.strftime('%Y%m%dT%H%M%SZ')}_{sanitise(uut_serial, 'unknown-uut')}_" \
           f"{sanitise(recipe_name, 'recipe')}"


def _utc_text(utc: _dt.datetime) -> str:
    moment = utc.astimezone(_dt.timezone.utc) if utc.tzinfo else utc
    return moment.strftime("%Y-%m-%dT%H:%M:%SZ")


def durable_for(clock: Clock) -> bool:
    """Whether a run's records are fsynced as they are written: on a real clock, always.

    A run on simulated time (the simulated bench) is made again exactly from its seed in
    seconds, so it skips the fsyncs, which cost more than anything else it writes. What
    integrity needs stays the same either way: every event and journal line reaches the
    operating system before the run goes on (a crash of the process loses nothing), files
    appear under their names only when complete (written aside, renamed last, metadata after
    the images), and checksums in the metadata and manifest let `verify` find any damage.
    """
    return not clock.simulated


class RunFolder:
    """Paths, event log, journal and captures of one run folder."""

    def __init__(self, path: Path, clock: Clock | None = None) -> None:
        self.path = Path(path)
        self.clock: Clock = clock or RealClock()
        self.durable = durable_for(self.clock)
        self._events: EventLog | None = None
        self._journal: Journal | None = None
        self.inputs: dict[str, dict[str, Any]] = {}
        self.registered: dict[str, dict[str, Any]] = {}
        self.writer_lock: WriterLock | None = None

    # -- creating and opening --------------------------------------------------------------------
    @classmethod
    def create(cls, root: Path | str, *, uut_serial: str, recipe_name: str, utc: _dt.datetime,
               clock: Clock | None = None) -> RunFolder:
        """Make a new run folder under `root` (the runs directory); never reuses an existing one."""
        root = Path(root)
        root.mkdir(parents=True, exist_ok=True)
        base = folder_name(utc, uut_serial, recipe_name)
        n = 1
        while True:
            path = root / (base if n == 1 else f"{base}-{n}")
            try:
                path.mkdir()
                break
            except FileExistsError:
                n += 1
        folder = cls(path, clock)
        folder.writer_lock = WriterLock.acquire(path, "run")  # before anything else is written
        make_reserve(path)
        for sub in SUBFOLDERS:
            (path / sub).mkdir()
        fsync_dir(root)
        write_json_atomic(path / MARKER_NAME, {
            "format": MARKER_FORMAT, "version": 1, "uut_serial": uut_serial,
            "recipe_name": recipe_name, "created_utc": _utc_text(utc)})
        return folder

    def take_writer_lock(self, purpose: str) -> WriterLock:
        """Become the only writer of this folder (raises RunFolderBusy naming the holder)."""
        if self.writer_lock is None or not self.writer_lock.held:
            self.writer_lock = WriterLock.acquire(self.path, purpose)
        return self.writer_lock

    def release_writer_lock(self) -> None:
        if self.writer_lock is not None:
            self.writer_lock.release()

    @classmethod
    def open(cls, path: Path | str, clock: Clock | None = None) -> RunFolder:
        """Open an existing run folder for resume, verify or analysis; clear error if it is not one."""
        path = Path(path)
        if not path.exists():
            raise RunFolderError(f"{path}: no such folder; give the path of a run folder "
                                 f"(runs/<time>_<serial>_<recipe>)")
        if not path.is_dir():
            raise RunFolderError(f"{path}: is a file, not a run folder")
        marker = path / MARKER_NAME
        if not marker.exists():
            raise RunFolderError(f"{path}: not a run folder ({MARKER_NAME} is missing); give the "
                                 f"path of a folder made by `nightbench run`")
        try:
            info = json.loads(marker.read_text(encoding="utf-8"))
        except ValueError as exc:
            raise RunFolderError(f"{marker}: damaged ({exc}); the folder may still be checked with "
                                 f"`verify`") from None
        if not isinstance(info, dict) or info.get("format") != MARKER_FORMAT:
            raise RunFolderError(f"{marker}: not a nightbench run folder marker")
        folder = cls(path, clock)
        for sub in SUBFOLDERS:
            (path / sub).mkdir(exist_ok=True)
        inputs_index = path / "inputs" / "inputs.json"
        if inputs_index.exists():
            try:
                folder.inputs = json.loads(inputs_index.read_text(encoding="utf-8"))
            except ValueError:
                folder.inputs = {}
        return folder

    # -- paths -----------------------------------------------------------------------------------
    @property
    def frames_dir(self) -> Path:
        return self.path / "frames"

    @property
    def results_dir(self) -> Path:
        return self.path / "results"

    @property
    def plots_dir(self) -> Path:
        return self.path / "plots"

    @property
    def inputs_dir(self) -> Path:
        return self.path / "inputs"

    @property
    def events_path(self) -> Path:
        return self.path / EVENTS_NAME

    @property
    def journal_path(self) -> Path:
        return self.path / JOURNAL_NAME

    # -- logs ------------------------------------------------------------------------------------
    @property
    def events(self) -> EventLog:
        """The run's event log, opened on first use (appending, if it exists: resume)."""
        if self._events is None or self._events.closed:
            self._events = EventLog(self.events_path, self.clock, durable=self.durable)
        return self._events

    @property
    def journal(self) -> Journal:
        """The journal of completed steps (raises `JournalError` if it is damaged)."""
        if self._journal is None:
            self._journal = Journal(self.journal_path, durable=self.durable)
        return self._journal

    # -- inputs ----------------------------------------------------------------------------------
    def copy_inputs(self, *, station: Path | str | None = None, uut: Path | str | None = None,
                    recipe: Path | str | None = None,
                    texts: Mapping[str, tuple[str, str]] | None = None) -> dict[str, dict[str, Any]]:
        """Copy the station, UUT and recipe files as run into inputs/, with their SHA-256.

        `texts` gives inputs that exist only in memory (e.g. the built-in simulated station):
        {role: (file name, text)}. Returns {role: {name, relpath, sha256, bytes, source}}.
        """
        given: dict[str, tuple[str, bytes, str]] = {}
        for role, src in (("station", station), ("uut", uut), ("recipe", recipe)):
            if src is None:
                continue
            src = Path(src)
            try:
                given[role] = (src.name, src.read_bytes(), str(src.resolve()))
            except OSError as exc:
                raise RunFolderError(f"cannot copy the {role} file {src} into the run folder: "
                                     f"{exc.strerror or exc}; check the path") from None
        for role, (name, text) in (texts or {}).items():
            given[role] = (name, text.encode("utf-8"), "(built in)")
        for role, (name, data, source) in given.items():
            target = self.inputs_dir / f"{role}__{sanitise(name, role)}"
            write_bytes_atomic(target, data)
            self.inputs[role] = {"name": name, "relpath": target.relative_to(self.path).as_posix(),
                                 "sha256": sha256_file(target), "bytes": len(data),
                                 "source": source}
        write_json_atomic(self.inputs_dir / "inputs.json", self.inputs)
        return dict(self.inputs)

    def input_path(self, role: str) -> Path:
        """Path of the copy of an input (station, uut, recipe) inside the run folder."""
        if role not in self.inputs:
            raise RunFolderError(f"{self.path}: no {role} file was copied into this run folder")
        return self.path / self.inputs[role]["relpath"]

    # -- captures and results ----------------------------------------------------------------------
    def new_capture(self, step_id: str, name: str, keep: Keep = "both", *,
                    expected_count: int | None = None, min_free_bytes: int = DEFAULT_MIN_FREE,
                    extra: Mapping[str, object] | None = None) -> CaptureWriter:
        """A writer for one capture step, logging to this run's events (fsynced when
        `durable`, see `durable_for`)."""
        return CaptureWriter(self.frames_dir, step_id, name, keep, expected_count=expected_count,
                             clock=self.clock, events=self.events, min_free_bytes=min_free_bytes,
                             extra=extra, durable=self.durable)

    def set_aside_partials(self, reason: str = "unfinished capture found when the run was resumed"
                           ) -> list[Path]:
        """Move every unfinished capture to frames/abandoned/ (call before resuming)."""
        return move_partials_aside(self.frames_dir, reason, clock=self.clock, events=self.events)

    def register(self, path: Path | str, kind: str = "result") -> dict[str, Any]:
        """Record a file written by analysis (checksum in the event log); returns its entry."""
        path = Path(path)
        full = path if path.is_absolute() else self.path / path
        try:
            rel = full.resolve().relative_to(self.path.resolve()).as_posix()
        except ValueError:
            raise RunFolderError(f"{path} is outside the run folder {self.path}; write results "
                                 f"under results/ or plots/") from None
        if not full.is_file():
            raise RunFolderError(f"{full}: cannot register a file that does not exist")
        entry = {"kind": kind, "sha256": sha256_file(full), "bytes": full.stat().st_size}
        self.registered[rel] = entry
        self.events.emit("file_written", path=rel, **entry)
        return {"path": rel, **entry}

    def close(self) -> None:
        """Close the event log (sync to disk). Safe to call twice."""
        if self._events is not None:
            self._events.close()

    def __enter__(self) -> RunFolder:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"RunFolder({str(self.path)!r})"


def is_run_folder(path: Path | str) -> bool:
    """True if `path` holds a run-folder marker."""
    return (Path(path) / MARKER_NAME).is_file()


def enclosing_run_folder(path: Path | str) -> Path | None:
    """The run folder that `path` is (or lies inside), if any."""
    resolved = Path(path).resolve()
    for candidate in (resolved, *resolved.parents):
        if is_run_folder(candidate):
            return candidate
    return None


def refuse_inside_run_folder(path: Path | str, option: str = "--out") -> None:
    """Results written by hand never land in a run folder: its results are its record (the
    manifest's checksums cover them) and only the run or a re-analysis version may add to it."""
    run = enclosing_run_folder(path)
    if run is not None:
        raise RunFolderError(f"{option} {path}: is inside the run folder {run}; a run folder's "
                             "results are part of its record and are never overwritten. Give a "
                             "folder outside it (or leave the option out to write a new results "
                             "version of that run).")


def refuse_unfinished_run(path: Path | str) -> None:
    """Re-analysis reads a run that ended; one still `running` was interrupted (or is live)."""
    manifest = Path(path) / "manifest.json"
    try:
        state = json.loads(manifest.read_text(encoding="utf-8")).get("state")
    except (OSError, ValueError, AttributeError):
        raise RunFolderError(f"{manifest}: missing or unreadable; run `nightbench verify "
                             f"{path}` to see what the folder holds") from None
    if state == "running":
        raise RunFolderError(f"{path}: the run did not finish (its manifest says running): it "
                             "was interrupted or is still going. Resume it (`nightbench resume "
                             f"{path}`) and analyse it when it has ended.")


__all__ = ["RunFolder", "RunFolderError", "enclosing_run_folder", "folder_name",
           "is_run_folder", "refuse_inside_run_folder", "refuse_unfinished_run", "sanitise"]
