"""What the recipe language needs to know about a station, handed in by the station layer.

``sequences`` never reads station files nor talks to instruments: the station builds these two
small records from its configuration and instrument models and passes them in. That keeps recipe
validation and duration estimates pure and testable without a bench.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Mapping, Protocol

from sequences.yamlsource import Problem

if TYPE_CHECKING:
    from sequences.plansteps import PlanStep

__all__ = ["StationFacts", "TimingModel", "Refusal", "InstrumentLimits", "PlanCheck"]


@dataclass(frozen=True)
class Refusal:
    """Why a setpoint or position is not allowed, and what to do instead."""

    message: str
    hint: str = ""


class InstrumentLimits(Protocol):
    """The one answer to "is this allowed, and if not why" for the station's instruments.

    The station implements it from its station file (station.inputs.limits); recipe validation,
    preflight and the step handlers all ask it, so a limit is written down once.
    """

    def setpoint_problem(self, mode: str, value: float) -> Refusal | None:
        """None if the blackbody may go to ``value`` (C absolute, K difference), else why not."""
        ...

    def position_problem(self, axis: str, low: float, high: float | None = None
                         ) -> Refusal | None:
        """None if the stage axis may go to ``low`` (and, for a scan, every value up to
        ``high``), else why not (an unknown axis included)."""
        ...


class PlanCheck(Protocol):
    """Checks the station adds over a whole expanded plan (the analyses' options and needs)."""

    def __call__(self, steps: Sequence["PlanStep"]) -> list[Problem]: ...


@dataclass(frozen=True)
class StationFacts:
    """What recipe validation checks against: names, limits and the analyses' declarations.

    ``stage_axes`` maps an axis name to its unit (``deg`` for a gimbal axis, ``mm`` for a linear
    one); ``limits`` answers every setpoint and position question; ``check_plan`` (optional) adds
    the station's checks of the whole plan, so that every problem of a recipe is reported in one
    pass.
    """

    targets: frozenset[str]
    stage_axes: Mapping[str, str]
    limits: InstrumentLimits
    analyses: frozenset[str]
    check_plan: PlanCheck | None = None


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
