"""Retry policy: the one place that decides what a transport does when a command fails.

Configurable per instrument from a plain dict (the station file):

    recovery: {retries: 3, backoff_s: 0.5, backoff_factor: 2, retry_on: [timeout, reply],
               reconnect_on: [timeout, connection], give_up_after_s: 30}

Back-off waits go through the station clock, so in simulated time they cost nothing. Every retry,
reconnect and give-up is reported as an event and logged.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any, TypeVar

from drivers.clock import Clock
from drivers.errors import (
    InstrumentConnectionError,
    InstrumentError,
    InstrumentRefused,
    InstrumentReplyError,
    InstrumentTimeout,
)

log = logging.getLogger("nightbench.transport")

T = TypeVar("T")
EventSink = Callable[[dict[str, Any]], None]

ERROR_KINDS = ("timeout", "connection", "reply", "refused")


def error_kind(exc: BaseException) -> str:
    """Classify an instrument error into one of ERROR_KINDS (`other` for anything else)."""
    if isinstance(exc, InstrumentTimeout):
        return "timeout"
    if isinstance(exc, InstrumentConnectionError):
        return "connection"
    if isinstance(exc, InstrumentReplyError):
        return "reply"
    if isinstance(exc, InstrumentRefused):
        return "refused"
    return "other"


def _kinds(values: Iterable[str], what: str) -> frozenset[str]:
    kinds = frozenset(str(v) for v in values)
    unknown = kinds - set(ERROR_KINDS)
    if unknown:
        raise ValueError(f"recovery {what}: unknown error kind(s) {sorted(unknown)}; "
                         f"use any of {list(ERROR_KINDS)}")
    return kinds


@dataclass(frozen=True)
class RetryPolicy:
    """Bounded retries with exponential back-off in clock time.

    `retries` extra attempts after the first; wait before attempt n (n >= 1) is
    `backoff_s * backoff_factor ** (n - 1)`. `give_up_after_s` bounds the whole command (clock
    time, back-off included); None means only `retries` bounds it. A refused command
    (the instrument said no) is never retried by default: asking again does not change the answer.
    """

    retries: int = 2
    backoff_s: float = 0.2
    backoff_factor: float = 2.0
    retry_on: frozenset[str] = field(default_factory=lambda: frozenset({"timeout", "connection",
                                                                        "reply"}))
    reconnect_on: frozenset[str] = field(default_factory=lambda: frozenset({"timeout",
                                                                            "connection"}))
    give_up_after_s: float | None = None

    def __post_init__(self) -> None:
        if self.retries < 0:
            raise ValueError("recovery retries must be 0 or more")
        if self.backoff_s < 0 or self.backoff_factor < 1:
            raise ValueError("recovery backoff_s must be >= 0 and backoff_factor >= 1")
        object.__setattr__(self, "retry_on", _kinds(self.retry_on, "retry_on"))
        object.__setattr__(self, "reconnect_on", _kinds(self.reconnect_on, "reconnect_on"))

    @classmethod
    def from_mapping(cls, d: Mapping[str, Any] | None) -> RetryPolicy:
        """Build from a station-file mapping; unknown keys are refused with the accepted ones."""
        if not d:
            return cls()
        allowed = {"retries", "backoff_s", "backoff_factor", "retry_on", "reconnect_on",
                   "give_up_after_s"}
        unknown = set(d) - allowed
        if unknown:
            raise ValueError(f"recovery: unknown key(s) {sorted(unknown)}; "
                             f"accepted keys are {sorted(allowed)}")
        kwargs: dict[str, Any] = dict(d)
        for key in ("retry_on", "reconnect_on"):
            if key in kwargs:
                v = kwargs[key]
                kwargs[key] = frozenset([v] if isinstance(v, str) else v)
        return cls(**kwargs)

    def backoff(self, attempt: int) -> float:
        """Clock seconds to wait before retry number `attempt` (1-based)."""
        return self.backoff_s * self.backoff_factor ** (attempt - 1)

    def run(self, op: Callable[[], T], *, instrument: str, command: str, clock: Clock,
            reconnect: Callable[[], None], events: EventSink | None = None) -> T:
        """Run `op`, retrying failures this policy allows; re-raise the last error on give-up."""
        start = clock.now()
        attempt = 0
        while True:
            try:
                return op()
            except InstrumentError as exc:
                kind = error_kind(exc)
                attempt += 1
                if not getattr(exc, "retryable", True):
                    raise  # e.g. a well-formed reply the pattern cannot match: same answer again
                elapsed = clock.now() - start
                wait = self.backoff(attempt)
                over_time = (self.give_up_after_s is not None
                             and elapsed + wait > self.give_up_after_s)
                if kind not in self.retry_on or attempt > self.retries or over_time:
                    if kind in self.retry_on:
                        _emit(events, logging.ERROR, {
                            "type": "transport.give_up", "instrument": instrument,
                            "command": command, "attempts": attempt, "error": str(exc),
                            "kind": kind})
                    raise
                _emit(events, logging.WARNING, {
                    "type": "transport.retry", "instrument": instrument, "command": command,
                    "attempt": attempt, "error": str(exc), "kind": kind, "backoff_s": wait})
                clock.sleep(wait)
                if kind in self.reconnect_on:
                    _emit(events, logging.WARNING, {
                        "type": "transport.reconnect", "instrument": instrument,
                        "command": command, "attempt": attempt})
                    try:
                        reconnect()
                    except InstrumentError as rexc:
                        _emit(events, logging.WARNING, {
                            "type": "transport.reconnect_failed", "instrument": instrument,
                            "command": command, "attempt": attempt, "error": str(rexc)})


def describe(event: Mapping[str, Any]) -> str:
    """One readable line for a transport event (the log never shows a raw dict)."""
    kind = str(event.get("type", "event"))
    who, cmd = event.get("instrument", "?"), event.get("command")
    text = f"{kind} {who}"
    if cmd is not None:
        text += f": {cmd!r}"
    if "attempt" in event:
        text += f", attempt {event['attempt']}"
    if "attempts" in event:
        text += f", gave up after {event['attempts']} attempts"
    if "error" in event:
        text += f": {event['error']}"
    if "backoff_s" in event:
        text += f"; next try in {event['backoff_s']:g} s"
    return text


def _emit(events: EventSink | None, level: int, event: dict[str, Any]) -> None:
    log.log(level, "%s", describe(event))
    if events is not None:
        events(event)
