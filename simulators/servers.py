"""Protocol handlers: a declared driver's command table answered from the bench physics.

A simulator answers whatever a declaration (drivers/declare.py) says: the built-in drivers'
tables by default, or any other dialect (`BlackbodyProtocol(bench, driver=MyBlackbody)`), so
the driver and its stand-in share one source of truth. Handlers are keyed by capability name
(`set_temperature`, `stable`...), never by command text. Each handler counts the commands it
receives, asks the fault plan whether a fault fires, and answers exactly one line per command
(unless a fault says otherwise). `start_bench_servers` puts one LineServer per instrument on
127.0.0.1.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Mapping
from typing import Any, Literal

from drivers.blackbody_scpi import ScpiBlackbody
from drivers.declare import DeclaredDriver, Query, Setting, header, template_regex
from drivers.protocol import ErrorCode
from drivers.stage_scpi import ScpiStage
from drivers.wheel_scpi import ScpiWheel
from simulators.bench import SimBench
from simulators.faults import FaultRule
from simulators.line_server import LineAnswerer, LineServer, Response

Fields = Mapping[str, str]


class _Refused(Exception):
    def __init__(self, code: ErrorCode, message: str) -> None:
        super().__init__(message)
        self.code = code


def _number(fields: Fields, name: str = "value") -> float:
    try:
        value = float(fields[name])
    except (KeyError, ValueError):
        raise _Refused(ErrorCode.BAD_ARGUMENT, "number expected") from None
    if not math.isfinite(value):
        raise _Refused(ErrorCode.BAD_ARGUMENT, "finite number expected")
    return value


def reply_template(pattern: str) -> str:
    """A format template from a reply pattern with named groups, for a simulator to answer:
    `(?P<code>-?\\d+),"(?P<message>.*)"` -> `{code},"{message}"` (simple patterns only)."""
    text = re.sub(r"\(\?P<(\w+)>(?:[^()]|\([^()]*\))*\)", r"{\1}", pattern)
    return re.sub(r"\\(.)", r"\1", text)


class InstrumentProtocol:
    """Common part: command counting, wire faults, the error query, dispatch by capability."""

    driver: type[DeclaredDriver] = DeclaredDriver
    kind = ""

    def __init__(self, bench: SimBench, name: str | None = None,
                 driver: type[DeclaredDriver] | DeclaredDriver | None = None) -> None:
        """`driver`: whose declaration to answer, a class or a built driver (a station-file
        driver carries its declaration on the instance); the built-in one by default."""
        self.bench = bench
        self.name = name or self.kind
        self.count = 0
        self.last_error: tuple[int, str] = (0, "No error")
        declared = driver or type(self).driver
        self.dialect = getattr(declared, "dialect", None) or declared.DIALECT
        self.commands = dict(getattr(declared, "commands", None) or declared.COMMANDS)
        self._requests = [(key, re.compile(template_regex(cap.command), re.IGNORECASE))
                          for key, cap in self.commands.items()]
        self._headers = {header(cap.command).upper(): cap.command
                         for cap in self.commands.values()}
        self._matched: dict[str, tuple[str, dict[str, str]]] = {}  # line -> (key, fields)
        self._handlers: dict[str, Callable[[Fields], Any]] = self._build()
        missing = set(self.commands) - set(self._handlers)
        if missing:
            raise RuntimeError(f"{self.kind} simulator cannot answer {sorted(missing)}")

    def _build(self) -> dict[str, Callable[[Fields], Any]]:
        return {"identify": lambda f: self.bench.identity[self.kind], "error": self._error}

    def _error(self, fields: Fields) -> str:
        code, message = self.last_error
        self.last_error = (0, "No error")
        cap = self.commands["error"]
        assert isinstance(cap, Query)
        return reply_template(cap.reply).format(code=code, message=message)

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
        return _corrupt(reply, rule) if reply is not None else Response(None)

    def dispatch(self, line: str) -> str | None:
        """The reply line to one command line, in the declared dialect."""
        line = line.strip()
        try:
            found = self._matched.get(line) or self._match(line)
            if found is not None:
                key, fields = found
                return self._answer(key, self._handlers[key](dict(fields)))
            head = line.split()[0].upper() if line.split() else ""
            if head in self._headers:
                raise _Refused(ErrorCode.BAD_ARGUMENT,
                               f"arguments do not match {self._headers[head]}")
            raise _Refused(ErrorCode.UNKNOWN_COMMAND, f"unknown command {head}")
        except _Refused as exc:
            self.last_error = (int(exc.code), str(exc))
            return self.dialect.refusal(exc.code, str(exc))

    def _match(self, line: str) -> tuple[str, dict[str, str]] | None:
        """The first declared request the line matches, remembered (a soak repeats a handful of
        lines thousands of times; the table is cleared when it grows past 1,000 lines)."""
        for key, request in self._requests:
            m = request.fullmatch(line)
            if m is not None:
                if len(self._matched) >= 1000:
                    self._matched.clear()
                self._matched[line] = found = (key, m.groupdict())
                return found
        return None

    def _answer(self, key: str, value: Any) -> str | None:
        cap = self.commands[key]
        if isinstance(cap, Setting):
            return self.dialect.ok
        if isinstance(value, bool):
            return (self.dialect.true_words if value else self.dialect.false_words)[0]
        if isinstance(value, float):
            return f"{value:.4f}"
        if cap.words and value not in cap.words:
            return {ours: word for word, ours in cap.words.items()}[value]
        return str(value)


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
    driver = ScpiBlackbody
    kind = "blackbody"

    def _build(self) -> dict[str, Callable[[Fields], Any]]:
        bb = self.bench.blackbody
        return {
            **super()._build(),
            "set_mode": self._mode,
            "mode": lambda f: bb.mode,
            "set_temperature": lambda f: self._set("absolute", _number(f)),
            "set_difference": lambda f: self._set("difference", _number(f)),
            "setpoint": lambda f: float(bb.setpoint_value),
            "temperature": lambda f: float(bb.measured_c()),
            "reference_temperature": lambda f: float(bb.measured_reference_c()),
            "difference": lambda f: float(bb.measured_c() - bb.measured_reference_c()),
            "stable": lambda f: bool(bb.is_stable()),
            "go_safe": lambda f: bb.set("absolute", bb.start_c),  # standby at its start
        }

    def _set(self, mode: Literal["absolute", "difference"], value: float) -> None:
        why = self.bench.blackbody.check(mode, value)
        if why:
            raise _Refused(ErrorCode.OUT_OF_RANGE, why)
        self.bench.blackbody.set(mode, value)

    def _mode(self, fields: Fields) -> None:
        """Switching mode keeps the absolute setpoint (bumpless)."""
        bb = self.bench.blackbody
        words = {w.upper(): ours for w, ours in self.commands["mode"].words.items()}  # type: ignore[union-attr]
        want = words.get(fields["mode"].upper())
        if want is None:
            raise _Refused(ErrorCode.BAD_ARGUMENT, f"mode is {' or '.join(words)}")
        target = bb.setpoint_c()
        if want == "absolute":
            bb.set("absolute", target)
        else:
            bb.set("difference", target - bb.reference_c())

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
    driver = ScpiWheel
    kind = "wheel"

    def _build(self) -> dict[str, Callable[[Fields], Any]]:
        wh = self.bench.wheel
        return {
            **super()._build(),
            "slot_count": lambda f: int(wh.slots),
            "select_slot": self._move,
            "current_slot": lambda f: int(wh.position()),
            "moving": lambda f: bool(wh.is_moving()),
            "home": lambda f: wh.home(),
        }

    def _move(self, fields: Fields) -> None:
        value = _number(fields, "slot")
        if not value.is_integer():
            raise _Refused(ErrorCode.BAD_ARGUMENT, "slot is a whole number")
        why = self.bench.wheel.check(int(value))
        if why:
            code = ErrorCode.BUSY if "moving" in why else ErrorCode.OUT_OF_RANGE
            raise _Refused(code, why)
        self.bench.wheel.move(int(value))

    def restart(self) -> None:
        self.bench.wheel.restart()


class StageProtocol(InstrumentProtocol):
    driver = ScpiStage
    kind = "stage"

    def __init__(self, bench: SimBench, name: str | None = None,
                 driver: type[DeclaredDriver] | DeclaredDriver | None = None) -> None:
        self.pending: list[FaultRule] = []   # stall / hard_limit waiting for the next MOVE
        super().__init__(bench, name, driver)

    def _build(self) -> dict[str, Callable[[Fields], Any]]:
        st = self.bench.stage
        return {
            **super()._build(),
            "axis_list": lambda f: ",".join(st.axes()),
            "axis_limits": lambda f: "{:g},{:g}".format(*self._limits(f)),
            "state": lambda f: st.state(self._axis(f)),
            "move": self._move,
            "position": lambda f: float(st.position(self._axis(f))),
            "moving": lambda f: bool(st.is_moving(self._axis(f))),
            "home": lambda f: st.home(self._axis(f)),
            "stop": lambda f: st.stop(),
        }

    def _axis(self, fields: Fields) -> str:
        axis = fields["axis"]
        if axis not in self.bench.stage.specs:
            raise _Refused(ErrorCode.BAD_ARGUMENT,
                           f"no axis {axis}; axes are {','.join(self.bench.stage.axes())}")
        return axis

    def _limits(self, fields: Fields) -> tuple[float, float]:
        spec = self.bench.stage.specs[self._axis(fields)]
        return spec.minimum, spec.maximum

    def _move(self, fields: Fields) -> None:
        axis = self._axis(fields)
        target = _number(fields)
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

    def physics_faults(self, t: float) -> None:
        for kind in ("stall", "hard_limit"):
            rule = self.bench.faults.fire(self.name, kind, count=self.count, t=t)
            if rule is not None:
                self.pending.append(rule)

    def restart(self) -> None:
        self.bench.stage.restart()


PROTOCOLS: dict[str, type[InstrumentProtocol]] = {
    "blackbody": BlackbodyProtocol, "wheel": WheelProtocol, "stage": StageProtocol}


def serve(protocol: InstrumentProtocol, name: str | None = None) -> LineServer:
    """A LineServer answering `protocol` with its dialect's line endings."""
    d = protocol.dialect
    return LineServer(protocol, name=name or protocol.name,
                      terminator=d.read_termination.encode(),
                      line_end=d.write_termination.encode())


def answerer(protocol: InstrumentProtocol, name: str | None = None) -> LineAnswerer:
    """The far end of an in-process link to `protocol` (what its server does with a line)."""
    d = protocol.dialect
    return LineAnswerer(protocol, name or protocol.name, terminator=d.read_termination.encode(),
                        line_end=d.write_termination.encode())


class BenchServers:
    """One LineServer per simulated instrument; `ports` maps instrument kind -> TCP port."""

    def __init__(self, bench: SimBench,
                 drivers: Mapping[str, type[DeclaredDriver] | DeclaredDriver] | None = None
                 ) -> None:
        self.bench = bench
        self.protocols: dict[str, InstrumentProtocol] = {}
        self.servers: dict[str, LineServer] = {}
        try:
            for kind, cls in PROTOCOLS.items():
                self.protocols[kind] = cls(bench, driver=(drivers or {}).get(kind))
                self.servers[kind] = serve(self.protocols[kind], name=kind)
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


def start_bench_servers(bench: SimBench, drivers: Mapping[str, type[DeclaredDriver]
                                                       | DeclaredDriver] | None = None
                        ) -> BenchServers:
    """Start the blackbody, wheel and stage servers on 127.0.0.1 (ephemeral ports). `drivers`
    maps a kind to the declared driver whose dialect its simulator speaks (built-in default)."""
    return BenchServers(bench, drivers)
