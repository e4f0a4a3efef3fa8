"""The run's story from events.jsonl: state changes, steps, and each fault with how it ended.

A fault is told as one episode, not as the raw retries: "blackbody MEAS:TEMP? timed out; retried
twice, reconnected once; recovered" or "... gave up after 4 attempts", so an engineer sees in one
line whether the bench rode it out.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from station.record.events import read_events

TRANSPORT = ("transport.retry", "transport.reconnect", "transport.reconnect_failed",
             "transport.give_up")
NOTABLE = {"resume.start", "safing.blackbody", "safing.stage", "internal_error", "log_repaired",
           "capture_abandoned", "blackbody.settled", "analysis.done", "preflight.passed"}


@dataclass(frozen=True)
class Moment:
    """One line of the timeline: when (UTC and seconds from the start), what, and detail."""

    utc: str
    elapsed_s: float
    kind: str
    text: str
    level: str = "info"


@dataclass
class Fault:
    """A fault episode and how it was ridden out (``recovered`` False: it ended the run)."""

    utc: str
    elapsed_s: float
    what: str
    events: int = 1
    retries: int = 0
    reconnects: int = 0
    recovered: bool = True
    how: str = ""


@dataclass(frozen=True)
class StepRow:
    step: str
    kind: str
    start_utc: str
    duration_s: float | None
    status: str
    summary: str


@dataclass
class Timeline:
    moments: list[Moment] = field(default_factory=list)
    faults: list[Fault] = field(default_factory=list)
    steps: list[StepRow] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    events: int = 0


def _brief(mapping: Mapping[str, Any], limit: int = 90) -> str:
    text = ", ".join(f"{k}={_short(v)}" for k, v in mapping.items())
    return text if len(text) <= limit else text[:limit - 3] + "..."


def _short(v: Any) -> str:
    if isinstance(v, float):
        return f"{v:.4g}"
    if isinstance(v, Mapping):
        return "{" + _brief(v, 60) + "}"
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_short(x) for x in v[:4]) + (", ..." if len(v) > 4 else "") + "]"
    return str(v)


def _moment(e: Mapping[str, Any], t0: float) -> Moment | None:
    kind = str(e.get("type"))
    if kind == "state":
        text = f"{e.get('source')} -> {e.get('dest')}"
        if e.get("cause"):
            text += f": {e['cause']}"
        level = "error" if e.get("dest") in ("faulted", "failed", "aborted") else "info"
        return Moment(e.get("utc", ""), float(e.get("t", t0)) - t0, "state", text, level)
    if kind == "log" and e.get("level") in ("warning", "error"):
        return Moment(e.get("utc", ""), float(e.get("t", t0)) - t0, "log", str(e.get("text")),
                      str(e.get("level")))
    if kind in NOTABLE:
        fields = {k: v for k, v in e.items() if k not in ("t", "utc", "type", "seq", "traceback")}
        bad = kind == "internal_error" or fields.get("ok") is False
        return Moment(e.get("utc", ""), float(e.get("t", t0)) - t0, kind, _brief(fields),
                      "error" if bad else "info")
    return None


def _faults(events: Iterable[Mapping[str, Any]], t0: float) -> list[Fault]:
    """Group transport retries into episodes; captures discarded and frames rejected each one."""
    out: list[Fault] = []
    open_key: tuple[Any, Any] | None = None
    retaken: set[str] = set()
    for e in events:
        kind = e.get("type")
        t = float(e.get("t", t0)) - t0
        if kind in TRANSPORT:
            key = (e.get("instrument"), e.get("command"))
            if key != open_key or not out:
                out.append(Fault(e.get("utc", ""), t, f"{key[0]} {key[1]}: "
                                 f"{e.get('kind') or e.get('error', 'error')}", events=0))
                open_key = key
            episode = out[-1]
            episode.events += 1
            if kind == "transport.retry":
                episode.retries += 1
            elif kind == "transport.reconnect":
                episode.reconnects += 1
            elif kind == "transport.give_up":
                episode.recovered = False
                episode.how = f"gave up after {e.get('attempts')} attempts: {e.get('error')}"
            continue
        open_key = None
        if kind == "capture.discarded":
            out.append(Fault(e.get("utc", ""), t, f"capture {e.get('name')} discarded: "
                             f"{e.get('reason')}", recovered=False,
                             how=f"capture:{e.get('step')}"))
        elif kind == "frame.rejected":
            out.append(Fault(e.get("utc", ""), t, f"frame {e.get('counter')} rejected: "
                             f"{e.get('reason')}", how="frame dropped; the capture went on"))
        elif kind == "frame.gap":
            out.append(Fault(e.get("utc", ""), t, f"frame counter gap after {e.get('after')} "
                             f"(got {e.get('got')})", how="gap recorded; the capture went on"))
        elif kind == "capture.done":
            retaken.add(str(e.get("step")))
    for f in out:
        if f.how.startswith("capture:"):
            step = f.how.split(":", 1)[1]
            f.recovered = step in retaken
            f.how = "taken again" if f.recovered else "not taken again before the run ended"
        elif f.recovered and not f.how:
            parts = [f"retried {f.retries}x"] + ([f"reconnected {f.reconnects}x"]
                                                 if f.reconnects else [])
            f.how = ", ".join(parts) + "; recovered"
    return out


def _steps(events: Iterable[Mapping[str, Any]]) -> list[StepRow]:
    started: dict[str, Mapping[str, Any]] = {}
    rows: list[StepRow] = []
    for e in events:
        kind = e.get("type")
        if kind == "step.start":
            started[str(e.get("step"))] = e
        elif kind == "step.done":
            s = started.pop(str(e.get("step")), e)
            result = e.get("result") if isinstance(e.get("result"), Mapping) else {}
            rows.append(StepRow(str(e.get("step")), str(e.get("kind", s.get("kind", ""))),
                                str(s.get("utc", "")), float(e["t"]) - float(s.get("t", e["t"])),
                                "done", _brief(result, 70)))
    for step, s in started.items():
        rows.append(StepRow(step, str(s.get("kind", "")), str(s.get("utc", "")), None,
                            "unfinished", ""))
    return rows


def read_timeline(run: Path) -> Timeline:
    """The timeline of a run folder (an absent or torn log gives what could be read)."""
    path = Path(run) / "events.jsonl"
    if not path.is_file():
        return Timeline(notes=["no events.jsonl in the run folder"])
    events = read_events(path)
    if not events:
        return Timeline()
    t0 = float(events[0].get("t", 0.0))
    moments = [m for m in (_moment(e, t0) for e in events) if m is not None]
    return Timeline(moments, _faults(events, t0), _steps(events), _notes(events), len(events))


def _notes(events: Iterable[Mapping[str, Any]]) -> list[str]:
    """What the recipe's `note` steps said (logged while a note step ran)."""
    out, in_note = [], False
    for e in events:
        if e.get("type") == "step.start":
            in_note = e.get("kind") == "note"
        elif e.get("type") == "step.done":
            in_note = False
        elif in_note and e.get("type") == "log":
            out.append(str(e.get("text")))
    return out
