"""Protocol handlers: the command tables of drivers/protocol.py answered from the bench physics.

Each handler counts the commands it receives, asks the fault plan whether a fault fires, and
answers exactly one line per command (unless a fault says otherwise). `start_bench_servers`
puts one LineServer per instrument on 127.0.0.1.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Literal

from drivers.protocol import (
    BLACKBODY_COMMANDS,
    OK,
    STAGE_COMMANDS,
    WHEEL_COMMANDS,
    Command,
    ErrorCode,
    error_reply,
    headers,
    split_command,
)
from simulators.bench import SimBench
from simulators.faults import FaultRule
from simulators.line_server import LineServer, Response


class _Refused(Exception):
    def __init__(self, code: ErrorCode, message: str) -> None:
        super().__init__(message)
        self.code = code


def _number(args: list[str], i: int = 0) -> float:
    try:
        value = float(args[i])
    except (IndexError, ValueError):
        raise _Refused(ErrorCode.BAD_ARGUMENT, "number expected") from None
    if not math.isfinite(value):
        raise _Refused(ErrorCode.BAD_ARGUMENT, "finite number expected")
    return value


def _arg(args: list[str], i: int = 0) -> str:
    if len(args) <= i:
        raise _Refused(ErrorCode.BAD_ARGUMENT, "argument missing")
    return args[i]


class InstrumentProtocol:
    """Common part: command counting, wire faults, SYST:ERR?, dispatch by header."""

    table: tuple[Command, ...] = ()
    kind = ""

    def __init__(self, bench: SimBench, name: str | None = None) -> None:
        self.bench = bench
        self.name = name or self.kind
        self.count = 0
        self.last_error: tuple[int, str] = (0, "No error")
        self._handlers: dict[str, Callable[[list[str]], str]] = self._build()
        missing = headers(self.table) - set(self._handlers)
        if missing:
            raise RuntimeError(f"{self.kind} protocol handler lacks {sorted(missing)}")

    def _build(self) -> dict[str, Callable[[list[str]], str]]:
        return {"*IDN?": lambda a: self.bench.identity[self.kind], "SYST:ERR?": self._syst_err}

    def _syst_err(self, args: list[str]) -> str:
        code, message = self.last_error
        self.last_error = (0, "No error")
        return f'{code},"{message}"'

    def physics_faults(self, t: float) -> None:
        """Apply physics faults that fire now (overridden per instrument)."""

    def restart(self) -> None:
        """Power cycle: state lost (overridden per instrument)."""

    def __call__(self, line: str) -> Response:
        with self.bench.lock:
            self.count += 1
            t = self.bench.clock.now()
            self.physics_faults(t)
            rule = self.bench.faults.first_wire_fault(self.name, count=self.count, t=t)
            if rule is not None and rule.kind in ("timeout", "disconnect", "restart"):
                if rule.kind == "restart":
                    self.restart()
                return Response(None, close=rule.kind != "timeout")
            reply = self.dispatch(line)
        return _corrupt(reply, rule)

    def dispatch(self, line: str) -> str:
        header, args = split_command(line)
        handler = self._handlers.get(header)
        if handler is None:
            self.last_error = (int(ErrorCode.UNKNOWN_COMMAND), f"unknown command {header}")
            return error_reply(ErrorCode.UNKNOWN_COMMAND, f"unknown command {header}")
        try:
            return handler(args)
        except _Refused as exc:
            self.last_error = (int(exc.code), str(exc))
            return error_reply(exc.code, str(exc))


def _corrupt(reply: str, rule: FaultRule | None) -> Response:
    """Garbled: every byte's high bit flipped (not text any more); truncated: the first half
    with no terminator, so the client's read runs into its timeout."""
    if rule is None:
        return Response(reply)
    data = reply.encode("ascii", "replace")
    if rule.kind == "garbled":
        return Response(raw=bytes(b ^ 0x80 for b in data) + b"\n")
    return Response(raw=data[: max(1, len(data) // 2)])


class BlackbodyProtocol(InstrumentProtocol):
    table = BLACKBODY_COMMANDS
    kind = "blackbody"

    def _build(self) -> dict[str, Callable[[list[str]], str]]:
        bb = self.bench.blackbody
        return {
            **super()._build(),
            "SOUR:MODE": self._mode,
            "SOUR:MODE?": lambda a: "ABS" if bb.mode == "absolute" else "DIFF",
            "SOUR:TEMP": lambda a: self._set("absolute", _number(a)),
            "SOUR:DIFF": lambda a: self._set("difference", _number(a)),
            "SOUR:SETP?": lambda a: f"{bb.setpoint_value:.4f}",
            "MEAS:TEMP?": lambda a: f"{bb.measured_c():.4f}",
            "MEAS:REF?": lambda a: f"{bb.measured_reference_c():.4f}",
            "STAT:STAB?": lambda a: "1" if bb.is_stable() else "0",
        }

    def _set(self, mode: Literal["absolute", "difference"], value: float) -> str:
        why = self.bench.blackbody.check(mode, value)
        if why:
            raise _Refused(ErrorCode.OUT_OF_RANGE, why)
        self.bench.blackbody.set(mode, value)
        return OK

    def _mode(self, args: list[str]) -> str:
        """Switching mode keeps the absolute setpoint (bumpless)."""
        bb = self.bench.blackbody
        want = _arg(args).upper()
        if want not in ("ABS", "DIFF"):
            raise _Refused(ErrorCode.BAD_ARGUMENT, "mode is ABS or DIFF")
        target = bb.setpoint_c()
        if want == "ABS":
            bb.set("absolute", target)
        else:
            bb.set("difference", target - bb.reference_c())
        return OK

    def physics_faults(self, t: float) -> None:
        plan, bb = self.bench.faults, self.bench.blackbody
        rule = plan.fire(self.name, "unsettled", count=self.count, t=t)
        if rule is not None:
            bb.unsettled_from = _fault_time(rule, plan.start(), t)
        rule = plan.fire(self.name, "drift", count=self.count, t=t)
        if rule is not None:
            bb.runaway = (_fault_time(rule, plan.start(), t), float(rule.params.get("rate_k_per_s",
                                                                                0.002)))
            duration = rule.params.get("duration_s")  # given: the drift stops and snaps back
            bb.runaway_until = None if duration is None else bb.runaway[0] + float(duration)

    def restart(self) -> None:
        self.bench.blackbody.restart()


def _fault_time(rule: FaultRule, t0: float, now: float) -> float:
    """A timed fault starts at its stated time (physics is lazy, so this stays exact)."""
    return t0 + rule.after_s if rule.after_s is not None else now


class WheelProtocol(InstrumentProtocol):
    table = WHEEL_COMMANDS
    kind = "wheel"

    def _build(self) -> dict[str, Callable[[list[str]], str]]:
        wh = self.bench.wheel
        return {
            **super()._build(),
            "WHL:COUN?": lambda a: str(wh.slots),
            "WHL:POS": self._move,
            "WHL:POS?": lambda a: str(wh.position()),
            "WHL:MOV?": lambda a: "1" if wh.is_moving() else "0",
            "WHL:HOME": lambda a: (wh.home(), OK)[1],
        }

    def _move(self, args: list[str]) -> str:
        value = _number(args)
        if not value.is_integer():
            raise _Refused(ErrorCode.BAD_ARGUMENT, "slot is a whole number")
        why = self.bench.wheel.check(int(value))
        if why:
            code = ErrorCode.BUSY if "moving" in why else ErrorCode.OUT_OF_RANGE
            raise _Refused(code, why)
        self.bench.wheel.move(int(value))
        return OK

    def restart(self) -> None:
        self.bench.wheel.restart()


class StageProtocol(InstrumentProtocol):
    table = STAGE_COMMANDS
    kind = "stage"

    def __init__(self, bench: SimBench, name: str | None = None) -> None:
        super().__init__(bench, name)
        self.pending: list[FaultRule] = []   # stall / hard_limit waiting for the next MOVE

    def _build(self) -> dict[str, Callable[[list[str]], str]]:
        st = self.bench.stage
        return {
            **super()._build(),
            "AXIS:LIST?": lambda a: ",".join(st.axes()),
            "AXIS:LIM?": lambda a: "{:g},{:g}".format(*self._limits(a)),
            "AXIS:STAT?": lambda a: st.state(self._axis(a)),
            "MOVE": self._move,
            "POS?": lambda a: f"{st.position(self._axis(a)):.4f}",
            "MOV?": lambda a: "1" if st.is_moving(self._axis(a)) else "0",
            "HOME": lambda a: (st.home(self._axis(a)), OK)[1],
            "STOP": lambda a: (st.stop(), OK)[1],
        }

    def _axis(self, args: list[str]) -> str:
        axis = _arg(args)
        if axis not in self.bench.stage.specs:
            raise _Refused(ErrorCode.BAD_ARGUMENT,
                           f"no axis {axis}; axes are {','.join(self.bench.stage.axes())}")
        return axis

    def _limits(self, args: list[str]) -> tuple[float, float]:
        spec = self.bench.stage.specs[self._axis(args)]
        return spec.minimum, spec.maximum

    def _move(self, args: list[str]) -> str:
        axis = self._axis(args)
        target = _number(args, 1)
        st = self.bench.stage
        why = st.check(axis, target)
        if why:
            code = (ErrorCode.OUT_OF_RANGE if "limits" in why else
                    ErrorCode.BUSY if "moving" in why else ErrorCode.NOT_READY)
            raise _Refused(code, why)
        rule = next((r for r in self.pending if r.params.get("axis", axis) == axis), None)
        if rule is None:
            st.move(axis, target)
        else:
            self.pending.remove(rule)
            if rule.kind == "stall":
                st.move(axis, target, stall_fraction=float(rule.params.get("fraction", 0.5)))
            else:
                st.move(axis, target, runaway=True)
        return OK

    def physics_faults(self, t: float) -> None:
        for kind in ("stall", "hard_limit"):
            rule = self.bench.faults.fire(self.name, kind, count=self.count, t=t)
            if rule is not None:
                self.pending.append(rule)

    def restart(self) -> None:
        self.bench.stage.restart()


PROTOCOLS: dict[str, type[InstrumentProtocol]] = {
    "blackbody": BlackbodyProtocol, "wheel": WheelProtocol, "stage": StageProtocol}


class BenchServers:
    """One LineServer per simulated instrument; `ports` maps instrument kind -> TCP port."""

    def __init__(self, bench: SimBench) -> None:
        self.bench = bench
        self.protocols: dict[str, InstrumentProtocol] = {}
        self.servers: dict[str, LineServer] = {}
        try:
            for kind, cls in PROTOCOLS.items():
                self.protocols[kind] = cls(bench)
                self.servers[kind] = LineServer(self.protocols[kind], name=kind)
        except Exception:
            self.close()
            raise

    @property
    def ports(self) -> dict[str, int]:
        return {kind: s.port for kind, s in self.servers.items()}

    def resource(self, kind: str, style: Literal["visa", "serial", "asrl"] = "visa") -> str:
        """A resource string reaching one simulator: VISA socket, pyserial socket:// or VISA
        serial-over-socket (ASRLsocket://)."""
        port = self.servers[kind].port
        if style == "visa":
            return f"TCPIP::127.0.0.1::{port}::SOCKET"
        if style == "serial":
            return f"socket://127.0.0.1:{port}"
        return f"ASRLsocket://127.0.0.1:{port}::INSTR"

    def close(self) -> None:
        for server in self.servers.values():
            server.close()

    def __enter__(self) -> BenchServers:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def start_bench_servers(bench: SimBench) -> BenchServers:
    """Start the blackbody, wheel and stage servers on 127.0.0.1 (ephemeral ports)."""
    return BenchServers(bench)
