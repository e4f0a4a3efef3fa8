"""A threaded TCP line server on 127.0.0.1: one reply line per command line.

The server runs in its own daemon thread (never on the caller's event loop: a blocking pyvisa
call in the same thread would deadlock). It accepts `\\n` and `\\r\\n` terminated lines, or only
lines ending in `line_end` when that is not `\\n` (a CR+LF instrument ignores a bare LF). The
handler returns a `Response`, which may also ask for no reply (a reply timeout), raw bytes (a
garbled or truncated reply) or a closed connection (a dropped link): the fault injector's tools.
"""

from __future__ import annotations

import logging
import socket
import socketserver
import threading
from collections.abc import Callable
from dataclasses import dataclass

log = logging.getLogger("nightbench.simulators")


@dataclass(frozen=True)
class Response:
    """What the server does with one command line."""

    text: str | None = None          # reply line, terminator added; None = no reply
    raw: bytes | None = None         # send exactly these bytes instead of `text`
    close: bool = False              # close the connection after sending


Handler = Callable[[str], "Response | str | None"]


class _Server(socketserver.ThreadingTCPServer):
    daemon_threads = True
    allow_reuse_address = True
    block_on_close = False

    def __init__(self, handler: Handler, name: str, terminator: bytes, line_end: bytes) -> None:
        super().__init__(("127.0.0.1", 0), _LineHandler)
        self.answer = LineAnswerer(handler, name, terminator, line_end)
        self.name = name
        self.connections: set[socket.socket] = set()
        self.connections_lock = threading.Lock()


class _LineHandler(socketserver.StreamRequestHandler):
    server: _Server

    def setup(self) -> None:
        super().setup()
        self.connection.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        with self.server.connections_lock:
            self.server.connections.add(self.connection)

    def finish(self) -> None:
        with self.server.connections_lock:
            self.server.connections.discard(self.connection)
        try:
            super().finish()
        except OSError:
            pass

    def handle(self) -> None:
        while True:
            try:
                raw = self.rfile.readline()
            except OSError:
                return
            if not raw:
                return
            data, close = self.server.answer(raw)
            try:
                if data:
                    self.wfile.write(data)
                    self.wfile.flush()
                if close:
                    self.connection.shutdown(socket.SHUT_RDWR)
                    return
            except OSError:
                return


class LineAnswerer:
    """What the server does with one received line, apart from the socket: the bytes to send
    back (None: no reply) and whether to close the connection after them. A server and an
    in-process link (`sim+local`) share it, so the two answer every line and fault alike."""

    def __init__(self, handler: Handler, name: str, terminator: bytes = b"\n",
                 line_end: bytes = b"\n") -> None:
        self.line_handler = handler
        self.name = name
        self.terminator = terminator
        self.line_end = line_end

    def __call__(self, raw: bytes) -> tuple[bytes | None, bool]:
        if self.line_end != b"\n" and not raw.endswith(self.line_end):
            return None, False  # not this instrument's line ending: it keeps waiting, as a real one
        line = raw.decode("ascii", "replace").strip("\r\n").strip()
        if not line:
            return None, False
        try:
            out = self.line_handler(line)
        except Exception as exc:  # a simulator bug must show up, not kill the thread quietly
            log.exception("%s: handler failed on %r", self.name, line)
            out = Response(f'ERR 300,"simulator error: {type(exc).__name__}"')
        response = out if isinstance(out, Response) else Response(out)
        data = response.raw
        if data is None and response.text is not None:
            data = response.text.encode("ascii", "replace") + self.terminator
        return data or None, response.close


class LineServer:
    """`LineServer(handler, name)` listens on 127.0.0.1 at an ephemeral `port` until `close()`."""

    def __init__(self, handler: Handler, name: str = "sim", terminator: bytes = b"\n",
                 line_end: bytes = b"\n") -> None:
        self._server = _Server(handler, name, terminator, line_end)
        self.name = name
        self.port: int = self._server.server_address[1]
        self._thread = threading.Thread(target=self._server.serve_forever,
                                        kwargs={"poll_interval": 0.05},
                                        name=f"sim-{name}", daemon=True)
        self._thread.start()
        self._closed = False

    def drop_connections(self) -> None:
        """Close every open client connection (the server keeps listening)."""
        with self._server.connections_lock:
            conns = list(self._server.connections)
        for conn in conns:
            try:
                conn.shutdown(socket.SHUT_RDWR)
            except OSError:
                pass

    def close(self) -> None:
        """Stop listening, drop clients, join the thread. Safe to call twice."""
        if self._closed:
            return
        self._closed = True
        self._server.shutdown()
        self.drop_connections()
        self._server.server_close()
        self._thread.join(timeout=2.0)

    def __enter__(self) -> LineServer:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
