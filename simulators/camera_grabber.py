"""A `FrameGrabber` driver that streams frames of the simulated camera.

Each grabbed frame reads the current scene from `scene_source` (the simulated bench state:
blackbody, wheel, stage), renders it, stamps it with the clock's time and a counter, and moves the
clock on by one frame period, so a dry run takes the simulated time a real grab would.

Noise is reproducible by what is captured: the station may call `begin_capture(key)` before each
capture (key: the run's step id and capture name, say); the frames of that capture are then
seeded by (run seed, key, frame index in the capture), so a resumed run re-captures the very same
frames whatever happened before. Without the call, frames are seeded by the grabber's counter as
before (reproducible for an uninterrupted run only).

An optional fault plan makes it misbehave the way real grabbers do, per frame: `drop` (the frame
never arrives: its counter is skipped), `repeat` (the previous frame is delivered again with the
same counter) and `short` (a frame with only part of its rows). The station detects each from the
counters and the shape and grabs again.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from typing import Any

from drivers.clock import Clock
from drivers.interfaces import Frame, FrameGrabber
from simulators.camera_render import CameraRenderer, SceneState


class SimFrameGrabber(FrameGrabber):
    """Frames from a `CameraRenderer` of whatever scene the simulated bench shows.

    Built by the station for a camera whose resource is `sim` (it needs the simulated bench).
    """

    KIND = "camera"
    SETTINGS = {"resource": "'sim': rendered from the simulated bench (simulated stations only)"}

    def __init__(self, renderer: CameraRenderer, scene_source: Callable[[], SceneState],
                 clock: Clock, frame_rate_hz: float, name: str = "camera",
                 attach_truth: bool = False, faults: Any = None,
                 fault_name: str = "grabber") -> None:
        if not frame_rate_hz > 0:
            raise ValueError(f"{name}: frame_rate_hz must be > 0, got {frame_rate_hz}")
        self.renderer = renderer
        self.scene_source = scene_source
        self.clock = clock
        self._rate = float(frame_rate_hz)
        self.name = name
        self._counter = 0
        self.attach_truth = attach_truth
        self.faults = faults            # simulators.faults.FaultPlan or None
        self.fault_name = fault_name    # the instrument name its rules use
        self._last: Frame | None = None
        self._capture_key: str | None = None
        self._capture_index = 0

    def begin_capture(self, key: str) -> None:
        """Name the capture that follows: its frames' noise is seeded by (run seed, `key`,
        frame index in the capture, from 0, counting frames delivered whole). Call it again
        (same key) to re-capture the same frames; `end_capture` returns to counter-seeded
        frames."""
        if not isinstance(key, str) or not key:
            raise ValueError(f"{self.name}: capture key must be a non-empty string, got {key!r}")
        self._capture_key = key
        self._capture_index = 0

    def end_capture(self) -> None:
        """Back to frames seeded by the grabber's counter."""
        self._capture_key = None
        self._capture_index = 0

    @property
    def shape(self) -> tuple[int, int]:
        return self.renderer.shape

    @property
    def bit_depth(self) -> int:
        return int(self.renderer.truth.bit_depth)

    def identify(self) -> str:
        return f"nightbench simulated camera, {self.renderer.truth.model}"

    def grab(self, count: int) -> Iterator[Frame]:
        """Yield up to `count` frames; counters increase by one; the clock advances 1/rate per
        frame. With a fault plan some frames are dropped (fewer yielded), repeated or short."""
        if count < 0:
            raise ValueError(f"{self.name}: frame count must be >= 0, got {count}")
        period = 1.0 / self._rate
        for _ in range(int(count)):
            fault = self._fault()
            last = self._last
            if fault == "repeat" and last is not None:
                yield Frame(data=last.data, counter=last.counter, timestamp=self.clock.now(),
                            meta=dict(last.meta, fault="repeat"))
                self.clock.sleep(period)
                continue
            scene = self.scene_source()
            self._counter += 1
            index, key = self._counter, self._capture_key
            if key is not None:
                # only a frame delivered whole uses up an index of the capture: after a drop or
                # a short frame the station grabs again and gets that same frame
                index = self._capture_index
                if fault is None or fault == "repeat":
                    self._capture_index += 1
            if fault == "drop":
                self.clock.sleep(period)
                continue
            data = self.renderer.render(scene, index, key)
            meta: dict[str, Any] = {
                "source_c": scene.source_c, "plate_c": scene.plate_c,
                "target": None if scene.target is None else scene.target.kind,
                "az_deg": scene.az_deg, "el_deg": scene.el_deg}
            if key is not None:
                meta["capture_key"] = key
                meta["capture_index"] = index
            if self.attach_truth:  # tests only: a real grabber cannot know this
                meta["truth_spots_xy_px"] = self.renderer.expected_spots(scene)[0].tolist()
            last = self._last = Frame(data=data, counter=self._counter,
                                      timestamp=self.clock.now(), meta=meta)
            if fault == "short":
                yield Frame(data=data[: max(1, data.shape[0] // 2)], counter=self._counter,
                            timestamp=last.timestamp, meta=dict(meta, fault="short"))
            else:
                yield last
            self.clock.sleep(period)

    def _fault(self) -> str | None:
        """The grabber fault (drop, repeat, short) that fires for the next frame, if any."""
        if self.faults is None:
            return None
        for kind in ("drop", "repeat", "short"):
            if self.faults.should_fire(self.fault_name, kind, count=self._counter + 1,
                                       t=self.clock.now()):
                return kind
        return None

    def truth_for_current_scene(self) -> dict[str, Any]:
        """Ground truth (spot positions, model parameters) of the scene now in view, for JSON."""
        return self.renderer.truth_for_scene(self.scene_source())

    def snapshot(self) -> dict[str, Any]:
        return {"frames": self._counter, "frame_rate_hz": self._rate}
