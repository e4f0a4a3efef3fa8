"""Event log: JSON lines stamped by the station clock, safe against threads and kill -9."""

from __future__ import annotations

import datetime as dt
import json
import os
import signal
import subprocess
import sys
import textwrap
import threading
from pathlib import Path

import pytest

from drivers.clock import SimClock
from station.record import events as events_mod
from station.record.events import EventLog, read_events, scan_events, utc_iso


def test_event_carries_clock_time_and_iso8601_utc(tmp_path: Path) -> None:
    clock = SimClock()
    with EventLog(tmp_path / "events.jsonl", clock) as log:
        clock.sleep(3723.25)
        log.emit("state", name="running", cause="preflight passed")
    (event,) = read_events(tmp_path / "events.jsonl")
    # Reference: Python datetime for the same instant, ISO 8601 extended format with a Z suffix.
    expected = dt.datetime.fromtimestamp(1_767_225_600 + 3723.25, tz=dt.timezone.utc)
    assert event["t"] == pytest.approx(1_767_225_600 + 3723.25, abs=1e-6)
    assert event["utc"] == expected.strftime("%Y-%m-%dT%H:%M:%S.250Z") == "2026-01-01T01:02:03.250Z"
    assert (event["type"], event["name"], event["seq"]) == ("state", "running", 1)


def test_utc_iso_of_unix_epoch() -> None:
    assert utc_iso(0.0) == "1970-01-01T00:00:00.000Z"  # POSIX epoch definition


def test_four_threads_lose_and_interleave_nothing(tmp_path: Path) -> None:
    log = EventLog(tmp_path / "events.jsonl", SimClock(), fsync_every=1000)

    def writer(k: int) -> None:
        for i in range(500):
            log.emit("io", thread=k, i=i, pad="y" * 300)

    threads = [threading.Thread(target=writer, args=(k,)) for k in range(4)]
    for th in threads:
        th.start()
    for th in threads:
        th.join()
    log.close()
    scan = scan_events(tmp_path / "events.jsonl")
    assert scan.healthy
    assert len(scan.events) == 2000
    assert sorted(e["seq"] for e in scan.events) == list(range(1, 2001))
    for k in range(4):
        assert [e["i"] for e in scan.events if e["thread"] == k] == list(range(500))


def test_fsync_every_n_events_and_at_once_for_state_changes(tmp_path: Path,
                                                           monkeypatch: pytest.MonkeyPatch) -> None:
    calls: list[int] = []
    real = os.fsync
    monkeypatch.setattr(events_mod.os, "fsync", lambda fd: (calls.append(fd), real(fd)))
    monkeypatch.setattr(events_mod, "fsync_dir", lambda path: None)  # count file syncs only
    log = EventLog(tmp_path / "e.jsonl", SimClock(), fsync_every=10)
    for i in range(25):
        log.emit("io", i=i)
    assert len(calls) == 2  # after events 10 and 20
    log.emit("state", name="held")
    assert len(calls) == 3  # a state change goes to the disk at once
    log.close()


def test_torn_last_line_is_tolerated_then_cut_on_reopen(tmp_path: Path) -> None:
    path = tmp_path / "events.jsonl"
    clock = SimClock()
    with EventLog(path, clock) as log:
        for i in range(5):
            log.emit("io", i=i)
    torn = b'{"seq": 6, "t": 1.0, "type": "i'
    with open(path, "ab") as fh:
        fh.write(torn)
    scan = scan_events(path)
    assert (len(scan.events), scan.torn_tail, scan.bad_lines) == (5, True, [])
    with EventLog(path, clock) as log:
        log.emit("io", i=5)
    events = read_events(path)
    assert [e["seq"] for e in events] == [1, 2, 3, 4, 5, 6, 7]
    assert events[5]["type"] == "log_repaired" and events[5]["dropped_bytes"] == len(torn)
    assert scan_events(path).healthy


def test_bad_middle_line_is_reported_with_its_number(tmp_path: Path) -> None:
    path = tmp_path / "events.jsonl"
    path.write_text('{"seq": 1, "type": "a"}\nnot json\n{"seq": 2, "type": "b"}\n')
    scan = scan_events(path)
    assert [e["seq"] for e in scan.events] == [1, 2]
    assert scan.bad_lines == [(2, "not json")]


def test_subscribers_see_each_event_and_a_broken_one_does_not_stop_the_log(tmp_path: Path) -> None:
    seen: list[str] = []
    log = EventLog(tmp_path / "e.jsonl", SimClock())
    stop = log.subscribe(lambda e: seen.append(e["type"]))
    log.subscribe(lambda e: 1 / 0)
    log.emit("log")
    stop()
    log.emit("io")
    log.close()
    assert seen == ["log"]
    assert log.subscriber_errors == 2
    assert len(read_events(tmp_path / "e.jsonl")) == 2


def test_reserved_field_names_and_closed_log_are_refused(tmp_path: Path) -> None:
    log = EventLog(tmp_path / "e.jsonl", SimClock())
    with pytest.raises(ValueError, match="reserved"):
        log.emit("log", t=1.0)
    log.close()
    with pytest.raises(ValueError, match="closed"):
        log.emit("log")
    assert read_events(tmp_path / "e.jsonl") == []


def test_unserialisable_value_is_kept_as_text(tmp_path: Path) -> None:
    with EventLog(tmp_path / "e.jsonl", SimClock()) as log:
        log.emit("io", obj=object(), n=3)
    (event,) = read_events(tmp_path / "e.jsonl")
    assert event["obj"].startswith("<object object") and event["n"] == 3


def test_kill_9_keeps_every_acknowledged_event(tmp_path: Path) -> None:
    path = tmp_path / "events.jsonl"
    child = textwrap.dedent(f"""
        from drivers.clock import SimClock
        from station.record.events import EventLog
        log = EventLog({str(path)!r}, SimClock(), fsync_every=25)
        for i in range(1, 1000000):
            log.emit("io", i=i, pad="z" * 500)
            if i % 20 == 0:
                print(i, flush=True)
    """)
    proc = subprocess.Popen([sys.executable, "-c", child], stdout=subprocess.PIPE, text=True)
    acknowledged = 0
    for line in proc.stdout:
        acknowledged = int(line)
        if acknowledged >= 400:
            break
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    proc.stdout.close()
    scan = scan_events(path)
    assert scan.bad_lines == []
    seqs = [e["seq"] for e in scan.events]
    assert seqs == list(range(1, len(seqs) + 1))  # nothing lost before the last whole line
    assert len(seqs) >= acknowledged
    assert all(json.dumps(e) for e in scan.events)


def test_unknown_event_names_are_refused_with_the_closest_known(tmp_path: Path) -> None:
    log = EventLog(tmp_path / "e.jsonl", SimClock())
    with pytest.raises(ValueError, match="did you mean 'capture.done'"):
        log.emit("capture_done", step="s1")
    log.close()
    assert read_events(tmp_path / "e.jsonl") == []


def test_each_member_is_marked_and_the_sync_set_follows_the_marks() -> None:
    from station.record.events import DEFAULT_SYNC_TYPES, Event

    assert {e.value for e in Event if e.flush} == set(DEFAULT_SYNC_TYPES)
    assert {"state", "step.done", "capture.stored", "capture.done"} <= DEFAULT_SYNC_TYPES
    assert "io" not in DEFAULT_SYNC_TYPES
