"""Motion stage / gimbal driver for the nightbench line protocol: its command table, declared.

Axes, soft limits and park positions come from the station file
(`axes: {az: {min: -40, max: 40, park: 0, unit: deg}}`); they may be tighter than the
controller's. An axis that reports STALLED or HARDLIMIT raises InstrumentFault.
"""

from __future__ import annotations

from drivers.declare import BOOL, TEXT, Dialect, Query, Setting
from drivers.kinds import DeclaredStage

AXIS_WORDS = {"READY": "ready", "MOVING": "moving", "STALLED": "stalled",
              "HARDLIMIT": "on its hard limit"}


class ScpiStage(DeclaredStage):
    """A multi-axis stage; nothing moves unless every requested target is inside its limits."""

    DIALECT = Dialect()
    COMMANDS = {
        "identify": Query("*IDN?", TEXT, meaning="maker,model,serial,firmware"),
        "axis_list": Query("AXIS:LIST?", TEXT, meaning="axis names, comma separated"),
        "axis_limits": Query("AXIS:LIM? {axis}", TEXT, meaning="controller limits: min,max"),
        "state": Query("AXIS:STAT? {axis}", "(?P<value>[A-Z]+)", words=AXIS_WORDS,
                       meaning="axis state"),
        "move": Setting("MOVE {axis} {value:.4f}", meaning="start an absolute move"),
        "position": Query("POS? {axis}", meaning="actual position, live while moving"),
        "moving": Query("MOV? {axis}", BOOL, meaning="axis moving"),
        "home": Setting("HOME {axis}", meaning="move to the index (0) and clear a fault"),
        "stop": Setting("STOP", meaning="stop every axis where it is"),
        "error": Query("SYST:ERR?", '(?P<code>-?\\d+),"(?P<message>.*)"',
                       meaning="last error, 0 when none"),
    }

    def controller_axes(self) -> list[str]:
        """Axis names as the controller reports them (to check the station file against)."""
        return [a for a in str(self.ask("axis_list")).split(",") if a]
