"""The nightbench line protocol: one command per line, exactly one reply line per command.

Our own command set in the style of SCPI (an open standard: upper-case headers with `:` levels,
`?` for queries). Queries return the value; settings return `OK` or `ERR <code>,"<message>"`.
The tables below are shared by the drivers (what they send) and the simulators (what they
answer), so the two cannot drift apart.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from enum import IntEnum

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


BLACKBODY_COMMANDS: tuple[Command, ...] = (
    Command("*IDN?", "", "maker,model,serial,firmware", "identity"),
    Command("SOUR:MODE", "ABS|DIFF", "OK", "absolute or difference-to-reference control"),
    Command("SOUR:MODE?", "", "ABS|DIFF", "control mode"),
    Command("SOUR:TEMP", "<C>", "OK", "absolute setpoint, degrees C (switches to ABS)"),
    Command("SOUR:DIFF", "<K>", "OK", "difference setpoint, K (switches to DIFF)"),
    Command("SOUR:SETP?", "", "<float>", "setpoint in the current mode's unit"),
    Command("MEAS:TEMP?", "", "<float>", "source (emitter) temperature, C"),
    Command("MEAS:REF?", "", "<float>", "reference (ambient) sensor temperature, C"),
    Command("STAT:STAB?", "", "1|0", "controller stability flag"),
    Command("SYST:ERR?", "", '<code>,"<message>"', "last error, 0 when none (reading clears it)"),
)

WHEEL_COMMANDS: tuple[Command, ...] = (
    Command("*IDN?", "", "maker,model,serial,firmware", "identity"),
    Command("WHL:COUN?", "", "<int>", "number of slots"),
    Command("WHL:POS", "<n>", "OK", "start moving to slot n (1-based)"),
    Command("WHL:POS?", "", "<int>", "slot in the beam, 0 while travelling"),
    Command("WHL:MOV?", "", "1|0", "travelling"),
    Command("WHL:HOME", "", "OK", "find the index and go to slot 1"),
    Command("SYST:ERR?", "", '<code>,"<message>"', "last error, 0 when none"),
)

STAGE_COMMANDS: tuple[Command, ...] = (
    Command("*IDN?", "", "maker,model,serial,firmware", "identity"),
    Command("AXIS:LIST?", "", "<name>,<name>...", "axis names"),
    Command("AXIS:LIM?", "<ax>", "<min>,<max>", "controller soft limits of an axis"),
    Command("AXIS:STAT?", "<ax>", "READY|MOVING|STALLED|HARDLIMIT", "axis state"),
    Command("MOVE", "<ax> <pos>", "OK", "start an absolute move"),
    Command("POS?", "<ax>", "<float>", "actual position (updates while moving)"),
    Command("MOV?", "<ax>", "1|0", "axis moving"),
    Command("HOME", "<ax>", "OK", "move to the index (0) and clear a fault state"),
    Command("STOP", "", "OK", "stop every axis where it is"),
    Command("SYST:ERR?", "", '<code>,"<message>"', "last error, 0 when none"),
)

AXIS_STATES = ("READY", "MOVING", "STALLED", "HARDLIMIT")

_ERR_RE = re.compile(r'^ERR\s+(\d+)\s*,\s*"(.*)"$')


def error_reply(code: ErrorCode | int, message: str) -> str:
    """Format an error reply line (without terminator)."""
    return f'ERR {int(code)},"{message.replace(chr(34), chr(39))}"'


def parse_error(reply: str) -> tuple[int, str] | None:
    """`(code, message)` when `reply` is an error reply, else None."""
    m = _ERR_RE.match(reply.strip())
    if not m:
        return None
    return int(m.group(1)), m.group(2)


def split_command(line: str) -> tuple[str, list[str]]:
    """Header (upper-cased) and arguments of a command line. `MOVE az 1.5` -> (`MOVE`, [az, 1.5])."""
    parts = line.strip().split()
    if not parts:
        return "", []
    args: list[str] = []
    for part in parts[1:]:
        args.extend(a for a in part.split(",") if a)
    return parts[0].upper(), args


def headers(table: tuple[Command, ...]) -> frozenset[str]:
    """Every header of a command table (for validation and for the simulators' dispatch)."""
    return frozenset(c.header for c in table)
