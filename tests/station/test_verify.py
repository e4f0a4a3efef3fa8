"""verify_run: every kind of damage is reported by file name; a sound run passes."""

from __future__ import annotations

import datetime as dt
import os
from pathlib import Path

import numpy as np
import pytest

from drivers.clock import SimClock
from drivers.interfaces import Frame
from station.record.manifest import Manifest
from station.record.runfolder import RunFolder
from station.record.verify import verify_run

START = dt.datetime(2026, 1, 1, 18, 0, tzinfo=dt.timezone.utc)


def make_run(root: Path, *, finish: bool = True) -> RunFolder:
    """A small complete run: inputs, two captures, journal, events, a result, closed manifest."""
    clock = SimClock()
    folder = RunFolder.create(root, uut_serial="SN7", recipe_name="demo", utc=START, clock=clock)
    folder.copy_inputs(texts={"recipe": ("demo.yaml", "steps: []\n")})
    manifest = Manifest.begin(clock, inputs=folder.inputs, plan={"steps": 2})
    manifest.write(folder.path)
    folder.events.emit("state", name="running", cause="preflight passed")
    for k, name in enumerate(("flat_5K", "flat_10K"), start=1):
        with folder.new_capture(f"sweep[{k}].capture", name, keep="both") as cap:
            for i in range(6):
                cap.add(Frame(np.full((16, 20), 1000 * k + i, np.uint16), i, clock.now()))
                clock.sleep(0.02)
            record = cap.finish()
        folder.journal.record(f"sweep[{k}].capture", "capture", record.to_dict(folder.path))
    (folder.results_dir / "sitf.json").write_text('{"sitf": 12.5}\n')
    folder.register(folder.results_dir / "sitf.json")
    if finish:
        folder.events.emit("state", name="complete", cause="all steps done")
        folder.close()
        manifest.close(folder.path, state="complete", cause="all steps done", clock=clock)
    return folder


def test_a_sound_run_passes(tmp_path: Path) -> None:
    folder = make_run(tmp_path)
    report = verify_run(folder.path)
    assert report.ok, report.format()
    # run-folder.json, inputs.json, recipe copy, events, journal, 2 x (stack, avg, json), result
    assert report.files_checked == 12
    # events: state running, 2 x capture.stored, file_written, state complete
    assert (report.captures_checked, report.journal_entries, report.events_count) == (2, 2, 5)
    assert report.state == "complete"
    assert "verdict: OK" in report.format()


def test_altered_byte_truncation_and_deletion_are_each_named(tmp_path: Path) -> None:
    folder = make_run(tmp_path)
    stack = folder.frames_dir / "flat_5K.stack.tif"
    data = bytearray(stack.read_bytes())
    data[-1] ^= 0x01  # flip one bit of the last pixel: same size, different SHA-256
    stack.write_bytes(bytes(data))
    avg = folder.frames_dir / "flat_10K.avg.tif"
    os.truncate(avg, avg.stat().st_size - 10)
    (folder.results_dir / "sitf.json").unlink()
    (folder.plots_dir / "late.png").write_bytes(b"\x89PNG")
    report = verify_run(folder.path)
    assert not report.ok
    assert report.altered == ["frames/flat_5K.stack.tif (checksum differs)"]
    size = avg.stat().st_size
    assert report.truncated == [f"frames/flat_10K.avg.tif ({size} of {size + 10} bytes)"]
    assert report.missing == ["results/sitf.json"]
    assert report.extra == ["plots/late.png"]
    text = report.format()
    # the flipped bit and the cut are also caught by each capture's own checksums (metadata)
    assert "flat_5K.stack.tif does not match the checksum in its metadata" in text
    assert "verdict: 6 problem(s)" in text
    for name in ("flat_5K.stack.tif", "flat_10K.avg.tif", "results/sitf.json", "plots/late.png"):
        assert name in text


def test_partial_abandoned_and_temp_files_are_reported(tmp_path: Path) -> None:
    folder = make_run(tmp_path, finish=False)
    cap = folder.new_capture("sweep[3].capture", "flat_15K", keep="stack")
    cap.add(Frame(np.zeros((16, 20), np.uint16), 0, 0.0))
    cap.abandon("operator abort")
    cap2 = folder.new_capture("sweep[4].capture", "flat_20K", keep="stack")
    cap2.add(Frame(np.zeros((16, 20), np.uint16), 0, 0.0))
    cap2._close_streams()
    folder.close()
    Manifest.begin(SimClock()).close(folder.path, state="aborted", cause="SIGINT",
                                     clock=SimClock())
    (folder.path / ".manifest.json.abc.tmp").write_text("x")
    report = verify_run(folder.path)
    assert report.partial == ["frames/flat_20K.frames.jsonl.partial",
                              "frames/flat_20K.stack.tif.partial"]
    assert report.temporary == [".manifest.json.abc.tmp"]
    assert [a["step_id"] for a in report.abandoned] == ["sweep[3].capture"]
    assert report.abandoned[0]["frames_added"] == 1
    assert "set aside: frames/abandoned/sweep3.capture-1" in report.format()
    assert report.state == "aborted" and len(report.problems) == 3


def test_capture_with_fewer_pages_than_its_metadata_is_reported(tmp_path: Path) -> None:
    folder = make_run(tmp_path, finish=False)
    meta = folder.frames_dir / "flat_5K.json"
    meta.write_text(meta.read_text().replace('"count": 6', '"count": 7'))
    folder.close()
    report = verify_run(folder.path)
    assert "capture 'flat_5K': stack holds 6 readable frame(s), metadata says 7" in \
        report.capture_problems


@pytest.mark.parametrize("target", ["journal.jsonl", "manifest.json"])
def test_corrupt_journal_or_manifest_is_a_named_problem(tmp_path: Path, target: str) -> None:
    folder = make_run(tmp_path)
    path = folder.path / target
    text = path.read_text()
    path.write_text(text[:40] + "\x00garbage\n" + text[40:])
    report = verify_run(folder.path)
    assert not report.ok
    assert any(target in p for p in report.problems), report.problems


def test_unfinished_run_does_not_pass(tmp_path: Path) -> None:
    folder = make_run(tmp_path, finish=False)
    folder.close()
    report = verify_run(folder.path)
    assert report.state == "running" and not report.ok
    assert "did not finish" in report.problems[0]
