"""Abstract instrument interfaces: what the station may ask of each kind of instrument.

A driver for a new model implements one of these; the sequencer only ever talks to these
interfaces. Units: temperatures in degrees Celsius, differences in kelvin, stage positions in
the axis unit (degrees for rotary axes, millimetres for linear ones), times in seconds.
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

BlackbodyMode = Literal["absolute", "difference"]


class Instrument(ABC):
    """Common to every instrument: a name for messages, an identity string, a way to close."""

    name: str = "instrument"

    @abstractmethod
    def identify(self) -> str:
        """Maker/model/serial/firmware as the instrument reports it."""

    def close(self) -> None:  # noqa: B027 - optional for drivers without resources
        """Release the transport. Safe to call twice."""

    def snapshot(self) -> dict[str, Any]:
        """Live readings for the console and frame metadata. Never raises on a healthy link."""
        return {}

    def harmless_queries(self) -> dict[str, Callable[[], Any]]:
        """Every question that changes nothing (identity, readbacks, status), ready to call.
        `nightbench check` asks them all and parses the replies, so `check` fails wherever
        `bench` or a run would. Declared drivers list each query; this default asks the
        identity and the snapshot."""
        return {"identify": self.identify, "snapshot": self.snapshot}


class Blackbody(Instrument):
    """An area blackbody source with a reference (ambient/target plate) sensor."""

    kind = "blackbody"

    @abstractmethod
    def setpoint_range(self, mode: BlackbodyMode) -> tuple[float, float]:
        """The station's limits for a mode: (min, max) in C (absolute) or K (difference)."""

    def setpoint_problem(self, mode: str, value: float) -> str | None:
        """Why this setpoint is not allowed (None when it is): the one limit check, used by
        the driver before sending and by recipe validation and preflight alike."""
        if mode not in ("absolute", "difference"):
            return f"mode is 'absolute' or 'difference', not {mode!r}"
        lo, hi = self.setpoint_range(mode)  # type: ignore[arg-type]
        unit, what = ("C", "") if mode == "absolute" else ("K", "difference ")
        if not math.isfinite(value) or not lo <= value <= hi:
            return f"{what}{value} {unit} outside the station limits {lo}..{hi} {unit}"
        return None

    @abstractmethod
    def set_mode(self, mode: BlackbodyMode) -> None: ...

    @abstractmethod
    def mode(self) -> BlackbodyMode: ...

    @abstractmethod
    def set_temperature(self, celsius: float) -> None:
        """Absolute setpoint (absolute mode)."""

    @abstractmethod
    def set_difference(self, kelvin: float) -> None:
        """Setpoint relative to the reference sensor (difference mode)."""

    @abstractmethod
    def setpoint(self) -> float:
        """The setpoint in the current mode's unit (C absolute, K difference)."""

    @abstractmethod
    def temperature(self) -> float:
        """Measured source temperature, C."""

    @abstractmethod
    def reference_temperature(self) -> float:
        """Measured reference (ambient / target plate) temperature, C."""

    def difference(self) -> float:
        """Measured source minus reference, K."""
        return self.temperature() - self.reference_temperature()

    @abstractmethod
    def is_stable(self) -> bool:
        """The controller's own stability flag."""

    @abstractmethod
    def go_safe(self) -> None:
        """Drive to the safe setpoint configured for this station (never raises silently)."""

    def safing_problem(self) -> str | None:
        """Exercise the safing path without changing anything, where the driver can; the
        problem found, or None. Called by `check` and preflight before anything moves."""
        return None


class TargetWheel(Instrument):
    """A wheel of targets; slots are numbered from 1 and may carry names."""

    kind = "wheel"

    @abstractmethod
    def slot_count(self) -> int: ...

    @abstractmethod
    def slot_names(self) -> dict[int, str]: ...

    def slot_problem(self, slot: int) -> str | None:
        """Why this slot cannot be selected (None when it can)."""
        names = self.slot_names()
        if slot not in names:
            return f"no slot {slot} in the station file; slots are {sorted(names)}"
        return None

    @abstractmethod
    def select_slot(self, slot: int) -> None:
        """Start moving to a slot; returns at once. Poll `is_moving`."""

    def select(self, target: str | int) -> int:
        """Select by slot number or by name; returns the slot number."""
        if isinstance(target, int):
            slot = target
        else:
            by_name = {v: k for k, v in self.slot_names().items()}
            if target not in by_name:
                raise KeyError(f"{self.name}: no slot named {target!r}; slots are {by_name}")
            slot = by_name[target]
        self.select_slot(slot)
        return slot

    @abstractmethod
    def current_slot(self) -> int | None:
        """Slot in the beam, or None while travelling."""

    @abstractmethod
    def is_moving(self) -> bool: ...

    @abstractmethod
    def home(self) -> None: ...


@dataclass(frozen=True)
class AxisLimits:
    """Soft limits of one axis, in its unit; `park` is where the axis rests when safe."""

    minimum: float
    maximum: float
    park: float = 0.0
    unit: str = "deg"

    def contains(self, value: float) -> bool:
        return self.minimum <= value <= self.maximum


class MotionStage(Instrument):
    """A motion stage or gimbal with named axes (e.g. az/el or x/y)."""

    kind = "stage"

    @abstractmethod
    def axes(self) -> list[str]: ...

    @abstractmethod
    def limits(self, axis: str) -> AxisLimits:
        """Soft limits (the station's, which may be tighter than the controller's)."""

    def position_problem(self, axis: str, value: float) -> str | None:
        """Why this target is not allowed (None when it is): the one limit check, used by the
        driver before moving and by recipe validation and preflight alike."""
        if axis not in self.axes():
            return f"no axis {axis!r}; axes are {', '.join(self.axes())}"
        lim = self.limits(axis)
        if not math.isfinite(value) or not lim.contains(value):
            return f"{axis} {value} outside {lim.minimum}..{lim.maximum} {lim.unit}"
        return None

    @abstractmethod
    def move_to(self, targets: dict[str, float]) -> None:
        """Start absolute moves; refuses out-of-limit targets before any axis moves."""

    @abstractmethod
    def position(self, axis: str) -> float: ...

    def positions(self) -> dict[str, float]:
        return {a: self.position(a) for a in self.axes()}

    @abstractmethod
    def is_moving(self) -> bool: ...

    @abstractmethod
    def home(self) -> None: ...

    @abstractmethod
    def stop(self) -> None: ...

    def park(self) -> None:
        """Move every axis to its park position."""
        self.move_to({a: self.limits(a).park for a in self.axes()})


@dataclass
class Frame:
    """One frame as grabbed. `data` is (rows, cols); `counter` comes from the camera/grabber."""

    data: np.ndarray
    counter: int
    timestamp: float
    meta: dict[str, Any] = field(default_factory=dict)


class FrameGrabber(Instrument):
    """A source of frames from the UUT.

    Most grabbers learn their format once when they open: they set `_shape` (rows, cols),
    `_bit_depth` and `_rate` (frames per second) and inherit the three properties below; a
    grabber whose format can change overrides them.
    """

    kind = "grabber"
    _shape: tuple[int, int]
    _bit_depth: int
    _rate: float

    @property
    def shape(self) -> tuple[int, int]:
        """(rows, cols)."""
        return self._shape

    @property
    def bit_depth(self) -> int:
        return self._bit_depth

    @property
    def frame_rate(self) -> float:
        """Frames per second (used for timing and duration estimates)."""
        return self._rate

    @abstractmethod
    def grab(self, count: int) -> Iterator[Frame]:
        """Yield `count` consecutive frames; waits go through the station clock."""
