"""The interfaces of drivers/interfaces.py over a declaration: one base per instrument kind.

Each base names the capabilities its kind needs (`RULES`, the required command keys), reads the
kind's station settings (limits, slots, axes) and implements the interface methods by asking the
declared capabilities. A driver then only declares: see drivers/blackbody_scpi.py.

| kind      | required keys                                                 | optional          |
|-----------|---------------------------------------------------------------|-------------------|
| blackbody | identify, set_mode, mode, set_temperature, set_difference,    | error, go_safe,   |
|           | setpoint, temperature, reference_temperature, stable          | difference        |
| wheel     | identify, select_slot, current_slot, moving, home             | slot_count, error |
| stage     | identify, move, position, moving (or state), home, stop       | state, error      |

Busy and settle semantics: `stable` (blackbody) and `moving` (wheel, stage) are boolean queries;
a stage may instead declare `state` with words mapped to `ready`, `moving` or anything else,
which counts as a fault (e.g. {READY: ready, MOVING: moving, STALLED: stalled}).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from drivers.declare import CommandRule, DeclaredDriver, Query, SettingsProblem
from drivers.errors import InstrumentFault, LimitError
from drivers.interfaces import AxisLimits, Blackbody, BlackbodyMode, MotionStage, TargetWheel

_IDENTIFY = CommandRule(query=True, value="text")
_ERROR = CommandRule(query=True, required=False, value="error")
MODES: tuple[BlackbodyMode, ...] = ("absolute", "difference")


def number(settings: Any, key: str, path: tuple[str, ...],
           problems: list[SettingsProblem]) -> float | None:
    """A finite number from a settings mapping, or a problem with its key path."""
    if not isinstance(settings, Mapping) or key not in settings:
        problems.append(SettingsProblem(path + (key,), "missing"))
        return None
    value = settings[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)) \
            or not math.isfinite(value):
        problems.append(SettingsProblem(path + (key,), f"must be a number, not {value!r}"))
        return None
    return float(value)


class DeclaredBlackbody(DeclaredDriver, Blackbody):
    """A blackbody from its declaration; limits checked by `setpoint_problem` before sending."""

    KIND = "blackbody"
    RULES = {
        "identify": _IDENTIFY,
        "set_mode": CommandRule(query=False, fields=("mode",)),
        "mode": CommandRule(query=True, value="word"),
        "set_temperature": CommandRule(query=False, fields=("value",)),
        "set_difference": CommandRule(query=False, fields=("value",)),
        "setpoint": CommandRule(query=True),
        "temperature": CommandRule(query=True),
        "reference_temperature": CommandRule(query=True),
        "difference": CommandRule(query=True, required=False),
        "stable": CommandRule(query=True, value="bool"),
        "error": _ERROR,
        "go_safe": CommandRule(query=False, required=False),
    }
    SETTINGS = {
        "limits": "{min_c, max_c, min_difference_k, max_difference_k}: station limits, "
                  "checked before anything is sent",
        "safe_c": "absolute temperature (C) the source goes to whenever the bench is made safe",
    }

    def _read_settings(self, settings: Mapping[str, Any],
                       problems: list[SettingsProblem]) -> None:
        limits = settings.get("limits")
        if not isinstance(limits, Mapping):
            problems.append(SettingsProblem(("limits",), "missing, or not a mapping {min_c, "
                                            "max_c, min_difference_k, max_difference_k}"))
            limits = {}
        lim = [number(limits, k, ("limits",), problems)
               for k in ("min_c", "max_c", "min_difference_k", "max_difference_k")]
        safe = number(settings, "safe_c", (), problems)
        self.min_c, self.max_c, self.min_k, self.max_k = (v if v is not None else math.nan
                                                          for v in lim)
        self.safe_c = safe if safe is not None else math.nan
        if None not in lim and safe is not None and not self.min_c <= safe <= self.max_c:
            problems.append(SettingsProblem(("safe_c",), f"{safe} C outside the limits "
                                            f"{self.min_c}..{self.max_c} C"))
        mode = self.commands.get("mode")
        if isinstance(mode, Query) and set(mode.words.values()) != set(MODES):
            problems.append(SettingsProblem(("modes",), "must map exactly absolute and "
                                            "difference to the controller's words"))

    def setpoint_range(self, mode: BlackbodyMode) -> tuple[float, float]:
        return (self.min_c, self.max_c) if mode == "absolute" else (self.min_k, self.max_k)

    def setpoint_problem(self, mode: str, value: float) -> str | None:
        """The station limits, then the instrument's own range where it is declared."""
        problem = super().setpoint_problem(mode, value)
        cap = self.commands.get("set_temperature" if mode == "absolute" else "set_difference")
        limits = getattr(cap, "limits", None)
        if problem is None and limits is not None and not limits[0] <= value <= limits[1]:
            problem = f"{value} outside the instrument's range {limits[0]}..{limits[1]}"
        return problem

    def _refuse_unless_allowed(self, mode: str, value: float) -> None:
        problem = self.setpoint_problem(mode, value)
        if problem is not None:
            raise LimitError(f"{self.name}: {problem}; nothing was sent")

    def set_mode(self, mode: BlackbodyMode) -> None:
        words = {ours: word for word, ours in self.commands["mode"].words.items()}  # type: ignore[union-attr]
        if mode not in words:
            raise ValueError(f"{self.name}: mode is 'absolute' or 'difference', not {mode!r}")
        self.send("set_mode", mode=words[mode])

    def mode(self) -> BlackbodyMode:
        return self.ask("mode")  # type: ignore[no-any-return]

    def set_temperature(self, celsius: float) -> None:
        self._refuse_unless_allowed("absolute", celsius)
        self.send("set_temperature", value=float(celsius))

    def set_difference(self, kelvin: float) -> None:
        self._refuse_unless_allowed("difference", kelvin)
        self.send("set_difference", value=float(kelvin))

    def setpoint(self) -> float:
        return float(self.ask("setpoint"))

    def temperature(self) -> float:
        return float(self.ask("temperature"))

    def reference_temperature(self) -> float:
        return float(self.ask("reference_temperature"))

    def difference(self) -> float:
        """The controller's own source-minus-reference reading where it has one: both sensors
        sampled together (no skew between two queries) in one exchange, which halves the traffic
        of a settle wait; else the two readings subtracted."""
        if self.has("difference"):
            return float(self.ask("difference"))
        return super().difference()

    def is_stable(self) -> bool:
        return bool(self.ask("stable"))

    def go_safe(self) -> None:
        """The declared safe command when there is one; else absolute mode at `safe_c`."""
        if self.has("go_safe"):
            self.send("go_safe")
            return
        self.set_mode("absolute")
        self.set_temperature(self.safe_c)

    def safing_problem(self) -> str | None:
        """Exercise the safing path without changing anything: in absolute mode, send the
        setpoint the source already has through the same command. A typo in the template
        fails here, at `check`, not at the end of the night. None when it worked."""
        if self.has("go_safe"):
            return None
        if self.mode() != "absolute":
            return "not exercised: the source is in difference mode (safing would change it)"
        try:
            self.set_mode("absolute")
            self.set_temperature(self.setpoint())
        except Exception as exc:  # reported to the operator, who must fix the template
            return f"the safing commands fail: {exc}"
        return None

    def snapshot(self) -> dict[str, Any]:
        return {"mode": self.mode(), "setpoint": self.setpoint(),
                "temperature_c": self.temperature(),
                "reference_c": self.reference_temperature(), "stable": self.is_stable()}


class DeclaredWheel(DeclaredDriver, TargetWheel):
    """A target wheel from its declaration; slot names come from the station file."""

    KIND = "wheel"
    RULES = {
        "identify": _IDENTIFY,
        "slot_count": CommandRule(query=True, required=False, value="int"),
        "select_slot": CommandRule(query=False, fields=("slot",)),
        "current_slot": CommandRule(query=True, value="int"),
        "moving": CommandRule(query=True, value="bool"),
        "home": CommandRule(query=False),
        "error": _ERROR,
    }
    SETTINGS = {
        "slots": "{<n>: {name: <slot name>, target: {...}}} or {<n>: <slot name>}: what sits "
                 "in each slot (numbered from 1)",
        "travelling_slot": "the slot number the controller reports while moving (default 0)",
    }

    def _read_settings(self, settings: Mapping[str, Any],
                       problems: list[SettingsProblem]) -> None:
        slots = settings.get("slots")
        self._names: dict[int, str] = {}
        self._count: int | None = None
        self.travelling_slot = settings.get("travelling_slot", 0)
        if not isinstance(slots, Mapping) or not slots:
            problems.append(SettingsProblem(("slots",), "missing, or not a mapping of slot "
                                            "number to name"))
            return
        for key, spec in slots.items():
            try:
                slot = int(key) if not isinstance(key, bool) else 0
            except (TypeError, ValueError):
                problems.append(SettingsProblem(("slots", str(key)), "is not a slot number"))
                continue
            if slot < 1:
                problems.append(SettingsProblem(("slots", str(key)), "slot numbers start at 1"))
                continue
            label = spec.get("name") if isinstance(spec, Mapping) else spec
            self._names[slot] = str(label if label is not None else f"slot{slot}")

    def slot_count(self) -> int:
        if self._count is None:
            self._count = int(self.ask("slot_count")) if self.has("slot_count") \
                else max(self._names)
        return self._count

    def slot_names(self) -> dict[int, str]:
        return dict(self._names)

    def select_slot(self, slot: int) -> None:
        problem = self.slot_problem(slot)
        if problem is not None:
            raise LimitError(f"{self.name}: {problem}; nothing was sent")
        self.send("select_slot", slot=int(slot))

    def current_slot(self) -> int | None:
        slot = int(self.ask("current_slot"))
        return None if slot == self.travelling_slot else slot

    def is_moving(self) -> bool:
        return bool(self.ask("moving"))

    def home(self) -> None:
        self.send("home")

    def snapshot(self) -> dict[str, Any]:
        slot = self.current_slot()
        return {"slot": slot, "target": self._names.get(slot) if slot else None,
                "moving": self.is_moving()}


class DeclaredStage(DeclaredDriver, MotionStage):
    """A motion stage from its declaration; nothing moves unless every target is allowed."""

    KIND = "stage"
    RULES = {
        "identify": _IDENTIFY,
        "move": CommandRule(query=False, fields=("axis", "value")),
        "position": CommandRule(query=True, fields=("axis",)),
        "moving": CommandRule(query=True, fields=("axis",), value="bool", required=False),
        "state": CommandRule(query=True, fields=("axis",), value="word", required=False),
        "home": CommandRule(query=False, fields=("axis",)),
        "stop": CommandRule(query=False),
        "error": _ERROR,
        "axis_list": CommandRule(query=True, required=False, value="text"),
        "axis_limits": CommandRule(query=True, fields=("axis",), required=False, value="text"),
    }
    SETTINGS = {
        "axes": "{<axis>: {min, max, park, unit}}: station soft limits and park position of "
                "each axis",
    }

    def _read_settings(self, settings: Mapping[str, Any],
                       problems: list[SettingsProblem]) -> None:
        if not (self.has("moving") or self.has("state")):
            problems.append(SettingsProblem(("commands", "moving"), "missing (or give 'state')"))
        axes = settings.get("axes")
        self._limits: dict[str, AxisLimits] = {}
        if not isinstance(axes, Mapping) or not axes:
            problems.append(SettingsProblem(("axes",), "missing, or not a mapping of axis name "
                                            "to {min, max, park, unit}"))
            return
        for axis, spec in axes.items():
            path = ("axes", str(axis))
            if isinstance(spec, AxisLimits):
                self._limits[str(axis)] = spec
                continue
            if not isinstance(spec, Mapping):
                problems.append(SettingsProblem(path, "needs {min, max, park, unit}"))
                continue
            lo, hi = number(spec, "min", path, problems), number(spec, "max", path, problems)
            park = number(spec, "park", path, problems) if "park" in spec else 0.0
            if lo is None or hi is None or park is None:
                continue
            if not lo <= park <= hi:
                problems.append(SettingsProblem(path + ("park",), f"{park} outside {lo}..{hi}"))
                continue
            self._limits[str(axis)] = AxisLimits(lo, hi, park, str(spec.get("unit", "deg")))

    def axes(self) -> list[str]:
        return list(self._limits)

    def limits(self, axis: str) -> AxisLimits:
        try:
            return self._limits[axis]
        except KeyError:
            raise KeyError(f"{self.name}: no axis {axis!r}; axes are {self.axes()}") from None

    def move_to(self, targets: dict[str, float]) -> None:
        problems = [p for a, v in targets.items()
                    if (p := self.position_problem(a, float(v))) is not None]
        if problems:
            raise LimitError(f"{self.name}: {'; '.join(problems)}; no axis was moved")
        for axis, value in targets.items():
            self.send("move", axis=axis, value=float(value))

    def position(self, axis: str) -> float:
        self.limits(axis)
        return float(self.ask("position", axis=axis))

    def axis_state(self, axis: str) -> str:
        """`ready`, `moving` or a fault word, from `state` (or `moving` when none is declared)."""
        if self.has("state"):
            return str(self.ask("state", axis=axis))
        return "moving" if self.ask("moving", axis=axis) else "ready"

    def is_moving(self) -> bool:
        """True while any axis moves; an axis in a fault state raises InstrumentFault."""
        moving = False
        for axis in self.axes():
            state = self.axis_state(axis)
            if state not in ("ready", "moving"):
                asked = self.commands["state" if self.has("state") else "moving"]
                raise InstrumentFault(self.name, f"axis {axis} {state} at "
                                      f"{self.position(axis):.3f}",
                                      asked.command.format(axis=axis),
                                      hint=f"{self.commands['home'].command.format(axis=axis)}"
                                           " after checking the stage")
            moving = moving or state == "moving"
        return moving

    def home(self) -> None:
        for axis in self.axes():
            self.send("home", axis=axis)

    def stop(self) -> None:
        self.send("stop")

    def snapshot(self) -> dict[str, Any]:
        return {**{a: self.position(a) for a in self.axes()},
                "states": {a: self.axis_state(a) for a in self.axes()}}
