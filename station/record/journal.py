"""The journal of completed steps: what `nightbench resume` reads to know where to go on.

Why a separate file from the event log: the event log is for people and may lose its last few
routine lines in a power cut; the journal is for the machine and must never say a step is done
when it is not, nor forget one that is. Each completed step is one JSON line carrying its own
SHA-256, written and fsynced before `record` returns. A line torn by a crash is the step that was in
flight: it is ignored (with a warning) and that step runs again. A damaged line anywhere else
means the file was changed after the fact, and resuming from it could repeat or skip data, so
reading it raises `JournalError`.

Example::

    journal = Journal(run / "journal.jsonl")
    journal.record("sweep[2].capture", "capture", {"frames": 100})
    done = journal.completed()          # {"sweep[2].capture": {...}}
"""

from __future__ import annotations

import hashlib
import json
import os
import threading
from pathlib import Path
from typing import Any

from station.record.atomic import dumps_json, fsync_dir

FORMAT_VERSION = 1


class JournalError(Exception):
    """The journal cannot be trusted or a record cannot be written; the message says what to do."""


def _digest(body: dict[str, Any]) -> str:
    return hashlib.sha256(dumps_json(body, indent=None).encode("utf-8")).hexdigest()[:16]


class Journal:
    """Append-only record of completed steps, one fsynced JSON line each."""

    def __init__(self, path: Path | str, *, durable: bool = True) -> None:
        self.path = Path(path)
        self.durable = durable  # False: lines reach the OS, not the disk (simulated time)
        self.warnings: list[str] = []
        self._lock = threading.Lock()
        self._records: dict[str, dict[str, Any]] = {}
        self._order: list[str] = []
        self._torn = False
        if self.path.exists():
            self._load()

    # -- reading ---------------------------------------------------------------------------------
    def _load(self) -> None:
        data = self.path.read_bytes()
        lines = data.split(b"\n")
        tail = lines.pop()
        for number, raw in enumerate(lines, start=1):
            if not raw.strip():
                continue
            record = self._parse(raw, number)
            step = record["step"]
            if step in self._records:
                raise JournalError(
                    f"{self.path}, line {number}: step {step!r} is recorded twice (first at entry "
                    f"{self._order.index(step) + 1}). The journal was edited or two runs wrote to "
                    f"the same folder; do not resume from it. Start the recipe again in a new run "
                    f"folder, or remove the duplicate line if you know which one is right.")
            self._records[step] = record
            self._order.append(step)
        if tail.strip():
            self._torn = True
            self.warnings.append(
                f"{self.path}: the last line ({len(tail)} bytes) was cut off by an interruption; "
                f"the step it describes is treated as not done and will run again")

    def _parse(self, raw: bytes, number: int) -> dict[str, Any]:
        fix = ("The journal was damaged or edited after it was written, so resuming could repeat "
               "or skip steps. Restore the file from a backup, or delete this line and every line "
               "after it to run those steps again (their old frames are then set aside), or start "
               "the recipe again in a new run folder.")
        try:
            record = json.loads(raw)
        except ValueError as exc:
            raise JournalError(f"{self.path}, line {number}: not valid JSON ({exc}). {fix}") from None
        if not isinstance(record, dict) or not {"step", "kind", "data", "check"} <= record.keys():
            raise JournalError(f"{self.path}, line {number}: not a journal record (needs step, "
                               f"kind, data and check). {fix}")
        body = {k: v for k, v in record.items() if k != "check"}
        if _digest(body) != record["check"]:
            raise JournalError(f"{self.path}, line {number}: the record for step "
                               f"{record['step']!r} does not match its checksum. {fix}")
        return record

    def completed(self) -> dict[str, dict[str, Any]]:
        """Completed steps in the order they finished: {step id: record}."""
        with self._lock:
            return {step: self._records[step] for step in self._order}

    def is_completed(self, step_id: str) -> bool:
        with self._lock:
            return step_id in self._records

    def __len__(self) -> int:
        return len(self._order)

    # -- writing ---------------------------------------------------------------------------------
    def record(self, step_id: str, kind: str, data: dict[str, Any] | None = None,
               **extra: Any) -> dict[str, Any]:
        """Append one completed step; returns only once the line is on the disk (durable) or
        handed to the operating system (not durable: a kill -9 still loses nothing).

        `extra` fields (for example the clock time) are stored beside `data`.
        """
        with self._lock:
            if step_id in self._records:
                raise JournalError(f"{self.path}: step {step_id!r} is already recorded as done; "
                                   f"a resumed run must start at the first step not in the journal")
            body: dict[str, Any] = {"v": FORMAT_VERSION, "n": len(self._order) + 1,
                                    "step": step_id, "kind": kind, "data": data or {}}
            for key, value in extra.items():
                if key in body or key == "check":
                    raise ValueError(f"journal field {key!r} is reserved")
                body[key] = value
            body = json.loads(dumps_json(body, indent=None))  # the stored form, as read back
            line = dumps_json({**body, "check": _digest(body)}, indent=None) + "\n"
            self._write(line.encode("utf-8"))
            self._records[step_id] = {**body, "check": _digest(body)}
            self._order.append(step_id)
            return self._records[step_id]

    def _write(self, line: bytes) -> None:
        new_file = not self.path.exists()
        if self._torn:
            self._cut_tail()
        with open(self.path, "ab") as fh:
            fh.write(line)
            fh.flush()
            if self.durable:
                os.fsync(fh.fileno())
        if new_file and self.durable:
            fsync_dir(self.path.parent)

    def _cut_tail(self) -> None:
        with open(self.path, "r+b") as fh:
            data = fh.read()
            keep = data.rfind(b"\n") + 1
            fh.truncate(keep)
            fh.flush()
            os.fsync(fh.fileno())
        self._torn = False
