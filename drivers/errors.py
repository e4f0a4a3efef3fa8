"""Errors raised by drivers and transports.

Every error names the instrument, the command that was sent and the reply (if any), so an
operator reading the log at 8 am knows which box to look at and what it said.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any


class InstrumentError(Exception):
    """An instrument did not do what was asked."""

    def __init__(self, instrument: str, message: str, command: str | None = None,
                 reply: str | None = None, hint: str | None = None) -> None:
        self.instrument = instrument
        self.command = command
        self.reply = reply
        self.hint = hint
        self.detail = message
        parts = [f"{instrument}: {message}"]
        if command is not None:
            parts.append(f"command {command!r}")
        if reply is not None:
            parts.append(f"reply {reply!r}")
        text = "; ".join(parts)
        if hint:
            text += f". {hint}"
        super().__init__(text)


class InstrumentTimeout(InstrumentError):
    """No reply within the transport's timeout."""


class InstrumentConnectionError(InstrumentError):
    """The transport could not be opened, or the connection dropped."""


class InstrumentReplyError(InstrumentError):
    """A reply arrived but could not be understood (garbled, truncated, wrong type)."""


class InstrumentRefused(InstrumentError):
    """The instrument answered with an error reply (e.g. a setpoint out of its range)."""


class InstrumentFault(InstrumentError):
    """The instrument reports a fault state of its own (e.g. an axis stalled or on a hard limit)."""


class SettingsError(ValueError):
    """Driver settings from the station file are missing or wrong; `path` is the dotted key
    (e.g. `limits.min_c`), `detail` the problem without the instrument name and `problems`
    every problem found (objects with `path` and `message`), so one load shows them all."""

    def __init__(self, message: str, path: str = "", detail: str = "",
                 problems: Sequence[Any] = ()) -> None:
        super().__init__(message)
        self.path = path
        self.detail = detail or message
        self.problems = list(problems)


class LimitError(ValueError):
    """A setpoint outside the station's limits: refused before anything moves."""


class ResourceStringError(ValueError):
    """A resource string that names no transport we know."""
