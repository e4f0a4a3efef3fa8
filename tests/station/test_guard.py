"""The blackbody guard: a capture in progress is held while the source leaves its tolerance.

In process, simulated time: settle -> capture. A fault plan makes the simulated blackbody drift
away linearly during the capture and snap back after `duration_s` (a controller regaining
control). The run must be held (running -> held -> running), the capture discarded once and
retaken, the run complete, and every frame kept taken after the source was back within tolerance
for the step's hold time. Times are checked against the closed form of the injected drift:
offset = rate * (t - t_start) leaves a tolerance band `tol` at t_start + tol / rate.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from drivers.clock import SimClock
from simulators.faults import FaultPlan
from station.engine.runner import execute, load_inputs, new_run_folder

TOLERANCE = 0.05      # K
HOLD_S = 2.0          # s within tolerance before the source counts as settled
FRAMES = 90           # 3 s at the demo UUT's 30 Hz
DRIFT_AFTER_S = 4.0   # s after the bench starts: the capture is running then
DRIFT_RATE = 0.05     # K/s: leaves the band after TOLERANCE / DRIFT_RATE = 1 s
DRIFT_DURATION_S = 3.0

RECIPE = f"""\
recipe: guard-hold
description: settle, then a capture during which the source drifts away and comes back
steps:
  - target: open
  - blackbody: {{mode: difference, value: 0.0, tolerance: {TOLERANCE}, hold: {HOLD_S}, timeout: 120}}
  - capture: {{name: flat, frames: {FRAMES}, keep: both}}
"""


class QuietConsole:
    """The sequencer's console, recording nothing: the event log is what the test reads."""

    def start(self, plan_len: int, estimate_s: float) -> None: ...
    def step(self, index: int, step_id: str, description: str = "", **_: Any) -> None: ...
    def readings(self, values: Mapping[str, Any]) -> None: ...
    def log(self, level: str | int, text: str) -> None: ...
    def state(self, name: str, cause: str | None = None) -> None: ...


def test_guard_holds_then_resumes_and_retakes_the_capture(tmp_path: Path) -> None:
    recipe = tmp_path / "guard.yaml"
    recipe.write_text(RECIPE, encoding="utf-8")
    inputs = load_inputs(recipe, station_path=None, uut_path=None, overrides={})
    clock = SimClock()
    t0 = clock.now()
    faults = FaultPlan(seed=3, t0=t0)
    faults.add("blackbody", "drift", after_s=DRIFT_AFTER_S,
               params={"rate_k_per_s": DRIFT_RATE, "duration_s": DRIFT_DURATION_S})
    run = new_run_folder(inputs, tmp_path / "runs", clock)
    outcome = execute(inputs, run, clock, QuietConsole(), seed=1, fault_plan=faults)
    run.close()

    assert outcome.state == "complete", outcome.cause
    assert faults.counts() == {("blackbody", "drift"): 1}
    events = [json.loads(x) for x in run.events_path.read_text().splitlines()]
    states = [(e["source"], e["dest"]) for e in events if e["type"] == "state"]
    assert states == [("idle", "preflight"), ("preflight", "running"), ("running", "held"),
                      ("held", "running"), ("running", "complete")]
    discarded = [e for e in events if e["type"] == "capture.discarded"]
    assert len(discarded) == 1
    done = [e for e in events if e["type"] == "capture.done"]
    assert len(done) == 1 and done[0]["attempts"] == 2

    held_at = next(e["t"] for e in events if e["type"] == "state" and e["dest"] == "held")
    resumed_at = next(e["t"] for e in events if e["type"] == "state" and e["source"] == "held")
    drift_start = t0 + DRIFT_AFTER_S
    recovered = drift_start + DRIFT_DURATION_S
    # closed form of the injected drift: out of the band at drift_start + tol / rate; the guard
    # polls once a second (station.engine.steps.POLL_S), readback noise 2 mK moves that by < 0.1 s
    assert drift_start + TOLERANCE / DRIFT_RATE - 0.1 <= held_at \
        <= drift_start + TOLERANCE / DRIFT_RATE + 1.0 + 0.1
    # released only after the hold time back inside the band
    assert resumed_at >= recovered + HOLD_S

    meta = json.loads((run.frames_dir / "flat.json").read_text())
    assert meta["count"] == FRAMES
    assert min(meta["timestamps"]) >= resumed_at > recovered
    # the discarded attempt was set aside, not mixed with the kept frames
    assert list((run.frames_dir / "abandoned").iterdir())
