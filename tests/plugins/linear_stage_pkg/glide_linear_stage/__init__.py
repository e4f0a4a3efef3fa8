"""Driver for the Glide linear stage: one axis `x` in millimetres (an invented instrument).

The worked example of DEVELOPERS.md. Its controller speaks the nightbench line protocol
(drivers/protocol.py, STAGE_COMMANDS), so the built-in stage simulator stands in for it:

| method     | command        | reply                                          |
|------------|----------------|------------------------------------------------|
| move_to    | MOVE x <mm>    | OK (the target is checked against limits first)|
| position   | POS? x         | float, mm                                      |
| is_moving  | AXIS:STAT? x   | READY/MOVING; STALLED/HARDLIMIT raise          |
| home       | HOME x         | OK                                             |
| stop       | STOP           | OK                                             |

Station entry::

    stage:
      driver: glide-linear-stage
      resource: TCPIP::10.20.0.31::5025::SOCKET
      axes:
        x: {min: -50, max: 50, park: 0, unit: mm}
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from drivers.errors import LimitError
from drivers.interfaces import AxisLimits, MotionStage
from drivers.scpi import InstrumentFault, ScpiDriver, SettingsError
from drivers.transport import Transport

AXIS = "x"


class GlideLinearStage(ScpiDriver, MotionStage):
    """A single linear axis; refuses targets outside the station's travel before sending."""

    KIND = "stage"
    SETTINGS = {"axes": "{x: {min, max, park, unit: mm}}: soft travel limits and park position"}

    def __init__(self, transport: Transport, *, name: str,
                 settings: Mapping[str, Any]) -> None:
        super().__init__(transport, name=name, settings=settings)
        problems = self.validate_settings(self.settings)
        if problems:
            raise SettingsError(f"{name}: " + "; ".join(problems))
        travel = self.settings["axes"][AXIS]
        self._limits = AxisLimits(float(travel["min"]), float(travel["max"]),
                                  float(travel.get("park", 0.0)), "mm")

    @classmethod
    def validate_settings(cls, settings: Mapping[str, Any]) -> list[str]:
        axes = settings.get("axes")
        if not isinstance(axes, Mapping) or list(axes) != [AXIS]:
            return [f"axes: this stage has exactly one axis; give {{{AXIS}: {{min, max, park, "
                    "unit: mm}}"]
        travel = axes[AXIS]
        if not isinstance(travel, Mapping) or not {"min", "max"} <= set(travel):
            return [f"axes.{AXIS}: give min, max and park in mm"]
        lo, hi, park = travel["min"], travel["max"], travel.get("park", 0.0)
        if not lo < hi:
            return [f"axes.{AXIS}.max: {hi} must be above min {lo}"]
        if not lo <= park <= hi:
            return [f"axes.{AXIS}.park: {park} outside {lo}..{hi}"]
        return []

    def axes(self) -> list[str]:
        return [AXIS]

    def limits(self, axis: str) -> AxisLimits:
        if axis != AXIS:
            raise KeyError(f"{self.name}: the only axis is {AXIS!r}, not {axis!r}")
        return self._limits

    def move_to(self, targets: dict[str, float]) -> None:
        for axis, value in targets.items():
            lim = self.limits(axis)
            if not lim.contains(float(value)):
                raise LimitError(f"{self.name}: {axis} {value} mm outside {lim.minimum}.."
                                 f"{lim.maximum} mm; nothing was moved")
        if AXIS in targets:
            self._set(f"MOVE {AXIS} {float(targets[AXIS]):.3f}")

    def position(self, axis: str) -> float:
        self.limits(axis)
        return self._ask_float(f"POS? {AXIS}")

    def is_moving(self) -> bool:
        state = self._ask(f"AXIS:STAT? {AXIS}")
        if state in ("STALLED", "HARDLIMIT"):
            raise InstrumentFault(self.name, f"axis {AXIS} {state.lower()}",
                                  f"AXIS:STAT? {AXIS}", state, hint="home the stage")
        return state == "MOVING"

    def home(self) -> None:
        self._set(f"HOME {AXIS}")

    def stop(self) -> None:
        self._set("STOP")

    def snapshot(self) -> dict[str, Any]:
        return {"x_mm": self.position(AXIS)}
