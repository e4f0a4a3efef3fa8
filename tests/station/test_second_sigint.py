"""A second Ctrl-C during safing is reported and never faults the run (in process, deterministic).

The signals are raised with `signal.raise_signal` at chosen points of an in-process run on the
simulated bench in simulated time, so the test does not depend on when a subprocess gets
scheduled: the first SIGINT when the long capture starts, the second from inside an event-log
write during safing (where a handler that logged used to re-enter the buffered writer). The file
size of the event log is taken just before and just after each signal: a handler that does no
I/O leaves it unchanged. `test_second_sigint_stress` repeats the run 200 times with the signals
at random points; it is marked `stress` and left out of the default suite (`pytest -m stress`).
"""

from __future__ import annotations

import io
import random
import signal
from pathlib import Path
from typing import Any

import pytest
from rich.console import Console

from drivers.clock import SimClock
from station.cli.console import RunConsole
from station.engine import steps
from station.engine.runner import execute, load_inputs, new_run_folder
from station.record.events import read_events
from tests.station.fast_bench import fast_station_yaml

SAFE_C = 22.0   # safe_c of the fast station file
PARK = {"az": 0.0, "el": 0.0}
RECIPE = """\
recipe: second-sigint
description: a short capture, a move away from park, then a long capture the test interrupts
steps:
  - target: open
  - blackbody: {mode: difference, value: 1.0, tolerance: 1.5, hold: 1, timeout: 60}
  - capture: {name: first, frames: 2, keep: average}
  - move: {az: 35.0, el: -25.0}
  - capture: {name: long, frames: 400, keep: average}
"""


@pytest.fixture(scope="module")
def files(tmp_path_factory: pytest.TempPathFactory) -> Path:
    base = tmp_path_factory.mktemp("sigint")
    (base / "station.yaml").write_text(fast_station_yaml("sigint bench", timeout_s=0.5),
                                       encoding="utf-8")
    (base / "recipe.yaml").write_text(RECIPE, encoding="utf-8")
    return base


def run_with_two_sigints(files: Path, runs: Path, monkeypatch: pytest.MonkeyPatch, *,
                         first_at_frame: int, second_at_io: int) -> dict[str, Any]:
    """Run the recipe; SIGINT at frame `first_at_frame` of the long capture, and again during
    the `second_at_io`-th instrument exchange of safing. Returns what the checks need."""
    inputs = load_inputs(files / "recipe.yaml", station_path=files / "station.yaml",
                         uut_path=None, overrides={})
    clock = SimClock()
    run = new_run_folder(inputs, runs, clock)
    sizes: list[tuple[int, int]] = []

    def raise_sigint() -> None:
        before = run.events_path.stat().st_size
        signal.raise_signal(signal.SIGINT)  # the handler runs before this returns
        sizes.append((before, run.events_path.stat().st_size))

    original_capture = steps.STEP_HANDLERS["capture"]
    frames_seen = {"n": 0}

    def capture(step: Any, ctx: Any) -> dict:
        if step.name == "long":
            original_grab = ctx.bench.camera.grab

            def grab(count: int):
                for frame in original_grab(count):
                    frames_seen["n"] += 1
                    if frames_seen["n"] == first_at_frame:
                        raise_sigint()
                    yield frame

            ctx.bench.camera.grab = grab
        return original_capture(step, ctx)

    monkeypatch.setitem(steps.STEP_HANDLERS, "capture", capture)
    safing_io = {"n": 0, "on": False}

    def during_safing(record: dict) -> None:  # runs inside EventLog.emit, its lock held
        if record["type"] == "state" and record.get("dest") == "safing":
            safing_io["on"] = True
        elif record["type"] == "io" and safing_io["on"]:
            safing_io["n"] += 1
            if safing_io["n"] == second_at_io:
                raise_sigint()

    run.events.subscribe(during_safing)
    live = RunConsole(Console(file=io.StringIO()), plain=True, clock=clock)
    outcome = execute(inputs, run, clock, live, seed=1)
    run.close()
    return {"outcome": outcome, "events": read_events(run.events_path), "sizes": sizes}


def check_aborted_safely(result: dict[str, Any]) -> list[dict]:
    outcome, events = result["outcome"], result["events"]
    assert outcome.state == "aborted", outcome.cause
    assert "SIGINT" in outcome.cause and not outcome.safing_problems
    # both signals were taken, and neither handler wrote a byte to the event log
    assert len(result["sizes"]) == 2
    assert all(before == after for before, after in result["sizes"]), result["sizes"]
    states = [(e["source"], e["dest"]) for e in events if e["type"] == "state"]
    assert states[-2:] == [("running", "safing"), ("safing", "aborted")]
    safing = {e["type"]: e for e in events if e["type"].startswith("safing.")}
    assert safing["safing.blackbody"]["ok"] is True
    # the source reports the station's safe setpoint (drivers send 4 decimals)
    assert abs(safing["safing.blackbody"]["setpoint_c"] - SAFE_C) <= 1e-4
    assert safing["safing.stage"]["ok"] is True
    for axis, park in PARK.items():
        assert abs(safing["safing.stage"]["positions"][axis] - park) <= 1e-4
    logs = [e for e in events if e["type"] == "log"]
    assert sum("SIGINT received: aborting" in e["text"] for e in logs) == 1
    again = [e for e in logs if "received again" in e["text"]]
    assert len(again) == 1
    return events


def test_second_sigint_does_not_skip_safing(files: Path, tmp_path: Path,
                                            monkeypatch: pytest.MonkeyPatch) -> None:
    result = run_with_two_sigints(files, tmp_path / "runs", monkeypatch, first_at_frame=3,
                                  second_at_io=1)
    events = check_aborted_safely(result)
    again = next(e["seq"] for e in events if e["type"] == "log" and "received again" in e["text"])
    safing_start = next(e["seq"] for e in events if e["type"] == "state" and e["dest"] == "safing")
    parked = next(e["seq"] for e in events if e["type"] == "safing.stage")
    # reported while safing went on (delivered between the blackbody and the stage), not after
    assert safing_start < again < parked


@pytest.mark.stress
@pytest.mark.timeout(1800)  # 200 runs: about 3 minutes on an idle 2-core machine
def test_second_sigint_stress(files: Path, tmp_path: Path,
                              monkeypatch: pytest.MonkeyPatch) -> None:
    """200 runs, the signals at random frames and exchanges: every one aborts safely."""
    rng = random.Random(2026)
    for n in range(200):
        with monkeypatch.context() as mp:
            result = run_with_two_sigints(files, tmp_path / f"runs{n}", mp,
                                          first_at_frame=rng.randint(1, 20),
                                          second_at_io=rng.randint(1, 6))
        check_aborted_safely(result)
