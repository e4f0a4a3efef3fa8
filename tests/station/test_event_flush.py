"""Flush-at-once events are on the disk before the next instrument command is sent.

How it is proven: every fsync of the run's events.jsonl records the file size synced; before
every command a transport sends (its `_exchange`), the test reads the log and checks that each
flush-at-once event written so far (station.record.events.Event members marked True) ends at or
before the synced size. A power cut just before that command would therefore keep them all.
POSIX fsync semantics (data of the file flushed to the device when it returns) is the reference;
common practice for write-ahead logs. The run goes on the simulated bench with its records made
durable as on a real clock (`durable_for` patched): on simulated time they are written, not
fsynced, which the second test checks.
"""

from __future__ import annotations

import json
import os
from collections.abc import Callable
from pathlib import Path

import pytest

from drivers.transport import Transport
from station.cli.main import main
from station.record import events as events_mod
from station.record import runfolder as runfolder_mod
from station.record.events import DEFAULT_SYNC_TYPES
from tests.station.fast_bench import fast_station_yaml

RECIPE = """\
recipe: flush-order
steps:
  - target: open
  - move: {az: 1.0, el: 0.5}
  - blackbody: {mode: difference, value: 2, tolerance: 0.05, hold: 2, timeout: 120}
  - capture: {name: flat, frames: 2, keep: both}
  - note: between
  - blackbody: {mode: difference, value: 4, tolerance: 0.05, hold: 2, timeout: 120}
  - capture: {name: hot, frames: 2, keep: both}
  - analyze: {analysis: sitf, captures: [flat, hot]}
  - move: {az: 0.0, el: 0.0}
"""



def run_checking_each_command(tmp_path: Path, runs: Path, monkeypatch: pytest.MonkeyPatch,
                              check_before: Callable[[str], None]) -> int:
    """Run RECIPE on the fast simulated bench, calling `check_before(command)` before every
    command any transport sends; returns the exit code."""
    for cls in Transport.__subclasses__():
        if "_exchange" in cls.__dict__:
            def wrapped(self, command, expect_reply, _original=cls.__dict__["_exchange"]):
                check_before(command)
                return _original(self, command, expect_reply)
            monkeypatch.setattr(cls, "_exchange", wrapped)
    station = tmp_path / "station.yaml"
    station.write_text(fast_station_yaml("flush-bench", timeout_s=1.0), encoding="utf-8")
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text(RECIPE, encoding="utf-8")
    return main(["run", str(recipe), "--station", str(station), "--runs", str(runs), "--plain"])

def test_each_flush_at_once_event_is_synced_before_the_next_command(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    synced: dict[str, int] = {}
    real_fsync = os.fsync

    def fsync(fd: int) -> None:
        real_fsync(fd)
        target = os.readlink(f"/proc/self/fd/{fd}")
        if target.endswith("events.jsonl"):
            synced[target] = os.fstat(fd).st_size

    monkeypatch.setattr(events_mod.os, "fsync", fsync)
    monkeypatch.setattr(runfolder_mod, "durable_for", lambda clock: True)  # as on a real clock
    checked = {"commands": 0, "urgent": 0, "read": 0, "last_urgent_end": 0}
    runs = tmp_path / "runs"

    def check_before(command: str) -> None:
        logs = list(runs.glob("*/events.jsonl"))
        if not logs:
            return
        path = str(logs[0].resolve())
        with open(path, "rb") as fh:  # read on from where the last check stopped
            fh.seek(checked["read"])
            new = fh.read()
        end = checked["read"]
        for line in new.splitlines(keepends=True):
            if not line.endswith(b"\n"):
                break
            end += len(line)
            if json.loads(line)["type"] in DEFAULT_SYNC_TYPES:
                checked["urgent"] += 1
                checked["last_urgent_end"] = end
        checked["read"] = end
        assert checked["last_urgent_end"] <= synced.get(path, 0), (
            f"a flush-at-once event is not on disk before command {command!r}")
        checked["commands"] += 1

    assert run_checking_each_command(tmp_path, runs, monkeypatch, check_before) == 0
    # Every command after the log opened was checked, and the urgent events were many.
    assert checked["commands"] > 20
    assert checked["urgent"] >= 20


def test_on_simulated_time_every_line_is_written_before_the_next_command_none_fsynced(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """A dry run keeps the process-crash guarantee (each line handed to the operating system
    before the next command: a kill -9 loses nothing) and drops only the power-cut one: no
    journal line or frame is fsynced, the event log only once, when it is closed."""
    fsynced: list[str] = []   # what each fsync flushed, named when it was called
    monkeypatch.setattr(os, "fsync", lambda fd: fsynced.append(os.readlink(f"/proc/self/fd/{fd}")))
    runs = tmp_path / "runs"
    seen = {"commands": 0}

    def check_before(command: str) -> None:
        logs = list(runs.glob("*/events.jsonl"))
        if logs:
            data = logs[0].read_bytes()   # what any other process sees now
            assert data.endswith(b"\n"), f"a torn event line before command {command!r}"
            seen["commands"] += 1

    assert run_checking_each_command(tmp_path, runs, monkeypatch, check_before) == 0
    assert seen["commands"] > 20
    run = str(next(runs.iterdir()).resolve())
    records = [n for n in fsynced if n.startswith(run)
               and (n.endswith("journal.jsonl") or "/frames" in n)]
    assert records == [], f"records of a simulated run were fsynced: {records[:3]}"
    # the event log once, when it is closed at the end of the run
    assert sum(n.endswith("events.jsonl") for n in fsynced) == 1
