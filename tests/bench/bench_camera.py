"""Benchmark: stream 1,000 frames of the demo camera (640x512, 14 bit) viewing a 15x11 pinhole grid.

Prints frames per second and memory (tracemalloc peak of Python allocations, and the process's
resident set size before and after), first with a fixed scene, then with the source and plate
temperatures changing every frame (as the simulated blackbody's readings do), open aperture and
pinhole grid. Target (issue 18): >= 300 frames/s with the temperature changing every frame, memory
flat while streaming.
Run: python3 tests/bench/bench_camera.py
"""

from __future__ import annotations

import resource
import time
import tracemalloc
from pathlib import Path

import yaml

from analysis.targets import OpenAperture, PinholeGrid
from drivers.clock import SimClock
from simulators.camera_grabber import SimFrameGrabber
from simulators.camera_render import CameraRenderer, SceneState
from simulators.camera_truth import truth_from_mapping

TRUTH = Path(__file__).resolve().parents[2] / "station" / "data" / "demo_camera_truth.yaml"


def _rss_mb() -> float:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) / 1024.0
    return float("nan")


def main(frames: int = 1000) -> None:
    truth = truth_from_mapping(yaml.safe_load(TRUTH.read_text()))
    renderer = CameraRenderer(truth)
    scene = SceneState(source_c=35.0, plate_c=20.0,
                       target=PinholeGrid(rows=11, cols=15, pitch_mm=27.0, diameter_mm=0.5),
                       collimator_focal_mm=1000.0)
    grabber = SimFrameGrabber(renderer, lambda: scene, SimClock(), frame_rate_hz=30.0)
    t0 = time.perf_counter()
    renderer.render_mean(scene)
    first = time.perf_counter() - t0
    list(grabber.grab(20))  # warm-up
    rss0 = _rss_mb()
    tracemalloc.start()
    t0 = time.perf_counter()
    rss_mid = 0.0
    checksum = 0
    for i, frame in enumerate(grabber.grab(frames)):
        checksum += int(frame.data[256, 320])
        if i == frames // 2:
            rss_mid = _rss_mb()
    elapsed = time.perf_counter() - t0
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    rss1 = _rss_mb()
    print(f"scene render (clean + FPN, once): {first * 1e3:.1f} ms")
    print(f"streamed {frames} frames 640x512 14-bit, 15x11 grid: {frames / elapsed:.1f} frames/s "
          f"({elapsed / frames * 1e3:.2f} ms/frame)")
    print(f"tracemalloc peak while streaming: {peak / 1e6:.2f} MB")
    print(f"RSS before / midway / after: {rss0:.1f} / {rss_mid:.1f} / {rss1:.1f} MB "
          f"(max RSS {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.1f} MB)")
    print(f"checksum {checksum}")
    for name, target in (("open aperture", OpenAperture()), ("15x11 grid", scene.target)):
        wall_fps, cpu_fps = fps_with_changing_temperature(renderer, target, frames)
        print(f"temperature changing every frame, {name}: {wall_fps:.1f} frames/s wall "
              f"({1e3 / wall_fps:.2f} ms/frame), {cpu_fps:.1f} frames per CPU "
              "second (the figure on a machine shared with other jobs); target >= 300 frames/s")


def fps_with_changing_temperature(renderer: CameraRenderer, target: object, frames: int
                                  ) -> tuple[float, float]:
    """(frames per wall second, per CPU second) streaming `target` with the source and plate
    temperatures changing every frame, after 20 frames of warm-up."""
    state = {"i": 0}

    def changing() -> SceneState:
        state["i"] += 1
        k = state["i"]
        return SceneState(source_c=35.0 + 1e-4 * k, plate_c=20.0 + 1e-5 * k, target=target,
                          collimator_focal_mm=1000.0)

    g = SimFrameGrabber(renderer, changing, SimClock(), frame_rate_hz=30.0)
    g.begin_capture("bench")
    list(g.grab(20))
    t0, c0 = time.perf_counter(), time.process_time()
    for frame in g.grab(frames):
        frame.data[0, 0]
    elapsed, cpu = time.perf_counter() - t0, time.process_time() - c0
    return frames / elapsed, frames / cpu

if __name__ == "__main__":
    main()
