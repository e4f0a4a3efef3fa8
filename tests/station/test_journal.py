"""Journal of completed steps: durable on return, tolerant of a torn tail, strict elsewhere."""

from __future__ import annotations

import hashlib
import json
import os
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from station.record import journal as journal_mod
from station.record.atomic import dumps_json
from station.record.journal import Journal, JournalError


def _fill(path: Path, n: int) -> Journal:
    journal = Journal(path)
    for i in range(1, n + 1):
        journal.record(f"sweep[{i}].capture", "capture", {"frames": 10 * i}, t=100.0 * i)
    return journal


def test_records_read_back_in_order_with_their_data(tmp_path: Path) -> None:
    _fill(tmp_path / "journal.jsonl", 3)
    done = Journal(tmp_path / "journal.jsonl").completed()
    assert list(done) == ["sweep[1].capture", "sweep[2].capture", "sweep[3].capture"]
    assert [r["data"]["frames"] for r in done.values()] == [10, 20, 30]
    assert [r["t"] for r in done.values()] == [100.0, 200.0, 300.0]
    assert [r["n"] for r in done.values()] == [1, 2, 3]


def test_each_line_carries_the_sha256_of_its_body(tmp_path: Path) -> None:
    _fill(tmp_path / "j.jsonl", 1)
    line = json.loads((tmp_path / "j.jsonl").read_text().splitlines()[0])
    body = {k: v for k, v in line.items() if k != "check"}
    # Reference: hashlib SHA-256 (FIPS 180-4) of the compact, key-sorted JSON body.
    expected = hashlib.sha256(dumps_json(body, indent=None).encode()).hexdigest()[:16]
    assert line["check"] == expected


def test_each_record_is_fsynced_before_record_returns(tmp_path: Path,
                                                      monkeypatch: pytest.MonkeyPatch) -> None:
    calls: list[int] = []
    real = os.fsync
    dirs: list[Path] = []
    monkeypatch.setattr(journal_mod.os, "fsync", lambda fd: (calls.append(fd), real(fd)))
    monkeypatch.setattr(journal_mod, "fsync_dir", dirs.append)
    journal = Journal(tmp_path / "j.jsonl")
    journal.record("a", "note", {})
    journal.record("b", "note", {})
    assert len(calls) == 2  # one per record (the file)
    assert dirs == [tmp_path]  # and the directory once, when the file was created


def test_torn_last_line_is_ignored_with_a_warning_and_cut_before_the_next_record(
        tmp_path: Path) -> None:
    path = tmp_path / "journal.jsonl"
    _fill(path, 2)
    with open(path, "ab") as fh:
        fh.write(b'{"step": "sweep[3].capture", "kind": "cap')
    journal = Journal(path)
    assert list(journal.completed()) == ["sweep[1].capture", "sweep[2].capture"]
    assert len(journal.warnings) == 1 and "cut off" in journal.warnings[0]
    journal.record("sweep[3].capture", "capture", {"frames": 30})
    again = Journal(path)
    assert again.warnings == []
    assert len(again) == 3
    assert len(path.read_text().splitlines()) == 3


def test_garbage_in_the_middle_names_file_line_and_remedy(tmp_path: Path) -> None:
    path = tmp_path / "journal.jsonl"
    _fill(path, 3)
    lines = path.read_text().splitlines()
    lines[1] = lines[1][:20] + "#" + lines[1][21:]
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(JournalError) as info:
        Journal(path)
    message = str(info.value)
    assert str(path) in message and "line 2" in message
    assert "delete this line" in message


def test_edited_but_valid_json_fails_its_checksum(tmp_path: Path) -> None:
    path = tmp_path / "journal.jsonl"
    _fill(path, 3)
    lines = path.read_text().splitlines()
    record = json.loads(lines[2])
    record["data"]["frames"] = 31
    lines[2] = json.dumps(record)
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(JournalError, match=r"line 3: .*does not match its checksum"):
        Journal(path)


def test_a_step_cannot_be_recorded_twice(tmp_path: Path) -> None:
    journal = _fill(tmp_path / "j.jsonl", 1)
    with pytest.raises(JournalError, match="already recorded"):
        journal.record("sweep[1].capture", "capture", {})
    assert len(Journal(tmp_path / "j.jsonl")) == 1


def test_kill_9_never_loses_an_acknowledged_step(tmp_path: Path) -> None:
    path = tmp_path / "journal.jsonl"
    child = textwrap.dedent(f"""
        from station.record.journal import Journal
        journal = Journal({str(path)!r})
        for i in range(1, 100000):
            journal.record(f"scan[{{i}}].capture", "capture", {{"frames": i, "pad": "q" * 800}})
            print(i, flush=True)
    """)
    proc = subprocess.Popen([sys.executable, "-c", child], stdout=subprocess.PIPE, text=True)
    acknowledged = 0
    for line in proc.stdout:
        acknowledged = int(line)
        if acknowledged >= 60:
            break
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    proc.stdout.close()
    journal = Journal(path)  # must not raise: at most the tail is torn
    done = journal.completed()
    assert len(done) >= acknowledged
    assert list(done) == [f"scan[{i}].capture" for i in range(1, len(done) + 1)]
    assert len(journal.warnings) <= 1
