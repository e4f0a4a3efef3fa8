"""The manifest: what ran, where, when, how it ended, and the checksum of every file written.

Why: at 8 am the engineer (or a customer's auditor) must be able to tell from one file which
software and which station files produced a run, whether it finished, why it stopped, and whether
any file has changed since. It is written atomically at the start (state `running`) and again at
the end with the SHA-256 of every file in the folder except itself.

Example::

    manifest = Manifest.begin(clock, utc=start, inputs=folder.inputs, plan={"steps": 42})
    manifest.write(folder.path)
    ...
    manifest.close(folder.path, state="complete", cause="all steps done", clock=clock)
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import json
import os
import platform
import socket
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from drivers.clock import Clock
from station import __version__
from station.record.atomic import TEMP_SUFFIX, sha256_file, write_json_atomic
from station.record.events import utc_iso
from station.record.live import is_live_view

MANIFEST_NAME = "manifest.json"
MANIFEST_FORMAT = "nightbench-manifest"
RUNNING = "running"
NOT_RECORDED = frozenset({"writer.lock", "space.reserve"})
DERIVED_AFTER_CLOSE = frozenset({"report.html", "report.pdf", "history-pending.json"})
"""Written from the closed record after the manifest (the report, a history still to catch up):
not part of the record, so never checksummed (a resume rewrites them)."""
"""Files at the top of a run folder that are machinery, not record: the writer lock (see
writer_lock.py) and the disk reserve for the closing manifest (see closing.py)."""


class ManifestError(Exception):
    """The manifest is missing or cannot be read; the message names the file and what to do."""


@dataclass
class Manifest:
    """Everything a reader needs to trust (or distrust) a run folder. Times: UTC ISO 8601 and clock s.

    Two clocks: `start_utc`/`end_utc` and the clock seconds are the run's own clock (simulated in
    a dry run, as the event log is stamped); `wall_start_utc`/`wall_end_utc` are the computer's
    wall clock, always. A simulated run also records `simulated_span` (start, end, seconds of
    simulated time). `start_confirmation` says how a real-station start was confirmed.
    """

    start_utc: str
    start_clock: float
    simulated_clock: bool
    software_version: str = __version__
    python: str = field(default_factory=lambda: platform.python_version())
    host: str = field(default_factory=socket.gethostname)
    platform: str = field(default_factory=platform.platform)
    state: str = RUNNING
    cause: str | None = None
    end_utc: str | None = None
    end_clock: float | None = None
    inputs: dict[str, dict[str, Any]] = field(default_factory=dict)
    plan: dict[str, Any] = field(default_factory=dict)
    sessions: list[dict[str, Any]] = field(default_factory=list)
    files: dict[str, dict[str, Any]] = field(default_factory=dict)
    wall_start_utc: str | None = None
    wall_end_utc: str | None = None
    simulated_span: dict[str, Any] | None = None
    start_confirmation: str | None = None
    format: str = MANIFEST_FORMAT
    version: int = 1

    @classmethod
    def begin(cls, clock: Clock, *, inputs: dict[str, dict[str, Any]] | None = None,
              plan: dict[str, Any] | None = None, utc: _dt.datetime | None = None,
              wall: Callable[[], float] = time.time) -> Manifest:
        """A manifest for a run starting now (clock time; `utc` defaults to the clock's time;
        `wall` is the wall clock, injectable for tests)."""
        now = clock.now()
        start = utc.astimezone(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ") if utc \
            else utc_iso(now)
        wall_now = utc_iso(wall())
        manifest = cls(start_utc=start, start_clock=now, simulated_clock=bool(clock.simulated),
                       inputs=dict(inputs or {}), plan=dict(plan or {}), wall_start_utc=wall_now)
        manifest.sessions.append({"started_utc": start, "started_clock": now, "pid": os.getpid(),
                                  "host": manifest.host, "kind": "start", "wall_utc": wall_now})
        return manifest

    # -- names of the inputs, for people -------------------------------------------------------
    def input_name(self, role: str) -> str | None:
        entry = self.inputs.get(role)
        return entry.get("name") if entry else None

    def input_sha256(self, role: str) -> str | None:
        entry = self.inputs.get(role)
        return entry.get("sha256") if entry else None

    # -- life cycle ----------------------------------------------------------------------------
    def write(self, run_path: Path | str) -> Path:
        """Write atomically to `<run>/manifest.json`."""
        return write_json_atomic(Path(run_path) / MANIFEST_NAME, self.to_dict())

    def resumed(self, run_path: Path | str, clock: Clock, note: str = "",
                accepted_changes: list[str] | None = None,
                wall: Callable[[], float] = time.time) -> Path:
        """Mark the run running again after an interruption and write it. `accepted_changes`
        lists files found changed that the operator chose to go on with (--force)."""
        now = clock.now()
        session: dict[str, Any] = {
            "started_utc": utc_iso(now), "started_clock": now, "pid": os.getpid(),
            "host": socket.gethostname(), "kind": "resume", "previous_state": self.state,
            "previous_cause": self.cause, "note": note, "wall_utc": utc_iso(wall())}
        if accepted_changes:
            session["accepted_changed_files"] = list(accepted_changes)
        self.sessions.append(session)
        self.state, self.cause, self.end_utc, self.end_clock = RUNNING, None, None, None
        self.wall_end_utc = None
        self.files = {}
        return self.write(run_path)

    def close(self, run_path: Path | str, *, state: str, cause: str | None, clock: Clock,
              wall: Callable[[], float] = time.time) -> Path:
        """Record the end state and its cause, checksum every file, write atomically."""
        now = clock.now()
        self.state, self.cause = state, cause
        self.end_utc, self.end_clock = utc_iso(now), now
        self.wall_end_utc = utc_iso(wall())
        if self.simulated_clock:
            self.simulated_span = {"start_utc": self.start_utc, "end_utc": self.end_utc,
                                   "seconds": round(now - float(self.start_clock), 6)}
        self.files = checksum_files(Path(run_path))
        return self.write(run_path)

    def to_dict(self) -> dict[str, Any]:
        return dataclasses.asdict(self)

    @classmethod
    def from_dict(cls, data: dict[str, Any], source: Path | str = MANIFEST_NAME) -> Manifest:
        if data.get("format") != MANIFEST_FORMAT:
            raise ManifestError(f"{source}: not a nightbench manifest (format is "
                                f"{data.get('format')!r}); point the command at a run folder")
        names = {f.name for f in dataclasses.fields(cls)}
        missing = [f.name for f in dataclasses.fields(cls)
                   if f.default is dataclasses.MISSING and f.default_factory is dataclasses.MISSING
                   and f.name not in data]
        if missing:
            raise ManifestError(f"{source}: missing {', '.join(missing)}. {_FIX}")
        return cls(**{k: v for k, v in data.items() if k in names})


_FIX = ("The manifest was damaged or edited. The frames, events and journal beside it may still be "
        "intact: run `verify` to see which files are sound; restore manifest.json from a backup to "
        "trust the checksums again.")


def checksum_files(run_path: Path) -> dict[str, dict[str, Any]]:
    """{relative path: {sha256, bytes}} of every file under the run folder except the manifest and
    leftover temporary files of interrupted atomic writes."""
    files: dict[str, dict[str, Any]] = {}
    for path in sorted(run_path.rglob("*")):
        if not path.is_file():
            continue
        rel = path.relative_to(run_path).as_posix()
        if (rel == MANIFEST_NAME or rel in NOT_RECORDED or rel in DERIVED_AFTER_CLOSE
                or path.name.endswith(TEMP_SUFFIX) or is_live_view(rel)):  # the live view changes after the close: not record
            continue
        files[rel] = {"sha256": sha256_file(path), "bytes": path.stat().st_size}
    return files


def load_manifest(run_path: Path | str) -> Manifest:
    """Read `<run>/manifest.json` (or a manifest file given directly); `ManifestError` if unusable."""
    path = Path(run_path)
    if path.is_dir():
        path = path / MANIFEST_NAME
    if not path.exists():
        raise ManifestError(f"{path}: no manifest. Either this is not a run folder or the run was "
                            f"interrupted before it started; check the path.")
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (ValueError, UnicodeDecodeError) as exc:
        raise ManifestError(f"{path}: not valid JSON ({exc}). {_FIX}") from None
    if not isinstance(data, dict):
        raise ManifestError(f"{path}: not a JSON object. {_FIX}")
    try:
        return Manifest.from_dict(data, path)
    except TypeError as exc:
        raise ManifestError(f"{path}: unexpected content ({exc}). {_FIX}") from None


def software_summary() -> dict[str, str]:
    """Software, Python and host facts, for a console header or a report."""
    return {"software_version": __version__, "python": platform.python_version(),
            "executable": sys.executable, "host": socket.gethostname(),
            "platform": platform.platform()}
