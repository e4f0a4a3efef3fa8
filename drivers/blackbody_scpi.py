"""Blackbody driver for the nightbench line protocol: a command table with station limits.

| method                | command        | unit | checked before sending           |
|-----------------------|----------------|------|----------------------------------|
| set_mode              | SOUR:MODE      |      | absolute / difference            |
| set_temperature       | SOUR:TEMP <C>  | C    | limits.min_c .. limits.max_c     |
| set_difference        | SOUR:DIFF <K>  | K    | limits.min/max_difference_k      |
| setpoint              | SOUR:SETP?     | C/K  |                                  |
| temperature           | MEAS:TEMP?     | C    |                                  |
| reference_temperature | MEAS:REF?      | C    |                                  |
| is_stable             | STAT:STAB?     | 1/0  |                                  |
| go_safe               | SOUR:TEMP safe_c (absolute mode)                      |
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from drivers.errors import LimitError
from drivers.interfaces import Blackbody, BlackbodyMode
from drivers.scpi import ScpiDriver
from drivers.transport import Transport

_MODES: dict[str, BlackbodyMode] = {"ABS": "absolute", "DIFF": "difference"}


class ScpiBlackbody(ScpiDriver, Blackbody):
    """An area blackbody with absolute and difference-to-reference control."""

    KIND = "blackbody"
    SETTINGS = {
        "limits": "{min_c, max_c, min_difference_k, max_difference_k}: station limits, "
                  "checked before anything is sent",
        "safe_c": "absolute temperature (C) the source goes to whenever the bench is made safe",
    }

    def __init__(self, transport: Transport, *, name: str,
                 settings: Mapping[str, Any]) -> None:
        super().__init__(transport, name=name, settings=settings)
        limits = self._setting("limits")
        if not isinstance(limits, Mapping):
            raise self._fail("limits", "must be a mapping {min_c, max_c, min_difference_k, max_difference_k}")
        self.min_c = self._number(limits, "min_c", "limits")
        self.max_c = self._number(limits, "max_c", "limits")
        self.min_k = self._number(limits, "min_difference_k", "limits")
        self.max_k = self._number(limits, "max_difference_k", "limits")
        self.safe_c = self._number(self.settings, "safe_c", "")
        if not self.min_c <= self.safe_c <= self.max_c:
            raise self._fail("safe_c", f"{self.safe_c} C outside the limits "
                                       f"{self.min_c}..{self.max_c} C")

    def set_mode(self, mode: BlackbodyMode) -> None:
        code = {v: k for k, v in _MODES.items()}.get(mode)
        if code is None:
            raise ValueError(f"{self.name}: mode is 'absolute' or 'difference', not {mode!r}")
        self._set(f"SOUR:MODE {code}")

    def mode(self) -> BlackbodyMode:
        return self.transport.query("SOUR:MODE?", lambda reply: _MODES[reply])

    def set_temperature(self, celsius: float) -> None:
        if not self.min_c <= celsius <= self.max_c:
            raise LimitError(f"{self.name}: {celsius} C outside the station limits "
                             f"{self.min_c}..{self.max_c} C; nothing was sent")
        self._set(f"SOUR:TEMP {celsius:.4f}")

    def set_difference(self, kelvin: float) -> None:
        if not self.min_k <= kelvin <= self.max_k:
            raise LimitError(f"{self.name}: difference {kelvin} K outside the station limits "
                             f"{self.min_k}..{self.max_k} K; nothing was sent")
        self._set(f"SOUR:DIFF {kelvin:.4f}")

    def setpoint(self) -> float:
        return self._ask_float("SOUR:SETP?")

    def temperature(self) -> float:
        return self._ask_float("MEAS:TEMP?")

    def reference_temperature(self) -> float:
        return self._ask_float("MEAS:REF?")

    def is_stable(self) -> bool:
        return self._ask_bool("STAT:STAB?")

    def go_safe(self) -> None:
        """Absolute mode at the safe setpoint (SOUR:TEMP switches to absolute itself)."""
        self.set_temperature(self.safe_c)

    def snapshot(self) -> dict[str, Any]:
        return {"mode": self.mode(), "setpoint": self.setpoint(),
                "temperature_c": self.temperature(),
                "reference_c": self.reference_temperature(), "stable": self.is_stable()}
