"""Two clocks in the run record, and files colleagues can read.

- Run folders are named by the wall clock, never by the simulated clock: two dry runs a minute
  apart (an injected wall clock, no real waiting) get names a minute apart, and a resume keeps
  the folder and records its own wall-clock time. The manifest records wall-clock start and end
  and, for a simulated run, the simulated span.
- Every file of a run folder has the mode the umask gives a new file (POSIX open(2): 0666 less
  the umask), including the ones written through temporary files (mkstemp makes them 0600).
"""

from __future__ import annotations

import datetime as dt
import io
import json
import os
import signal
import stat
from pathlib import Path
from typing import Any

import pytest
from rich.console import Console

from drivers.clock import SimClock
from station.cli.console import RunConsole
from station.engine import steps
from station.engine.resume import resume_run
from station.engine.runner import execute, load_inputs, new_run_folder, plan_summary
from station.record.manifest import Manifest, load_manifest
from tests.station.fast_bench import fast_station_yaml

WALL_T0 = dt.datetime(2031, 5, 6, 22, 15, 30, tzinfo=dt.timezone.utc).timestamp()
SIM_START = "2026-01-01T00:00:00"  # SimClock's fixed epoch (drivers/clock.py)

WAITS = """\
recipe: two-clocks
description: three waits of a minute, simulated
steps:
  - wait: 60
  - wait: 60
  - wait: 60
"""

GRID = """\
recipe: modes
description: one capture of the grid and its analysis
steps:
  - target: pinhole_grid
  - blackbody: {mode: difference, value: 30.0, tolerance: 0.5, hold: 1, timeout: 120}
  - capture: {name: grid, frames: 2, keep: both}
  - analyze: {analysis: distortion, captures: [grid], options: {mode: grid}}
"""


@pytest.fixture(scope="module")
def station(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("record") / "station.yaml"
    path.write_text(fast_station_yaml("record bench", timeout_s=0.5), encoding="utf-8")
    return path


def dry_run(recipe: Path, station: Path, runs: Path, wall_s: float, console_file: io.StringIO
            ) -> tuple[Any, Path]:
    """What `nightbench run` does, with the wall clock injected."""
    inputs = load_inputs(recipe, station_path=station, uut_path=None, overrides={})
    clock = SimClock()
    run = new_run_folder(inputs, runs, clock, wall=lambda: wall_s)
    manifest = Manifest.begin(clock, inputs=run.inputs, plan=plan_summary(inputs, 1),
                              wall=lambda: wall_s)
    manifest.write(run.path)
    live = RunConsole(Console(file=console_file, width=200), plain=True, clock=clock)
    outcome = execute(inputs, run, clock, live, seed=1, manifest=manifest)
    run.close()
    manifest.close(run.path, state=outcome.state, cause=outcome.cause, clock=clock,
                   wall=lambda: wall_s + 0.5)
    run.release_writer_lock()
    return outcome, run.path


def test_folders_are_named_by_the_wall_clock_and_a_resume_keeps_its_folder(
        station: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    recipe = tmp_path / "waits.yaml"
    recipe.write_text(WAITS, encoding="utf-8")
    runs = tmp_path / "runs"
    first_out, first = dry_run(recipe, station, runs, WALL_T0, io.StringIO())
    assert first_out.state == "complete"

    # the second run is interrupted at its second wait (SIGINT raised in process)
    original_wait = steps.STEP_HANDLERS["wait"]
    seen = {"n": 0}

    def wait(step: Any, ctx: Any) -> dict:
        seen["n"] += 1
        if seen["n"] == 2:
            signal.raise_signal(signal.SIGINT)
        return original_wait(step, ctx)

    monkeypatch.setitem(steps.STEP_HANDLERS, "wait", wait)
    second_out, second = dry_run(recipe, station, runs, WALL_T0 + 60.0, io.StringIO())
    monkeypatch.undo()
    assert second_out.state == "aborted"
    serial = load_inputs(recipe, station_path=station, uut_path=None, overrides={}).uut.serial
    assert first.name == f"20310506T221530Z_{serial}_two-clocks"
    assert second.name == f"20310506T221630Z_{serial}_two-clocks"  # one minute later

    manifest = json.loads((first / "manifest.json").read_text())
    assert manifest["wall_start_utc"] == "2031-05-06T22:15:30.000Z"
    assert manifest["wall_end_utc"] == "2031-05-06T22:15:30.500Z"
    # simulated: three waits of 60 s from the simulated epoch (poll steps land exactly on it)
    assert manifest["start_utc"].startswith(SIM_START)
    assert manifest["simulated_span"]["seconds"] == pytest.approx(180.0, abs=1.0)

    # resume the interrupted run a day later on the wall clock: same folder, simulated time
    # continuing where it stopped, the session stamped with the wall clock
    buf = io.StringIO()
    live = RunConsole(Console(file=buf, width=200), plain=True)
    state, _, path = resume_run(second, console=live, wall=lambda: WALL_T0 + 86400.0)
    assert state == "complete" and path == second.resolve()
    assert sorted(p.name for p in runs.iterdir()) == [first.name, second.name]
    resumed = load_manifest(second)
    assert resumed.sessions[-1]["kind"] == "resume"
    assert resumed.sessions[-1]["wall_utc"] == "2031-05-07T22:15:30.000Z"
    assert resumed.wall_start_utc == "2031-05-06T22:16:30.000Z"  # the first session's start
    assert resumed.wall_end_utc is not None and resumed.simulated_span["seconds"] > 60.0
    # the resume's screen shows the run's simulated time, labelled, not the wall clock
    lines = buf.getvalue().splitlines()
    assert lines and all(" simulated " in line and line.startswith(SIM_START[:10])
                         for line in lines)


def test_every_file_of_a_run_folder_has_the_umask_mode(station: Path, tmp_path: Path) -> None:
    # the distortion plots (SVG, written atomically through a temporary file) are real here:
    # drawing them takes a fraction of a second
    recipe = tmp_path / "grid.yaml"
    recipe.write_text(GRID, encoding="utf-8")
    old = os.umask(0o027)  # a lab umask: group may read, others nothing
    try:
        outcome, run = dry_run(recipe, station, tmp_path / "runs", WALL_T0, io.StringIO())
    finally:
        os.umask(old)
    assert outcome.state == "complete", outcome.cause
    files = [p for p in run.rglob("*") if p.is_file()]
    names = {p.relative_to(run).as_posix() for p in files}
    for expected in ("manifest.json", "run-folder.json", "events.jsonl", "journal.jsonl",
                     "inputs/inputs.json", "frames/grid.json", "frames/grid.avg.tif",
                     "frames/grid.stack.tif", "results/distortion.json",
                     "results/distortion_points.csv", "results/undistortion_map.tif",
                     "plots/distortion_map.svg"):
        assert expected in names, sorted(names)
    wrong = {p.relative_to(run).as_posix(): oct(stat.S_IMODE(p.stat().st_mode))
             for p in files if stat.S_IMODE(p.stat().st_mode) != 0o666 & ~0o027}
    assert wrong == {}, wrong  # every file 0640
    dirs = [p for p in run.rglob("*") if p.is_dir()] + [run]
    assert all(stat.S_IMODE(d.stat().st_mode) == 0o777 & ~0o027 for d in dirs)
