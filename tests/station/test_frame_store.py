"""Frame store: streamed uint16 stacks, exact float64 averages, partial files set aside."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap
import tracemalloc
from pathlib import Path

import numpy as np
import pytest
import tifffile

from drivers.clock import SimClock
from drivers.interfaces import Frame
from station.record import atomic
from station.record.atomic import DiskFullError
from station.record.events import EventLog, read_events
from station.record.frame_store import (CaptureWriter, FrameStoreError, list_captures, load_average,
                                 load_metadata, load_stack, move_partials_aside, partial_files)

ROWS, COLS = 64, 80
FLOAT32_UNIT_ROUNDOFF = 2.0 ** -24  # IEEE 754 binary32: relative rounding error <= 2^-24


def frames(n: int, seed: int = 3, counters: list[int] | None = None) -> list[Frame]:
    rng = np.random.default_rng(seed)
    cube = rng.integers(0, 2 ** 14, (n, ROWS, COLS), dtype=np.uint16)  # a 14-bit camera
    counters = counters or list(range(1000, 1000 + n))
    return [Frame(cube[i], counters[i], 0.02 * i) for i in range(n)]


def run_dir(tmp_path: Path) -> Path:
    (tmp_path / "frames").mkdir(exist_ok=True)
    return tmp_path


def test_stack_round_trips_exactly_and_average_matches_numpy(tmp_path: Path) -> None:
    clock = SimClock()
    data = frames(40)
    writer = CaptureWriter(run_dir(tmp_path) / "frames", "sweep[1].capture", "flat_5K", "both",
                           expected_count=40, clock=clock)
    for f in data:
        writer.add(f, readings={"difference_K": np.float64(5.0)})
        clock.sleep(1 / 50)
    record = writer.finish()
    cube = np.stack([f.data for f in data])
    stack = load_stack(tmp_path, "flat_5K")
    assert stack.dtype == np.uint16 and stack.shape == (40, ROWS, COLS)
    assert np.array_equal(stack, cube)
    avg = load_average(tmp_path, "flat_5K")
    reference = cube.astype(np.float64).mean(axis=0)  # numpy's mean as the reference
    assert avg.dtype == np.float32
    # Integer sums are exact in float64 (< 2^53), so the only error is the final float32 rounding.
    assert np.max(np.abs(avg - reference) / np.maximum(reference, 1)) <= FLOAT32_UNIT_ROUNDOFF
    assert record.count == 40 and record.shape == (ROWS, COLS)
    assert record.end_t - record.start_t == pytest.approx(40 / 50)
    with tifffile.TiffFile(record.stack_path) as tf:  # TIFF 6.0: one IFD (page) per frame
        assert len(tf.pages) == 40
        assert tf.pages[0].bitspersample == 16
    with tifffile.TiffFile(record.average_path) as tf:
        assert tf.pages[0].bitspersample == 32 and tf.pages[0].sampleformat == 3  # IEEE float


def test_metadata_holds_counters_times_readings_and_checksums(tmp_path: Path) -> None:
    data = frames(5, counters=[10, 11, 13, 13, 14])  # one dropped (12), one repeated (13)
    writer = CaptureWriter(run_dir(tmp_path) / "frames", "s1", "dark", "stack", expected_count=5)
    for i, f in enumerate(data):
        writer.add(f, readings={"blackbody_C": 20.0 + i / 1000, "stage": {"az": 1.5}})
    record = writer.finish()
    meta = load_metadata(tmp_path, "dark")
    assert meta["counters"] == [10, 11, 13, 13, 14]
    assert (meta["counter_gaps"], meta["repeated_counters"]) == (1, 1)
    assert (record.counter_gaps, record.repeated_counters) == (1, 1)
    assert meta["timestamps"] == pytest.approx([0.0, 0.02, 0.04, 0.06, 0.08])
    assert [r["blackbody_C"] for r in meta["readings"]] == pytest.approx(
        [20.0, 20.001, 20.002, 20.003, 20.004])
    assert meta["shape"] == [ROWS, COLS] and meta["axis_order"] == "rows, cols"
    assert "average" not in meta["files"]
    import hashlib  # reference checksum: hashlib over the file's bytes
    digest = hashlib.sha256(record.stack_path.read_bytes()).hexdigest()
    assert meta["files"]["stack"]["sha256"] == digest == record.checksums["dark.stack.tif"]
    with pytest.raises(FrameStoreError, match="no average"):
        load_average(tmp_path, "dark")


def test_files_are_partial_until_finish_and_metadata_comes_last(tmp_path: Path) -> None:
    frames_dir = run_dir(tmp_path) / "frames"
    writer = CaptureWriter(frames_dir, "s1", "open", "both")
    for f in frames(3):
        writer.add(f)
    names = sorted(p.name for p in frames_dir.iterdir())
    assert names == ["open.frames.jsonl.partial", "open.stack.tif.partial"]
    assert list_captures(tmp_path) == []
    # A stack torn by a crash stays readable page by page (pages written one by one).
    with tifffile.TiffFile(frames_dir / "open.stack.tif.partial") as tf:
        assert len(tf.pages) >= 1
    writer.finish()
    assert sorted(p.name for p in frames_dir.iterdir()) == [
        "open.avg.tif", "open.json", "open.stack.tif"]
    assert list_captures(tmp_path) == ["open"]


def test_abandon_moves_partials_aside_with_reason(tmp_path: Path) -> None:
    clock = SimClock()
    frames_dir = run_dir(tmp_path) / "frames"
    log = EventLog(tmp_path / "events.jsonl", clock)
    writer = CaptureWriter(frames_dir, "sweep[2].capture", "flat", "both", clock=clock, events=log)
    for f in frames(7):
        writer.add(f)
    folder = writer.abandon("operator abort (SIGINT)")
    assert folder == frames_dir / "abandoned" / "sweep-2-.capture-1"
    assert partial_files(frames_dir) == []
    reason = json.loads((folder / "reason.json").read_text())
    assert reason["step_id"] == "sweep[2].capture" and reason["frames_added"] == 7
    assert reason["files"]["flat.stack.tif.partial"]["readable_pages"] == 7
    assert np.array_equal(tifffile.imread(folder / "flat.stack.tif.partial")[6], frames(7)[6].data)
    (event,) = read_events(tmp_path / "events.jsonl", "capture.abandoned")
    assert event["frames_added"] == 7
    log.close()


def test_redoing_a_step_sets_old_files_aside_and_never_mixes_them(tmp_path: Path) -> None:
    frames_dir = run_dir(tmp_path) / "frames"
    first = CaptureWriter(frames_dir, "scan[4].capture", "spot_4", "stack")
    for f in frames(3, seed=1):
        first.add(f)
    first._close_streams()  # as if killed: partial files stay behind
    second = CaptureWriter(frames_dir, "scan[4].capture", "spot_4", "stack")
    assert (frames_dir / "abandoned" / "scan-4-.capture-1" / "spot_4.stack.tif.partial").exists()
    for f in frames(5, seed=2):
        second.add(f)
    second.finish()
    # Finished but not journaled (crash before the journal line): a third attempt sets it aside.
    third = CaptureWriter(frames_dir, "scan[4].capture", "spot_4", "stack")
    for f in frames(4, seed=4):
        third.add(f)
    third.finish()
    assert (frames_dir / "abandoned" / "scan-4-.capture-2" / "spot_4.json").exists()
    assert load_stack(tmp_path, "spot_4").shape == (4, ROWS, COLS)
    with pytest.raises(FrameStoreError, match="already used by step"):
        CaptureWriter(frames_dir, "scan[5].capture", "spot_4", "stack")


def test_disk_full_mid_capture_raises_and_keeps_frames_taken(tmp_path: Path,
                                                             monkeypatch: pytest.MonkeyPatch) -> None:
    frames_dir = run_dir(tmp_path) / "frames"
    writer = CaptureWriter(frames_dir, "s9", "long", "both", min_free_bytes=1_000_000)
    free = iter([10**9] * 3 + [1_000_000 + ROWS * COLS * 2 - 1])  # one byte short at frame 4
    monkeypatch.setattr(atomic, "free_bytes", lambda path: next(free))
    data = frames(4)
    for f in data[:3]:
        writer.add(f)
    with pytest.raises(DiskFullError) as info:
        writer.add(data[3])
    assert "frame 4 of capture 'long'" in str(info.value)
    assert info.value.needed == 1_000_000 + ROWS * COLS * 2
    monkeypatch.undo()
    folder = writer.abandon(str(info.value))
    assert json.loads((folder / "reason.json").read_text())["frames_added"] == 3
    assert len(tifffile.imread(folder / "long.stack.tif.partial")) == 3


def test_bad_frames_are_refused_with_the_capture_named(tmp_path: Path) -> None:
    frames_dir = run_dir(tmp_path) / "frames"
    writer = CaptureWriter(frames_dir, "s1", "a", "stack")
    writer.add(frames(1)[0])
    with pytest.raises(FrameStoreError, match=r"capture 'a': frame 7 is \(10, 80\)"):
        writer.add(Frame(np.zeros((10, COLS), np.uint16), 7, 0.0))
    writer.abandon("test")
    floats = CaptureWriter(frames_dir, "s2", "b", "stack")
    with pytest.raises(FrameStoreError, match="use keep: average"):
        floats.add(Frame(np.zeros((4, 4), np.float32), 1, 0.0))
    wide = CaptureWriter(frames_dir, "s3", "c", "stack")
    with pytest.raises(FrameStoreError, match="outside uint16"):
        wide.add(Frame(np.full((4, 4), 70000, np.int32), 1, 0.0))
    with pytest.raises(FrameStoreError, match="keep must be one of"):
        CaptureWriter(frames_dir, "s4", "d", "all")  # type: ignore[arg-type]
    with pytest.raises(FrameStoreError, match="no frames"):
        CaptureWriter(frames_dir, "s5", "e", "both").finish()


def test_averaging_holds_one_accumulator_not_the_frames(tmp_path: Path) -> None:
    frame_bytes = ROWS * 4 * COLS * 4 * 2
    data = np.random.default_rng(0).integers(0, 2 ** 14, (ROWS * 4, COLS * 4), dtype=np.uint16)

    def peak(n: int, keep: str) -> int:
        writer = CaptureWriter(run_dir(tmp_path) / "frames", f"m{n}{keep}", f"m{n}{keep}", keep,
                               expected_count=n)
        tracemalloc.start()
        for i in range(n):
            writer.add(Frame(data, i, i * 0.01))
        writer.finish()
        _, top = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        return top

    for keep in ("average", "both"):
        growth = (peak(200, keep) - peak(20, keep)) / 180
        # Holding frames would grow by frame_bytes (82 kB) per frame; counters and TIFF page
        # offsets grow by a few hundred bytes. Bound: 1/16 of a frame per frame.
        assert growth < frame_bytes / 16, (keep, growth)


def test_kill_9_mid_capture_then_partials_are_set_aside_on_resume(tmp_path: Path) -> None:
    frames_dir = run_dir(tmp_path) / "frames"
    child = textwrap.dedent(f"""
        import numpy as np
        from drivers.interfaces import Frame
        from station.record.frame_store import CaptureWriter
        w = CaptureWriter({str(frames_dir)!r}, "sweep[3].capture", "flat_15K", "both")
        img = np.full(({ROWS}, {COLS}), 1234, np.uint16)
        for i in range(1, 100000):
            w.add(Frame(img, i, i * 0.02), readings={{"difference_K": 15.0}})
            print(i, flush=True)
    """)
    proc = subprocess.Popen([sys.executable, "-c", child], stdout=subprocess.PIPE, text=True)
    acknowledged = 0
    for line in proc.stdout:
        acknowledged = int(line)
        if acknowledged >= 25:
            break
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    proc.stdout.close()
    (folder,) = move_partials_aside(frames_dir, "resume after kill -9", clock=SimClock())
    assert folder.name == "sweep-3-.capture-1"
    reason = json.loads((folder / "reason.json").read_text())
    assert reason["step_id"] == "sweep[3].capture"
    assert reason["frames_added"] >= acknowledged
    pages = reason["files"]["flat_15K.stack.tif.partial"]["readable_pages"]
    assert acknowledged <= pages <= reason["frames_added"] + 1
    assert np.all(tifffile.imread(folder / "flat_15K.stack.tif.partial", key=0) == 1234)
    assert partial_files(frames_dir) == []
