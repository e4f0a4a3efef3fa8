"""Start the monitor's web server (uvicorn) with the access rules of app.py."""

from __future__ import annotations

import ipaddress
import os
import secrets
from pathlib import Path
from typing import Any

from station.cli import exitcodes

__all__ = ["is_loopback", "serve_monitor"]


def is_loopback(host: str) -> bool:
    """True for 127.0.0.0/8, ::1 and 'localhost'."""
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def serve_monitor(folder: Path, *, host: str, port: int, token: str | None, read_only: bool,
                  console: Any) -> int:
    """Serve until interrupted. Binding beyond loopback without a token makes one up and prints
    it (it is needed to open the page and for every control)."""
    import uvicorn

    from station.monitor.app import MonitorSettings, build_app

    folder = Path(folder)
    if not folder.is_dir():
        console.print(f"monitor: {folder} is not a folder; give a run folder or a folder of runs",
                      highlight=False, markup=False)
        return exitcodes.INVALID
    token = token or os.environ.get("NIGHTBENCH_MONITOR_TOKEN") or None
    loopback = is_loopback(host)
    if not loopback and not token:
        token = secrets.token_urlsafe(18)
        console.print(f"monitor: access token (needed from other machines): {token}",
                      highlight=False, markup=False)
    settings = MonitorSettings(root=folder.resolve(), token=token, read_only=read_only,
                               loopback=loopback)
    console.print(f"monitor: serving {folder} on http://{host}:{port}/"
                  f"{' (read-only)' if read_only else ''}; Ctrl-C stops it (runs go on)",
                  highlight=False, markup=False)
    uvicorn.run(build_app(settings), host=host, port=port, log_level="warning")
    return exitcodes.OK
