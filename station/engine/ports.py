"""What the run engine needs of the things around it, as small Protocols (duck typing, typed).

The engine talks to a console (the live display, a plain logger, or a test's recorder), an event
log and a journal; each is described here by the few methods the engine calls, so any object
that has them will do and a type checker sees a misspelt call.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Protocol

__all__ = ["Console", "Emit", "EventSink", "JournalWriter", "HasPath"]


class Console(Protocol):
    """The live display of a run (station.cli.console.RunConsole)."""

    def step(self, index: int, step_id: str, description: str = "") -> None: ...

    def readings(self, values: Mapping[str, object]) -> None: ...

    def log(self, level: str, text: str) -> None: ...

    def state(self, name: str, cause: str | None = None) -> None: ...


class Emit(Protocol):
    """Append one event to the run's log (station.record.events.EventLog.emit)."""

    def __call__(self, type: str, **fields: object) -> object: ...  # noqa: A002


class EventSink(Protocol):
    """An event log: something with ``emit`` (station.record.events.EventLog)."""

    def emit(self, type: str, **fields: object) -> object: ...  # noqa: A002


class JournalWriter(Protocol):
    """The journal of completed steps (station.record.journal.Journal)."""

    def record(self, step_id: str, kind: str, data: dict[str, object] | None = None
               ) -> object: ...


class HasPath(Protocol):
    """A run folder, as far as reading its captures goes."""

    @property
    def path(self) -> Path: ...
