"""VideoCapture grabber against a video file written by OpenCV's own VideoWriter."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

cv2 = pytest.importorskip("cv2")

from drivers.errors import InstrumentConnectionError, InstrumentError  # noqa: E402
from drivers.registry import find_driver  # noqa: E402
from drivers.testkit import run_contract  # noqa: E402
from drivers.clock import SimClock  # noqa: E402
from drivers.video_capture import VideoCaptureGrabber, parse_video_resource  # noqa: E402

ROWS, COLS, FRAMES, FPS = 120, 160, 12, 25.0


def write_video(path: Path) -> list[np.ndarray]:
    """MJPG .avi of frames whose mean level encodes the frame index (10 + 15 i)."""
    writer = cv2.VideoWriter(str(path), cv2.VideoWriter_fourcc(*"MJPG"), FPS, (COLS, ROWS))
    assert writer.isOpened()
    frames = []
    for i in range(FRAMES):
        gray = np.full((ROWS, COLS), 10 + 15 * i, dtype=np.uint8)
        gray[ROWS // 4: ROWS // 2, COLS // 4: COLS // 2] = 250  # a bright block: shape check
        frames.append(gray)
        writer.write(cv2.cvtColor(gray, cv2.COLOR_GRAY2BGR))
    writer.release()
    return frames


@pytest.fixture
def video(tmp_path: Path) -> tuple[Path, list[np.ndarray]]:
    path = tmp_path / "bay.avi"
    return path, write_video(path)


def test_reads_every_frame_with_shape_counters_and_levels(video) -> None:
    path, written = video
    grabber = find_driver("video-capture")(None, name="camera",
                                           settings={"resource": f"file:{path.name}",
                                                     "base_dir": str(path.parent)})
    assert isinstance(grabber, VideoCaptureGrabber)
    assert grabber.shape == (ROWS, COLS)
    assert grabber.frame_rate == pytest.approx(FPS)      # from the file's header
    frames = list(grabber.grab(FRAMES))
    grabber.close()
    assert [f.counter for f in frames] == list(range(1, FRAMES + 1))
    assert all(f.data.shape == (ROWS, COLS) and f.data.dtype == np.uint8 for f in frames)
    # MJPG is lossy: JPEG at OpenCV's default quality (95) keeps flat areas within a few
    # grey levels (common practice for baseline JPEG of smooth content)
    for f, w in zip(frames, written):
        assert abs(float(np.median(f.data)) - float(np.median(w))) <= 3
        assert abs(float(f.data[ROWS // 3, COLS // 3]) - 250) <= 3
    # timestamps are media time: frame i at (i-1)/fps, to within one frame
    stamps = np.array([f.timestamp for f in frames])
    assert np.diff(stamps) == pytest.approx(1 / FPS, abs=1e-3)


def test_end_of_file_is_an_instrument_error_unless_looping(video) -> None:
    path, _ = video
    once = VideoCaptureGrabber(settings={"resource": str(path)})
    with pytest.raises(InstrumentError, match=f"ended after {FRAMES} frames"):
        list(once.grab(FRAMES + 1))
    looping = VideoCaptureGrabber(settings={"resource": str(path), "loop": True})
    counters = [f.counter for f in looping.grab(FRAMES + 3)]
    assert counters == list(range(1, FRAMES + 4))         # counters keep rising across the loop


def test_contract_runner_passes_on_a_video_file(video) -> None:
    path, _ = video
    grabber = VideoCaptureGrabber(settings={"resource": str(path), "frame_rate": 30})
    report = run_contract(grabber, SimClock(), frames=5)
    report.raise_if_failed()
    assert grabber.frame_rate == 30.0                    # the setting overrides the header


def test_bad_resources_and_settings_are_named() -> None:
    assert parse_video_resource("device:2", None) == ("device", 2)
    assert parse_video_resource("/dev/video1", None) == ("device", "/dev/video1")
    assert parse_video_resource("file:a.avi", "/bench") == ("file", "/bench/a.avi")
    with pytest.raises(InstrumentConnectionError, match="video file .*missing.avi not found"):
        VideoCaptureGrabber(settings={"resource": "file:/nowhere/missing.avi"})
    assert VideoCaptureGrabber.validate_settings({"resource": "0", "channel": "purple",
                                                  "frame_rate": -1}) == [
        "channel: 'purple' is not one of ('green', 'gray', 'blue', 'red')",
        "frame_rate: must be a positive number, not -1"]
