"""A small base for hand-written drivers that speak our SCPI-style line protocol.

New drivers declare their command table instead (drivers/declare.py, drivers/kinds.py); this
base stays for plug-ins written against it. It assumes the project's own reply habits: `OK`
for a setting, `ERR <code>,"<message>"` for a refusal, `1`/`0` for booleans.

Deliberately boring: ask a query, parse a number, send a setting and expect `OK`. Retries,
reconnects, timeouts and io logging live in the transport; this base only turns replies into
values and error replies into InstrumentRefused.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any, ClassVar

from drivers.errors import (  # noqa: F401 - SettingsError, InstrumentFault re-exported
    InstrumentFault,
    InstrumentRefused,
    InstrumentReplyError,
    SettingsError,
)
from drivers.protocol import OK, parse_error
from drivers.transport import Transport


def _refusal_check(instrument: str, command: str):  # noqa: ANN202 - small parser factory
    def check(reply: str) -> str:
        err = parse_error(reply)
        if err is not None:
            code, message = err
            raise InstrumentRefused(instrument, f"refused (error {code}: {message})",
                                    command, reply)
        return reply
    return check


class ScpiDriver:
    """Transport + name + the four ways of talking. Subclasses add a command table."""

    KIND: ClassVar[str] = ""
    SETTINGS: ClassVar[Mapping[str, str]] = {}

    def __init__(self, transport: Transport, *, name: str,
                 settings: Mapping[str, Any] | None = None) -> None:
        self.transport = transport
        self.name = name
        self.settings: Mapping[str, Any] = dict(settings or {})

    # --- talking ----------------------------------------------------------------------------
    def _ask(self, command: str) -> str:
        """Query; an error reply becomes InstrumentRefused naming instrument, command, reply."""
        return self.transport.query(command, _refusal_check(self.name, command))

    def _ask_float(self, command: str) -> float:
        check = _refusal_check(self.name, command)
        return self.transport.query(command, lambda r: float(check(r)))

    def _ask_int(self, command: str) -> int:
        check = _refusal_check(self.name, command)
        return self.transport.query(command, lambda r: int(check(r)))

    def _ask_bool(self, command: str) -> bool:
        def parse(reply: str) -> bool:
            value = _refusal_check(self.name, command)(reply)
            if value not in ("0", "1"):
                raise ValueError("expected 1 or 0")
            return value == "1"
        return self.transport.query(command, parse)

    def _set(self, command: str) -> None:
        """Send a setting; anything but `OK` is refused (error reply) or not understood."""
        def parse(reply: str) -> str:
            _refusal_check(self.name, command)(reply)
            if reply != OK:
                raise ValueError(f"expected {OK} or an error reply")
            return reply
        self.transport.query(command, parse)

    def _reply_error(self, command: str, reply: str, why: str) -> InstrumentReplyError:
        return InstrumentReplyError(self.name, why, command, reply)

    # --- common to every instrument ---------------------------------------------------------
    def identify(self) -> str:
        return self._ask("*IDN?")

    def last_error(self) -> tuple[int, str]:
        """The instrument's last error (code 0 when none); reading clears it."""
        def parse(reply: str) -> tuple[int, str]:
            code, _, message = reply.partition(",")
            return int(code), message.strip().strip('"')
        return self.transport.query("SYST:ERR?", parse)

    def close(self) -> None:
        self.transport.close()

    # --- settings helpers -------------------------------------------------------------------
    @classmethod
    def validate_settings(cls, settings: Mapping[str, Any]) -> list[str]:
        """Problems with station-file settings as `path: message` lines (empty when fine).

        Constructors only read settings (no I/O), so building one without a transport checks
        them exactly as a real connection would.
        """
        try:
            cls(None, name=cls.KIND, settings=settings)  # type: ignore[arg-type]
        except SettingsError as exc:
            return [f"{exc.path}: {exc.detail}" if exc.path else exc.detail]
        return []

    def _fail(self, path: str, detail: str) -> SettingsError:
        return SettingsError(f"{self.name}: {path}: {detail}", path, detail)

    def _setting(self, key: str) -> Any:
        if key not in self.settings:
            raise self._fail(key, f"missing ({self.SETTINGS.get(key, '')}); settings of this "
                                  f"driver: {', '.join(self.SETTINGS)}")
        return self.settings[key]

    def _number(self, mapping: Mapping[str, Any], key: str, where: str) -> float:
        path = f"{where}.{key}" if where else key
        try:
            return float(mapping[key])
        except KeyError:
            raise self._fail(path, "missing") from None
        except (TypeError, ValueError):
            raise self._fail(path, f"must be a number, got {mapping[key]!r}") from None
