"""Drivers whose command table is written in the station file: a text-command controller, no Python.

The station file gives the same declaration a Python driver writes (drivers/declare.py), as
data; the kind bases of drivers/kinds.py do the rest::

    blackbody:
      driver: scpi-configurable-blackbody
      resource: socket://10.20.0.21:4001
      limits: {min_c: 5, max_c: 90, min_difference_k: -15, max_difference_k: 50}
      safe_c: 22
      modes: {absolute: ABS, difference: DIFF}        # our mode name -> the controller's word
      commands:
        identify: {query: "WHO?", reply: "(?P<value>.+)"}
        set_mode: "T.MODE {mode}"                     # a setting: its reply must match replies.ok
        set_temperature: "T.SET {value:.2f}"
        temperature: {query: "T.NOW?", reply: "(?P<value>[-+0-9.eE]+)"}
        stable: {query: "T.STABLE?"}                  # a yes/no query reads the boolean words
      replies: {ok: "OK", error: "ERR (?P<code>\\d+)"}   # (?P<message>...) is optional
      booleans: {"true": ["YES"], "false": ["NO"]}    # quote words YAML would turn into booleans
      terminations: {read: "\\r\\n", write: "\\r\\n"}

Templates use Python format fields (`{value:.3f}`); each command may use only the fields its
kind allows. Every problem is found at load time and named by its key path
(`commands.temperature.reply`), so the station loader can point at the file line. Keys or words
that YAML turned into booleans or numbers (unquoted `true`, `yes`, `on`, `NO`...) are errors with
the fix, never silently ignored.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from drivers.declare import (
    BOOL,
    Capability,
    DeclaredDriver,
    Dialect,
    Query,
    Setting,
    SettingsProblem,
    check_declaration,
)
from drivers.kinds import MODES, DeclaredBlackbody, DeclaredStage, DeclaredWheel

_TOP_KEYS = ("commands", "replies", "booleans", "terminations", "modes")
_DESCRIBE = {
    "commands": "command templates and reply patterns; keys: {keys}",
    "replies": "{ok: <pattern>, error: <pattern with (?P<code>...), optional (?P<message>...)>}",
    "booleans": "{'true': [words], 'false': [words]} (default 1 / 0; quote YES, NO, ON, OFF)",
    "terminations": "{read, write} line endings (default \\n)",
}


def _yaml_trap(value: Any, path: tuple[str, ...], what: str) -> SettingsProblem | None:
    """A key or word that YAML read as a boolean or a number: say so, and how to quote it."""
    if isinstance(value, bool):
        spelled = ("YES" if value else "NO") if what == "word" else str(value).lower()
        return SettingsProblem(path, f"YAML read this unquoted {what} as the boolean {value} "
                               f"(it does so for true/false, yes/no, on/off); quote it as the "
                               f"controller spells it: '{spelled}'")
    if not isinstance(value, str):
        return SettingsProblem(path, f"YAML read this unquoted {what} as the number {value!r}; "
                               f"quote it: '{value}'")
    return None


def _yaml_traps(settings: Mapping[str, Any]) -> list[SettingsProblem]:
    """Non-string keys anywhere in the dialect sections; non-string words where words belong."""
    problems: list[SettingsProblem] = []

    def walk(node: Any, path: tuple[str, ...], words: bool) -> None:
        if isinstance(node, Mapping):
            for key, value in node.items():
                trap = _yaml_trap(key, path + (str(key),), "key")
                if trap is not None:
                    problems.append(trap)
                walk(value, path + (str(key),), words)
        elif isinstance(node, (list, tuple)):
            for i, value in enumerate(node):
                walk(value, path + (str(i),), words)
        elif words and node is not None:
            trap = _yaml_trap(node, path, "word")
            if trap is not None:
                problems.append(trap)

    for key in settings:
        trap = _yaml_trap(key, (str(key),), "key")
        if trap is not None:
            problems.append(trap)
    for section in _TOP_KEYS:
        if section in settings:
            walk(settings[section], (section,), words=section in ("booleans", "modes"))
    return problems


def _capability(spec: Any, is_query: bool, path: tuple[str, ...],
                problems: list[SettingsProblem]) -> Capability | None:
    if not is_query:
        if isinstance(spec, Mapping):
            problems.append(SettingsProblem(path, "is a setting: give the command text only "
                                            "(its reply must match replies.ok)"))
            return None
        return Setting(spec)
    if not isinstance(spec, Mapping):
        problems.append(SettingsProblem(path, "is a query: write {query: <command>, reply: "
                                        "<pattern with (?P<value>...)>}"))
        return None
    for extra in set(spec) - {"query", "reply", "words"}:
        problems.append(SettingsProblem(path + (str(extra),), "unknown key; a query has "
                                        "'query', 'reply' and optionally 'words'"))
    words = spec.get("words") or {}
    if not isinstance(words, Mapping):
        problems.append(SettingsProblem(path + ("words",), "must map the controller's words "
                                        "to ours, e.g. {READY: ready, MOVING: moving}"))
        return None
    return Query(spec.get("query"), spec.get("reply"), words={str(k): str(v)
                                                               for k, v in words.items()})


class ConfigurableDriver(DeclaredDriver):
    """Reads the declaration from the settings; the kind base (a second parent) does the rest."""

    def _declaration(self, settings: Mapping[str, Any], problems: list[SettingsProblem]
                     ) -> tuple[Dialect, Mapping[str, Capability]]:
        traps = _yaml_traps(settings)
        problems += traps
        trapped = {p.path[:2] for p in traps}
        dialect = self._dialect(settings, problems)
        raw = settings.get("commands")
        commands: dict[str, Capability] = {}
        reported = set(trapped)
        if not isinstance(raw, Mapping):
            problems.append(SettingsProblem(("commands",), "missing, or not a mapping of "
                                            "command name to template; needs "
                                            + ", ".join(k for k, r in self.RULES.items()
                                                        if r.required)))
            return dialect, commands
        for key, spec in raw.items():
            path = ("commands", str(key))
            rule = self.RULES.get(key)
            if rule is None or path in trapped:
                continue  # unknown keys are reported by check_declaration
            before = len(problems)
            cap = _capability(spec, rule.query, path, problems)
            if isinstance(cap, Query) and cap.reply is None:
                if rule.value == "bool":
                    cap = Query(cap.command, BOOL, words=cap.words)
                else:
                    problems.append(SettingsProblem(path + ("reply",), "reply pattern missing; "
                                                    "e.g. '(?P<value>[-+0-9.eE]+)'"))
                    cap = None
            if cap is None or len(problems) > before:
                reported.add(path)
                continue
            commands[str(key)] = cap
        if "mode" in commands and isinstance(commands["mode"], Query):
            commands["mode"] = Query(commands["mode"].command, commands["mode"].reply,
                                     words=self._mode_words(settings, problems))
        problems += [p for p in check_declaration(self.RULES, commands, dialect)
                     if p.path[:2] not in reported]
        return dialect, commands

    def _mode_words(self, settings: Mapping[str, Any],
                    problems: list[SettingsProblem]) -> dict[str, str]:
        modes = settings.get("modes", {"absolute": "ABS", "difference": "DIFF"})
        if not isinstance(modes, Mapping) or set(modes) != set(MODES):
            problems.append(SettingsProblem(("modes",), "must map exactly absolute and "
                                            "difference to the controller's words"))
            modes = {"absolute": "ABS", "difference": "DIFF"}
        return {str(word): ours for ours, word in modes.items()}

    @staticmethod
    def _dialect(settings: Mapping[str, Any], problems: list[SettingsProblem]) -> Dialect:
        kw: dict[str, Any] = {}
        replies = settings.get("replies", {}) or {}
        if not isinstance(replies, Mapping):
            problems.append(SettingsProblem(("replies",), "must be a mapping {ok, error}"))
        else:
            for extra in set(replies) - {"ok", "error"}:
                problems.append(SettingsProblem(("replies", str(extra)), "unknown; use ok, error"))
            if "ok" in replies:
                kw["ok"] = None if replies["ok"] is None else str(replies["ok"])
            if replies.get("error") is not None:
                kw["error"] = replies["error"]
        booleans = settings.get("booleans", {}) or {}
        if not isinstance(booleans, Mapping):
            problems.append(SettingsProblem(("booleans",), "must be {'true': [...], "
                                            "'false': [...]}"))
        else:
            for extra in set(booleans) - {"true", "false"}:
                if isinstance(extra, str):
                    problems.append(SettingsProblem(("booleans", extra), "unknown; use 'true' "
                                                    "and 'false' (quoted)"))
            for side in ("true", "false"):
                if side in booleans:
                    raw = booleans[side]
                    items = raw if isinstance(raw, (list, tuple)) else [raw]
                    kw[f"{side}_words"] = tuple(str(w) for w in items if w is not None)
        terms = settings.get("terminations", {}) or {}
        if not isinstance(terms, Mapping):
            problems.append(SettingsProblem(("terminations",), "must be {read, write}"))
        else:
            for side in ("read", "write"):
                if side not in terms:
                    continue
                if not isinstance(terms[side], str) or not terms[side]:
                    problems.append(SettingsProblem(("terminations", side), "must be a text "
                                                    "such as \"\\n\" or \"\\r\\n\""))
                else:
                    kw[f"{side}_termination"] = terms[side]
        return Dialect(**kw)


def _settings_help(kind_settings: Mapping[str, str], rules: Mapping[str, Any]
                   ) -> dict[str, str]:
    out = dict(kind_settings)
    for key, text in _DESCRIBE.items():
        out[key] = text.replace("{keys}", ", ".join(k + ("" if r.required else " (optional)")
                                                   for k, r in rules.items()))
    return out


class ConfigurableBlackbody(ConfigurableDriver, DeclaredBlackbody):
    """A blackbody controller described in the station file; limits checked before sending."""

    SETTINGS = {**_settings_help(DeclaredBlackbody.SETTINGS, DeclaredBlackbody.RULES),
                "modes": "{absolute: <word>, difference: <word>}: the controller's mode words"}


class ConfigurableWheel(ConfigurableDriver, DeclaredWheel):
    """A target wheel described in the station file; slot names come from `slots`."""

    SETTINGS = _settings_help(DeclaredWheel.SETTINGS, DeclaredWheel.RULES)


class ConfigurableStage(ConfigurableDriver, DeclaredStage):
    """A motion stage described in the station file; every target is checked before any move."""

    SETTINGS = _settings_help(DeclaredStage.SETTINGS, DeclaredStage.RULES)
