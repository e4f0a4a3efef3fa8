"""Motion stage physics from the clock: trapezoidal (or triangular) velocity profile per axis.

A move of distance d at top speed v and acceleration a, from rest to rest:
    d > v^2/a: trapezoid, duration d/v + v/a (accelerate v/a, cruise, decelerate v/a)
    otherwise: triangle, duration 2 sqrt(d/a) (peak speed sqrt(d a) < v)
Position is evaluated in closed form at any time, so readback while moving is exact. Soft limits
refuse a move; a hard-limit hit or a stall (fault injection) stops the axis in an error state that
only HOME clears.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from drivers.clock import Clock


def move_duration(d: float, v: float, a: float) -> float:
    """Rest-to-rest time for distance d (trapezoid or triangle)."""
    d = abs(d)
    if d == 0:
        return 0.0
    if d > v * v / a:
        return d / v + v / a
    return 2.0 * math.sqrt(d / a)


def distance_at(tau: float, d: float, v: float, a: float) -> float:
    """Distance covered tau seconds into a rest-to-rest move of distance d >= 0."""
    total = move_duration(d, v, a)
    if tau <= 0 or d == 0:
        return 0.0
    if tau >= total:
        return d
    ramp = min(v / a, total / 2.0)
    peak = a * ramp
    if tau < ramp:
        return 0.5 * a * tau * tau
    if tau < total - ramp:
        return 0.5 * a * ramp * ramp + peak * (tau - ramp)
    rest = total - tau
    return d - 0.5 * a * rest * rest


@dataclass(frozen=True)
class AxisSpec:
    """One axis: soft limits (refused), hard limits (stop with error), kinematics, start."""

    minimum: float
    maximum: float
    hard_minimum: float
    hard_maximum: float
    velocity: float
    acceleration: float
    start: float = 0.0

    @classmethod
    def from_mapping(cls, name: str, d: Mapping[str, Any]) -> AxisSpec:
        try:
            spec = cls(float(d["min"]), float(d["max"]),
                       float(d.get("hard_min", d["min"])), float(d.get("hard_max", d["max"])),
                       float(d["velocity"]), float(d["acceleration"]), float(d.get("start", 0.0)))
        except KeyError as exc:
            raise ValueError(f"stage axis {name!r}: missing {exc.args[0]!r} "
                             "(needs min, max, velocity, acceleration)") from None
        if not (spec.hard_minimum <= spec.minimum < spec.maximum <= spec.hard_maximum):
            raise ValueError(f"stage axis {name!r}: need hard_min <= min < max <= hard_max")
        if spec.velocity <= 0 or spec.acceleration <= 0:
            raise ValueError(f"stage axis {name!r}: velocity and acceleration must be positive")
        return spec


@dataclass
class _Move:
    t0: float
    p0: float
    p1: float
    stop_after_s: float | None = None   # stall: freeze this long after t0
    end_state: str = "READY"           # READY, STALLED or HARDLIMIT once finished


class StagePhysics:
    """Simulated multi-axis stage; axis states are READY, MOVING, STALLED, HARDLIMIT."""

    def __init__(self, clock: Clock, axes: Mapping[str, Mapping[str, Any]]) -> None:
        if not axes:
            raise ValueError("stage needs at least one axis")
        self.clock = clock
        self.specs = {name: AxisSpec.from_mapping(name, d) for name, d in axes.items()}
        now = clock.now()
        self._moves = {n: _Move(now, s.start, s.start) for n, s in self.specs.items()}

    def axes(self) -> list[str]:
        return list(self.specs)

    def _duration(self, axis: str, m: _Move) -> float:
        s = self.specs[axis]
        full = move_duration(m.p1 - m.p0, s.velocity, s.acceleration)
        return full if m.stop_after_s is None else min(full, m.stop_after_s)

    def position(self, axis: str, t: float | None = None) -> float:
        t = self.clock.now() if t is None else t
        m, s = self._moves[axis], self.specs[axis]
        tau = t - m.t0
        if m.stop_after_s is not None:
            tau = min(tau, m.stop_after_s)
        d = distance_at(tau, abs(m.p1 - m.p0), s.velocity, s.acceleration)
        return m.p0 + math.copysign(d, m.p1 - m.p0)

    def state(self, axis: str) -> str:
        m = self._moves[axis]
        if self.clock.now() < m.t0 + self._duration(axis, m):
            return "MOVING"
        return m.end_state

    def is_moving(self, axis: str) -> bool:
        return self.state(axis) == "MOVING"

    def check(self, axis: str, target: float) -> str | None:
        """Why a move is refused (None when accepted)."""
        if axis not in self.specs:
            return f"no axis {axis!r}; axes are {','.join(self.specs)}"
        s = self.specs[axis]
        if not (math.isfinite(target) and s.minimum <= target <= s.maximum):
            return f"{axis} {target:g} outside soft limits {s.minimum:g}..{s.maximum:g}"
        state = self.state(axis)
        if state == "MOVING":
            return f"{axis} is moving"
        if state != "READY":
            return f"{axis} in {state}; HOME it first"
        return None

    def move(self, axis: str, target: float, *, stall_fraction: float | None = None,
             runaway: bool = False) -> float:
        """Start a move; returns its duration. `stall_fraction`/`runaway` are injected faults."""
        now = self.clock.now()
        p0 = self.position(axis, now)
        m = _Move(now, p0, float(target))
        if runaway:
            s = self.specs[axis]
            m.p1 = s.hard_maximum if target >= p0 else s.hard_minimum
            m.end_state = "HARDLIMIT"
        elif stall_fraction is not None:
            s = self.specs[axis]
            m.stop_after_s = stall_fraction * move_duration(m.p1 - p0, s.velocity,
                                                             s.acceleration)
            m.end_state = "STALLED"
        self._moves[axis] = m
        return self._duration(axis, m)

    def home(self, axis: str) -> float:
        """Move to the index (0) from wherever the axis is; clears a fault state."""
        now = self.clock.now()
        p0 = self.position(axis, now)
        self._moves[axis] = _Move(now, p0, 0.0)
        return self._duration(axis, self._moves[axis])

    def stop(self) -> None:
        """Stop every axis where it is (an immediate stop: deceleration not modelled)."""
        now = self.clock.now()
        for axis, m in self._moves.items():
            if self.state(axis) == "MOVING":
                p = self.position(axis, now)
                self._moves[axis] = _Move(now, p, p, end_state="READY")

    def stall_now(self, axis: str) -> None:
        """A motion in progress stalls at once (e.g. mechanical jam)."""
        now = self.clock.now()
        p = self.position(axis, now)
        self._moves[axis] = _Move(now, p, p, end_state="STALLED")

    def restart(self) -> None:
        """Power cycle: motion lost, axes stay where they stopped, states cleared."""
        now = self.clock.now()
        self._moves = {a: _Move(now, self.position(a, now), self.position(a, now))
                       for a in self.specs}
