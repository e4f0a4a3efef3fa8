"""TIFF replay grabber: loose TIFF folders and a run folder's captures, in order, with counters."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import tifffile

from drivers.clock import SimClock
from drivers.errors import InstrumentConnectionError, InstrumentError
from drivers.interfaces import Frame
from drivers.registry import find_driver
from drivers.testkit import run_contract
from drivers.tiff_replay import TiffReplayGrabber, natural_key

ROWS, COLS = 64, 80


def image(level: int) -> np.ndarray:
    """A frame whose every pixel tells which frame it is (so order errors cannot hide)."""
    return np.full((ROWS, COLS), level, dtype=np.uint16)


def test_loose_files_in_natural_order_pages_in_turn(tmp_path: Path) -> None:
    # written out of order; frame_10 must come after frame_9 (natural order), not after frame_1
    for i in (10, 2, 1, 9):
        tifffile.imwrite(tmp_path / f"frame_{i}.tif", image(100 * i))
    tifffile.imwrite(tmp_path / "frame_11.tif", np.stack([image(1101), image(1102)]))
    grabber = find_driver("tiff-replay")(None, name="camera",
                                         settings={"resource": f"replay:{tmp_path.name}",
                                                   "base_dir": str(tmp_path.parent)})
    assert isinstance(grabber, TiffReplayGrabber)
    assert grabber.shape == (ROWS, COLS) and grabber.bit_depth == 16
    frames = list(grabber.grab(6))
    assert [int(f.data[0, 0]) for f in frames] == [100, 200, 900, 1000, 1101, 1102]
    assert [f.counter for f in frames] == [1, 2, 3, 4, 5, 6]
    # no recorded times: the frame period of the default 30 fps
    assert np.diff([f.timestamp for f in frames]) == pytest.approx(1 / 30.0)
    with pytest.raises(InstrumentError, match="replay ran out after 6 frames"):
        next(iter(grabber.grab(1)))


def test_run_folder_captures_replay_recorded_counters_and_times(tmp_path: Path) -> None:
    from station.record.frame_store import CaptureWriter

    frames_dir = tmp_path / "frames"
    clock = SimClock()
    originals: list[Frame] = []
    for name, first in (("grid_b", 201), ("grid_a", 101)):   # b recorded first, a second
        writer = CaptureWriter(frames_dir, f"s{first}.capture", name, keep="both", clock=clock)
        for k in range(3):
            counter = first + 2 * k                            # a gap of one at every frame
            frame = Frame(image(counter), counter, clock.now())
            originals.append(frame)
            writer.add(frame)
            clock.sleep(0.04)                                  # 25 fps
        writer.finish()
    grabber = TiffReplayGrabber(settings={"resource": str(frames_dir)})
    replayed = list(grabber.grab(6))
    # served in recording order (by first timestamp), not by name; pixel-exact, same counters
    assert [f.counter for f in replayed] == [201, 203, 205, 101, 103, 105]
    assert [f.counter for f in replayed] == [f.counter for f in originals]
    for got, want in zip(replayed, originals):
        assert np.array_equal(got.data, want.data)
        assert got.timestamp == pytest.approx(want.timestamp, abs=1e-6)
    # frame rate from the recorded times: six frames 0.04 s apart -> 5 intervals over 0.20 s
    assert grabber.frame_rate == pytest.approx(5 / 0.20)


def test_contract_runner_passes_on_replay_and_loops_keep_counting(tmp_path: Path) -> None:
    for i in range(1, 5):
        tifffile.imwrite(tmp_path / f"f{i}.tiff", image(i))
    grabber = TiffReplayGrabber(settings={"resource": str(tmp_path), "loop": True})
    report = run_contract(grabber, SimClock(), frames=4)
    report.raise_if_failed()
    again = list(grabber.grab(3))
    assert [f.counter for f in again] == [5, 6, 7]
    assert [int(f.data[0, 0]) for f in again] == [1, 2, 3]


def test_missing_or_empty_folders_say_what_to_do(tmp_path: Path) -> None:
    with pytest.raises(InstrumentConnectionError, match="replay folder .* not found"):
        TiffReplayGrabber(settings={"resource": str(tmp_path / "nope")})
    with pytest.raises(InstrumentConnectionError, match="no TIFF frames in"):
        TiffReplayGrabber(settings={"resource": str(tmp_path)})
    assert sorted([Path("a10.tif"), Path("a9.tif"), Path("A1.tif")], key=natural_key) == [
        Path("A1.tif"), Path("a9.tif"), Path("a10.tif")]
