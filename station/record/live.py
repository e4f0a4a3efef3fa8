"""What a run shows to anyone watching from elsewhere: a small live-status file, and an inbox of
operator requests.

Why files: a run needs no monitor, and a monitor that crashes or restarts must never disturb a
run. So the run only writes `live/status.json` (replaced atomically, never appended, so a reader
sees a whole document or the previous one), and reads `live/requests/` for pause, continue and
abort requests left there by a monitor, recording each in its own event log with where it came
from. The requests then take the run's ordinary safe paths (the same flags as SIGUSR1, SIGUSR2
and SIGTERM). Nothing here is fsynced: the live status is a view, not a record; the event log and
the journal are the record.

The writer takes the same calls as the console (start, step, readings, log, state), so the run
engine needs no knowledge of it: station.cli.console.ConsoleTee hands each call to both.
"""

from __future__ import annotations

import json
import os
import time
from collections import deque
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any

from drivers.clock import Clock
from station.record.atomic import to_jsonable

__all__ = ["is_live_view", "LIVE_DIR", "STATUS_NAME", "REQUESTS_DIR", "ACTIONS", "LiveStatusWriter",
           "read_status", "post_request", "take_requests"]

LIVE_DIR = "live"
STATUS_NAME = "status.json"
REQUESTS_DIR = "requests"
ACTIONS = ("pause", "continue", "abort")
WRITE_EVERY_S = 0.5  # real seconds between routine rewrites; state and step changes write at once


def _write_replace(path: Path, data: Mapping[str, Any]) -> None:
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    tmp.write_text(json.dumps(to_jsonable(data), separators=(",", ":")), encoding="utf-8")
    os.replace(tmp, path)


def is_live_view(relative_path: str) -> bool:
    """True for files of the live view (never checksummed into the manifest, never verified)."""
    return relative_path == LIVE_DIR or relative_path.startswith(LIVE_DIR + "/")


def read_status(run_path: Path | str) -> dict[str, Any] | None:
    """The run's last live status, or None when it has none (yet) or it cannot be read."""
    try:
        return json.loads((Path(run_path) / LIVE_DIR / STATUS_NAME).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def post_request(run_path: Path | str, action: str, source: str) -> Path:
    """Leave an operator request for the run (the monitor's side). Returns the request file."""
    if action not in ACTIONS:
        raise ValueError(f"unknown action {action!r}; one of {', '.join(ACTIONS)}")
    folder = Path(run_path) / LIVE_DIR / REQUESTS_DIR
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{time.time_ns():020d}-{action}.json"
    _write_replace(path, {"action": action, "source": source, "wall_utc": time.time()})
    return path


def take_requests(run_path: Path | str) -> list[dict[str, Any]]:
    """The run's side: read and remove pending requests, oldest first (unreadable ones are
    removed too and reported as such)."""
    folder = Path(run_path) / LIVE_DIR / REQUESTS_DIR
    try:
        names = sorted(p for p in folder.iterdir() if p.suffix == ".json")
    except OSError:
        return []
    out = []
    for path in names:
        try:
            body = json.loads(path.read_text(encoding="utf-8"))
            action = str(body.get("action", ""))
            out.append({"action": action if action in ACTIONS else f"unknown:{action}",
                        "source": str(body.get("source", "unknown"))})
        except (OSError, ValueError):
            out.append({"action": "unreadable", "source": path.name})
        try:
            path.unlink()
        except OSError:
            pass
    return out


class LiveStatusWriter:
    """Keeps `live/status.json` up to date from the console calls of the run engine.

    ``on_request(action, source)`` is called for each operator request found in the inbox; the
    caller turns it into the run's pause / continue / abort flags and records it.
    """

    def __init__(self, run_path: Path | str, clock: Clock, *, recipe: str, uut_serial: str,
                 step_sources: Mapping[str, str] | None = None,
                 on_request: Callable[[str, str], None] | None = None,
                 recent: int = 30) -> None:
        self.path = Path(run_path) / LIVE_DIR / STATUS_NAME
        self.path.parent.mkdir(parents=True, exist_ok=True)
        self.run_path = Path(run_path)
        self.clock = clock
        self.step_sources = dict(step_sources or {})
        self.on_request = on_request
        self._last_write = 0.0
        self._per_step: list[float] = []
        self._lines: deque[dict[str, Any]] = deque(maxlen=recent)
        self.status: dict[str, Any] = {
            "pid": os.getpid(), "recipe": recipe, "uut_serial": uut_serial, "state": "idle",
            "cause": "", "step_index": 0, "steps_total": 0, "step_id": "", "step_source": "",
            "description": "", "estimate_s": None, "estimate_done_s": None,
            "clock_start": None, "clock_now": None, "simulated": bool(clock.simulated),
            "wall_start": time.time(), "wall_updated": time.time(), "readings": {},
            "recent": [],
        }

    # -- the console API --------------------------------------------------------------------------
    def start(self, plan_len: int, estimate_s: float, *,
              per_step_s: Sequence[float] | None = None, **_: Any) -> None:
        """`per_step_s`: the plan's estimate of each step, so progress follows the plan's time
        rather than its step count."""
        self._per_step = [float(s) for s in per_step_s] if per_step_s else []
        self.status.update(steps_total=int(plan_len), estimate_s=float(estimate_s),
                           clock_start=self.clock.now())
        self._write(force=True)

    def step(self, index: int, step_id: str, description: str = "", **_: Any) -> None:
        """Step `index` (1-based) starts."""
        done = sum(self._per_step[:max(int(index) - 1, 0)]) if self._per_step else None
        self.status.update(step_index=int(index), step_id=step_id, description=description,
                           step_source=self.step_sources.get(step_id, ""),
                           estimate_done_s=done)
        self._write(force=True)

    def readings(self, values: Mapping[str, Any]) -> None:
        self.status["readings"].update(values)
        self._write()

    def log(self, level: str | int, text: str) -> None:
        self._lines.append({"clock": self.clock.now(), "level": str(level).upper(),
                            "text": str(text)})
        self._write()

    def state(self, name: str, cause: str | None = None) -> None:
        self.status.update(state=name, cause=cause or "")
        self._write(force=True)

    def stop(self) -> None:
        self._write(force=True)

    # -- internals --------------------------------------------------------------------------------
    def _write(self, force: bool = False) -> None:
        now = time.monotonic()
        if not force and now - self._last_write < WRITE_EVERY_S:
            return
        self._last_write = now
        self._poll_requests()
        self.status.update(clock_now=self.clock.now(), wall_updated=time.time(),
                           recent=list(self._lines))
        try:
            _write_replace(self.path, self.status)
        except OSError:
            pass  # a view only: a full disk is reported by the record, not by the view

    def _poll_requests(self) -> None:
        if self.on_request is None:
            return
        for request in take_requests(self.run_path):
            self.on_request(request["action"], request["source"])
