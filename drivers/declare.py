"""Declared drivers: an instrument's command table written once, as data.

A driver module lists its capabilities, one line each, the way the manual does::

    DIALECT = Dialect(read_termination="\\r\\n", write_termination="\\r\\n", ok="OK",
                      error_reply="ERR {code}", true_words=("YES",), false_words=("NO",))
    COMMANDS = {
        "identify": Query("WHO?", TEXT),
        "set_temperature": Setting("T.SET {value:.2f}", unit="C", limits=(-20.0, 150.0)),
        "temperature": Query("T.NOW?", unit="C"),
        "stable": Query("T.STABLE?", BOOL),
        ...
    }

`DeclaredDriver` turns that into talking: it formats the command, sends it through the
transport, checks the reply against the dialect's error and ok replies, parses the value and
raises the project's errors. The kind bases in drivers/kinds.py map the interface methods
(`set_temperature`, `is_moving`...) to capability names; the simulators answer the same table.
Line endings, boolean words, the error reply (message optional) and a minimum timeout are
declared in `Dialect`, never hand-coded.
"""

from __future__ import annotations

import functools
import re
import string
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any, ClassVar, TypeVar

from drivers.errors import InstrumentRefused, InstrumentReplyError, SettingsError
from drivers.transport import Transport

T = TypeVar("T")

NUMBER = r"(?P<value>[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)"
INTEGER = r"(?P<value>[-+]?\d+)"
TEXT = r"(?P<value>.+)"
BOOL = "bool"     # shorthand for Query(..., reply=BOOL): the dialect's true/false words
VALUE_KINDS = ("float", "int", "bool", "text", "word", "error")


@dataclass(frozen=True)
class Query:
    """A question and how to read its answer.

    `reply` is a regular expression with a `value` group (BOOL: the dialect's boolean words);
    `words` maps a controller word to ours (a value map, e.g. READY -> ready); `harmless`
    queries change nothing and are asked by `nightbench check`.
    """

    command: str
    reply: str = NUMBER
    unit: str = ""
    words: Mapping[str, str] = field(default_factory=dict)
    meaning: str = ""
    harmless: bool = True


@dataclass(frozen=True)
class Setting:
    """A command that changes something; the reply must be the dialect's `ok`.

    `limits` is the instrument's own range from its manual (the station's may be tighter).
    """

    command: str
    unit: str = ""
    limits: tuple[float, float] | None = None
    meaning: str = ""


Capability = Query | Setting


@dataclass(frozen=True)
class Dialect:
    """How the controller talks, apart from its commands.

    `ok`: the acknowledgement of a setting (a regular expression; None = settings get no reply).
    `error_reply`: how it refuses, as a template with `{code}` and optionally `{message}`;
    `error` may give a regular expression instead (named groups `code`, optional `message`).
    `timeout_s`: the slowest reply the manual allows (the station may give more, not less).
    """

    read_termination: str = "\n"
    write_termination: str = "\n"
    ok: str | None = "OK"
    error_reply: str = 'ERR {code},"{message}"'
    error: str | None = None
    true_words: tuple[str, ...] = ("1",)
    false_words: tuple[str, ...] = ("0",)
    timeout_s: float | None = None

    @property
    def error_pattern(self) -> str:
        if self.error is not None:
            return self.error
        return _error_regex(self.error_reply)

    def refusal(self, code: int, message: str) -> str:
        """The error reply a simulator speaking this dialect sends."""
        return self.error_reply.format(code=int(code), message=message.replace('"', "'"))


@dataclass(frozen=True)
class CommandRule:
    """What one capability key must be in a kind: query or setting, fields, value type."""

    query: bool
    fields: tuple[str, ...] = ()
    required: bool = True
    value: str = "float"


@dataclass(frozen=True)
class SettingsProblem:
    """A problem with the key path to it (so the station loader can give file:line)."""

    path: tuple[str, ...]
    message: str

    def __str__(self) -> str:
        return f"{'.'.join(self.path)}: {self.message}"


_SAMPLES: dict[str, Any] = {"value": 1.25, "mode": "MODE", "slot": 1, "axis": "ax"}
_FIELD_RE = {"value": r"[^\s,]+", "slot": r"[^\s,]+", "axis": r"[^\s,]+", "mode": r"[^\s,]+",
             "code": r"-?\d+", "message": ".*"}


def template_fields(template: str) -> list[tuple[str, str]]:
    """(name, format spec) of every `{...}` of a template; ValueError on unpaired braces."""
    return [(name, spec or "") for _, name, spec, _ in string.Formatter().parse(template)
            if name is not None]


def template_regex(template: str, fields: Mapping[str, str] | None = None) -> str:
    """A regular expression matching what `template` formats to, one named group per field.

    >>> re.fullmatch(template_regex("MOVE {axis} {value:.3f}"), "MOVE az 1.500")["value"]
    '1.500'
    """
    fields = {**_FIELD_RE, **(fields or {})}
    out = []
    for literal, name, _, _ in string.Formatter().parse(template):
        out.append(r"\s+".join(re.escape(p) for p in literal.split(" ")))
        if name is not None:
            out.append(f"(?P<{name}>{fields.get(name, '.+?')})")
    return "".join(out)


@functools.lru_cache(maxsize=64)
def _error_regex(error_reply: str) -> str:
    """The error reply's pattern: asked at every reply, built once per template (pure)."""
    return template_regex(error_reply, {"code": r"-?\d+", "message": ".*"})


def header(template: str) -> str:
    """The command word of a template: `MOVE {axis} {value}` -> `MOVE`."""
    words = template.split("{")[0].split()
    return words[0] if words else template


def check_template(template: Any, rule: CommandRule, path: tuple[str, ...],
                   problems: list[SettingsProblem]) -> bool:
    """Append what is wrong with a command template for `rule`; True when it is usable."""
    if not isinstance(template, str) or not template.strip():
        problems.append(SettingsProblem(path, "must be a non-empty command text"))
        return False
    try:
        fields = template_fields(template)
    except ValueError as exc:
        problems.append(SettingsProblem(path, f"braces do not pair up ({exc}); write {{{{ and "
                                              "}} for literal braces"))
        return False
    allowed = ", ".join("{" + f + "}" for f in rule.fields) or "none"
    for name, spec in fields:
        if name not in rule.fields:
            problems.append(SettingsProblem(
                path, f"unknown placeholder {{{name}}}; this command may use: {allowed}"))
            return False
        try:
            format(_SAMPLES[name], spec)
        except ValueError as exc:
            problems.append(SettingsProblem(path, f"placeholder {{{name}:{spec}}}: {exc}"))
            return False
    missing = [f for f in rule.fields if f not in {n for n, _ in fields}]
    if missing:
        problems.append(SettingsProblem(path, "must contain "
                                        + ", ".join("{" + f + "}" for f in missing)))
        return False
    return True


def check_pattern(text: Any, path: tuple[str, ...], groups: tuple[str, ...],
                  problems: list[SettingsProblem]) -> re.Pattern[str] | None:
    """Compile a reply pattern that must have `groups`; append the problem otherwise."""
    if not isinstance(text, str):
        problems.append(SettingsProblem(path, "must be a regular expression text, e.g. "
                                        "'(?P<value>[-+0-9.eE]+)'"))
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


def check_declaration(rules: Mapping[str, CommandRule], commands: Mapping[str, Capability],
                      dialect: Dialect, where: tuple[str, ...] = ("commands",)
                      ) -> list[SettingsProblem]:
    """Every problem of a declaration against its kind's rules (no instrument contacted)."""
    problems: list[SettingsProblem] = []
    for key in commands:
        if key not in rules:
            problems.append(SettingsProblem(where + (key,), "not a command of this kind; "
                                            "known: " + ", ".join(rules)))
    for key, rule in rules.items():
        cap, path = commands.get(key), where + (key,)
        if cap is None:
            if rule.required:
                problems.append(SettingsProblem(path, "missing"))
            continue
        if rule.query != isinstance(cap, Query):
            problems.append(SettingsProblem(path, "must be a query (with a reply pattern)"
                                            if rule.query else "must be a setting"))
            continue
        if not check_template(cap.command, rule, path, problems) or not isinstance(cap, Query):
            continue
        if cap.reply == BOOL:
            continue
        groups = ("code",) if rule.value == "error" else ("value",)
        pattern = check_pattern(cap.reply, path + ("reply",), groups, problems)
        samples = list(cap.words) if cap.words else []
        if rule.value == "bool" and not set(dialect.true_words) & set(dialect.false_words):
            samples = [*dialect.true_words, *dialect.false_words]
        unmatched = [w for w in samples if pattern is not None and not pattern.fullmatch(w)]
        if unmatched:
            problems.append(SettingsProblem(path + ("reply",), f"can never match the word(s) "
                                            f"{', '.join(unmatched)} it must read; widen the "
                                            "pattern or fix the words"))
    if dialect.ok is not None:
        check_pattern(dialect.ok, ("replies", "ok"), (), problems)
    check_pattern(dialect.error_pattern, ("replies", "error"), ("code",), problems)
    both = set(dialect.true_words) & set(dialect.false_words)
    if both:
        problems.append(SettingsProblem(("booleans",), "a word is both true and false: "
                                        + ", ".join(sorted(both))))
    return problems


class PatternMismatch(InstrumentReplyError):
    """A well-formed reply the declared pattern does not match: asking again gives the same
    answer, so the transport does not retry it."""

    retryable = False


class DeclaredDriver:
    """Talks to an instrument from its declaration; subclasses give KIND, DIALECT, COMMANDS."""

    KIND: ClassVar[str] = ""
    RULES: ClassVar[Mapping[str, CommandRule]] = {}
    DIALECT: ClassVar[Dialect] = Dialect()
    COMMANDS: ClassVar[Mapping[str, Capability]] = {}
    SETTINGS: ClassVar[Mapping[str, str]] = {}

    def __init__(self, transport: Transport | None, *, name: str,
                 settings: Mapping[str, Any] | None = None) -> None:
        self.transport = transport  # type: ignore[assignment]
        self.name = name
        self.settings: Mapping[str, Any] = dict(settings or {})
        problems: list[SettingsProblem] = []
        self.dialect, self.commands = self._declaration(self.settings, problems)
        if not problems:
            problems += check_declaration(self.RULES, self.commands, self.dialect)
        self._read_settings(self.settings, problems)
        if problems:
            first = problems[0]
            raise SettingsError(f"{name}: " + "; ".join(str(p) for p in problems),
                                ".".join(first.path), first.message, problems)
        if transport is not None:
            transport.configure(read_termination=self.dialect.read_termination,
                                write_termination=self.dialect.write_termination,
                                min_timeout_s=self.dialect.timeout_s)

    # --- what subclasses may override ---------------------------------------------------------
    def _declaration(self, settings: Mapping[str, Any], problems: list[SettingsProblem]
                     ) -> tuple[Dialect, Mapping[str, Capability]]:
        """The dialect and commands: the class's own (a configurable driver reads settings)."""
        return self.DIALECT, self.COMMANDS

    def _read_settings(self, settings: Mapping[str, Any],
                       problems: list[SettingsProblem]) -> None:
        """Read the kind's station settings (limits, slots, axes); append problems."""

    @classmethod
    def settings_problems(cls, settings: Mapping[str, Any]) -> list[SettingsProblem]:
        """Every problem of `settings`, each with its key path; nothing is contacted."""
        try:
            cls(None, name=cls.KIND or "settings", settings=settings)
        except SettingsError as exc:
            return list(exc.problems) or [SettingsProblem((), exc.detail)]
        return []

    @classmethod
    def validate_settings(cls, settings: Mapping[str, Any]) -> list[str]:
        """Problems as `key.path: message` texts; empty when the settings are good."""
        return [str(p) for p in cls.settings_problems(settings)]

    # --- talking ------------------------------------------------------------------------------
    def has(self, key: str) -> bool:
        return key in self.commands

    def _refusal(self, command: str, reply: str) -> None:
        m = re.fullmatch(self.dialect.error_pattern, reply)
        if m is not None:
            message = m.groupdict().get("message")
            text = f"error {m['code']}" + (f": {message}" if message else "")
            raise InstrumentRefused(self.name, f"refused ({text})", command, reply)

    def send(self, key: str, **fields: Any) -> None:
        """Send a declared setting with its fields filled in."""
        self._set(self.commands[key].command.format(**fields))

    def ask(self, key: str, **fields: Any) -> Any:
        """Ask a declared query; the reply is parsed to the kind's value type for this key."""
        return self.ask_match(key, lambda m: self._convert(key, m["value"]), **fields)

    def ask_match(self, key: str, convert: Callable[[re.Match[str]], T], **fields: Any) -> T:
        cap = self.commands[key]
        assert isinstance(cap, Query)
        pattern = self._reply_pattern(cap)
        return self._query(cap.command.format(**fields), pattern, convert,
                           f"commands.{key}.reply")

    def _set(self, command: str) -> None:
        """A setting as text: the reply must be the dialect's ok (none is read if ok is None)."""
        ok = self.dialect.ok
        if ok is None:
            self.transport.write(command)
        else:
            self._query(command, ok, lambda m: m.group(0), "replies.ok")

    def _ask(self, command: str) -> str:
        """A query as text; the whole reply (after the error check)."""
        return self._query(command, TEXT, lambda m: m["value"], "reply")

    def _query(self, command: str, pattern: str, convert: Callable[[re.Match[str]], T],
               where: str) -> T:
        def parse(reply: str) -> T:
            self._refusal(command, reply)
            m = re.fullmatch(pattern, reply)
            if m is None:
                raise PatternMismatch(self.name, f"reply not understood: it does not match "
                                      f"{where} {pattern!r}; not retried, the same question "
                                      "gets the same answer (fix the pattern or the words)",
                                      command, reply)
            return convert(m)
        return self.transport.query(command, parse)

    def _reply_pattern(self, cap: Query) -> str:
        if cap.reply != BOOL:
            return cap.reply
        words = [*self.dialect.true_words, *self.dialect.false_words]
        return "(?P<value>" + "|".join(re.escape(w) for w in words) + ")"

    def _convert(self, key: str, text: str) -> Any:
        cap = self.commands[key]
        kind = self.RULES[key].value if key in self.RULES else "text"
        if isinstance(cap, Query) and cap.words:
            if text not in cap.words:
                raise ValueError(f"{text!r} is not one of {sorted(cap.words)}")
            return cap.words[text]
        if kind == "bool":
            if text in self.dialect.true_words:
                return True
            if text in self.dialect.false_words:
                return False
            raise ValueError(f"{text!r} is neither true {list(self.dialect.true_words)} nor "
                             f"false {list(self.dialect.false_words)} (booleans)")
        return {"float": float, "int": int}.get(kind, str)(text)

    # --- common to every instrument -----------------------------------------------------------
    def identify(self) -> str:
        return str(self.ask("identify"))

    def last_error(self) -> tuple[int, str]:
        """The controller's error query (commands.error); (0, '') when none is declared."""
        if not self.has("error"):
            return 0, ""
        return self.ask_match("error", lambda m: (int(m["code"]),
                                                  m.groupdict().get("message") or ""))

    def harmless_queries(self) -> dict[str, Callable[[], Any]]:
        """Every query that changes nothing (identity, readbacks, status), ready to call:
        `nightbench check` asks them all and parses the replies, as `bench` and a run will."""
        out: dict[str, Callable[[], Any]] = {}
        for key, cap in self.commands.items():
            if not isinstance(cap, Query) or not cap.harmless or key == "error":
                continue
            rule = self.RULES.get(key, CommandRule(query=True))
            if "axis" in rule.fields:
                for axis in getattr(self, "axes", lambda: [])():
                    out[f"{key} {axis}"] = (lambda k=key, a=axis: self.ask(k, axis=a))
            elif not rule.fields:
                out[key] = (lambda k=key: self.ask(k))
        return out

    def close(self) -> None:
        if self.transport is not None:
            self.transport.close()
