"""The nightbench line protocol: one command per line, exactly one reply line per command.

Our own command set in the style of SCPI (an open standard: upper-case headers with `:` levels,
`?` for queries). Queries return the value; settings return `OK` or `ERR <code>,"<message>"`.
The tables below are derived from the drivers' declarations (drivers/blackbody_scpi.py,
wheel_scpi.py, stage_scpi.py), which the simulators answer, so the two cannot drift apart.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import dataclass
from enum import IntEnum

from drivers.blackbody_scpi import ScpiBlackbody
from drivers.declare import BOOL, INTEGER, NUMBER, TEXT, Capability, Dialect, Setting, header
from drivers.stage_scpi import ScpiStage
from drivers.wheel_scpi import ScpiWheel

OK = "OK"


class ErrorCode(IntEnum):
    """Error codes carried in `ERR <code>,"<message>"` replies."""

    UNKNOWN_COMMAND = 100
    BAD_ARGUMENT = 101
    OUT_OF_RANGE = 200
    BUSY = 201
    NOT_READY = 202
    HARDWARE_FAULT = 300


@dataclass(frozen=True)
class Command:
    """One row of an instrument's command table."""

    header: str
    args: str
    reply: str
    meaning: str

    @property
    def is_query(self) -> bool:
        return self.header.endswith("?")


_SHOWN = {NUMBER: "<number>", INTEGER: "<int>", TEXT: "<text>"}


def command_table(commands: Mapping[str, Capability], dialect: Dialect) -> tuple[Command, ...]:
    """The manual's table of a declared driver: header, arguments, reply, meaning."""
    rows = []
    for cap in commands.values():
        head = header(cap.command)
        args = re.sub(r"\{(\w+)[^}]*\}", r"<\1>", cap.command[len(head):].strip())
        if isinstance(cap, Setting):
            reply = dialect.ok or "(none)"
        elif cap.words:
            reply = "|".join(cap.words)
        elif cap.reply == BOOL:
            reply = "|".join((*dialect.true_words, *dialect.false_words))
        else:
            reply = _SHOWN.get(cap.reply, cap.reply)
        rows.append(Command(head, args, reply, cap.meaning))
    return tuple(rows)


BLACKBODY_COMMANDS = command_table(ScpiBlackbody.COMMANDS, ScpiBlackbody.DIALECT)
WHEEL_COMMANDS = command_table(ScpiWheel.COMMANDS, ScpiWheel.DIALECT)
STAGE_COMMANDS = command_table(ScpiStage.COMMANDS, ScpiStage.DIALECT)

_ERR_RE = re.compile(r'^ERR\s+(\d+)\s*,\s*"(.*)"$')


def parse_error(reply: str) -> tuple[int, str] | None:
    """`(code, message)` when `reply` is an error reply of our own dialect, else None (used by
    the hand-written base drivers/scpi.py; declared drivers read their dialect's pattern)."""
    m = _ERR_RE.match(reply.strip())
    if not m:
        return None
    return int(m.group(1)), m.group(2)
