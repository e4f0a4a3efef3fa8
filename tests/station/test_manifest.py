"""Manifest: written at start and end, checksums of every file, clear refusal when damaged."""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import platform
from pathlib import Path

import pytest

from drivers.clock import RealClock, SimClock
from station import __version__
from station.record.manifest import Manifest, ManifestError, load_manifest


def test_start_then_end_with_checksums_of_every_file(tmp_path: Path) -> None:
    clock = SimClock()
    (tmp_path / "frames").mkdir()
    (tmp_path / "frames" / "a.tif").write_bytes(b"\x49\x49\x2a\x00" + bytes(100))
    (tmp_path / "events.jsonl").write_text('{"seq": 1}\n')
    (tmp_path / ".x.json.123.tmp").write_text("left by a crash")
    manifest = Manifest.begin(clock, inputs={"recipe": {"name": "r.yaml", "sha256": "ab"}},
                              plan={"steps": 12, "estimate_s": 28800})
    manifest.write(tmp_path)
    started = load_manifest(tmp_path)
    assert (started.state, started.files, started.simulated_clock) == ("running", {}, True)
    # SimClock starts at 2026-01-01 00:00 UTC (1 767 225 600 s after the POSIX epoch).
    assert started.start_utc == "2026-01-01T00:00:00.000Z"
    clock.sleep(8 * 3600)
    manifest.close(tmp_path, state="complete", cause="all 12 steps done", clock=clock)
    done = load_manifest(tmp_path / "manifest.json")
    assert done.end_utc == "2026-01-01T08:00:00.000Z"
    assert done.end_clock - done.start_clock == pytest.approx(8 * 3600)
    assert sorted(done.files) == ["events.jsonl", "frames/a.tif"]  # not itself, not temp files
    for rel, entry in done.files.items():
        data = (tmp_path / rel).read_bytes()
        assert entry == {"sha256": hashlib.sha256(data).hexdigest(), "bytes": len(data)}
    assert done.software_version == __version__
    assert done.python == platform.python_version()
    assert done.input_name("recipe") == "r.yaml" and done.plan["steps"] == 12


def test_real_clock_is_recorded_as_not_simulated(tmp_path: Path) -> None:
    start = dt.datetime(2026, 3, 1, 18, 0, 0, tzinfo=dt.timezone.utc)
    manifest = Manifest.begin(RealClock(), utc=start)
    assert manifest.simulated_clock is False
    assert manifest.start_utc == "2026-03-01T18:00:00Z"


def test_resume_records_a_new_session_and_clears_the_end(tmp_path: Path) -> None:
    clock = SimClock()
    manifest = Manifest.begin(clock)
    manifest.close(tmp_path, state="aborted", cause="SIGINT from the operator", clock=clock)
    loaded = load_manifest(tmp_path)
    clock.sleep(60)
    loaded.resumed(tmp_path, clock, note="resumed by the test")
    again = load_manifest(tmp_path)
    assert (again.state, again.cause, again.end_utc) == ("running", None, None)
    assert [s["kind"] for s in again.sessions] == ["start", "resume"]
    assert again.sessions[1]["previous_state"] == "aborted"
    assert again.sessions[1]["started_clock"] - again.sessions[0]["started_clock"] == 60


@pytest.mark.parametrize("content, fragment", [
    ('{"format": "nightbench-manifest", "start_utc": ', "not valid JSON"),
    ("[1, 2]", "not a JSON object"),
    ('{"format": "something-else"}', "not a nightbench manifest"),
    ('{"format": "nightbench-manifest", "start_utc": "x"}', "missing start_clock"),
    ('{"format": "nightbench-manifest", "start_utc": "x", "start_clock": 0,'
     ' "simulated_clock": true, "unknown": 1, "state": "running"}', None),
])
def test_damaged_manifest_is_refused_naming_the_file(tmp_path: Path, content: str,
                                                     fragment: str | None) -> None:
    (tmp_path / "manifest.json").write_text(content)
    if fragment is None:  # unknown keys from a newer version are ignored, not fatal
        assert load_manifest(tmp_path).state == "running"
        return
    with pytest.raises(ManifestError) as info:
        load_manifest(tmp_path)
    assert str(tmp_path / "manifest.json") in str(info.value)
    assert fragment in str(info.value)


def test_missing_manifest_says_so(tmp_path: Path) -> None:
    with pytest.raises(ManifestError, match="no manifest"):
        load_manifest(tmp_path)


def test_manifest_file_is_sorted_indented_json(tmp_path: Path) -> None:
    Manifest.begin(SimClock()).write(tmp_path)
    text = (tmp_path / "manifest.json").read_text()
    keys = list(json.loads(text))
    assert keys == sorted(keys)
    assert text.splitlines()[1].startswith('  "')
