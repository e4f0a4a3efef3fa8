"""The simulated frame grabber driver (simulators/camera_grabber.py), on simulated time."""

from __future__ import annotations

import json

import numpy as np
import pytest

from analysis.geometry import CameraGeometry
from analysis.targets import OpenAperture, PinholeGrid
from drivers.clock import SimClock
from drivers.interfaces import FrameGrabber
from simulators.camera_grabber import SimFrameGrabber
from simulators.camera_render import CameraRenderer, SceneState
from simulators.camera_truth import CameraTruth

GEOM = CameraGeometry(width=64, height=48, pixel_pitch_um=17.0, focal_length_mm=25.0)


def _grabber(scene_holder: list[SceneState], clock: SimClock) -> SimFrameGrabber:
    truth = CameraTruth(geometry=GEOM, model="nightbench demo imager LW-640")
    return SimFrameGrabber(CameraRenderer(truth), lambda: scene_holder[0], clock, 30.0)


def test_frames_carry_counter_and_clock_time() -> None:
    # A 30 Hz camera delivers a frame every 1/30 s: 10 frames move simulated time by 1/3 s.
    clock = SimClock()
    t0 = clock.now()
    g = _grabber([SceneState(30.0, 20.0, OpenAperture())], clock)
    assert isinstance(g, FrameGrabber)
    frames = list(g.grab(10))
    assert [f.counter for f in frames] == list(range(1, 11))
    np.testing.assert_allclose([f.timestamp - t0 for f in frames], np.arange(10) / 30.0,
                               atol=2e-6)  # float64 spacing at 1.8e9 s is 2.4e-7 s per add
    assert clock.now() - t0 == pytest.approx(10 / 30.0, abs=2e-6)
    assert frames[0].data.shape == g.shape == (48, 64) and frames[0].data.dtype == np.uint16
    assert g.bit_depth == 14 and g.frame_rate == 30.0
    assert g.identify() == "nightbench simulated camera, nightbench demo imager LW-640"
    assert list(g.grab(1))[0].counter == 11


def test_scene_changes_are_seen_and_truth_is_json() -> None:
    # The grabber reads the scene per frame: a hotter source raises the mean signal by about
    # SiTF * dT counts (SiTF = R dL/dT, definition).
    holder = [SceneState(30.0, 20.0, OpenAperture())]
    g = _grabber(holder, SimClock())
    cold = next(iter(g.grab(1))).data.mean()
    holder[0] = SceneState(31.0, 20.0, OpenAperture())
    hot = next(iter(g.grab(1))).data.mean()
    sitf = g.renderer.truth.sitf_counts_per_k(30.5)
    assert hot - cold == pytest.approx(sitf, rel=0.02)
    holder[0] = SceneState(35.0, 20.0, PinholeGrid(3, 4, 25.0, 0.5))
    truth = g.truth_for_current_scene()
    assert len(truth["spots_xy_px"]) == 12
    json.dumps(truth)
    assert "truth_spots_xy_px" not in next(iter(g.grab(1))).meta
    g.attach_truth = True
    spots = next(iter(g.grab(1))).meta["truth_spots_xy_px"]
    # Attached on request: the same positions the ground-truth dictionary gives.
    np.testing.assert_allclose(spots, truth["spots_xy_px"], atol=0)
