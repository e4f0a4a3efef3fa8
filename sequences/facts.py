"""What the recipe language needs to know about a station, handed in by the station layer.

``sequences`` never reads station files nor talks to instruments: the station builds these two
small records from its configuration and instrument models and passes them in. That keeps recipe
validation and duration estimates pure and testable without a bench.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Mapping

__all__ = ["StationFacts", "TimingModel"]


@dataclass(frozen=True)
class StationFacts:
    """Limits and names that recipe validation checks against.

    ``stage_axes`` maps an axis name to its soft limits ``(low, high)`` in the axis's own unit
    (degrees for a gimbal); blackbody limits are inclusive ``(low, high)`` pairs.
    """

    targets: frozenset[str]
    blackbody_absolute_c: tuple[float, float]
    blackbody_difference_k: tuple[float, float]
    stage_axes: Mapping[str, tuple[float, float]]
    analyses: frozenset[str]


@dataclass(frozen=True)
class TimingModel:
    """Instrument models behind the run-time estimate (all SI-like units: s, K or C, axis units).

    The blackbody is modelled as a first-order system of time constant ``blackbody_time_constant_s``
    whose rate is limited to ``blackbody_slew_k_per_s``; a difference setpoint is taken relative to
    ``reference_c``. The wheel turns either way, ``wheel_seconds_per_slot`` per slot. Each stage axis
    follows a trapezoidal velocity profile. Frames arrive at ``frame_rate_hz``; ``frame_bytes`` is
    one raw frame as stored in a stack; an averaged frame is stored as float32, by default twice a
    16-bit raw frame (``average_frame_bytes`` overrides that).

    Starting state: the blackbody at ``blackbody_start_c``; the wheel at ``wheel_start_slot`` (None:
    unknown, the first turn is charged half a revolution, the worst case); the stage at
    ``stage_start`` (axes not named start at 0, the usual park position).
    """

    blackbody_slew_k_per_s: float
    blackbody_time_constant_s: float
    blackbody_start_c: float
    reference_c: float
    wheel_seconds_per_slot: float
    wheel_slot_of: Mapping[str, int]
    wheel_slot_count: int
    stage_velocity: Mapping[str, float]
    stage_acceleration: Mapping[str, float]
    frame_rate_hz: float
    frame_bytes: int
    command_overhead_s: float = 0.05
    wheel_start_slot: int | None = None
    stage_start: Mapping[str, float] = field(default_factory=dict)
    average_frame_bytes: int | None = None
