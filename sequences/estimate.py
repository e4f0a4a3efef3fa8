"""How long a plan will really take on the bench, and how much it will write, from instrument models.

The estimate walks the plan tracking the bench's state (blackbody temperature, wheel slot, stage
position) and charges each step with a closed-form time:

* blackbody: a first-order approach of time constant tau whose rate is limited to a slew rate S.
  While the error |e| exceeds S*tau the rate is the slew limit, so that phase lasts
  (|e0| - S*tau) / S; then the error decays as exp(-t/tau) from min(|e0|, S*tau) down to the
  tolerance, lasting tau * ln(e1 / tol); then the hold time.
* wheel: slots moved the shortest way round times the seconds per slot.
* stage: a trapezoidal velocity profile per axis (t = d/v + v/a, or 2*sqrt(d/a) when the axis
  never reaches full speed); the axes move together, so the slowest axis sets the time.
* capture: frames / frame rate.  wait: its seconds.  note, analyze: nothing.
* every step: the command overhead.

A blackbody step whose time reaches 90 % of its timeout is returned as a warning with its place
in the recipe, so `check` and preflight can show it before anything moves.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from sequences.facts import TimingModel
from sequences.plan import Plan
from sequences.plansteps import (AlignStep, BlackbodyStep, CaptureStep, FovScanStep, MoveStep,
                                 TargetStep, WaitStep)
from sequences.yamlsource import Problem, SourceRef

__all__ = ["Estimate", "TimeoutWarning", "estimate", "blackbody_settle_s", "wheel_travel_s",
           "trapezoid_s", "slots_between", "NEAR_TIMEOUT_FRACTION"]

NEAR_TIMEOUT_FRACTION = 0.9
"""A step whose estimated duration reaches 90 % of its timeout is warned about: the model's
error and a warmer lab than modelled easily eat a 10 % margin."""

ALIGN_MOVE_S = 2.0  # a correction of a fraction of a degree: settle-dominated (stage model)
FOV_MOVE_S = 3.0  # a step of a few degrees out and the settle


@dataclass(frozen=True)
class TimeoutWarning:
    """A step the model expects to time out, or to come within 10 % of its timeout."""

    step_id: str
    where: SourceRef
    needed_s: float
    timeout_s: float

    @property
    def exceeds(self) -> bool:
        return self.needed_s > self.timeout_s

    def as_problem(self) -> Problem:
        """The warning as a located message with its fix (printed like any input problem)."""
        how = "times out after" if self.exceeds else "comes within 10 % of its timeout of"
        return Problem(self.where, f"{self.step_id}: the blackbody needs about "
                                   f"{self.needed_s:.0f} s to settle and hold but {how} "
                                   f"{self.timeout_s:g} s",
                       f"raise its timeout above {self.needed_s * 1.25:.0f} s, or approach the "
                       "setpoint in smaller steps")

    def __str__(self) -> str:
        return str(self.as_problem())


@dataclass(frozen=True)
class Estimate:
    """Total real duration, the share of each step (by plan id), frames acquired, bytes written;
    ``warnings`` name steps the model expects to fail or nearly fail (a settle longer than, or
    within 10 % of, its timeout), with where each is written."""

    total_s: float
    per_step: list[tuple[str, float]]
    frames: int
    bytes: int
    warnings: list[TimeoutWarning] = field(default_factory=list)


def blackbody_settle_s(error_k: float, tolerance_k: float, slew_k_per_s: float,
                       time_constant_s: float) -> float:
    """Seconds until a slew-limited first-order system comes within ``tolerance_k`` of its setpoint.

    Closed form of dT/dt = clip((T_set - T) / tau, -S, S) started ``error_k`` away.
    """
    e0 = abs(error_k)
    if e0 <= tolerance_k:
        return 0.0
    if time_constant_s <= 0.0:
        return (e0 - tolerance_k) / slew_k_per_s
    knee = slew_k_per_s * time_constant_s
    slew_phase = max(e0 - knee, 0.0) / slew_k_per_s
    e1 = min(e0, knee)
    decay = time_constant_s * math.log(e1 / tolerance_k) if e1 > tolerance_k else 0.0
    return slew_phase + decay


def slots_between(a: int, b: int, count: int) -> int:
    """Slots moved going the shortest way round a wheel of ``count`` slots."""
    d = (b - a) % count
    return min(d, count - d)


def wheel_travel_s(a: int, b: int, count: int, seconds_per_slot: float) -> float:
    """Seconds to turn the wheel from slot ``a`` to slot ``b`` the shortest way."""
    return slots_between(a, b, count) * seconds_per_slot


def trapezoid_s(distance: float, velocity: float, acceleration: float) -> float:
    """Seconds for a rest-to-rest move with a trapezoidal (or triangular) velocity profile."""
    d = abs(distance)
    if d == 0.0:
        return 0.0
    if d >= velocity * velocity / acceleration:
        return d / velocity + velocity / acceleration
    return 2.0 * math.sqrt(d / acceleration)


def _check_model(timing: TimingModel) -> None:
    positive = {
        "blackbody_slew_k_per_s": timing.blackbody_slew_k_per_s,
        "wheel_slot_count": timing.wheel_slot_count,
        "frame_rate_hz": timing.frame_rate_hz,
    }
    for name, value in positive.items():
        if not value > 0:
            raise ValueError(f"timing model: {name} must be positive, got {value!r}; "
                             "check the instrument models in the station file")
    for axis in timing.stage_velocity:
        if not (timing.stage_velocity[axis] > 0 and timing.stage_acceleration.get(axis, 0) > 0):
            raise ValueError(f"timing model: stage axis '{axis}' needs a positive velocity and "
                             "acceleration; check the stage model in the station file")


def estimate(plan: Plan, timing: TimingModel) -> Estimate:
    """Walk the plan with the instrument models and return the expected real duration.

    Raises ValueError naming the step when the models lack something the plan needs (a target
    with no slot, an axis with no speed).
    """
    _check_model(timing)
    temperature = timing.blackbody_start_c
    slot = timing.wheel_start_slot
    position: dict[str, float] = dict(timing.stage_start)
    average_bytes = (timing.average_frame_bytes if timing.average_frame_bytes is not None
                     else 2 * timing.frame_bytes)
    per_step: list[tuple[str, float]] = []
    warnings: list[TimeoutWarning] = []
    frames = 0
    written = 0
    for step in plan.steps:
        seconds = 0.0
        if isinstance(step, BlackbodyStep):
            target = (step.setpoint if step.mode == "absolute"
                      else timing.reference_c + step.setpoint)
            settle = blackbody_settle_s(target - temperature, step.tolerance_k,
                                        timing.blackbody_slew_k_per_s,
                                        timing.blackbody_time_constant_s)
            seconds = settle + step.hold_s
            if seconds >= NEAR_TIMEOUT_FRACTION * step.timeout_s:
                warnings.append(TimeoutWarning(step.id, step.source, seconds, step.timeout_s))
            temperature = target
        elif isinstance(step, TargetStep):
            if step.target not in timing.wheel_slot_of:
                raise ValueError(f"{step.id}: target '{step.target}' has no wheel slot in the "
                                 "timing model; add it to the wheel's slots in the station file")
            new = timing.wheel_slot_of[step.target]
            moved = (timing.wheel_slot_count // 2 if slot is None
                     else slots_between(slot, new, timing.wheel_slot_count))
            seconds = moved * timing.wheel_seconds_per_slot
            slot = new
        elif isinstance(step, MoveStep):
            times = []
            for axis, value in step.position.items():
                if axis not in timing.stage_velocity:
                    raise ValueError(f"{step.id}: stage axis '{axis}' has no speed in the timing "
                                     "model; add its velocity and acceleration")
                times.append(trapezoid_s(value - position.get(axis, 0.0),
                                         timing.stage_velocity[axis],
                                         timing.stage_acceleration[axis]))
                position[axis] = value
            seconds = max(times, default=0.0)
        elif isinstance(step, CaptureStep):
            seconds = step.frames / timing.frame_rate_hz
            frames += step.frames
            if step.keep in ("stack", "both"):
                written += step.frames * timing.frame_bytes
            if step.keep in ("average", "both"):
                written += average_bytes
        elif isinstance(step, WaitStep):
            seconds = step.duration_s
        elif isinstance(step, AlignStep):
            # Typically three looks (the loop converges quadratically), each a short move and
            # the frames; the bound is max_iterations (the usual case is estimated).
            looks = min(3, step.max_iterations)
            seconds = looks * (ALIGN_MOVE_S + step.frames / timing.frame_rate_hz)
            frames += looks * step.frames
        elif isinstance(step, FovScanStep):
            # Four edges, ~log2(field / tolerance) + 3 looks each, a move of a few degrees and
            # its settle for each.
            looks = 4 * (int(math.log2(max(2.0, 20.0 / step.tolerance_deg))) + 3)
            seconds = looks * (FOV_MOVE_S + step.frames / timing.frame_rate_hz)
            frames += looks * step.frames
        seconds += timing.command_overhead_s
        per_step.append((step.id, seconds))
    total = math.fsum(s for _, s in per_step)
    return Estimate(total, per_step, frames, written, warnings)
