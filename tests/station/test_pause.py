"""Operator pause: SIGUSR1 pauses a running `nightbench run` at the next step boundary, SIGUSR2
continues it. Real subprocess, paced simulated time (`--realtime 20`), so polling with short real
sleeps is unavoidable here; the assertions are on the event log, not on timing."""

from __future__ import annotations

import json
import signal
import subprocess
import sys
import time
from pathlib import Path

RECIPE = """\
recipe: e2e-pause
description: a few waits the operator pauses between
steps:
  - target: open
  - wait: 10
  - wait: 10
  - wait: 10
  - wait: 10
  - note: done
"""


def _events(runs: Path) -> list[dict]:
    files = list(runs.glob("*/events.jsonl"))
    if not files:
        return []
    out = []
    for line in files[0].read_text().splitlines():
        try:
            out.append(json.loads(line))
        except ValueError:
            pass  # the line being written
    return out


def _wait_for(runs: Path, predicate, timeout_s: float = 60.0) -> list[dict]:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        events = _events(runs)
        if predicate(events):
            return events
        time.sleep(0.05)
    raise AssertionError(f"timed out; last events: {[e['type'] for e in _events(runs)][-10:]}")


def test_sigusr1_pauses_between_steps_and_sigusr2_continues(tmp_path: Path) -> None:
    recipe = tmp_path / "pause.yaml"
    recipe.write_text(RECIPE, encoding="utf-8")
    runs = tmp_path / "runs"
    proc = subprocess.Popen(
        [sys.executable, "-m", "station", "run", str(recipe), "--runs", str(runs), "--plain",
         "--realtime", "20"], cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
        text=True)
    try:
        _wait_for(runs, lambda ev: any(e["type"] == "step.start" and e["kind"] == "wait"
                                       for e in ev))
        proc.send_signal(signal.SIGUSR1)
        events = _wait_for(runs, lambda ev: any(e["type"] == "state" and e["dest"] == "paused"
                                                for e in ev))
        started_when_paused = sum(e["type"] == "step.start" for e in events)
        time.sleep(1.0)  # two steps' worth of paced time: nothing may start while paused
        assert sum(e["type"] == "step.start" for e in _events(runs)) == started_when_paused
        proc.send_signal(signal.SIGUSR2)
        out, _ = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 0, out
    states = [(e["source"], e["dest"]) for e in _events(runs) if e["type"] == "state"]
    assert states == [("idle", "preflight"), ("preflight", "running"), ("running", "paused"),
                      ("paused", "running"), ("running", "complete")]
    assert sum(e["type"] == "step.done" for e in _events(runs)) == 6
