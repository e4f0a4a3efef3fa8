"""The event log: one JSON line per command, reply, state change and measurement.

Why append-only JSON lines: a kill -9 or a power cut can at worst tear the last line, every earlier
line stays readable, and the file can be followed live (`tail -f`) or loaded with any JSON reader.
Every line is handed to the operating system before `emit` returns (one write, so a kill -9 of
the process loses nothing it acknowledged). fsync (to the disk) happens at once for the types
:class:`Event` marks flush-at-once (state changes, step boundaries, captures ...), and for the
routine lines every `fsync_every` events or `sync_interval_s` seconds of real time, whichever
comes first: a power cut loses at most about a second of routine traffic (commands, replies,
readings) and never a state change. A run on simulated time opens its log with `durable=False`:
every line still reaches the operating system before `emit` returns, none is fsynced (such a
run is made again from its seed in seconds; see station.record.runfolder). A dry run's thousands of routine lines a second therefore
cost one fsync a second, not one per fifty lines. Every event type is a member of
:class:`Event`; the log refuses others.

Example::

    log = EventLog(run / "events.jsonl", clock)
    log.emit(Event.STATE, name="running", cause="preflight passed")
    events = read_events(run / "events.jsonl")
"""

from __future__ import annotations

import datetime as _dt
import difflib
import errno
import json
import os
import threading
import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from enum import Enum
from pathlib import Path
from typing import Any

from drivers.clock import Clock
from station.record.atomic import DiskFullError, dumps_json, free_bytes, fsync_dir

RESERVED_KEYS = frozenset({"t", "utc", "type", "seq"})
"""Keys every event carries; `emit` refuses fields with these names."""

class Event(str, Enum):
    """Every kind of event a run writes, each marked flush-at-once (``True``: on the disk before
    the run goes on) or buffered (synced every ``fsync_every`` events).

    At once: what resume, the post-mortem or the operator must find after a power cut (state
    changes, step boundaries, finished or abandoned captures, safing, recoveries, analysis
    results). Buffered: the routine traffic (every command and reply, readings, notes).

    >>> Event("step.done").flush, Event.IO.flush
    (True, False)
    """

    flush: bool

    def __new__(cls, name: str, flush: bool) -> "Event":
        member = str.__new__(cls, name)
        member._value_ = name
        member.flush = flush
        return member

    STATE = ("state", True)
    STEP_START = ("step.start", True)
    STEP_DONE = ("step.done", True)
    CAPTURE_STORED = ("capture.stored", True)        # the capture's files are closed and synced
    CAPTURE_DONE = ("capture.done", True)            # the step accepted the capture
    CAPTURE_ABANDONED = ("capture.abandoned", True)  # files set aside (see frames/abandoned/)
    CAPTURE_DISCARDED = ("capture.discarded", True)  # guard failed mid-capture: retaken
    FRAME_GAP = ("frame.gap", False)
    FRAME_REJECTED = ("frame.rejected", False)
    BLACKBODY_SETTLED = ("blackbody.settled", False)
    ANALYSIS_DONE = ("analysis.done", True)
    ALIGN_ITERATION = ("align.iteration", True)      # one look of the closed loop
    ALIGN_DONE = ("align.done", True)
    STAGE_ORIGIN = ("stage.origin", True)            # the aligned pose became the origin
    FOV_SCAN_LOOK = ("fov_scan.look", False)         # one probe of an edge bisection
    FOV_SCAN_DONE = ("fov_scan.done", True)
    FILE_WRITTEN = ("file_written", True)
    PREFLIGHT_IDENTITY = ("preflight.identity", False)
    PREFLIGHT_WARNING = ("preflight.warning", False)
    PREFLIGHT_PASSED = ("preflight.passed", True)
    RESUME_START = ("resume.start", True)
    RESUME_RESTORE = ("resume.restore", True)
    SAFING_BLACKBODY = ("safing.blackbody", True)
    SAFING_STAGE = ("safing.stage", True)
    SAFING_INCOMPLETE = ("safing.incomplete", True)  # an instrument left live: by-hand steps
    INTERNAL_ERROR = ("internal_error", True)
    LOG = ("log", False)
    LOG_REPAIRED = ("log_repaired", True)
    IO = ("io", False)                               # one command and its reply
    TRANSPORT_RETRY = ("transport.retry", False)
    TRANSPORT_RECONNECT = ("transport.reconnect", True)
    TRANSPORT_RECONNECT_FAILED = ("transport.reconnect_failed", True)
    TRANSPORT_GIVE_UP = ("transport.give_up", True)
    OPERATOR_REQUEST = ("operator.request", True)    # pause/continue/abort asked from a monitor
    NOTIFY_SENT = ("notify.sent", False)
    NOTIFY_FAILED = ("notify.failed", True)
    SIMULATION_REWOUND = ("simulation.rewound", True)          # served bench back to a step start
    SIMULATION_NOT_REWOUND = ("simulation.not_rewound", True)


def event_type(name: "Event | str") -> Event:
    """The enumeration member of an event name; ValueError naming the closest known one."""
    if isinstance(name, Event):
        return name
    try:
        return Event(name)
    except ValueError:
        known = [e.value for e in Event]
        close = difflib.get_close_matches(str(name), known, n=1, cutoff=0.6)
        hint = f"did you mean '{close[0]}'?" if close else f"known: {', '.join(known)}"
        raise ValueError(f"unknown event type {name!r} (events are station.record.events."
                         f"Event members); {hint}") from None


DEFAULT_SYNC_TYPES = frozenset(e.value for e in Event if e.flush)
"""Event types written through to the disk at once (they matter for resume and post-mortem)."""

Subscriber = Callable[[dict[str, Any]], None]


def utc_iso(seconds: float) -> str:
    """ISO 8601 UTC timestamp with milliseconds and a Z suffix, from seconds since the epoch."""
    moment = _dt.datetime.fromtimestamp(seconds, tz=_dt.timezone.utc)
    return moment.strftime("%Y-%m-%dT%H:%M:%S.") + f"{moment.microsecond // 1000:03d}Z"


_PLAIN_SCALARS = (str, int, bool, type(None))


def _plain(value: object) -> bool:
    """True for values JSON holds as they are (no conversion needed): the io events' fields."""
    return (type(value) in _PLAIN_SCALARS
            or (type(value) is float and value - value == 0.0))  # finite float


_ENCODE = json.JSONEncoder(sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                           allow_nan=False).encode


def encode_line(record: dict[str, Any]) -> str:
    """One event as a JSON line, exactly as `dumps_json(record, indent=None)` writes it.

    The routine events (a command and its reply) hold only strings and numbers: those skip the
    general conversion (numpy values, paths, dataclasses), which costs more than the encoding.

    >>> encode_line({"type": "io", "command": "TEMP?", "reply": "35.1", "seq": 2})
    '{"command":"TEMP?","reply":"35.1","seq":2,"type":"io"}\\n'
    """
    if all(_plain(v) for v in record.values()):
        return _ENCODE(record) + "\n"
    return dumps_json(record, indent=None) + "\n"


class EventLog:
    """Thread-safe, append-only JSON-lines log stamped with the station clock.

    Reopening an existing log (resume) continues its sequence numbers; a line torn by a crash is cut
    off first and reported as a `log_repaired` event, so the file stays valid JSON lines.
    """

    def __init__(self, path: Path | str, clock: Clock, *, fsync_every: int = 1000,
                 sync_interval_s: float = 1.0,
                 sync_types: Iterable[str] = DEFAULT_SYNC_TYPES, durable: bool = True) -> None:
        if fsync_every < 1:
            raise ValueError("fsync_every must be >= 1")
        self.path = Path(path)
        self.clock = clock
        self.fsync_every = fsync_every
        self.sync_interval_s = sync_interval_s  # real seconds, whatever the station clock
        self.sync_types = frozenset(sync_types)
        self.durable = durable  # False: every line reaches the OS, none is fsynced
        self._lock = threading.RLock()
        self._subscribers: list[Subscriber] = []
        self.subscriber_errors = 0
        self.path.parent.mkdir(parents=True, exist_ok=True)
        scan = scan_events(self.path) if self.path.exists() else EventScan(self.path)
        repaired = _cut_torn_tail(self.path) if scan.torn_tail else b""
        self._seq = max((e.get("seq", 0) for e in scan.events if isinstance(e.get("seq"), int)),
                        default=0)
        new_file = not self.path.exists()
        self._fh = open(self.path, "ab")
        if new_file and durable:
            fsync_dir(self.path.parent)
        self._since_sync = 0
        self._synced_at = time.monotonic()
        self.broken: OSError | None = None  # set when a write failed: later events are lost
        self.lost = 0
        if repaired:
            self.emit("log_repaired", dropped_bytes=len(repaired),
                      dropped_text=repaired[:200].decode("utf-8", "replace"),
                      why="the previous session ended in the middle of writing this line")

    # -- writing ---------------------------------------------------------------------------------
    def emit(self, type: Event | str, **fields: object) -> dict[str, Any]:  # noqa: A002
        """Append one event; returns the record as written (also given to subscribers).

        ``type`` must be an :class:`Event` (or its name): an unknown name is refused.
        """
        kind = event_type(type)
        clash = RESERVED_KEYS.intersection(fields)
        if clash:
            raise ValueError(f"event fields may not be named {sorted(clash)} (reserved)")
        with self._lock:
            if self._fh.closed:
                raise ValueError(f"event log {self.path} is closed; reopen it with EventLog(...)")
            now = self.clock.now()
            record: dict[str, Any] = {"seq": self._seq + 1, "t": round(now, 6),
                                      "utc": utc_iso(now), "type": kind.value}
            record.update(fields)
            try:
                line = encode_line(record)
            except TypeError:  # a value JSON cannot hold: keep its repr rather than lose the event
                record.update({k: _lenient(v) for k, v in fields.items()})
                line = dumps_json(record, indent=None) + "\n"
            self._seq += 1
            if self.broken is None:
                self._since_sync += 1
                sync = self.durable and (
                    kind.value in self.sync_types or self._since_sync >= self.fsync_every
                    or time.monotonic() - self._synced_at >= self.sync_interval_s)
                try:
                    self._write_line(line.encode("utf-8"), sync)
                except OSError as exc:
                    self._fail(exc, record)
            else:
                self.lost += 1
            for fn in list(self._subscribers):
                try:
                    fn(record)
                except Exception:  # a broken display must never stop the run or the log
                    self.subscriber_errors += 1
            return record

    def _write_line(self, data: bytes, sync: bool) -> None:
        self._fh.write(data)
        self._fh.flush()
        if sync:
            os.fsync(self._fh.fileno())
            self._since_sync = 0
            self._synced_at = time.monotonic()

    def _fail(self, exc: OSError, record: dict[str, Any]) -> None:
        """The log cannot be written (disk full, disk gone). Raise once, so the step in flight
        faults and the run is safed; later events are counted in `lost`, not raised, so safing
        and closing the run are never stopped by the log."""
        self.broken = exc
        self.lost += 1
        if exc.errno in (errno.ENOSPC, errno.EDQUOT):
            raise DiskFullError(self.path.parent, len(dumps_json(record, indent=None)),
                                free_bytes(self.path.parent),
                                f"writing the event log {self.path.name}") from exc
        raise exc

    def sync(self) -> None:
        """Force everything written so far to the disk."""
        with self._lock:
            if not self._fh.closed and self.broken is None:
                self._fh.flush()
                os.fsync(self._fh.fileno())
                self._since_sync = 0

    def subscribe(self, fn: Subscriber) -> Callable[[], None]:
        """Call `fn(record)` after each event (keep it quick); returns a function that unsubscribes."""
        with self._lock:
            self._subscribers.append(fn)

        def unsubscribe() -> None:
            with self._lock:
                if fn in self._subscribers:
                    self._subscribers.remove(fn)

        return unsubscribe

    @property
    def closed(self) -> bool:
        return self._fh.closed

    def close(self) -> None:
        """Sync and close. Safe to call twice; a log that could not be written closes quietly."""
        with self._lock:
            if not self._fh.closed:
                try:
                    self.sync()
                finally:
                    try:
                        self._fh.close()
                    except OSError:
                        pass

    def __enter__(self) -> EventLog:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


# -- reading -------------------------------------------------------------------------------------
@dataclass
class EventScan:
    """What a read of an event log found: the events, and any lines that could not be read."""

    path: Path
    events: list[dict[str, Any]] = field(default_factory=list)
    bad_lines: list[tuple[int, str]] = field(default_factory=list)
    torn_tail: bool = False

    @property
    def healthy(self) -> bool:
        return not self.bad_lines and not self.torn_tail


def scan_events(path: Path | str) -> EventScan:
    """Read every event; a last line without its newline (torn by a crash) is set aside, not fatal.

    Unreadable lines in the middle are listed in `bad_lines` (1-based line number, text) so
    `verify` can report them; the readable events are still returned.
    """
    path = Path(path)
    scan = EventScan(path)
    data = path.read_bytes()
    if not data:
        return scan
    lines = data.split(b"\n")
    tail = lines.pop()  # text after the last newline: empty when the file ends cleanly
    for number, raw in enumerate(lines, start=1):
        if not raw.strip():
            continue
        try:
            record = json.loads(raw)
            if not isinstance(record, dict):
                raise ValueError("not an object")
        except ValueError:
            scan.bad_lines.append((number, raw[:200].decode("utf-8", "replace")))
            continue
        scan.events.append(record)
    if tail.strip():
        scan.torn_tail = True
    return scan


def read_events(path: Path | str, type: str | None = None) -> list[dict[str, Any]]:  # noqa: A002
    """The readable events of a log (optionally of one type), tolerant of a torn last line."""
    events = scan_events(path).events
    if type is not None:
        events = [e for e in events if e.get("type") == type]
    return events


def _lenient(value: Any) -> Any:
    try:
        dumps_json(value, indent=None)
        return value
    except TypeError:
        return repr(value)


def _cut_torn_tail(path: Path) -> bytes:
    """Truncate the file after its last newline; returns the bytes removed."""
    with open(path, "r+b") as fh:
        data = fh.read()
        keep = data.rfind(b"\n") + 1
        dropped = data[keep:]
        fh.truncate(keep)
        fh.flush()
        os.fsync(fh.fileno())
    return dropped
