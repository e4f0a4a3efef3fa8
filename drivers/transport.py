"""Line transports over pyvisa (pyvisa-py backend) and pyserial, chosen by the resource string.

    open_transport("TCPIP::10.0.0.5::5025::SOCKET", instrument="blackbody", clock=clock)
    open_transport("socket://127.0.0.1:5001", instrument="wheel", clock=clock)
    open_transport("/dev/ttyUSB0?baud=9600", instrument="stage", clock=clock)

The transport owns terminations, timeouts, error translation, bounded retries and reconnects
(through `RetryPolicy`), and reports every command and reply as an `io` event. Drivers only see
`query`, `write`, `close`, `reconnect`.
"""

from __future__ import annotations

import logging
import re
import select
import socket
import threading
from abc import ABC, abstractmethod
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any, Literal, TypeVar
from urllib.parse import parse_qsl, urlencode

from drivers.clock import Clock
from drivers.errors import (
    InstrumentConnectionError,
    InstrumentError,
    InstrumentReplyError,
    InstrumentTimeout,
    ResourceStringError,
)
from drivers.recovery import EventSink, RetryPolicy

log = logging.getLogger("nightbench.transport")
log.addHandler(logging.NullHandler())  # events go to the run's event log, not to stderr
T = TypeVar("T")

ACCEPTED_FORMS = (
    "VISA: TCPIP::host::port::SOCKET, TCPIP::host::INSTR, ASRL/dev/ttyUSB0::INSTR, "
    "ASRLsocket://127.0.0.1:PORT::INSTR, GPIB0::12::INSTR, USB0::...::INSTR; "
    "pyserial: /dev/ttyUSB0, COM3, socket://host:port, rfc2217://host:port, loop:// "
    "(serial settings as a suffix, e.g. /dev/ttyUSB0?baud=9600&parity=N)"
)

_VISA_PREFIX = re.compile(r"^(TCPIP\d*|ASRL|GPIB\d*|USB\d*|VXI\d*|PXI\d*|VICP\d*)", re.I)
_SERIAL_SCHEMES = ("socket://", "rfc2217://", "loop://", "spy://", "alt://", "hwgrep://")
_SERIAL_DEVICE = re.compile(r"^(/dev/\S+|COM\d+|\\\\\.\\COM\d+)$", re.I)
_SERIAL_KEYS = {"baud": int, "bytesize": int, "parity": str, "stopbits": float,
                "xonxoff": lambda v: str(v).lower() in ("1", "true", "yes"),
                "rtscts": lambda v: str(v).lower() in ("1", "true", "yes")}


@dataclass(frozen=True)
class ResourceInfo:
    """A checked resource string: which library opens it and with what."""

    resource: str
    backend: Literal["visa", "serial", "local"]
    interface: str
    address: str
    serial_settings: Mapping[str, Any] = field(default_factory=dict)


def parse_resource(resource: str) -> ResourceInfo:
    """Check a resource string without opening anything; ResourceStringError lists the forms."""
    text = (resource or "").strip()
    if not text:
        raise ResourceStringError(f"empty resource string; accepted forms: {ACCEPTED_FORMS}")
    if _VISA_PREFIX.match(text) and "::" in text:
        from pyvisa import rname

        try:
            parsed = rname.parse_resource_name(text)
        except Exception as exc:  # pyvisa raises InvalidResourceName (a ValueError) or others
            raise ResourceStringError(
                f"{text!r} looks like a VISA resource but does not parse ({exc}); "
                f"accepted forms: {ACCEPTED_FORMS}") from None
        return ResourceInfo(text, "visa", parsed.interface_type, str(parsed))
    base, _, query = text.partition("?")
    if base.lower().startswith(_SERIAL_SCHEMES) or _SERIAL_DEVICE.match(base):
        settings: dict[str, Any] = {}
        passthrough = []
        for key, value in parse_qsl(query, keep_blank_values=True):
            if key in _SERIAL_KEYS:
                try:
                    settings[key] = _SERIAL_KEYS[key](value)
                except ValueError:
                    raise ResourceStringError(
                        f"{text!r}: serial setting {key}={value!r} is not valid") from None
            else:
                passthrough.append((key, value))
        address = base + ("?" + urlencode(passthrough) if passthrough else "")
        scheme = base.split("://")[0].lower() if "://" in base else "device"
        return ResourceInfo(text, "serial", scheme, address, settings)
    raise ResourceStringError(f"{text!r} is not a resource string we know; "
                              f"accepted forms: {ACCEPTED_FORMS}")


class Transport(ABC):
    """A line-oriented link to one instrument with retries, reconnects and io events."""

    def __init__(self, info: ResourceInfo, *, instrument: str, clock: Clock, timeout_s: float,
                 policy: RetryPolicy | None, events: EventSink | None,
                 read_termination: str, write_termination: str) -> None:
        self.info = info
        self.instrument = instrument
        self.clock = clock
        self.timeout_s = float(timeout_s)
        self.policy = policy or RetryPolicy()
        self._events = events
        self.read_termination = read_termination
        self.write_termination = write_termination
        self._lock = threading.RLock()

    @property
    def resource(self) -> str:
        return self.info.resource

    # --- what drivers call -------------------------------------------------------------
    def query(self, command: str, parse: Callable[[str], T] | None = None) -> T | str:
        """Send one line, return its reply (parsed by `parse` inside the retry loop).

        `parse` raising ValueError turns into InstrumentReplyError, which the policy may retry:
        a garbled reply is usually a one-off on a noisy line.
        """
        def attempt() -> Any:
            reply = self._io(command, expect_reply=True)
            if parse is None:
                return reply
            try:
                return parse(reply)
            except InstrumentError:
                raise
            except (ValueError, TypeError, IndexError, KeyError) as exc:
                raise InstrumentReplyError(self.instrument, f"reply not understood ({exc})",
                                           command, reply) from None

        with self._lock:
            return self.policy.run(attempt, instrument=self.instrument, command=command,
                                   clock=self.clock, reconnect=self.reconnect,
                                   events=self._events)

    def write(self, command: str) -> None:
        """Send one line that has no reply (rare in our protocol: every line gets one)."""
        with self._lock:
            self.policy.run(lambda: self._io(command, expect_reply=False),
                            instrument=self.instrument, command=command, clock=self.clock,
                            reconnect=self.reconnect, events=self._events)

    def configure(self, *, read_termination: str | None = None,
                  write_termination: str | None = None,
                  min_timeout_s: float | None = None) -> None:
        """Take a driver's declared line endings and minimum timeout; reopen the link when the
        endings change (a VISA resource takes them when it opens)."""
        with self._lock:
            if min_timeout_s is not None and self.timeout_s < min_timeout_s:
                self.timeout_s = float(min_timeout_s)
            changed = False
            for attr, value in (("read_termination", read_termination),
                                ("write_termination", write_termination)):
                if value is not None and getattr(self, attr) != value:
                    setattr(self, attr, value)
                    changed = True
            if changed:
                self.reconnect()

    def reconnect(self) -> None:
        """Close and reopen the link (after a drop, or a timeout that may hide one)."""
        with self._lock:
            self._close_link()
            self._open_link()

    def close(self) -> None:
        with self._lock:
            self._close_link()

    def __enter__(self) -> Transport:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # --- per-library parts ---------------------------------------------------------------
    @abstractmethod
    def _open_link(self) -> None: ...

    @abstractmethod
    def _close_link(self) -> None: ...

    @abstractmethod
    def _exchange(self, command: str, expect_reply: bool) -> str | None: ...

    def _io(self, command: str, expect_reply: bool) -> str | None:
        reply = self._exchange(command, expect_reply)
        if reply is not None:
            reply = reply.strip("\r\n").strip()
        event = {"type": "io", "instrument": self.instrument, "command": command,
                 "reply": reply, "t": self.clock.now()}
        log.debug("%s: sent %r, got %r", self.instrument, command, reply)
        if self._events is not None:
            self._events(event)
        return reply

    def _timeout(self, command: str, received: bytes | None = None,
                 partial_known: bool = True) -> InstrumentTimeout:
        """A timeout naming what did arrive and the line endings in use: a wrong terminator
        looks exactly like a silent instrument otherwise."""
        seen = (f"received {received!r} so far, without the read terminator" if received
                else "nothing received" if partial_known
                else "no line ending in the read terminator; VISA does not show partial replies")
        return InstrumentTimeout(
            self.instrument, f"no reply within {self.timeout_s:g} s ({seen})", command,
            hint=f"check the instrument is on, {self.resource} is right, and the line endings: "
                 f"this link ends each command with {self.write_termination!r} and reads up to "
                 f"{self.read_termination!r}")

    def _dropped(self, command: str | None, exc: BaseException) -> InstrumentConnectionError:
        return InstrumentConnectionError(
            self.instrument, f"connection to {self.resource} failed ({exc})", command,
            hint="check cabling/network and that the instrument is powered")


class VisaTransport(Transport):
    """pyvisa with the pyvisa-py backend (`@py`): no vendor VISA library needed."""

    def __init__(self, info: ResourceInfo, **kw: Any) -> None:
        super().__init__(info, **kw)
        import pyvisa

        self._rm = pyvisa.ResourceManager("@py")
        self._res: Any = None
        self._open_link()

    def _open_link(self) -> None:
        from pyvisa.errors import VisaIOError

        try:
            res = self._rm.open_resource(self.info.resource)
        except (VisaIOError, OSError, ValueError) as exc:
            raise self._dropped(None, exc) from None
        res.read_termination = self.read_termination
        res.write_termination = self.write_termination
        res.timeout = int(self.timeout_s * 1000)
        self._res = res

    def _close_link(self) -> None:
        if self._res is not None:
            try:
                self._res.close()
            except Exception as exc:  # closing a broken link must not hide the real error
                log.debug("%s: close failed: %s", self.instrument, exc)
            self._res = None

    def close(self) -> None:
        super().close()
        try:
            self._rm.close()
        except Exception as exc:
            log.debug("%s: resource manager close failed: %s", self.instrument, exc)

    def _exchange(self, command: str, expect_reply: bool) -> str | None:
        from pyvisa.errors import VisaIOError
        from pyvisa import constants

        if self._res is None:
            self._open_link()
        problem = self._link_problem()
        if problem is not None:
            self._close_link()
            raise self._dropped(command, problem)
        try:
            self._res.write(command)
            return self._res.read() if expect_reply else None
        except VisaIOError as exc:
            if exc.error_code == constants.StatusCode.error_timeout:
                problem = self._link_problem()
                if problem is not None:
                    # pyvisa-py does not see EOF on a socket: its read spins to the timeout
                    # and its clear() would loop forever on the dead socket.
                    self._close_link()
                    raise self._dropped(command, problem) from None
                self._clear()
                raise self._timeout(command, None, partial_known=False) from None
            raise self._dropped(command, exc) from None
        except (OSError, EOFError) as exc:  # ConnectionRefusedError, BrokenPipe, reset
            self._close_link()
            raise self._dropped(command, exc) from None
        except UnicodeDecodeError as exc:
            self._clear()
            raise InstrumentReplyError(self.instrument, f"reply is not text ({exc})",
                                       command) from None

    def _link_problem(self) -> OSError | None:
        """Why a raw TCP session (``::SOCKET``) is unusable: closed by the other end, refused,
        reset; None when it looks healthy.

        Peeks at the pyvisa-py session's socket without consuming data; other session kinds
        (serial, GPIB, USB, VXI-11) report None and rely on their own errors.
        """
        try:
            sock = self._rm.visalib.sessions[self._res.session].interface
        except Exception:
            return None
        if not isinstance(sock, socket.socket):
            return None
        try:
            readable, _, _ = select.select([sock], [], [], 0)
            if readable and sock.recv(1, socket.MSG_PEEK) == b"":
                return ConnectionResetError("connection closed by the instrument")
        except (OSError, ValueError) as exc:
            return exc if isinstance(exc, OSError) else OSError(str(exc))
        return None

    def _clear(self) -> None:
        """Drop late or partial replies so they cannot answer the next query."""
        try:
            self._res.clear()
        except Exception as exc:
            log.debug("%s: clear failed: %s", self.instrument, exc)


class SerialTransport(Transport):
    """pyserial `serial_for_url` (device paths, COM ports, socket://, rfc2217://, loop://)."""

    def __init__(self, info: ResourceInfo, *, serial_settings: Mapping[str, Any] | None = None,
                 **kw: Any) -> None:
        super().__init__(info, **kw)
        self._settings = {**info.serial_settings, **(serial_settings or {})}
        self._port: Any = None
        self._open_link()

    def _open_link(self) -> None:
        import serial

        kwargs: dict[str, Any] = {"timeout": self.timeout_s, "write_timeout": self.timeout_s}
        mapping = {"baud": "baudrate", "bytesize": "bytesize", "parity": "parity",
                   "stopbits": "stopbits", "xonxoff": "xonxoff", "rtscts": "rtscts"}
        for key, value in self._settings.items():
            kwargs[mapping.get(key, key)] = value
        if "stopbits" in kwargs and float(kwargs["stopbits"]).is_integer():
            kwargs["stopbits"] = int(kwargs["stopbits"])
        try:
            self._port = serial.serial_for_url(self.info.address, **kwargs)
        except (serial.SerialException, OSError, ValueError) as exc:
            raise self._dropped(None, exc) from None

    def _close_link(self) -> None:
        if self._port is not None:
            try:
                self._port.close()
            except Exception as exc:
                log.debug("%s: close failed: %s", self.instrument, exc)
            self._port = None

    def _exchange(self, command: str, expect_reply: bool) -> str | None:
        import serial

        if self._port is None:
            self._open_link()
        term = self.read_termination.encode()
        try:
            self._port.write((command + self.write_termination).encode())
            if not expect_reply:
                return None
            raw = self._port.read_until(term)
        except (serial.SerialException, OSError) as exc:
            self._close_link()
            raise self._dropped(command, exc) from None
        if not raw.endswith(term):
            # b'' or a partial line: the read timed out. Drop what is buffered so a late reply
            # cannot answer the next command.
            self._drain()
            raise self._timeout(command, raw)
        try:
            return raw.decode("ascii")
        except UnicodeDecodeError as exc:
            raise InstrumentReplyError(self.instrument, f"reply is not text ({exc})", command,
                                       raw.decode("ascii", "replace")) from None

    def _drain(self) -> None:
        try:
            self._port.reset_input_buffer()
        except Exception as exc:
            log.debug("%s: input flush failed: %s", self.instrument, exc)


LineAnswer = Callable[[bytes], "tuple[bytes | None, bool]"]
"""The far end of an in-process link: the bytes of one sent line -> (reply bytes or None for no
reply, whether the link closes after them)."""


class LocalTransport(Transport):
    """A link to a simulator in this process (`sim+local`): the same bytes as over a socket
    (line endings, replies, garbled or missing replies, a dropped link) and the same errors,
    without the socket, the server thread and the VISA layers: about a fifth of the time of a
    loopback round trip, which matters for the thousands of readings of a simulated soak."""

    def __init__(self, info: ResourceInfo, *, answer: LineAnswer, **kw: Any) -> None:
        super().__init__(info, **kw)
        self._answer = answer
        self._linked = False
        self._dropped_by_far_end = False
        self._open_link()

    def _open_link(self) -> None:
        self._linked, self._dropped_by_far_end = True, False

    def _close_link(self) -> None:
        self._linked = False

    def _exchange(self, command: str, expect_reply: bool) -> str | None:
        if self._dropped_by_far_end:
            self._close_link()
            raise self._dropped(command, ConnectionResetError("connection closed by the "
                                                              "instrument"))
        if not self._linked:
            self._open_link()
        data, close = self._answer((command + self.write_termination).encode("ascii",
                                                                             "replace"))
        self._dropped_by_far_end = close
        if not expect_reply:
            return None
        if data is None and close:
            self._close_link()
            raise self._dropped(command, ConnectionResetError("connection closed by the "
                                                              "instrument"))
        term = self.read_termination.encode()
        if data is None or not data.endswith(term):
            raise self._timeout(command, data)  # at once: simulated time does not pass
        try:
            return data.decode("ascii")
        except UnicodeDecodeError as exc:
            raise InstrumentReplyError(self.instrument, f"reply is not text ({exc})", command,
                                       data.decode("ascii", "replace")) from None


def open_transport(resource: str, *, instrument: str, clock: Clock, timeout_s: float = 2.0,
                   policy: RetryPolicy | None = None, events: EventSink | None = None,
                   read_termination: str = "\n", write_termination: str = "\n",
                   serial_settings: Mapping[str, Any] | None = None) -> Transport:
    """Open the transport a resource string names (see ACCEPTED_FORMS)."""
    info = parse_resource(resource)
    kw: dict[str, Any] = dict(instrument=instrument, clock=clock, timeout_s=timeout_s,
                              policy=policy, events=events, read_termination=read_termination,
                              write_termination=write_termination)
    if info.backend == "visa":
        return VisaTransport(info, **kw)
    return SerialTransport(info, serial_settings=serial_settings, **kw)
