"""Kill -9 a real `nightbench run` at known points, resume it, compare with an uninterrupted run.

The interrupted runs go at `--realtime 20` (simulated time paced against the wall clock) so the
kill lands where the test wants it: the test polls events.jsonl (and frames/) for the step, then
sends SIGKILL. The resume runs in simulated time. All runs go in parallel to keep the file short
in wall time; every wait is bounded.

What "the same as an uninterrupted run" means here (the journal contract of station/record/journal.py):
the same step ids in the journal, the same captures with the same frame counts (exact: the plan
says how many), the same result file names, `verify` clean, and a capture cut by the kill kept
under frames/abandoned/ with fewer frames than planned.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest
import tifffile

from station.cli.main import main as cli_main
from station.record.verify import verify_run
from tests.station.fast_bench import fast_station_yaml

REPO = Path(__file__).resolve().parents[2]
SPEED = "20"
DEADLINE_S = 90.0

STATION = fast_station_yaml("Fast simulated bench for interruption tests", timeout_s=0.5, recovery=False)

RECIPE = """\
recipe: interruption-check
description: A short plan with settling, two captures, a wait and an analysis
steps:
  - target: pinhole_grid
  - move: {az: 0.0, el: 0.0}
  - blackbody: {mode: difference, value: 30.0, tolerance: 0.05, hold: 20}
  - capture: {name: first, frames: 24, keep: both}
  - wait: 30
  - capture: {name: second, frames: 12, keep: both}
  - analyze: {analysis: distortion, captures: [second], options: {mode: grid}}
"""


def _events_text(run: Path) -> str:
    try:
        return (run / "events.jsonl").read_text(encoding="utf-8", errors="replace")
    except OSError:
        return ""


def _started(step: str) -> Callable[[Path], bool]:
    return lambda run: _has(run, "step.start", step)


def _done(step: str) -> Callable[[Path], bool]:
    return lambda run: _has(run, "step.done", step)


def _has(run: Path, kind: str, step: str) -> bool:
    for line in _events_text(run).splitlines():
        if f'"{kind}"' in line and f'"{step}"' in line:
            return True
    return False


def _capturing(run: Path) -> bool:
    """At least two frames of the first capture are on disk, unfinished."""
    log = run / "frames" / "first.frames.jsonl.partial"
    try:
        return log.read_bytes().count(b"\n") >= 3
    except OSError:
        return False


KILL_POINTS: dict[str, Callable[[Path], bool]] = {
    "settling": _started("s3.blackbody"),
    "capture": _capturing,
    "between": _done("s4.capture"),
    "analysis": _started("s7.analyze"),
}


def _run_cmd(files: Path, runs: Path, realtime: bool) -> list[str]:
    cmd = [sys.executable, "-m", "station", "run", str(files / "recipe.yaml"), "--station",
           str(files / "station.yaml"), "--runs", str(runs), "--plain"]
    return cmd + (["--realtime", SPEED] if realtime else [])


def _one_run_folder(runs: Path) -> Path | None:
    found = [p for p in runs.glob("*") if (p / "run-folder.json").exists()] if runs.exists() else []
    return found[0] if found else None


def _captures(run: Path) -> dict[str, int]:
    out = {}
    for meta in (run / "frames").glob("*.json"):
        data = json.loads(meta.read_text(encoding="utf-8"))
        out[data["name"]] = data["count"]
    return out


def _journal_steps(run: Path) -> list[str]:
    return [json.loads(x)["step"] for x in (run / "journal.jsonl").read_text().splitlines() if x]


@pytest.fixture(scope="module")
def scenario(tmp_path_factory: pytest.TempPathFactory) -> dict:
    """One reference run and four killed-then-resumed runs, all in parallel."""
    base = tmp_path_factory.mktemp("kill9")
    files = base / "inputs"
    files.mkdir()
    (files / "station.yaml").write_text(STATION, encoding="utf-8")
    (files / "recipe.yaml").write_text(RECIPE, encoding="utf-8")
    env = {**os.environ, "PYTHONUNBUFFERED": "1"}
    quiet = dict(stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, cwd=REPO, env=env)
    victims = {name: subprocess.Popen(_run_cmd(files, base / name, True), **quiet)
               for name in KILL_POINTS}
    killed: dict[str, Path] = {}
    end = time.monotonic() + DEADLINE_S
    while len(killed) < len(victims) and time.monotonic() < end:
        for name, proc in victims.items():
            if name in killed:
                continue
            run = _one_run_folder(base / name)
            if run is not None and KILL_POINTS[name](run):
                os.kill(proc.pid, signal.SIGKILL)
                proc.wait(timeout=10)
                killed[name] = run
            elif proc.poll() is not None:
                pytest.fail(f"{name}: the run ended (rc {proc.returncode}) before the kill point: "
                            f"{proc.stderr.read().decode()[-500:] if proc.stderr else ''}")
        time.sleep(0.02)
    for name, proc in victims.items():
        if proc.poll() is None:
            proc.kill()
            proc.wait(timeout=10)
    assert set(killed) == set(KILL_POINTS), f"kill points not reached within {DEADLINE_S} s"
    aside_before = {name: sorted(p.name for p in (run / "frames").glob("*.partial"))
                    for name, run in killed.items()}
    resumes = {name: subprocess.Popen(
        [sys.executable, "-m", "station", "resume", str(run), "--plain"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=REPO, env=env)
        for name, run in killed.items()}
    # The uninterrupted reference runs in this process (simulated time) while the resumes go on.
    ref_rc = cli_main(_run_cmd(files, base / "ref", False)[3:])
    outputs = {name: proc.communicate(timeout=DEADLINE_S) for name, proc in resumes.items()}
    assert ref_rc == 0
    return {"reference": _one_run_folder(base / "ref"), "killed": killed,
            "rc": {n: p.returncode for n, p in resumes.items()},
            "out": {n: o[0].decode() + o[1].decode() for n, o in outputs.items()},
            "partials": aside_before}


@pytest.mark.parametrize("point", list(KILL_POINTS))
def test_resumed_run_matches_uninterrupted_run(scenario: dict, point: str) -> None:
    run = scenario["killed"][point]
    ref = scenario["reference"]
    assert scenario["rc"][point] == 0, scenario["out"][point][-1500:]
    assert "run complete" in scenario["out"][point]
    # Exact equality: the plan fixes step ids and frame counts (first 24, second 12).
    assert _journal_steps(run) == _journal_steps(ref)
    assert _captures(run) == _captures(ref) == {"first": 24, "second": 12}
    for name, count in _captures(run).items():
        with tifffile.TiffFile(run / "frames" / f"{name}.stack.tif") as tf:
            assert len(tf.pages) == count
    assert sorted(p.name for p in (run / "results").iterdir()) == \
        sorted(p.name for p in (ref / "results").iterdir())
    report = verify_run(run)
    assert report.ok, report.format()
    # Same scene, same settled setpoint: the averaged images agree. Tolerance: the guard allows
    # 0.05 K of a 30 K difference (0.17 % of the contrast) plus temporal noise averaged over 12
    # frames; 0.5 % of the mean level covers both (physics of the set-up, not a fit).
    resumed = tifffile.imread(run / "frames" / "second.avg.tif").astype(np.float64)
    uninterrupted = tifffile.imread(ref / "frames" / "second.avg.tif").astype(np.float64)
    assert abs(resumed.mean() - uninterrupted.mean()) <= 0.005 * uninterrupted.mean()


@pytest.mark.parametrize("point", list(KILL_POINTS))
def test_half_finished_capture_is_kept_aside(scenario: dict, point: str) -> None:
    run = scenario["killed"][point]
    aside = run / "frames" / "abandoned"
    folders = sorted(p for p in aside.iterdir() if p.is_dir()) if aside.is_dir() else []
    if point != "capture":
        assert folders == [], f"{point}: nothing was half written, nothing should be set aside"
        return
    assert len(folders) == 1
    reason = json.loads((folders[0] / "reason.json").read_text(encoding="utf-8"))
    assert reason["step_id"] == "s4.capture"
    # The kill fired once at least two frames were logged and before the 24th was finished.
    assert 2 <= reason["frames_added"] < 24
    assert not list((run / "frames").glob("*.partial"))
