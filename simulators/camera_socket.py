"""`sim-camera-socket`: a FrameGrabber for the camera of a served simulated bench.

The camera of `nightbench simulate` (simulators/served.py) is a TCP server on loopback speaking a
small protocol of its own: a text command line, then for a frame a text header line and a raw
little-endian uint16 payload of the announced length. This driver is what a station file names
for it (`driver: sim-camera-socket`, `resource: TCPIP::127.0.0.1::<port>::SOCKET`). Frames advance
the served bench's clock by one frame period, so a run's time is the bench's.

`begin_capture(key)` tells the camera that the next frames are frames 0, 1, ... of capture `key`
(the station passes the step id): their noise is then seeded by the capture, not by a counter a
restart would reset, so a capture taken again after a resume is the same capture.
"""

from __future__ import annotations

import re
import socket
from collections.abc import Iterator, Mapping
from typing import Any

import numpy as np

from drivers.errors import InstrumentConnectionError, InstrumentReplyError
from drivers.interfaces import Frame, FrameGrabber

_RESOURCE = re.compile(r"^TCPIP0?::(?P<host>[^:]+)::(?P<port>\d+)::SOCKET$", re.IGNORECASE)
MAX_PAYLOAD = 64 * 1024 * 1024  # a 4k x 4k uint16 frame is 32 MiB


class SocketFrameGrabber(FrameGrabber):
    """Frames from a served simulated camera (see the module docstring)."""

    KIND = "camera"
    SETTINGS = {
        "resource": "TCPIP::127.0.0.1::<port>::SOCKET, as printed by `nightbench simulate`",
        "frame_rate_hz": "frames per second the served camera delivers (default 30)",
    }

    def __init__(self, transport: None = None, *, name: str = "camera",
                 settings: Mapping[str, Any] | None = None) -> None:
        settings = dict(settings or {})
        problems = self.validate_settings(settings)
        if problems:
            raise InstrumentConnectionError(name, "; ".join(problems),
                                            hint="check the camera entry of the station file")
        self.name = name
        match = _RESOURCE.match(str(settings["resource"]).strip())
        assert match is not None
        self.address = (match["host"], int(match["port"]))
        try:
            self._sock = socket.create_connection(self.address, timeout=30.0)
        except OSError as exc:
            raise InstrumentConnectionError(
                name, f"no served camera at {self.address[0]}:{self.address[1]} ({exc})",
                hint="start `nightbench simulate` and use the station file it writes") from None
        self._sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        self._reader = self._sock.makefile("rb")
        cols, rows, depth, ident = self._ask("INFO?").split(",", 3)
        self._shape = (int(rows), int(cols))
        self._bit_depth = int(depth)
        self._identity = ident
        self._rate = float(settings.get("frame_rate_hz", 30.0))
        self._expect_ok(f"RATE {self._rate!r}")

    @classmethod
    def validate_settings(cls, settings: Mapping[str, Any]) -> list[str]:
        problems = []
        if not _RESOURCE.match(str(settings.get("resource", "")).strip()):
            problems.append("resource: give TCPIP::127.0.0.1::<port>::SOCKET (printed by "
                            "`nightbench simulate`)")
        rate = settings.get("frame_rate_hz", 30.0)
        if isinstance(rate, bool) or not isinstance(rate, (int, float)) or not rate > 0:
            problems.append(f"frame_rate_hz: must be a number above 0, not {rate!r}")
        return problems

    # -- the wire ------------------------------------------------------------------------------
    def _send(self, line: str) -> None:
        try:
            self._sock.sendall(line.encode("ascii") + b"\n")
        except OSError as exc:
            raise InstrumentConnectionError(self.name, f"served camera link lost ({exc})",
                                            command=line) from None

    def _line(self, command: str) -> str:
        try:
            raw = self._reader.readline()
        except OSError as exc:
            raise InstrumentConnectionError(self.name, f"served camera link lost ({exc})",
                                            command=command) from None
        if not raw:
            raise InstrumentConnectionError(self.name, "served camera closed the connection",
                                            command=command)
        return raw.decode("ascii", "replace").strip()

    def _ask(self, command: str) -> str:
        self._send(command)
        return self._line(command)

    def _expect_ok(self, command: str) -> None:
        reply = self._ask(command)
        if reply != "OK":
            raise InstrumentReplyError(self.name, f"unexpected reply {reply!r}", command=command)

    # -- FrameGrabber --------------------------------------------------------------------------
    def identify(self) -> str:
        return self._identity

    def begin_capture(self, key: str) -> None:
        """The next frames are frames 0, 1, ... of capture `key` (their noise follows it)."""
        self._expect_ok(f"BEGIN {key}")

    def grab(self, count: int) -> Iterator[Frame]:
        if count < 0:
            raise ValueError(f"{self.name}: frame count must be >= 0, got {count}")
        for _ in range(int(count)):
            header = self._ask("GRAB").split()
            if len(header) != 6 or header[0] != "FRAME":
                raise InstrumentReplyError(self.name, f"unexpected frame header {header!r}",
                                           command="GRAB")
            counter, stamp = int(header[1]), float(header[2])
            rows, cols, size = int(header[3]), int(header[4]), int(header[5])
            if size != rows * cols * 2 or size > MAX_PAYLOAD:
                raise InstrumentReplyError(self.name, f"frame of {rows} x {cols} announced with "
                                           f"{size} bytes", command="GRAB")
            body = self._reader.read(size)
            if len(body) != size:
                raise InstrumentConnectionError(self.name, f"frame {counter} cut short "
                                                f"({len(body)} of {size} bytes)", command="GRAB")
            data = np.frombuffer(body, dtype="<u2").reshape(rows, cols).astype(np.uint16)
            yield Frame(data=data, counter=counter, timestamp=stamp)

    def snapshot(self) -> dict[str, Any]:
        return {"frames": int(self._ask("STATE?")), "frame_rate_hz": self._rate}

    def close(self) -> None:
        try:
            self._reader.close()
            self._sock.close()
        except OSError:
            pass


__all__ = ["SocketFrameGrabber"]
