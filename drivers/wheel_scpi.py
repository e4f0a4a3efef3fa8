"""Target wheel driver for the nightbench line protocol.

| method        | command     | reply                 |
|---------------|-------------|-----------------------|
| slot_count    | WHL:COUN?   | int                   |
| select_slot   | WHL:POS <n> | OK (1 .. slot count)  |
| current_slot  | WHL:POS?    | int, 0 while moving   |
| is_moving     | WHL:MOV?    | 1/0                   |
| home          | WHL:HOME    | OK                    |

Slot names come from the station file (`slots: {1: {name: open}, 2: pinhole_grid, ...}`).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from drivers.errors import LimitError
from drivers.interfaces import TargetWheel
from drivers.scpi import ScpiDriver
from drivers.transport import Transport


class ScpiWheel(ScpiDriver, TargetWheel):
    """A target wheel with named slots."""

    KIND = "wheel"
    SETTINGS = {
        "slots": "{<n>: {name: <slot name>, target: {...}}} or {<n>: <slot name>}: what sits "
                 "in each slot (numbered from 1)",
    }

    def __init__(self, transport: Transport, *, name: str,
                 settings: Mapping[str, Any]) -> None:
        super().__init__(transport, name=name, settings=settings)
        slots = self._setting("slots")
        if not isinstance(slots, Mapping):
            raise self._fail("slots", "must be a mapping of slot number to name")
        self._names: dict[int, str] = {}
        for key, spec in slots.items():
            try:
                number = int(key)
            except (TypeError, ValueError):
                raise self._fail(f"slots.{key}", "is not a slot number") from None
            label = spec.get("name") if isinstance(spec, Mapping) else spec
            self._names[number] = str(label if label is not None else f"slot{number}")
        self._count: int | None = None

    def slot_count(self) -> int:
        if self._count is None:
            self._count = self._ask_int("WHL:COUN?")
        return self._count

    def slot_names(self) -> dict[int, str]:
        return dict(self._names)

    def select_slot(self, slot: int) -> None:
        if slot not in self._names:
            raise LimitError(f"{self.name}: slot {slot} is not in the station file "
                             f"(slots {sorted(self._names)}); nothing was sent")
        self._set(f"WHL:POS {int(slot)}")

    def current_slot(self) -> int | None:
        slot = self._ask_int("WHL:POS?")
        return None if slot == 0 else slot

    def is_moving(self) -> bool:
        return self._ask_bool("WHL:MOV?")

    def home(self) -> None:
        self._set("WHL:HOME")

    def snapshot(self) -> dict[str, Any]:
        slot = self.current_slot()
        return {"slot": slot, "target": self._names.get(slot) if slot else None,
                "moving": self.is_moving()}
