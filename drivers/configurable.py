"""Drivers whose command set is written in the station file: a text-command controller, no Python.

A lab with a new blackbody controller, wheel or stage that speaks text lines describes its
commands in the instrument entry; the driver sends the templates and parses the replies::

    blackbody:
      driver: scpi-configurable-blackbody
      resource: TCPIP::10.20.0.21::5025::SOCKET
      limits: {min_c: 5, max_c: 90, min_difference_k: -15, max_difference_k: 50}
      safe_c: 22
      modes: {absolute: ABS, difference: DIFF}        # our mode name -> the controller's word
      commands:
        identify: {query: "*IDN?", reply: "(?P<value>.+)"}
        set_mode: "SOUR:MODE {mode}"                  # a setting: its reply must match replies.ok
        set_temperature: "SOUR:TEMP {value:.3f}"
        temperature: {query: "MEAS:TEMP?", reply: "(?P<value>[-+0-9.eE]+)"}
      replies: {ok: "OK", error: "ERR (?P<code>-?\\d+),\\"(?P<message>.*)\\""}
      booleans: {true: ["1"], false: ["0"]}
      terminations: {read: "\\n", write: "\\n"}

Templates use Python format fields (`{value:.3f}`); each command may use only the fields its
kind allows (`PLACEHOLDERS`). Queries need a reply pattern with a `value` group (`code` and
`message` for the error query). Every problem is found at load time and named by its key path
(`commands.temperature.reply`), so the station loader can point at the file line.
"""

from __future__ import annotations

import re
import string
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any, ClassVar, TypeVar

from drivers.errors import InstrumentRefused, LimitError
from drivers.interfaces import AxisLimits, Blackbody, BlackbodyMode, MotionStage, TargetWheel
from drivers.scpi import SettingsError
from drivers.transport import Transport

T = TypeVar("T")


@dataclass(frozen=True)
class CommandRule:
    """What a command key must be: a setting or a query, the fields it may use, its value type."""

    query: bool
    fields: tuple[str, ...] = ()
    required: bool = True
    value: str = "float"  # float | int | bool | text | error (code + message)


@dataclass(frozen=True)
class Command:
    """One checked command: its template and, for a query, its compiled reply pattern."""

    key: str
    template: str
    reply: re.Pattern[str] | None


@dataclass(frozen=True)
class SettingsProblem:
    """A problem in the settings, with the key path to it (for a file:line message)."""

    path: tuple[str, ...]
    message: str

    def __str__(self) -> str:
        return f"{'.'.join(self.path)}: {self.message}"


_SAMPLES: dict[str, Any] = {"value": 1.25, "mode": "MODE", "slot": 1, "axis": "ax"}
_VALUE_GROUPS = {"error": ("code", "message")}
_TOP_KEYS = ("commands", "replies", "booleans", "terminations", "modes")


def _fields_of(template: str) -> list[tuple[str, str]]:
    """(field name, format spec) of every `{...}` in a template; ValueError on bad braces."""
    return [(name, spec or "") for _, name, spec, _ in string.Formatter().parse(template)
            if name is not None]


def _check_template(template: Any, rule: CommandRule,
                    problems: list[SettingsProblem], path: tuple[str, ...]) -> str | None:
    if not isinstance(template, str) or not template.strip():
        problems.append(SettingsProblem(path, "must be a non-empty command text"))
        return None
    try:
        fields = _fields_of(template)
    except ValueError as exc:
        problems.append(SettingsProblem(path, f"braces do not pair up ({exc}); write {{{{ and "
                                              f"}}}} for literal braces"))
        return None
    names = {n for n, _ in fields}
    allowed = ", ".join("{" + f + "}" for f in rule.fields) or "none"
    for name, spec in fields:
        if name not in rule.fields:
            problems.append(SettingsProblem(
                path, f"unknown placeholder {{{name}}}; this command may use: {allowed}"))
            return None
        try:
            format(_SAMPLES[name], spec)
        except ValueError as exc:
            problems.append(SettingsProblem(path, f"placeholder {{{name}:{spec}}}: {exc}"))
            return None
    missing = [f for f in rule.fields if f not in names]
    if missing:
        problems.append(SettingsProblem(
            path, "must contain " + ", ".join("{" + f + "}" for f in missing)))
        return None
    return template


def _parse_commands(rules: Mapping[str, CommandRule], commands: Any,
                    problems: list[SettingsProblem]) -> dict[str, Command]:
    if not isinstance(commands, Mapping):
        problems.append(SettingsProblem(("commands",), "missing, or not a mapping of command "
                                        "name to template; needs " + ", ".join(rules)))
        return {}
    out: dict[str, Command] = {}
    for key in commands:
        if key not in rules:
            problems.append(SettingsProblem(("commands", str(key)),
                                            "not a command of this driver; known: "
                                            + ", ".join(rules)))
    for key, rule in rules.items():
        if key not in commands:
            if rule.required:
                problems.append(SettingsProblem(("commands", key), "missing"))
            continue
        spec = commands[key]
        path = ("commands", key)
        if not rule.query:
            if isinstance(spec, Mapping):
                problems.append(SettingsProblem(path, "is a setting: give the command text "
                                                "only (its reply must match replies.ok)"))
                continue
            template = _check_template(spec, rule, problems, path)
            if template is not None:
                out[key] = Command(key, template, None)
            continue
        if not isinstance(spec, Mapping):
            problems.append(SettingsProblem(path, "is a query: write {query: <command>, reply: "
                                            "<pattern with (?P<value>...)>}"))
            continue
        for extra in set(spec) - {"query", "reply"}:
            problems.append(SettingsProblem(path + (str(extra),), "unknown key; a query has "
                                            "'query' and 'reply'"))
        template = _check_template(spec.get("query"), rule, problems, path + ("query",))
        pattern = _compile(spec.get("reply"), problems, path + ("reply",),
                           _VALUE_GROUPS.get(rule.value, ("value",)))
        if template is not None and pattern is not None:
            out[key] = Command(key, template, pattern)
    return out


def _compile(text: Any, problems: list[SettingsProblem], path: tuple[str, ...],
             groups: tuple[str, ...]) -> re.Pattern[str] | None:
    if text is None:
        problems.append(SettingsProblem(path, "reply pattern missing; e.g. "
                                        "'(?P<value>[-+0-9.eE]+)'"))
        return None
    if not isinstance(text, str):
        problems.append(SettingsProblem(path, "must be a regular expression text"))
        return None
    try:
        pattern = re.compile(text)
    except re.error as exc:
        problems.append(SettingsProblem(path, f"not a valid regular expression ({exc})"))
        return None
    lacking = [g for g in groups if g not in pattern.groupindex]
    if lacking:
        problems.append(SettingsProblem(path, "needs the named group(s) "
                                        + ", ".join(f"(?P<{g}>...)" for g in lacking)))
        return None
    return pattern


@dataclass(frozen=True)
class Dialect:
    """Everything the station file says about how the controller talks."""

    commands: Mapping[str, Command]
    ok: re.Pattern[str] | None
    error: re.Pattern[str] | None
    true_words: frozenset[str]
    false_words: frozenset[str]
    read_termination: str | None
    write_termination: str | None


def parse_dialect(rules: Mapping[str, CommandRule], settings: Mapping[str, Any],
                  problems: list[SettingsProblem]) -> Dialect:
    """Check `commands`, `replies`, `booleans` and `terminations`; problems are appended."""
    commands = _parse_commands(rules, settings.get("commands"), problems)
    replies = settings.get("replies", {}) or {}
    ok = error = None
    if not isinstance(replies, Mapping):
        problems.append(SettingsProblem(("replies",), "must be a mapping {ok, error}"))
    else:
        for extra in set(replies) - {"ok", "error"}:
            problems.append(SettingsProblem(("replies", str(extra)), "unknown; use ok, error"))
        ok_text = replies.get("ok", "OK")
        if ok_text is not None:
            ok = _compile(str(ok_text), problems, ("replies", "ok"), ())
        if replies.get("error") is not None:
            error = _compile(replies["error"], problems, ("replies", "error"),
                             ("code", "message"))
    booleans = settings.get("booleans", {}) or {}
    words: dict[str, frozenset[str]] = {"true": frozenset({"1"}), "false": frozenset({"0"})}
    if not isinstance(booleans, Mapping):
        problems.append(SettingsProblem(("booleans",), "must be {true: [...], false: [...]}"))
    else:
        for side in ("true", "false"):
            if side in booleans:
                raw = booleans[side]
                items = [raw] if isinstance(raw, (str, int)) else list(raw or [])
                words[side] = frozenset(str(w) for w in items)
        if words["true"] & words["false"]:
            problems.append(SettingsProblem(("booleans",), "a word is both true and false: "
                                            + ", ".join(sorted(words["true"] & words["false"]))))
    terms = settings.get("terminations", {}) or {}
    read = write = None
    if not isinstance(terms, Mapping):
        problems.append(SettingsProblem(("terminations",), "must be {read, write}"))
    else:
        for side in ("read", "write"):
            if side in terms and (not isinstance(terms[side], str) or not terms[side]):
                problems.append(SettingsProblem(("terminations", side),
                                                "must be a text such as \"\\n\" or \"\\r\\n\""))
        read, write = terms.get("read"), terms.get("write")
    return Dialect(commands, ok, error, words["true"], words["false"],
                   read if isinstance(read, str) else None,
                   write if isinstance(write, str) else None)


class ConfigurableDriver:
    """Sends the station file's templates and parses replies with its patterns.

    Subclasses give `RULES` (the command keys of their kind) and read their own settings in
    `_own_settings`; everything is validated together, so one load shows every problem.
    """

    KIND: ClassVar[str] = ""
    RULES: ClassVar[Mapping[str, CommandRule]] = {}
    SETTINGS: ClassVar[Mapping[str, str]] = {}

    def __init__(self, transport: Transport, *, name: str,
                 settings: Mapping[str, Any] | None = None) -> None:
        self.transport = transport
        self.name = name
        self.settings: Mapping[str, Any] = dict(settings or {})
        problems: list[SettingsProblem] = []
        self.dialect = parse_dialect(self.RULES, self.settings, problems)
        self._own_settings(self.settings, problems)
        if problems:
            raise SettingsError(f"{name}: " + "; ".join(str(p) for p in problems))
        self._apply_terminations()

    # --- validation -------------------------------------------------------------------------
    @classmethod
    def settings_problems(cls, settings: Mapping[str, Any]) -> list[SettingsProblem]:
        """Every problem of `settings`, each with its key path (no instrument is contacted)."""
        problems: list[SettingsProblem] = []
        parse_dialect(cls.RULES, settings, problems)
        probe = cls.__new__(cls)
        probe.name = "settings"
        probe.settings = settings
        cls._own_settings(probe, settings, problems)
        return problems

    @classmethod
    def validate_settings(cls, settings: Mapping[str, Any]) -> list[str]:
        """Problems as `key.path: message` texts; empty when the settings are good."""
        return [str(p) for p in cls.settings_problems(settings)]

    def _own_settings(self, settings: Mapping[str, Any],
                      problems: list[SettingsProblem]) -> None:
        """Read the kind's own settings (limits, axes, slots...); append problems."""

    def _apply_terminations(self) -> None:
        d = self.dialect
        changed = False
        for attr, value in (("read_termination", d.read_termination),
                            ("write_termination", d.write_termination)):
            if value is not None and getattr(self.transport, attr, value) != value:
                setattr(self.transport, attr, value)
                changed = True
        if changed:
            self.transport.reconnect()  # a VISA resource takes terminations when it opens

    # --- talking ------------------------------------------------------------------------------
    def has(self, key: str) -> bool:
        return key in self.dialect.commands

    def _text(self, key: str, **fields: Any) -> str:
        return self.dialect.commands[key].template.format(**fields)

    def _refusal(self, command: str, reply: str) -> None:
        pattern = self.dialect.error
        m = pattern.fullmatch(reply) if pattern is not None else None
        if m is not None:
            raise InstrumentRefused(self.name, f"refused (error {m['code']}: {m['message']})",
                                    command, reply)

    def _send(self, key: str, **fields: Any) -> None:
        """A setting: the reply must match replies.ok (or none is read when ok is null)."""
        command = self._text(key, **fields)
        ok = self.dialect.ok
        if ok is None:
            self.transport.write(command)
            return

        def parse(reply: str) -> str:
            self._refusal(command, reply)
            if ok.fullmatch(reply) is None:
                raise ValueError(f"expected a reply matching {ok.pattern!r}")
            return reply
        self.transport.query(command, parse)

    def _query(self, key: str, convert: Callable[[re.Match[str]], T], **fields: Any) -> T:
        spec = self.dialect.commands[key]
        command = self._text(key, **fields)
        assert spec.reply is not None

        def parse(reply: str) -> T:
            self._refusal(command, reply)
            m = spec.reply.fullmatch(reply)
            if m is None:
                raise ValueError(f"does not match {spec.reply.pattern!r} "
                                 f"(commands.{key}.reply)")
            return convert(m)
        return self.transport.query(command, parse)

    def _float(self, key: str, **fields: Any) -> float:
        return self._query(key, lambda m: float(m["value"]), **fields)

    def _int(self, key: str, **fields: Any) -> int:
        return self._query(key, lambda m: int(m["value"]), **fields)

    def _bool(self, key: str, **fields: Any) -> bool:
        d = self.dialect

        def convert(m: re.Match[str]) -> bool:
            word = m["value"]
            if word in d.true_words:
                return True
            if word in d.false_words:
                return False
            raise ValueError(f"{word!r} is neither true {sorted(d.true_words)} nor false "
                             f"{sorted(d.false_words)} (booleans)")
        return self._query(key, convert, **fields)

    # --- common to every instrument -----------------------------------------------------------
    def identify(self) -> str:
        return self._query("identify", lambda m: m["value"])

    def last_error(self) -> tuple[int, str]:
        """The controller's error query (commands.error); (0, '') when none is configured."""
        if not self.has("error"):
            return 0, ""
        return self._query("error", lambda m: (int(m["code"]), m["message"]))

    def close(self) -> None:
        self.transport.close()


def _number(settings: Mapping[str, Any], key: str, path: tuple[str, ...],
            problems: list[SettingsProblem]) -> float | None:
    if not isinstance(settings, Mapping) or key not in settings:
        problems.append(SettingsProblem(path + (key,), "missing"))
        return None
    value = settings[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        problems.append(SettingsProblem(path + (key,), f"must be a number, not {value!r}"))
        return None
    return float(value)


_IDENTIFY = CommandRule(query=True, value="text")
_ERROR = CommandRule(query=True, required=False, value="error")


class ConfigurableBlackbody(ConfigurableDriver, Blackbody):
    """A blackbody controller described in the station file; limits checked before sending."""

    KIND = "blackbody"
    RULES = {
        "identify": _IDENTIFY,
        "set_mode": CommandRule(query=False, fields=("mode",)),
        "mode": CommandRule(query=True, value="text"),
        "set_temperature": CommandRule(query=False, fields=("value",)),
        "set_difference": CommandRule(query=False, fields=("value",)),
        "setpoint": CommandRule(query=True),
        "temperature": CommandRule(query=True),
        "reference_temperature": CommandRule(query=True),
        "stable": CommandRule(query=True, value="bool"),
        "error": _ERROR,
    }
    SETTINGS = {
        "limits": "{min_c, max_c, min_difference_k, max_difference_k}: checked before sending",
        "safe_c": "absolute temperature (C) the source goes to when the bench is made safe",
        "modes": "{absolute: <word>, difference: <word>}: the controller's mode words",
        "commands": "templates: " + ", ".join(RULES),
        "replies": "{ok: <pattern>, error: <pattern with code, message>}",
        "booleans": "{true: [words], false: [words]} (default 1 / 0)",
        "terminations": "{read, write} line endings (default \\n)",
    }

    def _own_settings(self, settings: Mapping[str, Any],
                      problems: list[SettingsProblem]) -> None:
        limits = settings.get("limits")
        if not isinstance(limits, Mapping):
            problems.append(SettingsProblem(("limits",), "missing, or not a mapping"))
            limits = {}
        lim = [_number(limits, k, ("limits",), problems)
               for k in ("min_c", "max_c", "min_difference_k", "max_difference_k")]
        safe = _number(settings, "safe_c", (), problems)
        if None not in lim and safe is not None:
            self.min_c, self.max_c, self.min_k, self.max_k = lim  # type: ignore[assignment]
            self.safe_c = safe
            if not self.min_c <= safe <= self.max_c:
                problems.append(SettingsProblem(("safe_c",), f"{safe} outside the limits "
                                                f"{self.min_c}..{self.max_c} C"))
        modes = settings.get("modes", {"absolute": "ABS", "difference": "DIFF"})
        if not isinstance(modes, Mapping) or set(modes) != {"absolute", "difference"}:
            problems.append(SettingsProblem(("modes",), "must map exactly absolute and "
                                            "difference to the controller's words"))
            modes = {"absolute": "ABS", "difference": "DIFF"}
        self.mode_words: dict[str, str] = {k: str(v) for k, v in modes.items()}

    def set_mode(self, mode: BlackbodyMode) -> None:
        if mode not in self.mode_words:
            raise ValueError(f"{self.name}: mode is 'absolute' or 'difference', not {mode!r}")
        self._send("set_mode", mode=self.mode_words[mode])

    def mode(self) -> BlackbodyMode:
        by_word = {w: m for m, w in self.mode_words.items()}

        def convert(m: re.Match[str]) -> BlackbodyMode:
            if m["value"] not in by_word:
                raise ValueError(f"mode word {m['value']!r} is not one of {sorted(by_word)}")
            return by_word[m["value"]]  # type: ignore[return-value]
        return self._query("mode", convert)

    def set_temperature(self, celsius: float) -> None:
        if not self.min_c <= celsius <= self.max_c:
            raise LimitError(f"{self.name}: {celsius} C outside the station limits "
                             f"{self.min_c}..{self.max_c} C; nothing was sent")
        self._send("set_temperature", value=float(celsius))

    def set_difference(self, kelvin: float) -> None:
        if not self.min_k <= kelvin <= self.max_k:
            raise LimitError(f"{self.name}: difference {kelvin} K outside the station limits "
                             f"{self.min_k}..{self.max_k} K; nothing was sent")
        self._send("set_difference", value=float(kelvin))

    def setpoint(self) -> float:
        return self._float("setpoint")

    def temperature(self) -> float:
        return self._float("temperature")

    def reference_temperature(self) -> float:
        return self._float("reference_temperature")

    def is_stable(self) -> bool:
        return self._bool("stable")

    def go_safe(self) -> None:
        """Absolute mode first, then the safe setpoint: a controller may not switch by itself."""
        self.set_mode("absolute")
        self.set_temperature(self.safe_c)

    def snapshot(self) -> dict[str, Any]:
        return {"mode": self.mode(), "setpoint": self.setpoint(),
                "temperature_c": self.temperature(),
                "reference_c": self.reference_temperature(), "stable": self.is_stable()}


class ConfigurableWheel(ConfigurableDriver, TargetWheel):
    """A target wheel described in the station file; slot names come from `slots`."""

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
        "slots": "{<n>: {name: <slot name>, target: {...}}} or {<n>: <name>}",
        "travelling_slot": "the slot number the controller reports while moving (default 0)",
        "commands": "templates: " + ", ".join(RULES),
        "replies": "{ok, error}", "booleans": "{true, false}", "terminations": "{read, write}",
    }

    def _own_settings(self, settings: Mapping[str, Any],
                      problems: list[SettingsProblem]) -> None:
        slots = settings.get("slots")
        self._names: dict[int, str] = {}
        if not isinstance(slots, Mapping) or not slots:
            problems.append(SettingsProblem(("slots",), "missing, or not a mapping of slot "
                                            "number to name"))
            return
        for key, spec in slots.items():
            if isinstance(key, bool) or not isinstance(key, int) or key < 1:
                problems.append(SettingsProblem(("slots", str(key)), "slot numbers start at 1"))
                continue
            label = spec.get("name") if isinstance(spec, Mapping) else spec
            self._names[key] = str(label if label is not None else key)
        self.travelling_slot = settings.get("travelling_slot", 0)

    def slot_count(self) -> int:
        return self._int("slot_count") if self.has("slot_count") else max(self._names)

    def slot_names(self) -> dict[int, str]:
        return dict(self._names)

    def select_slot(self, slot: int) -> None:
        if slot not in self._names:
            raise LimitError(f"{self.name}: no slot {slot}; slots are {sorted(self._names)}; "
                             "nothing was sent")
        self._send("select_slot", slot=int(slot))

    def current_slot(self) -> int | None:
        slot = self._int("current_slot")
        return None if slot == self.travelling_slot else slot

    def is_moving(self) -> bool:
        return self._bool("moving")

    def home(self) -> None:
        self._send("home")

    def snapshot(self) -> dict[str, Any]:
        return {"slot": self.current_slot(), "moving": self.is_moving()}


class ConfigurableStage(ConfigurableDriver, MotionStage):
    """A motion stage described in the station file; every target is checked before any move."""

    KIND = "stage"
    RULES = {
        "identify": _IDENTIFY,
        "move": CommandRule(query=False, fields=("axis", "value")),
        "position": CommandRule(query=True, fields=("axis",)),
        "moving": CommandRule(query=True, fields=("axis",), value="bool"),
        "home": CommandRule(query=False, fields=("axis",)),
        "stop": CommandRule(query=False),
        "error": _ERROR,
    }
    SETTINGS = {
        "axes": "{<axis>: {min, max, park, unit}}: station soft limits and park positions",
        "commands": "templates: " + ", ".join(RULES),
        "replies": "{ok, error}", "booleans": "{true, false}", "terminations": "{read, write}",
    }

    def _own_settings(self, settings: Mapping[str, Any],
                      problems: list[SettingsProblem]) -> None:
        axes = settings.get("axes")
        self._limits: dict[str, AxisLimits] = {}
        if not isinstance(axes, Mapping) or not axes:
            problems.append(SettingsProblem(("axes",), "missing, or not a mapping of axis name "
                                            "to {min, max, park, unit}"))
            return
        for axis, spec in axes.items():
            path = ("axes", str(axis))
            lo, hi = _number(spec, "min", path, problems), _number(spec, "max", path, problems)
            if lo is None or hi is None:
                continue
            park = float(spec.get("park", 0.0))
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
        problems = []
        for axis, value in targets.items():
            lim = self.limits(axis)
            if not lim.contains(float(value)):
                problems.append(f"{axis} {value} outside {lim.minimum}..{lim.maximum} {lim.unit}")
        if problems:
            raise LimitError(f"{self.name}: {'; '.join(problems)}; no axis was moved")
        for axis, value in targets.items():
            self._send("move", axis=axis, value=float(value))

    def position(self, axis: str) -> float:
        self.limits(axis)
        return self._float("position", axis=axis)

    def is_moving(self) -> bool:
        return any(self._bool("moving", axis=a) for a in self.axes())

    def home(self) -> None:
        for axis in self.axes():
            self._send("home", axis=axis)

    def stop(self) -> None:
        self._send("stop")

    def snapshot(self) -> dict[str, Any]:
        return {a: self.position(a) for a in self.axes()}
