"""A loopback HTTP server that keeps every JSON body POSTed to it (notification tests)."""

from __future__ import annotations

import json
import threading
from collections.abc import Iterator
from contextlib import contextmanager
from http.server import BaseHTTPRequestHandler, HTTPServer


@contextmanager
def json_receiver() -> Iterator[tuple[str, list[dict]]]:
    """(URL on 127.0.0.1, list that fills with the received bodies); stopped on exit."""
    received: list[dict] = []

    class Receiver(BaseHTTPRequestHandler):
        def do_POST(self) -> None:  # noqa: N802 (http.server's name)
            received.append(json.loads(self.rfile.read(int(self.headers["Content-Length"]))))
            self.send_response(204)
            self.end_headers()

        def log_message(self, *args: object) -> None:
            pass

    server = HTTPServer(("127.0.0.1", 0), Receiver)
    threading.Thread(target=server.serve_forever, daemon=True).start()
    try:
        yield f"http://127.0.0.1:{server.server_address[1]}/bench", received
    finally:
        server.shutdown()
        server.server_close()
