"""Motion stage / gimbal driver for the nightbench line protocol, with station soft limits.

| method     | command          | reply                             |
|------------|------------------|-----------------------------------|
| move_to    | MOVE <ax> <pos>  | OK (every target checked first)   |
| position   | POS? <ax>        | float, live while moving          |
| is_moving  | AXIS:STAT? <ax>  | READY/MOVING; STALLED/HARDLIMIT raise InstrumentFault |
| home       | HOME <ax>        | OK, every axis                    |
| stop       | STOP             | OK                                |

Axes, soft limits and park positions come from the station file
(`axes: {az: {min: -40, max: 40, park: 0, unit: deg}}`); they may be tighter than the controller's.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from drivers.errors import LimitError
from drivers.interfaces import AxisLimits, MotionStage
from drivers.scpi import InstrumentFault, ScpiDriver
from drivers.transport import Transport


class ScpiStage(ScpiDriver, MotionStage):
    """A multi-axis stage; nothing moves unless every requested target is inside its limits."""

    KIND = "stage"
    SETTINGS = {
        "axes": "{<axis>: {min, max, park, unit}}: station soft limits and park position of "
                "each axis",
    }

    def __init__(self, transport: Transport, *, name: str,
                 settings: Mapping[str, Any]) -> None:
        super().__init__(transport, name=name, settings=settings)
        axes = self._setting("axes")
        if not isinstance(axes, Mapping) or not axes:
            raise self._fail("axes", "must be a mapping of axis name to {min, max, park, unit}")
        self._limits: dict[str, AxisLimits] = {}
        for axis, spec in axes.items():
            if isinstance(spec, AxisLimits):
                self._limits[str(axis)] = spec
                continue
            if not isinstance(spec, Mapping):
                raise self._fail(f"axes.{axis}", "needs {min, max, park, unit}")
            where = f"axes.{axis}"
            lo, hi = self._number(spec, "min", where), self._number(spec, "max", where)
            park = self._number(spec, "park", where) if "park" in spec else 0.0
            if not lo <= park <= hi:
                raise self._fail(f"{where}.park", f"{park} outside {lo}..{hi}")
            self._limits[str(axis)] = AxisLimits(lo, hi, park, str(spec.get("unit", "deg")))

    def axes(self) -> list[str]:
        return list(self._limits)

    def limits(self, axis: str) -> AxisLimits:
        try:
            return self._limits[axis]
        except KeyError:
            raise KeyError(f"{self.name}: no axis {axis!r}; axes are {self.axes()}") from None

    def controller_axes(self) -> list[str]:
        """Axis names as the controller reports them (to check the station file against)."""
        return self.transport.query("AXIS:LIST?", lambda r: [a for a in r.split(",") if a])

    def move_to(self, targets: dict[str, float]) -> None:
        problems = []
        for axis, value in targets.items():
            lim = self.limits(axis)
            if not lim.contains(float(value)):
                problems.append(f"{axis} {value} outside {lim.minimum}..{lim.maximum} {lim.unit}")
        if problems:
            raise LimitError(f"{self.name}: {'; '.join(problems)}; no axis was moved")
        for axis, value in targets.items():
            self._set(f"MOVE {axis} {float(value):.4f}")

    def position(self, axis: str) -> float:
        self.limits(axis)
        return self._ask_float(f"POS? {axis}")

    def axis_state(self, axis: str) -> str:
        return self._ask(f"AXIS:STAT? {axis}")

    def is_moving(self) -> bool:
        """True while any axis moves; an axis in a fault state raises InstrumentFault."""
        moving = False
        for axis in self.axes():
            state = self.axis_state(axis)
            if state in ("STALLED", "HARDLIMIT"):
                raise InstrumentFault(
                    self.name, f"axis {axis} {state.lower()} at {self.position(axis):.3f}",
                    f"AXIS:STAT? {axis}", state, hint="HOME the axis after checking the stage")
            if state not in ("READY", "MOVING"):
                raise self._reply_error(f"AXIS:STAT? {axis}", state, "unknown axis state")
            moving = moving or state == "MOVING"
        return moving

    def home(self) -> None:
        for axis in self.axes():
            self._set(f"HOME {axis}")

    def stop(self) -> None:
        self._set("STOP")

    def snapshot(self) -> dict[str, Any]:
        return {**{f"{a}": self.position(a) for a in self.axes()},
                "states": {a: self.axis_state(a) for a in self.axes()}}
