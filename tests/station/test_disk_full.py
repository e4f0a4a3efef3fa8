"""Running out of disk mid-capture faults the run safely, says so, and keeps what was taken.

In process, simulated time. The free-space reading (statvfs, POSIX) is replaced so that the disk
"fills" after the first capture: the second capture must stop, the run end faulted with a cause
that names the disk and the step, the bench be safed, and the first capture stay on disk intact.
"""

from __future__ import annotations

import json
from pathlib import Path

import tifffile

from drivers.clock import SimClock
from station.record import atomic
from station.engine.runner import execute, load_inputs, new_run_folder
from tests.station.test_guard import QuietConsole

RECIPE = """\
recipe: disk-fill
description: two captures; the disk fills between them
steps:
  - target: open
  - capture: {name: first, frames: 4, keep: both}
  - capture: {name: second, frames: 4, keep: both}
"""


def test_disk_full_mid_run_faults_safely_and_keeps_earlier_frames(tmp_path: Path,
                                                                  monkeypatch) -> None:
    recipe = tmp_path / "disk.yaml"
    recipe.write_text(RECIPE, encoding="utf-8")
    inputs = load_inputs(recipe, station_path=None, uut_path=None, overrides={})
    clock = SimClock()
    run = new_run_folder(inputs, tmp_path / "runs", clock)
    real_free = atomic.free_bytes

    def free(path):  # plenty until the first capture is on disk, then almost nothing
        done = (run.frames_dir / "first.json").exists()
        return 1024 if done else real_free(path)

    monkeypatch.setattr(atomic, "free_bytes", free)
    outcome = execute(inputs, run, clock, QuietConsole(), seed=1)
    run.close()

    assert outcome.state == "faulted"
    assert "disk" in outcome.cause.lower() and "capture" in outcome.cause
    events = [json.loads(x) for x in run.events_path.read_text().splitlines()]
    safing = {e["type"]: e for e in events if e["type"].startswith("safing.")}
    assert safing["safing.blackbody"]["ok"] and safing["safing.stage"]["ok"]
    stack = tifffile.imread(run.frames_dir / "first.stack.tif")
    assert stack.shape == (4, 512, 640)
