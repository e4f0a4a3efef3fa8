"""Frame grabber over OpenCV's VideoCapture: USB and analog capture devices, and video files.

Station entry::

    camera:
      driver: video-capture
      resource: device:0            # or /dev/video2, or file:recordings/bay2_soak.avi
      frame_rate: 30                # optional: overrides what the device or file reports
      loop: false                   # files only: start again at the end instead of failing

OpenCV is imported only when the driver opens (pip install opencv-python-headless). Frames are
returned as (rows, cols) single-channel arrays: analog and USB capture of a thermal camera's video
arrives as identical colour channels, so the green channel is that video (`channel: gray` mixes
the channels with OpenCV's BGR2GRAY weights instead).

Counters: from a file, the frame's 1-based position in the file (so a skipped frame shows as a gap);
from a device, a count of frames read since the driver opened.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import Any

import numpy as np

from drivers.clock import Clock, RealClock
from drivers.errors import InstrumentConnectionError, InstrumentError
from drivers.interfaces import Frame, FrameGrabber
from drivers.scpi import SettingsError

_CHANNELS = ("green", "gray", "blue", "red")


def require_cv2(instrument: str) -> Any:
    """Import OpenCV or say how to get it."""
    try:
        import cv2
    except ImportError:
        raise InstrumentConnectionError(
            instrument, "the video-capture driver needs OpenCV, which is not installed",
            hint="pip install opencv-python-headless (or: pip install nightbench[video])"
        ) from None
    return cv2


def parse_video_resource(resource: str, base_dir: str | Path | None) -> tuple[str, int | str]:
    """('device', index or /dev path) or ('file', absolute path) from a station resource."""
    text = str(resource).strip()
    if text.startswith("device:"):
        dev = text[len("device:"):].strip()
        return "device", int(dev) if dev.isdigit() else dev
    if text.isdigit():
        return "device", int(text)
    if text.startswith("/dev/"):
        return "device", text
    path = Path(text[len("file:"):] if text.startswith("file:") else text)
    if not path.is_absolute() and base_dir is not None:
        path = Path(base_dir) / path
    return "file", str(path)


class VideoCaptureGrabber(FrameGrabber):
    """Frames from a cv2.VideoCapture (device index, device path or video file)."""

    KIND = "camera"
    SETTINGS = {
        "resource": "device:<n>, /dev/videoN, or file:<video path> (relative to the station file)",
        "frame_rate": "frames per second, when the device or file reports none or a wrong one",
        "bit_depth": "bits per pixel of the video (default 8)",
        "channel": "green (default), gray, blue or red: how colour video becomes one channel",
        "loop": "files only: start again at the end (default false)",
    }

    def __init__(self, transport: None = None, *, name: str = "camera",
                 settings: Mapping[str, Any] | None = None, clock: Clock | None = None) -> None:
        settings = dict(settings or {})
        problems = self.validate_settings(settings)
        if problems:
            raise SettingsError(f"{name}: " + "; ".join(problems))
        self.name = name
        self.clock = clock or RealClock()
        self.source_kind, self.source = parse_video_resource(settings["resource"],
                                                             settings.get("base_dir"))
        self.channel = str(settings.get("channel", "green"))
        self.loop = bool(settings.get("loop", False))
        self._bit_depth = int(settings.get("bit_depth", 8))
        self._cv2 = require_cv2(name)
        if self.source_kind == "file" and not Path(str(self.source)).is_file():
            raise InstrumentConnectionError(name, f"video file {self.source} not found",
                                            hint="check the camera resource in the station file")
        self._cap = self._cv2.VideoCapture(self.source)
        if not self._cap.isOpened():
            raise InstrumentConnectionError(
                name, f"OpenCV could not open {self.source_kind} {self.source!r}",
                hint="check the device is plugged in and not used by another program, or "
                     "that the file is a video OpenCV can decode")
        reported = float(self._cap.get(self._cv2.CAP_PROP_FPS) or 0.0)
        self._rate = float(settings.get("frame_rate") or reported or 30.0)
        self._read_count = 0
        self._peek = self._read()  # the first frame fixes the shape
        if self._peek is None:
            raise InstrumentError(name, f"{self.source_kind} {self.source!r} gave no frame")

    @classmethod
    def validate_settings(cls, settings: Mapping[str, Any]) -> list[str]:
        problems = []
        if not str(settings.get("resource", "")).strip():
            problems.append("resource: missing; give device:0, /dev/video0 or file:<path>")
        if settings.get("channel", "green") not in _CHANNELS:
            problems.append(f"channel: {settings.get('channel')!r} is not one of {_CHANNELS}")
        rate = settings.get("frame_rate")
        if rate is not None and (not isinstance(rate, (int, float)) or rate <= 0):
            problems.append(f"frame_rate: must be a positive number, not {rate!r}")
        depth = settings.get("bit_depth", 8)
        if not isinstance(depth, int) or not 1 <= depth <= 16:
            problems.append(f"bit_depth: must be a whole number 1..16, not {depth!r}")
        return problems

    # --- reading ------------------------------------------------------------------------------
    def _read(self) -> tuple[np.ndarray, int, float] | None:
        """(image, counter, timestamp) of the next frame, or None at the end of a file."""
        ok, image = self._cap.read()
        if not ok and self.source_kind == "file" and self.loop and self._read_count:
            self._cap.set(self._cv2.CAP_PROP_POS_FRAMES, 0)
            ok, image = self._cap.read()
        if not ok:
            return None
        self._read_count += 1
        if self.source_kind == "file":
            counter = self._read_count
            stamp = float(self._cap.get(self._cv2.CAP_PROP_POS_MSEC)) / 1000.0
        else:
            counter, stamp = self._read_count, self.clock.now()
        return self._one_channel(image), counter, stamp

    def _one_channel(self, image: np.ndarray) -> np.ndarray:
        if image.ndim == 2:
            return image
        if self.channel == "gray":
            return self._cv2.cvtColor(image, self._cv2.COLOR_BGR2GRAY)
        return np.ascontiguousarray(image[:, :, {"blue": 0, "green": 1, "red": 2}[self.channel]])

    # --- FrameGrabber -------------------------------------------------------------------------
    @property
    def shape(self) -> tuple[int, int]:
        image = self._peek[0] if self._peek is not None else None
        if image is None:
            return (int(self._cap.get(self._cv2.CAP_PROP_FRAME_HEIGHT)),
                    int(self._cap.get(self._cv2.CAP_PROP_FRAME_WIDTH)))
        return int(image.shape[0]), int(image.shape[1])

    def identify(self) -> str:
        backend = self._cap.getBackendName() if hasattr(self._cap, "getBackendName") else "?"
        return f"OpenCV VideoCapture ({backend}) {self.source_kind} {self.source}"

    def grab(self, count: int) -> Iterator[Frame]:
        """`count` frames in order; the end of a file (without loop) is an InstrumentError."""
        if count < 0:
            raise ValueError(f"{self.name}: frame count must be >= 0, got {count}")
        for i in range(int(count)):
            item = self._peek if self._peek is not None else self._read()
            self._peek = None
            if item is None:
                raise InstrumentError(self.name, f"{self.source} ended after "
                                      f"{self._read_count} frames ({i} of {count} grabbed)",
                                      hint="set loop: true to replay the file from the start")
            image, counter, stamp = item
            yield Frame(data=image, counter=counter, timestamp=stamp,
                        meta={"source": str(self.source)})

    def snapshot(self) -> dict[str, Any]:
        return {"frames": self._read_count, "frame_rate_hz": self._rate}

    def close(self) -> None:
        cap, self._cap = getattr(self, "_cap", None), None
        if cap is not None:
            cap.release()
