"""Reading what runs write, for the monitor: never writing anything but operator requests.

Everything here tolerates a run folder that is being written: a file that vanishes or is half
written is skipped and read again at the next poll.
"""

from __future__ import annotations

import json
import os
import time
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from station.record.live import read_status

__all__ = ["RunView", "EventTail", "find_runs", "run_summary", "results_of", "latest_capture",
           "progress_of", "QUIET_EVENTS"]

# Events too frequent or too low-level for the page's list of recent events.
QUIET_EVENTS = frozenset({"io", "file_written", "frame.accepted"})
STALE_AFTER_S = 30.0  # a 'running' status not refreshed for this long: the run may have died


def _json(path: Path) -> dict[str, Any] | None:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def _is_run(path: Path) -> bool:
    return (path / "manifest.json").is_file() or (path / "run-folder.json").is_file()


@dataclass(frozen=True)
class RunView:
    """One run as the runs list shows it."""

    name: str
    path: Path
    state: str
    recipe: str
    uut_serial: str
    started_utc: str
    alive: bool


def _pid_alive(pid: Any) -> bool:
    try:
        os.kill(int(pid), 0)
        return True
    except (OSError, TypeError, ValueError):
        return False


def run_summary(path: Path) -> RunView:
    """State, recipe and UUT of one run folder: from the live status while it runs, from the
    manifest once it has ended."""
    manifest = _json(path / "manifest.json") or {}
    status = read_status(path) or {}
    state = str(manifest.get("state") or status.get("state") or "unknown")
    plan = manifest.get("plan") or {}
    alive = state not in ("complete", "aborted", "faulted") and _pid_alive(status.get("pid"))
    if state == "running" and not alive:
        state = "interrupted"
    return RunView(path.name, path, state, str(plan.get("recipe") or status.get("recipe") or ""),
                   str(plan.get("uut_serial") or status.get("uut_serial") or ""),
                   str(manifest.get("started_utc") or manifest.get("start_utc") or ""), alive)


def find_runs(root: Path) -> list[RunView]:
    """Run folders directly under `root` (or `root` itself when it is a run), newest first."""
    root = Path(root)
    if _is_run(root):
        return [run_summary(root)]
    try:
        folders = [p for p in root.iterdir() if p.is_dir() and _is_run(p)]
    except OSError:
        return []
    return [run_summary(p) for p in sorted(folders, key=lambda p: p.name, reverse=True)]


def progress_of(status: dict[str, Any]) -> dict[str, Any]:
    """Fraction done, elapsed and time left (run clock), and the expected end on the wall clock
    (only when the run clock is real time: a simulated clock's 'end' means nothing on a wall)."""
    total = float(status.get("estimate_s") or 0.0)
    done = status.get("estimate_done_s")
    steps = int(status.get("steps_total") or 0)
    index = int(status.get("step_index") or 0)
    if status.get("state") == "complete":
        frac = 1.0
    elif done is not None and total > 0:
        frac = float(done) / total
    else:
        frac = max(index - 1, 0) / steps if steps else 0.0
    frac = min(max(frac, 0.0), 1.0)
    start, now = status.get("clock_start"), status.get("clock_now")
    elapsed = max(float(now) - float(start), 0.0) if start is not None and now is not None else 0.0
    left = 0.0 if frac >= 1.0 else max(total * (1.0 - frac), 0.0)
    end_wall = None if status.get("simulated") else time.time() + left
    return {"fraction": frac, "elapsed_s": elapsed, "left_s": left, "expected_end_wall": end_wall,
            "stale": (status.get("state") in ("running", "held", "paused")
                      and time.time() - float(status.get("wall_updated") or 0) > STALE_AFTER_S)}


@dataclass
class EventTail:
    """Reads new whole lines of a growing events.jsonl from where it left off."""

    path: Path
    offset: int = 0
    _partial: bytes = field(default=b"")

    def read(self, limit: int = 500) -> list[dict[str, Any]]:
        try:
            with self.path.open("rb") as f:
                f.seek(self.offset)
                chunk = f.read(4 << 20)
        except OSError:
            return []
        self.offset += len(chunk)
        data = self._partial + chunk
        lines = data.split(b"\n")
        self._partial = lines.pop()
        out = []
        for line in lines:
            try:
                event = json.loads(line)
            except ValueError:
                continue
            if event.get("type") not in QUIET_EVENTS:
                out.append(event)
        return out[-limit:]


def results_of(path: Path) -> dict[str, Any]:
    """Verdicts (results/verdicts.json when present, else each results file's own) and short
    summaries of every results file, for the page's results panel."""
    results_dir = path / "results"
    verdicts: list[dict[str, Any]] = []
    summaries: dict[str, Any] = {}
    overall = None
    combined = _json(results_dir / "verdicts.json")
    if combined:
        verdicts = list(combined.get("verdicts") or [])
        overall = combined.get("overall")
    try:
        files = sorted(results_dir.glob("*.json"))
    except OSError:
        files = []
    for file in files:
        if file.name == "verdicts.json":
            continue
        doc = _json(file)
        if not isinstance(doc, dict):
            continue
        summary = doc.get("summary") if isinstance(doc.get("summary"), dict) else doc
        summaries[file.stem] = {k: v for k, v in summary.items()
                                if isinstance(v, (int, float, str, bool)) or v is None}
        if not combined:
            verdicts.extend(v for v in (doc.get("verdicts") or []) if isinstance(v, dict))
    return {"verdicts": verdicts, "overall": overall, "summaries": summaries}


def latest_capture(path: Path) -> tuple[Path, dict[str, Any]] | None:
    """The newest finished capture (its metadata is written last) and its metadata."""
    frames = path / "frames"
    try:
        metas = [p for p in frames.glob("*.json") if not p.name.startswith(".")]
    except OSError:
        return None
    for meta in sorted(metas, key=_mtime, reverse=True):
        doc = _json(meta)
        if doc is not None:
            return meta, doc
    return None


def _mtime(path: Path) -> float:
    try:
        return path.stat().st_mtime
    except OSError:
        return 0.0


def iter_capture_images(meta_path: Path, meta: dict[str, Any]) -> Iterator[Path]:
    """Image files of a capture, average first (named in its metadata, else by its stem)."""
    folder = meta_path.parent
    files = meta.get("files") or {}
    for key in ("average", "stack"):
        entry = files.get(key) if isinstance(files, dict) else None
        name = entry.get("file") if isinstance(entry, dict) else entry
        if name:
            yield folder / Path(str(name)).name
    stem = meta_path.name[: -len(".json")]
    yield folder / f"{stem}.avg.tif"
    yield folder / f"{stem}.stack.tif"
