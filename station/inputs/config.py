"""The station file: which instruments, on which resources, within which limits.

Loading checks everything at once and reports every problem with file, line and what to do, so an
engineer fixes a station file in one pass. Nothing is opened or moved here.

Schema (see station/data/*.yaml for complete examples)::

    station: <name>
    collimator: {focal_length_mm: <mm>}
    instruments:
      blackbody: {driver, resource, limits: {min_c, max_c, min_difference_k, max_difference_k},
                  safe_c, [timeout_s], [recovery: {...}], [other driver settings]}
      wheel:     {driver, resource, slots: {<n>: {name, target: {kind, ...}}}}
      stage:     {driver, resource, axes: {<axis>: {min, max, park, unit}}}
      camera:    {driver, resource}
    simulation: {...}   # only in a simulated station: bench physics and the camera's truth
    history: {url: <database URL>}   # optional: the run history (default: runs/history.sqlite)
"""

from __future__ import annotations

import difflib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from analysis.targets import Target, target_from_mapping
from drivers.errors import ResourceStringError
from drivers.interfaces import AxisLimits
from sequences.facts import PlanCheck, StationFacts
from station.inputs.notify_settings import NotifySettings, notify_problems, parse_notify
from station.inputs.limits import StationLimits
from sequences.yamlsource import (MarkedDict, Problem, SourceError, SourceRef, is_number,
                                  load_yaml)

ROLES = ("blackbody", "wheel", "stage", "camera")
SIM_RESOURCES = ("sim", "sim+visa", "sim+serial", "sim+local")
BUILTIN_DIR = Path(__file__).resolve().parent.parent / "data"
DEFAULT_SIM_STATION = BUILTIN_DIR / "sim_station.yaml"
COMMON_KEYS = {"driver", "resource", "timeout_s", "recovery"}


@dataclass(frozen=True)
class InstrumentEntry:
    """One instrument as the station file describes it; `settings` go to the driver as they are."""

    role: str
    driver: str
    resource: str
    timeout_s: float
    recovery: Mapping[str, Any]
    settings: Mapping[str, Any]
    where: SourceRef


@dataclass(frozen=True)
class BlackbodyLimits:
    """The station's limits for its source: refused before anything is sent."""

    min_c: float
    max_c: float
    min_difference_k: float
    max_difference_k: float
    safe_c: float


@dataclass(frozen=True)
class Slot:
    number: int
    name: str
    target: Target | None


@dataclass(frozen=True)
class StationConfig:
    """A validated station file."""

    name: str
    path: Path
    text: str
    collimator_focal_mm: float
    instruments: Mapping[str, InstrumentEntry]
    blackbody_limits: BlackbodyLimits
    slots: Mapping[int, Slot]
    axes: Mapping[str, AxisLimits]
    simulation: Mapping[str, Any] | None = None
    problems_ignored: tuple[str, ...] = field(default=())
    history_url: str | None = None
    notify: NotifySettings = field(default_factory=NotifySettings)

    @property
    def simulated(self) -> bool:
        return self.simulation is not None

    @property
    def base_dir(self) -> Path:
        return self.path.parent

    def target_named(self, name: str) -> Target | None:
        for slot in self.slots.values():
            if slot.name == name:
                return slot.target
        return None

    def slot_names(self) -> dict[int, str]:
        return {n: s.name for n, s in self.slots.items()}

    @property
    def limits(self) -> StationLimits:
        """The one answer to "is this setpoint / position allowed" for this station."""
        lim = self.blackbody_limits
        return StationLimits((lim.min_c, lim.max_c), (lim.min_difference_k, lim.max_difference_k),
                             dict(self.axes))

    def facts(self, analyses: frozenset[str], check_plan: PlanCheck | None = None
              ) -> StationFacts:
        """What recipe validation needs to know about this station."""
        return StationFacts(
            targets=frozenset(s.name for s in self.slots.values()),
            stage_axes={a: al.unit for a, al in self.axes.items()},
            limits=self.limits,
            analyses=analyses,
            check_plan=check_plan,
        )


class _Checker:
    """Collects problems while reading a marked mapping."""

    def __init__(self) -> None:
        self.problems: list[Problem] = []

    def add(self, where: SourceRef, message: str, hint: str = "") -> None:
        self.problems.append(Problem(where, message, hint))

    def mapping(self, parent: MarkedDict, key: str, hint: str) -> MarkedDict | None:
        value = parent.get(key)
        if value is None:
            self.add(parent.ref(), f"missing '{key}'", hint)
            return None
        if not isinstance(value, MarkedDict):
            self.add(parent.ref_of(key), f"'{key}' must be a mapping of keys and values", hint)
            return None
        return value

    def number(self, parent: MarkedDict, key: str, hint: str, *, positive: bool = False,
               default: float | None = None) -> float | None:
        if key not in parent:
            if default is not None:
                return default
            self.add(parent.ref(), f"missing '{key}'", hint)
            return None
        value = parent[key]
        if not is_number(value):
            self.add(parent.ref_of(key), f"'{key}' must be a number, not {value!r}", hint)
            return None
        if positive and value <= 0:
            self.add(parent.ref_of(key), f"'{key}' must be positive, not {value}", hint)
            return None
        return float(value)

    def text(self, parent: MarkedDict, key: str, hint: str) -> str | None:
        value = parent.get(key)
        if not isinstance(value, str) or not value.strip():
            where = parent.ref_of(key) if key in parent else parent.ref()
            self.add(where, f"'{key}' must be a non-empty text" if key in parent
                     else f"missing '{key}'", hint)
            return None
        return value


def _check_resource(check: _Checker, entry: MarkedDict, role: str, simulated: bool) -> None:
    from drivers.transport import parse_resource

    resource = entry.get("resource")
    if not isinstance(resource, str):
        return
    if role == "camera" and resource not in SIM_RESOURCES:
        return  # a camera resource (device index, file, folder) is checked by its driver
    if resource in SIM_RESOURCES:
        if not simulated:
            check.add(entry.ref_of("resource"),
                      f"{role}: resource '{resource}' names the built-in simulator, but this "
                      "station has no 'simulation' section",
                      "give the instrument's real resource string, e.g. "
                      "TCPIP::10.0.0.5::5025::SOCKET or /dev/ttyUSB0")
        return
    try:
        parse_resource(resource)
    except ResourceStringError as exc:
        check.add(entry.ref_of("resource"), f"{role}: {exc}")


def _check_driver(check: _Checker, entry: MarkedDict, role: str, known: Mapping[str, str]) -> None:
    name = entry.get("driver")
    if not isinstance(name, str):
        return
    if name not in known:
        close = difflib.get_close_matches(name, list(known), n=1)
        hint = f"did you mean '{close[0]}'? " if close else ""
        check.add(entry.ref_of("driver"), f"{role}: unknown driver '{name}'",
                  hint + "known drivers: " + ", ".join(sorted(known))
                  + " (run 'nightbench drivers' for their settings)")
    elif known[name] == "broken":
        from drivers.registry import driver_info

        check.add(entry.ref_of("driver"), f"{role}: {driver_info(name).error}",
                  "fix or reinstall the package that provides it ('nightbench drivers --check')")
    elif known[name] not in (role, "any"):
        check.add(entry.ref_of("driver"),
                  f"{role}: driver '{name}' is a {known[name]} driver, not a {role} driver",
                  "pick a driver of the right kind ('nightbench drivers' lists them)")


def _ref_of_path(entry: MarkedDict, path: str) -> SourceRef:
    """Position of a dotted key path such as `commands.temperature.reply` inside an entry."""
    node: Any = entry
    where = entry.ref()
    for part in path.split("."):
        key: Any = int(part) if part.isdigit() and isinstance(node, dict) and int(part) in node \
            else part
        if isinstance(node, MarkedDict) and key in node:
            where = node.ref_of(key)
            node = node[key]
        else:
            break
    return where


def _check_driver_settings(check: _Checker, entry: MarkedDict, role: str) -> None:
    """Let the driver check its own settings (e.g. command templates) when it can."""
    from drivers.registry import find_driver

    name = entry.get("driver")
    try:
        cls = find_driver(name)
    except Exception:  # unknown or broken drivers are reported by _check_driver
        return
    validate = getattr(cls, "validate_settings", None)
    if validate is None:
        return
    settings = {k: v for k, v in entry.items() if k not in COMMON_KEYS}
    if role == "camera":  # camera drivers take their resource among their settings
        settings["resource"] = entry.get("resource")
    for text in validate(settings):
        path, _, message = str(text).partition(": ")
        check.add(_ref_of_path(entry, path) if message else entry.ref(),
                  f"{role}: {text}", "see 'nightbench drivers' and DEVELOPERS.md")


def _known_drivers() -> dict[str, str]:
    from drivers.registry import list_drivers

    return {d.name: d.kind for d in list_drivers()}


def _instrument(check: _Checker, instruments: MarkedDict, role: str, simulated: bool,
                known: Mapping[str, str]) -> InstrumentEntry | None:
    entry = check.mapping(instruments, role,
                          f"describe the {role} with at least 'driver' and 'resource'")
    if entry is None:
        return None
    driver = check.text(entry, "driver", "name a driver, e.g. from 'nightbench drivers'")
    resource = check.text(entry, "resource",
                          "give a resource string such as TCPIP::host::port::SOCKET, "
                          "ASRL/dev/ttyUSB0::INSTR, GPIB0::12::INSTR or socket://host:port")
    _check_driver(check, entry, role, known)
    if isinstance(driver, str) and driver in known:
        _check_driver_settings(check, entry, role)
    _check_resource(check, entry, role, simulated)
    timeout = check.number(entry, "timeout_s", "seconds to wait for a reply", positive=True,
                           default=2.0)
    recovery = entry.get("recovery", {})
    if not isinstance(recovery, Mapping):
        check.add(entry.ref_of("recovery"), f"{role}: 'recovery' must be a mapping",
                  "e.g. recovery: {retries: 3, backoff_s: 0.5}")
        recovery = {}
    if driver is None or resource is None or timeout is None:
        return None
    settings = {k: v for k, v in entry.items() if k not in COMMON_KEYS}
    return InstrumentEntry(role, driver, resource, timeout, dict(recovery), settings, entry.ref())


def _blackbody_limits(check: _Checker, entry: MarkedDict | None) -> BlackbodyLimits | None:
    if entry is None:
        return None
    hint = ("every blackbody needs limits: {min_c, max_c, min_difference_k, max_difference_k}; "
            "take them from the source maker's manual and your lab's rules")
    limits = check.mapping(entry, "limits", hint)
    safe = check.number(entry, "safe_c", "the absolute temperature the source returns to "
                        "whenever a run ends other than complete (near ambient)")
    if limits is None:
        return None
    values = [check.number(limits, k, hint) for k in
              ("min_c", "max_c", "min_difference_k", "max_difference_k")]
    if any(v is None for v in values) or safe is None:
        return None
    min_c, max_c, min_d, max_d = values  # type: ignore[misc]
    if min_c >= max_c:
        check.add(limits.ref_of("max_c"), f"max_c ({max_c}) must be above min_c ({min_c})")
    if min_d >= max_d:
        check.add(limits.ref_of("max_difference_k"),
                  f"max_difference_k ({max_d}) must be above min_difference_k ({min_d})")
    if not min_c <= safe <= max_c:
        check.add(entry.ref_of("safe_c"), f"safe_c {safe} C is outside the limits "
                  f"[{min_c}, {max_c}] C", "pick a safe setpoint inside the limits")
    return BlackbodyLimits(min_c, max_c, min_d, max_d, safe)  # type: ignore[arg-type]


def _slots(check: _Checker, entry: MarkedDict | None, base_dir: Path) -> dict[int, Slot]:
    if entry is None:
        return {}
    slots_map = check.mapping(entry, "slots", "list the wheel's slots: {1: {name: open, target: "
                              "{kind: open}}, 2: {name: pinhole_grid, target: {...}}}")
    if slots_map is None:
        return {}
    slots: dict[int, Slot] = {}
    seen: dict[str, int] = {}
    for key, spec in slots_map.items():
        where = slots_map.key_ref(key)
        if isinstance(key, bool) or not isinstance(key, int) or key < 1:
            check.add(where, f"slot '{key}' must be a slot number from 1", "e.g. '3:'")
            continue
        if not isinstance(spec, MarkedDict):
            check.add(slots_map.ref_of(key), f"slot {key} must be a mapping with 'name' and "
                      "'target'")
            continue
        name = check.text(spec, "name", "give the slot a name recipes can use, e.g. pinhole_grid")
        if name is None:
            continue
        if name in seen:
            check.add(spec.ref_of("name"), f"slot name '{name}' is used twice (slots {seen[name]}"
                      f" and {key})", "give every slot its own name")
        seen[name] = key
        target = None
        if "target" in spec:
            raw = spec["target"]
            if not isinstance(raw, Mapping):
                check.add(spec.ref_of("target"), f"slot {key}: 'target' must be a mapping")
            else:
                try:
                    target = target_from_mapping(dict(raw), base_dir)
                except (ValueError, OSError) as exc:
                    check.add(spec.ref_of("target"), f"slot {key} target: {exc}")
        slots[key] = Slot(key, name, target)
    return slots


def _axes(check: _Checker, entry: MarkedDict | None) -> dict[str, AxisLimits]:
    if entry is None:
        return {}
    axes_map = check.mapping(entry, "axes", "list the stage axes with soft limits: "
                             "{az: {min: -40, max: 40, park: 0, unit: deg}}")
    if axes_map is None:
        return {}
    axes: dict[str, AxisLimits] = {}
    for name, spec in axes_map.items():
        if not isinstance(spec, MarkedDict):
            check.add(axes_map.ref_of(name), f"axis '{name}' must be a mapping with min, max, "
                      "park, unit")
            continue
        hint = f"axis '{name}' needs soft limits 'min' and 'max' (inside the stage's hard limits)"
        lo = check.number(spec, "min", hint)
        hi = check.number(spec, "max", hint)
        park = check.number(spec, "park", "where the axis rests when the bench is safe",
                            default=0.0)
        unit = spec.get("unit", "deg")
        if lo is None or hi is None or park is None:
            continue
        if lo >= hi:
            check.add(spec.ref_of("max"), f"axis '{name}': max ({hi}) must be above min ({lo})")
            continue
        if not lo <= park <= hi:
            check.add(spec.ref_of("park"), f"axis '{name}': park {park} is outside [{lo}, {hi}]",
                      "park inside the soft limits")
        axes[str(name)] = AxisLimits(lo, hi, park, str(unit))
    return axes


def load_station(path: Path | str | None = None) -> StationConfig:
    """Read and validate a station file (the built-in simulated station when `path` is None).

    Raises `SourceError` listing every problem with file, line and the fix.
    """
    path = Path(path) if path is not None else DEFAULT_SIM_STATION
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise SourceError([Problem(SourceRef(str(path), 1, 1), f"cannot read the station file "
                                   f"({exc.strerror})", "check the path given to --station")])
    doc = load_yaml(path, text)
    check = _Checker()
    if not isinstance(doc, MarkedDict):
        raise SourceError([Problem(doc.ref(), "a station file must be a mapping",
                                   "start from station/data/example_lab_station.yaml")])
    for key in doc:
        if key not in ("station", "collimator", "instruments", "simulation", "lab", "notes",
                       "history", "notify"):
            close = difflib.get_close_matches(str(key), ["station", "collimator", "instruments",
                                                         "simulation"], n=1)
            check.add(doc.key_ref(key), f"unknown top-level key '{key}'",
                      f"did you mean '{close[0]}'?" if close else
                      "allowed: station, collimator, instruments, simulation, lab, notes, "
                      "history, notify")
    name = check.text(doc, "station", "give the station a name, e.g. 'Bay 2 collimator bench'")
    collimator = check.mapping(doc, "collimator", "e.g. collimator: {focal_length_mm: 1500}")
    focal = (check.number(collimator, "focal_length_mm", "the collimator's effective focal "
                          "length from its calibration sheet", positive=True)
             if collimator is not None else None)
    simulation = doc.get("simulation")
    if simulation is not None and not isinstance(simulation, MarkedDict):
        check.add(doc.ref_of("simulation"), "'simulation' must be a mapping")
        simulation = None
    instruments = check.mapping(doc, "instruments", "list blackbody, wheel, stage and camera")
    entries: dict[str, InstrumentEntry] = {}
    limits = None
    slots: dict[int, Slot] = {}
    axes: dict[str, AxisLimits] = {}
    if instruments is not None:
        known = _known_drivers()
        for key in instruments:
            if key not in ROLES:
                check.add(instruments.key_ref(key), f"unknown instrument role '{key}'",
                          "roles are: " + ", ".join(ROLES))
        for role in ROLES:
            entry = _instrument(check, instruments, role, simulation is not None, known)
            if entry is not None:
                entries[role] = entry
        raw = {r: instruments.get(r) for r in ROLES}
        limits = _blackbody_limits(check, raw["blackbody"]
                                   if isinstance(raw["blackbody"], MarkedDict) else None)
        slots = _slots(check, raw["wheel"] if isinstance(raw["wheel"], MarkedDict) else None,
                       path.parent)
        axes = _axes(check, raw["stage"] if isinstance(raw["stage"], MarkedDict) else None)
    history_url = _history_url(check, doc)
    notify_raw = doc.get("notify")
    if notify_raw is not None:
        for key, message in notify_problems(notify_raw):
            where = (notify_raw.ref_of(key) if isinstance(notify_raw, MarkedDict) and key
                     else doc.ref_of("notify"))
            check.add(where, message, "see the README's 'Watching a run from elsewhere'")
    if check.problems or name is None or focal is None or limits is None:
        if not check.problems:
            check.add(doc.ref(), "the station file is incomplete")
        raise SourceError(check.problems)
    return StationConfig(name=name, path=path, text=text, collimator_focal_mm=focal,
                         instruments=entries, blackbody_limits=limits, slots=slots, axes=axes,
                         simulation=simulation, history_url=history_url,
                         notify=parse_notify(notify_raw))


def _history_url(check: _Checker, doc: MarkedDict) -> str | None:
    """``history: {url: ...}``: the run history's database (read by station/history)."""
    if "history" not in doc:
        return None
    history = check.mapping(doc, "history", "e.g. history: {url: postgresql://lab-db/nightbench}")
    if history is None:
        return None
    return check.text(history, "url", "a database URL, e.g. sqlite:///runs/history.sqlite or "
                      "postgresql://user@host/nightbench")
