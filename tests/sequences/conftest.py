"""Shared station facts and timing model for the recipe tests (an invented bench, 'bench-7')."""

from __future__ import annotations

import pytest

from sequences.facts import StationFacts, TimingModel
from station.inputs.limits import StationLimits


@pytest.fixture
def facts() -> StationFacts:
    return StationFacts(
        targets=frozenset({"pinhole_grid", "pinhole", "slanted_edge", "open"}),
        stage_axes={"az": "deg", "el": "deg"},
        limits=StationLimits.from_ranges(absolute_c=(5.0, 100.0), difference_k=(-10.0, 40.0),
                                         axes={"az": (-45.0, 45.0, "deg"),
                                               "el": (-30.0, 30.0, "deg")}),
        analyses=frozenset({"distortion", "sitf", "netd", "uniformity", "badpixels", "noise3d",
                            "mtf"}),
    )


@pytest.fixture
def timing() -> TimingModel:
    return TimingModel(
        blackbody_slew_k_per_s=0.05, blackbody_time_constant_s=60.0, blackbody_start_c=20.0,
        reference_c=20.0, wheel_seconds_per_slot=1.5,
        wheel_slot_of={"open": 0, "pinhole": 1, "pinhole_grid": 2, "slanted_edge": 3},
        wheel_slot_count=6, stage_velocity={"az": 10.0, "el": 5.0},
        stage_acceleration={"az": 20.0, "el": 10.0}, frame_rate_hz=30.0,
        frame_bytes=640 * 512 * 2, command_overhead_s=0.05, wheel_start_slot=0,
    )
